"""Sorted distinct words of a piece on two threads (``nogil`` kernels release the GIL)."""

from __future__ import annotations

import numpy as np

from fractalseq.words import _kernels as kernels

__all__ = ["sorted_runs_threaded"]


def sorted_runs_threaded(codes, starts, depth, bits, keys, n_low, threads: int = 2):
    """Unique words, counts and prefix histogram using ``threads`` threads.

    Words are split by the top bit of their first symbol (so the two halves
    are already in order), each half is sorted by a ``nogil`` radix sort, its
    distinct words counted, and then reduced by a ``nogil`` kernel
    straight into its slice of the output.
    """
    from concurrent.futures import ThreadPoolExecutor

    kernels.full_words_split(codes, starts, depth, bits, n_low, keys)
    cuts = (0, int(n_low), int(keys.shape[0]))
    parts = [(cuts[d], cuts[d + 1]) for d in range(2) if cuts[d + 1] > cuts[d]]
    order = sorted(range(len(parts)), key=lambda i: parts[i][0] - parts[i][1])  # largest first

    def sort_and_count(i: int) -> int:
        lo, hi = parts[i]
        kernels.sort_keys(keys[lo:hi], depth * bits)  # a nogil kernel: the two halves sort at once
        return kernels.count_runs(keys[lo:hi])

    with ThreadPoolExecutor(max_workers=threads) as pool:
        sizes = dict(zip(order, pool.map(sort_and_count, order)))
        offsets = np.concatenate([[0], np.cumsum([sizes[i] for i in range(len(parts))])]).astype(np.int64)
        uniq = np.empty(int(offsets[-1]), dtype=keys.dtype)
        cnt = np.empty(int(offsets[-1]), dtype=np.int64)

        def write(i: int) -> np.ndarray:
            lo, hi = parts[i]
            a, b = offsets[i], offsets[i + 1]
            return kernels.write_runs(keys[lo:hi], uniq[a:b], cnt[a:b], depth, bits)[1]

        hists = list(pool.map(write, order))
    lcp = np.sum(hists, axis=0) if hists else np.zeros(depth + 1, np.int64)
    # the last word of the low half and the first of the high half differ in the first symbol (no shared prefix)
    lcp[0] += max(0, len(parts) - 1)
    return uniq, cnt, lcp
