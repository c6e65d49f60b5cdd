"""The profile's entropy-rate choices: block length from the counts, bounds, and ordinal-pattern streams.

Helpers of :func:`fractalseq.jobs._profile.profile_source` (no estimate is computed here):

* :func:`evidence_rates` reads the three block-entropy rates at the block length the
  counts support (:func:`fractalseq.entropy._depth.evidence_depth`);
* :func:`ordinal_order` recognises a stream of ordinal patterns (the numeric reader's
  ``ordinal`` alphabet) and :func:`ordinal_entropy` measures its permutation entropy;
* :func:`choose_rate` holds every rate to the bounds computed on the same data
  (:func:`fractalseq.entropy._bounds.hold_to_bounds`);
* :func:`annotate_rows` marks the block-entropy rows the counts support and, for ordinal
  patterns, states the possible words with the overlap of consecutive patterns counted.
"""

from __future__ import annotations

import dataclasses
import math
import re
from typing import Any

from fractalseq.entropy import _estimators as ent
from fractalseq.entropy._bounds import RateChoice, hold_to_bounds
from fractalseq.entropy._depth import EvidenceDepth, evidence_depth, ordinal_possible_words, supported
from fractalseq.entropy._ordinal import OrdinalEntropy, permutation_entropy_of_codes
from fractalseq.errors import FractalseqError
from fractalseq.stream import SymbolArray
from fractalseq.words._counts import WordCounts, count_words

__all__ = ["annotate_rows", "choose_rate", "deepen_counts", "evidence_rates", "ordinal_delay", "ordinal_entropy", "ordinal_order"]

_ORDINAL = re.compile(r"ordinal(\d+)")


def ordinal_order(arr: SymbolArray) -> int:
    """The pattern order ``m`` when ``arr`` holds ordinal patterns (alphabet ``ordinal<m>`` of ``m!`` symbols), else 0."""
    hit = _ORDINAL.fullmatch(arr.alphabet.name or "")
    if hit is None:
        return 0
    m = int(hit.group(1))
    return m if 2 <= m <= 8 and arr.alphabet.size == math.factorial(m) else 0


def _numeric_info(arr: SymbolArray) -> dict:
    rep = getattr(arr, "report", None)
    extra = getattr(rep, "extra", None) or {}
    return dict(extra.get("numeric", {}))


def ordinal_delay(arr: SymbolArray) -> int:
    """The embedding delay of a stream of ordinal patterns, as its reader reports it (1 when not said)."""
    try:
        return max(int(_numeric_info(arr).get("delay", 1)), 1)
    except (TypeError, ValueError):
        return 1


def _min_depth(order: int, delay: int, counted: int) -> int:
    """Shallowest block length of a per-step rate: ``tau`` for ordinal patterns (the pattern ``tau``
    steps back shares ``m - 1`` values with the next one), when the counts reach it."""
    return min(max(int(delay), 1), counted - 1) if order and counted >= 2 else 0


def evidence_rates(wc: WordCounts, order: int = 0, delay: int = 1) -> tuple[dict[str, ent.EntropyEstimate], EvidenceDepth]:
    """Plug-in, Miller–Madow and Grassberger ``H(n+1) - H(n)`` at the block length the counts support."""
    ev = evidence_depth(wc, min_depth=_min_depth(order, delay, wc.depth))
    note = ev.note()
    if order:
        lag = "" if delay == 1 else f" {delay} steps later"
        note += (f"; ordinal patterns of order {order}{'' if delay == 1 else f', delay {delay}'}: "
                 f"{ordinal_possible_words(order, ev.depth + 1, delay)} possible "
                 f"{ev.depth + 1}-words (a pattern has at most {order} successors{lag}), not {wc.alphabet.size}^{ev.depth + 1}")
    if not ev.supported:
        note = f"too short: the words are seen fewer than {ent.SAMPLES_PER_SEEN_WORD} times on average; " + note
    out = {}
    for m in ent.METHODS:
        e = ent.h_difference(wc, ev.depth, m)
        details = dict(e.details)
        details["rule"] = ev.to_dict()["rule"]
        details["fixed_rule_depth"] = ev.fixed_rule_depth
        out[m] = dataclasses.replace(e, estimate=e.estimate + 0.0, reliable=ev.supported, note=note, details=details)  # never -0.0
    return out, ev


def deepen_counts(arr: SymbolArray, wc: WordCounts, cap: int, count_words=count_words) -> WordCounts:
    """Count deeper (up to ``cap``) while the counts support every word length counted.

    The default counted depth comes from the fixed rule; a source with memory (few of its possible
    words occur) supports longer words, and its rate is read too shallow unless they are counted.
    ``count_words`` counts (e.g. piece by piece on an engine: the same counts).
    """
    order, delay = ordinal_order(arr), ordinal_delay(arr)
    cap = int(min(cap, arr.alphabet.max_depth))
    need = delay + 1 if order else 0  # a per-step rate of patterns with delay tau needs (tau + 1)-words
    if wc.depth < min(need, cap):
        wc = count_words(arr, int(min(need, cap)))
    while wc.depth < cap and evidence_depth(wc, min_depth=_min_depth(order, delay, wc.depth)).limited_by_count:
        wc = count_words(arr, int(min(cap, wc.depth + 4)))
    return wc


def ordinal_entropy(arr: SymbolArray, order: int, n_boot: int, seed: int, level: float) -> OrdinalEntropy:
    """Permutation entropy of a stream of ordinal patterns (delay and tie rule as the reader reports them)."""
    info = _numeric_info(arr)
    delay = int(info.get("delay", 1))
    ties = str(info.get("ties", "time"))
    return permutation_entropy_of_codes(arr.codes, arr.starts, order, delay, ties, n_boot=n_boot, seed=seed, level=level)


def choose_rate(rates: dict[str, tuple[str, ent.EntropyEstimate]], alphabet_size: int, order: int,
                labels: dict[str, str]) -> RateChoice:
    """Hold the rates to ``[0, smallest upper bound]`` (``log2 m`` per step for ordinal patterns)."""
    if order:
        return hold_to_bounds(rates, math.log2(order), f"log2 {order} (a pattern of order {order} has at most {order} successors)",
                              labels=labels)
    return hold_to_bounds(rates, math.log2(alphabet_size), f"log2 of the alphabet size {alphabet_size}", labels=labels)


def annotate_rows(rows: tuple[dict[str, Any], ...], order: int, delay: int = 1) -> tuple[dict[str, Any], ...]:
    """Block-entropy rows with ``supported`` (observed words seen 20 times on average) and, for ordinal
    patterns, ``possible`` = ``m! m^(n-1)`` (delay 1; see :func:`ordinal_possible_words`)."""
    out = []
    for r in rows:
        r = dict(r)
        r["supported"] = supported(int(r["distinct"]), int(r["occurrences"]))
        if order:
            r["possible"] = float(ordinal_possible_words(order, int(r["depth"]), delay))
        out.append(r)
    return tuple(out)


def safe_ordinal_entropy(arr: SymbolArray, order: int, n_boot: int, seed: int, level: float,
                         notes: list[str]) -> OrdinalEntropy | None:
    """:func:`ordinal_entropy`, or ``None`` with a note saying why not."""
    if not order:
        return None
    try:
        pe = ordinal_entropy(arr, order, n_boot, seed, level)
    except FractalseqError as exc:
        notes.append(f"permutation entropy: not computed ({exc})")
        return None
    notes.extend(f"permutation entropy: {n}" for n in pe.notes)
    return pe
