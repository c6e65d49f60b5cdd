"""The block length of an entropy-rate estimate, chosen from the source's own word counts.

The fixed rule ``A**(n+1) <= length/100`` (:func:`fractalseq.entropy._estimators.choose_depth`)
asks for 100 occurrences of every *possible* word.  A source with memory uses
few of its possible words (a source with daily memory, or ordinal patterns,
where a pattern of order ``m`` has at most ``m`` successors among the ``m!``
patterns), so that rule stops long before the counts run short and reads the
rate at a block length too short to see the memory: the estimate then sits
above bounds the same data give.

:func:`evidence_depth` uses the counts instead: the deepest ``n`` (limited by
the counted depth) such that every word length up to ``n + 1`` has its
*observed* words seen at least :data:`SAMPLES_PER_SEEN_WORD` times on average,
the rule the growth estimate of the topological entropy already uses
(:func:`fractalseq.entropy._estimators.h_topological_growth`), and never
shallower than the fixed rule (which asks for more).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from fractalseq.entropy._estimators import SAMPLES_PER_SEEN_WORD, choose_depth

__all__ = ["SAMPLES_PER_SEEN_WORD", "EvidenceDepth", "evidence_depth", "ordinal_possible_words", "supported"]


def supported(distinct: int, occurrences: int, per_seen: float = SAMPLES_PER_SEEN_WORD) -> bool:
    """Whether ``occurrences`` cover ``distinct`` observed words at least ``per_seen`` times each on average."""
    return distinct > 0 and distinct * per_seen <= occurrences


def ordinal_possible_words(order: int, k: int, delay: int = 1) -> int:
    """Possible k-words of a stream of ordinal patterns of order ``m`` and delay ``tau``.

    With delay 1, ``m! * m**(k-1)``: consecutive patterns share ``m - 1`` values, so the next
    pattern is fixed by where the new value falls among them: ``m`` choices.  With delay
    ``tau`` the pattern at ``t`` shares ``m - 1`` values with the one at ``t - tau`` and none
    with those in between, so ``m!**min(k, tau) * m**max(k - tau, 0)``.
    """
    m, k, tau = int(order), int(k), max(int(delay), 1)
    return math.factorial(m) ** min(k, tau) * m ** max(k - tau, 0)


@dataclass(frozen=True)
class EvidenceDepth:
    """The block length ``n`` of the difference ``H(n+1) - H(n)`` and why.

    Attributes
    ----------
    depth:
        ``n`` (0 means the single-symbol entropy ``H(1)``).
    supported:
        False when the counts do not support ``depth`` (the words are seen too rarely even at the
        shallowest depth asked).
    fixed_rule_depth:
        What ``A**(n+1) <= length/100`` would have chosen.
    limited_by_count:
        True when deeper words would qualify but were not counted.
    distinct, occurrences:
        Of the ``(n+1)``-words at the chosen depth.
    """

    depth: int
    supported: bool
    fixed_rule_depth: int
    limited_by_count: bool
    distinct: int
    occurrences: int

    def note(self) -> str:
        """One sentence for the estimate's note."""
        k = self.depth + 1
        text = (f"block length n = {self.depth}: the {self.distinct} distinct {k}-words are seen "
                f"{self.occurrences / max(self.distinct, 1):.0f} times on average (rule: at least {SAMPLES_PER_SEEN_WORD})")
        if self.depth != self.fixed_rule_depth:
            text += f"; the fixed rule A^(n+1) <= length/100 would stop at n = {self.fixed_rule_depth}"
        if self.limited_by_count:
            text += "; limited by the counted depth"
        return text

    def to_dict(self) -> dict[str, Any]:
        return {
            "rule": f"largest n with distinct(k) * {SAMPLES_PER_SEEN_WORD} <= occurrences(k) for k = 1..n+1",
            "depth": self.depth, "supported": self.supported, "fixed_rule_depth": self.fixed_rule_depth,
            "limited_by_count": self.limited_by_count, "distinct": self.distinct, "occurrences": self.occurrences,
        }


def evidence_depth(wc: Any, per_seen: float = SAMPLES_PER_SEEN_WORD, min_depth: int = 0) -> EvidenceDepth:
    """The deepest block length the word counts support (see the module docstring).

    Parameters
    ----------
    wc:
        :class:`~fractalseq.words._counts.WordCounts` counted to depth ``>= 1``.
    per_seen:
        Occurrences wanted per observed word, on average.
    min_depth:
        Shallowest ``n`` reported even when the counts do not support it (then ``supported`` is
        False): 1 for ordinal patterns, whose per-step rate needs pairs of patterns.

    Returns
    -------
    EvidenceDepth
    """
    A, top, L = int(wc.alphabet.size), int(wc.depth), int(wc.length)
    fixed, _ = choose_depth(L, max(A, 2), offset=1)
    n = -1
    for k in range(1, top + 1):
        s = wc.spectrum(k)
        if not supported(s.distinct, s.total, per_seen):
            break
        n = k - 1
    fixed = int(min(fixed, top - 1))
    best = max(n, fixed)
    n = min(max(best, int(min_depth), 0), top - 1)
    ok = best >= n
    limited = ok and n == top - 1 and top < wc.alphabet.max_depth
    s = wc.spectrum(n + 1)
    return EvidenceDepth(depth=n, supported=ok, fixed_rule_depth=fixed,
                         limited_by_count=bool(limited), distinct=int(s.distinct), occurrences=int(s.total))
