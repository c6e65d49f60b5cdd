"""One count split by address: each worker counts the words of one slice of the address space.

Splitting a source by *position* (:mod:`fractalseq.words._pieces`) gives every worker
a table of the words of its stretch; the tables overlap in the words, so they must be
shipped back and merged, and for a long source at a deep depth (almost every word
distinct) that transfer and merge cost about as much as the counting saved.  Splitting
by *address* instead gives worker ``k`` every occurrence of the words whose address lies
in its range ``first_k..last_k`` (:func:`plan_slices`): each worker reads the whole input
(its own copy of the file: nothing passes through the parent) and keeps only its words,
so the slices hold disjoint words.  What a count document needs then adds up without a
merge (:func:`join_slices`):

* occurrences and the leaf table's size are plain sums;
* the distinct ``n``-words of the whole are the slices' distinct ``n``-words summed, less
  one for every pair of neighbouring slices whose last and first ``n``-word prefixes are
  the same word (addresses keep the first symbol in the most significant bits, so the
  slices' prefixes stay in order and a prefix shared by slices sits at their junction);
* the most frequent words are among the slices' own most frequent words.

Only when the tables themselves are wanted (a saved count file) are they sent back;
they are then concatenated in slice order, which is already the sorted order.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.runner import pause_point
from fractalseq.stream import ReadReport, SymbolStream
from fractalseq.words._corpus import count_inputs
from fractalseq.words._addresses import decode_address, reduce_tails
from fractalseq.words._counts import DENSE_MAX_BITS, WordCounts, check_depth

__all__ = ["AddressSlice", "SliceCount", "SlicedCounts", "count_slice", "join_slices", "plan_slices"]


@dataclass(frozen=True)
class AddressSlice:
    """Words whose address, padded to ``N`` symbols with zero codes, lies in ``first..last`` (inclusive)."""

    index: int
    first: int
    last: int


#: With a sample, the address space is cut at prefixes this much finer than the slices...
SAMPLE_RESOLUTION = 16
#: ... but into no more than this many prefixes.
MAX_PREFIXES = 1 << 16


def plan_slices(alphabet: Alphabet, depth: int, parts: int, sample: np.ndarray | None = None) -> list[AddressSlice]:
    """Cut the ``N``-word address space into ``parts`` contiguous slices at word-prefix boundaries.

    The slices are runs of the ``A**s`` prefixes of ``s`` symbols.  Without a
    sample, ``s`` is the fewest symbols giving at least ``parts`` prefixes and the
    runs hold nearly equal numbers of prefixes (for DNA on two workers: words
    starting with A or C, and with G or T).  With a ``sample`` of the input's
    codes, the prefixes are finer (about :data:`SAMPLE_RESOLUTION` per slice) and
    the runs hold nearly equal numbers of the sample's words, so the workers get
    similar shares of the occurrences.  Any cut gives the same counts; the sample
    only balances the work.  Fewer slices come back when there are fewer prefixes
    than ``parts`` (short words).

    Parameters
    ----------
    alphabet, depth:
        The alphabet and the deepest word length ``N``.
    parts:
        Slices wanted (e.g. one per worker).
    sample:
        Codes from the input (e.g. its first chunk), or ``None``.
    """
    depth = check_depth(alphabet, depth)
    if isinstance(parts, bool) or int(parts) < 1:
        raise ParameterError(f"The number of slices must be a positive whole number, not {parts!r}.")
    size, bits = alphabet.size, alphabet.bits
    sampled = sample is not None and np.asarray(sample).size > 0
    want = int(parts) * (SAMPLE_RESOLUTION if sampled else 1)
    s = 1
    while size**s < want and s < depth and size ** (s + 1) <= max(MAX_PREFIXES, int(parts)):
        s += 1
    prefixes = size**s
    parts = min(int(parts), prefixes)
    if sampled:
        cuts = _balanced_cuts(_prefix_weights(np.asarray(sample), size, s), parts)
    else:
        cuts = [i * prefixes // parts for i in range(parts + 1)]

    def address(p: int) -> int:  # padded address of the first word with prefix number p (base-A digits = codes)
        codes = []
        for _ in range(s):
            codes.append(p % size)
            p //= size
        a = 0
        for c in reversed(codes):
            a = (a << bits) | c
        return a << (bits * (depth - s))

    top = (1 << (bits * depth)) - 1
    return [
        AddressSlice(i, 0 if i == 0 else address(cuts[i]), top if i == parts - 1 else address(cuts[i + 1]) - 1)
        for i in range(parts)
    ]


def _prefix_weights(codes: np.ndarray, size: int, s: int) -> np.ndarray:
    """How often each ``s``-symbol prefix number occurs in ``codes`` (segment breaks ignored: a sample), plus one."""
    codes = codes.astype(np.int64, copy=False)
    n = codes.size - s + 1
    if n < 1:
        return np.ones(size**s, np.int64)
    idx = np.zeros(n, np.int64)
    for j in range(s):
        idx = idx * size + codes[j : j + n]
    return np.bincount(idx, minlength=size**s)[: size**s] + 1


def _balanced_cuts(weights: np.ndarray, parts: int) -> list[int]:
    """Prefix numbers cutting ``weights`` into ``parts`` runs of nearly equal weight (each run non-empty)."""
    prefixes = weights.size
    cum = np.cumsum(weights)
    total = int(cum[-1])
    cuts = [0]
    for i in range(1, parts):
        target = total * i / parts
        c = int(np.searchsorted(cum, target))  # cum[c] >= target: cutting after prefix c, or before it
        c = c + 1 if c + 1 <= prefixes and abs(cum[c] - target) < abs((cum[c - 1] if c else 0) - target) else c
        cuts.append(min(max(c, cuts[-1] + 1), prefixes - (parts - i)))
    cuts.append(prefixes)
    return cuts


@dataclass
class SliceCount:
    """What one slice's worker sends back (small unless the table is asked for).

    Attributes
    ----------
    where:
        The slice counted (its number and address range).
    alphabet, depth, length, segments:
        As in :class:`~fractalseq.words._counts.WordCounts`; ``length`` and ``segments`` count the
        whole inputs (every slice reads them all).
    reports:
        Per input: its name and what its reader kept and dropped.
    distinct:
        ``distinct[n]``: distinct ``n``-words of the slice (index 0 unused).
    occurrences:
        ``occurrences[n]``: occurrences of the slice's ``n``-words (index 0 unused).
    present, first, last:
        Per depth: whether the slice holds an ``n``-word, and its smallest and largest ``n``-word address.
    leaves:
        Distinct full ``N``-words of the slice (the table kind of the whole depends on their sum).
    top_words, top_counts:
        The slice's most frequent ``N``-words (most frequent first, ties by address).
    counts:
        The slice's table, or ``None`` when it was not asked for.
    """

    where: AddressSlice
    alphabet: Alphabet
    depth: int
    length: int
    segments: int
    reports: list[tuple[str, ReadReport]]
    distinct: np.ndarray
    occurrences: np.ndarray
    present: np.ndarray
    first: np.ndarray
    last: np.ndarray
    leaves: int
    top_words: np.ndarray
    top_counts: np.ndarray
    counts: WordCounts | None


#: Slices counted in this process (the pause point ``count.slice:N`` counts them).
_SLICES_RUN = [0]


def count_slice(task: tuple[Sequence[str], Callable[[str], SymbolStream], int, int, int, int, bool]) -> SliceCount | None:
    """Count the words of one address slice over every input (a worker's task).

    ``task`` is ``(paths, open_input, depth, index, parts, top, keep)``: the inputs, a
    picklable function opening one of them as a stream, the deepest word length, which of
    ``parts`` slices to count, how many most frequent words to report and whether to send
    the table back.  The worker plans the slices itself from the first chunk of the first
    input (:func:`plan_slices`), so every worker finds the same cuts and the parent reads
    nothing; then each input is read whole, streamed in chunks, on one thread, and only
    the slice's words are counted.  ``None`` when the plan has fewer slices than ``index + 1``
    (fewer word prefixes than workers).  A bad input or depth raises here, with the serial
    count's sentence.
    """
    paths, open_input, depth, index, parts, top, keep = task
    _SLICES_RUN[0] += 1
    pause_point("count.slice", _SLICES_RUN[0])  # test hook: a worker stopped inside its n-th slice
    first = open_input(paths[0])  # one stream for the sample and the count: a learned alphabet is learned once
    head = next(iter(first.chunks()), None)
    plan = plan_slices(first.alphabet, depth, parts, None if head is None else head.codes)
    del head
    if index >= len(plan):
        return None
    where = plan[index]
    inputs = itertools.chain([(paths[0], first)], ((p, open_input(p)) for p in paths[1:]))
    wc, reports = count_inputs(inputs, depth, parallel=False, compact=True, window=(where.first, where.last))
    return summarize_slice(wc, where, reports, top, keep)


def summarize_slice(wc: WordCounts, where: AddressSlice, reports: list[tuple[str, ReadReport]], top: int, keep: bool) -> SliceCount:
    """The figures :func:`join_slices` adds up, from one slice's counts."""
    N, b = wc.depth, wc.bits
    leaf_w, leaf_c = wc.leaf()
    leaf_sum = int(np.asarray(leaf_c).sum())
    distinct = wc.distinct_all().copy()
    occurrences = np.zeros(N + 1, np.int64)
    present = np.zeros(N + 1, bool)
    first = np.zeros(N + 1, np.uint64)
    last = np.zeros(N + 1, np.uint64)
    for n in range(1, N + 1):
        occurrences[n] = leaf_sum + int(wc.tail_count[wc.tail_len >= n].sum())
        shift = np.uint64(b * (N - n))
        ends = [np.uint64(leaf_w[0]) >> shift, np.uint64(leaf_w[-1]) >> shift] if leaf_w.size else []
        tails, _ = wc._tail_prefixes(n)
        if tails.size:
            ends += [tails[0], tails[-1]]
        if ends:
            present[n], first[n], last[n] = True, min(ends), max(ends)
    if top:
        order = np.lexsort((leaf_w, -np.asarray(leaf_c, np.int64)))[:top]
        top_words, top_counts = leaf_w[order].astype(np.uint64), np.asarray(leaf_c)[order].astype(np.int64)
    else:
        top_words, top_counts = np.zeros(0, np.uint64), np.zeros(0, np.int64)
    leaves = int(leaf_w.size) if wc.dense is None else int(np.count_nonzero(wc.dense))
    return SliceCount(where, wc.alphabet, N, wc.length, wc.segments, reports, distinct, occurrences, present, first, last,
                      leaves, top_words, top_counts, wc if keep else None)


@dataclass
class SlicedCounts:
    """Word counts of the inputs joined from their address slices: what a count document reports.

    Attributes
    ----------
    alphabet, depth, length, segments:
        As in :class:`~fractalseq.words._counts.WordCounts`.
    storage:
        The table kind a one-pass count would pick (``"dense"`` or ``"sparse"``).
    reports:
        Per input: its name and what its reader kept and dropped.
    counts:
        The joined table (equal to a one-pass count), or ``None`` when the slices did not send theirs.
    """

    alphabet: Alphabet
    depth: int
    length: int
    segments: int
    storage: str
    reports: list[tuple[str, ReadReport]]
    counts: WordCounts | None
    _distinct: np.ndarray
    _occurrences: np.ndarray
    _top_words: np.ndarray
    _top_counts: np.ndarray

    def ladder(self) -> list[dict]:
        """Per depth: distinct words, occurrences, possible words (as :meth:`WordCounts.ladder`)."""
        return [
            {"depth": n, "distinct": int(self._distinct[n]), "occurrences": int(self._occurrences[n]),
             "possible": float(self.alphabet.size) ** n}
            for n in range(1, self.depth + 1)
        ]

    def top(self, n: int, limit: int = 10) -> list[tuple[str, int]]:
        """The ``limit`` most frequent ``N``-words as (text, count), ties by address (as :meth:`WordCounts.top`;
        only ``n = N``: the slices keep their deepest words' leaders)."""
        if n != self.depth:
            raise ParameterError(f"Only the most frequent {self.depth}-words were kept; ask for n = {self.depth}.")
        order = np.lexsort((self._top_words, -self._top_counts))[:limit]
        return [(self.alphabet.word(decode_address(int(self._top_words[i]), self.depth, self.alphabet.bits)),
                 int(self._top_counts[i])) for i in order]


def join_slices(parts: Sequence[SliceCount | None]) -> SlicedCounts:
    """Add up the slices of one count (every slice of one :func:`plan_slices` plan, in any order; ``None``
    results of workers left without a slice are passed over).

    Raises
    ------
    InputError
        When the slices did not read the same inputs, or do not cover the addresses
        once (a file changed while the workers read it).
    """
    parts = sorted((p for p in parts if p is not None), key=lambda p: p.where.index)
    if not parts:
        raise InputError("There is no input to count; give at least one file.")
    head = parts[0]
    N = head.depth
    bounds = [(p.where.first, p.where.last) for p in parts]
    tiled = bounds[0][0] == 0 and bounds[-1][1] == (1 << (head.alphabet.bits * N)) - 1 and all(
        b[0] == a[1] + 1 for a, b in zip(bounds, bounds[1:]))
    for p in parts[1:]:
        if not tiled or (p.length, p.segments) != (head.length, head.segments) or _report_dicts(p) != _report_dicts(head):
            raise InputError("An input changed while the workers read it (they saw different symbols); count it again.")
    distinct = np.sum([p.distinct for p in parts], axis=0)
    for n in range(1, N + 1):  # an n-word at the junction of neighbouring slices is counted by both
        held = [p for p in parts if p.present[n]]
        distinct[n] -= sum(int(a.last[n] == c.first[n]) for a, c in zip(held, held[1:]))
    occurrences = np.sum([p.occurrences for p in parts], axis=0)
    bits = head.alphabet.bits
    cells = 1 << (bits * N) if bits * N <= DENSE_MAX_BITS else 0
    storage = "dense" if cells and sum(p.leaves for p in parts) > cells // 8 else "sparse"
    counts = None
    if all(p.counts is not None for p in parts):
        counts = concat_slices([p.counts for p in parts], storage)  # type: ignore[misc]
    return SlicedCounts(
        head.alphabet, N, head.length, head.segments, storage, head.reports, counts, distinct, occurrences,
        np.concatenate([p.top_words for p in parts]), np.concatenate([p.top_counts for p in parts]),
    )


def _report_dicts(p: SliceCount) -> list:
    return [(name, r.to_dict()) for name, r in p.reports]


def concat_slices(tables: Sequence[WordCounts], storage: str) -> WordCounts:
    """One table from the tables of consecutive address slices (disjoint words, already in order).

    ``storage`` is the kind to return (that of a one-pass count of the whole).
    """
    head = tables[0]
    tl, ta, tc = reduce_tails([t.tail_len for t in tables], [t.tail_addr for t in tables], [t.tail_count for t in tables])
    leaves = [t.leaf() for t in tables]
    if storage == "dense":
        dense = np.zeros(1 << (head.bits * head.depth), np.int64)
        for w, c in leaves:
            dense[w.astype(np.int64)] = c
        return WordCounts(head.alphabet, head.depth, head.length, head.segments, dense, None, None, tl, ta, tc)
    words = np.concatenate([w for w, _ in leaves])
    counts = np.concatenate([np.asarray(c, np.int64) for _, c in leaves])
    for t in tables:
        t.discard()  # the joined table replaces them: do not hold both
    return WordCounts(head.alphabet, head.depth, head.length, head.segments, None, words, counts, tl, ta, tc)
