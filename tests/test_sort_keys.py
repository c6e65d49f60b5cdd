"""The radix sort of word addresses gives ``numpy.sort``'s order (the reference: a general-purpose library).

Keys of one address slice share their top digits (the sort skips such digits), keys of
deep words fill 64 bits, and a sort of the halves of one array on two threads (as the
threaded count does) must give the same halves.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq.words._kernels import sort_keys


@settings(max_examples=60, deadline=None)
@given(n=st.integers(0, 3_000), used=st.integers(1, 64), shared=st.integers(0, 63), wide=st.booleans(),
       few=st.booleans(), seed=st.integers(0, 2**32 - 1))
def test_radix_sort_equals_numpy_sort(n, used, shared, wide, few, seed):
    dtype = np.uint64 if (wide or used > 32) else np.uint32
    used = min(used, 8 * np.dtype(dtype).itemsize)
    rng = np.random.default_rng(seed)
    keys = rng.integers(0, 1 << used, n, dtype=np.uint64)
    if few and n:  # many repeats
        keys = keys[rng.integers(0, n // 50 + 1, n)]
    if shared < used:  # one slice of the addresses: every key has the same bits above the `shared` low ones
        low = np.uint64((1 << shared) - 1)
        base = np.uint64(rng.integers(0, 1 << used, dtype=np.uint64))
        keys = (keys & low) | (base & ~low)
    keys = keys.astype(dtype)
    want = np.sort(keys)
    got = keys.copy()
    sort_keys(got, used)
    assert got.dtype == want.dtype and np.array_equal(got, want)


def test_two_threads_sort_the_halves_of_one_array():
    rng = np.random.default_rng(5)
    keys = rng.integers(0, 2**32, 400_000, dtype=np.uint64).astype(np.uint32)
    want = np.concatenate([np.sort(keys[:150_000]), np.sort(keys[150_000:])])
    with ThreadPoolExecutor(2) as pool:
        list(pool.map(lambda s: sort_keys(keys[s], 32), [slice(0, 150_000), slice(150_000, None)]))
    assert np.array_equal(keys, want)
