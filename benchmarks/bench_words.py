"""Word-count ladder speed and memory on a real >= 5 Mbase genome (issue: foundation).

Measures, in one process and on one core unless stated:

(a) the practical floor: map sequence bytes to codes with a lookup table and count them with ``np.bincount``;
(b) a naive reference written the way a user would by hand: a Python loop for the chaos-game points
    plus ``np.histogram2d`` at each scale 2^-1 .. 2^-16 (timed on a prefix, reported per symbol);
(c) fractalseq's full word-count ladder for depths 1..16 (exact counts + frequency-of-frequencies of
    every depth) from the same in-memory codes, on one thread and on two threads; and end to end from the
    compressed file.

Memory: peak resident memory of the 16-deep ladder above the baseline, per input symbol (in a child
process), and the peak for dense depth 12 when streaming one genome vs a file ten times larger.

Run: python benchmarks/bench_words.py   (writes benchmarks/results/words.json and words.md)
"""

from __future__ import annotations

import argparse
import json
import lzma
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from genomes import DATA, klebsiella, write_results  # noqa: E402


def best_of(fn, repeat=5):
    times = []
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def sequence_bytes(path: Path) -> bytes:
    """The bases of a FASTA file as one upper-case byte string (records concatenated)."""
    raw = lzma.decompress(path.read_bytes()) if path.suffix == ".xz" else path.read_bytes()
    lines = [ln for ln in raw.split(b"\n") if not ln.startswith(b">")]
    return b"".join(lines).upper()


def naive_ladder(seq: bytes, depth: int):
    """What a user would write by hand: chaos-game points in Python, histogram2d per scale."""
    corner = {ord("A"): (0.0, 0.0), ord("C"): (0.0, 1.0), ord("G"): (1.0, 0.0), ord("T"): (1.0, 1.0)}
    xs = np.empty(len(seq))
    ys = np.empty(len(seq))
    x = y = 0.5
    for i, b in enumerate(seq):
        cx, cy = corner[b]
        x = 0.5 * x + 0.5 * cx
        y = 0.5 * y + 0.5 * cy
        xs[i] = x
        ys[i] = y
    xs, ys = xs[depth:], ys[depth:]  # drop the transient that still remembers the start
    occupied = []
    for m in range(1, depth + 1):
        bins = 1 << m
        if m <= 12:  # a dense 2-D histogram is what one reaches for first
            h, _, _ = np.histogram2d(xs, ys, bins=bins, range=[[0, 1], [0, 1]])
            occupied.append(int(np.count_nonzero(h)))
        else:  # 4^13 bins no longer fit: unique box indices instead
            ix = np.floor(xs * bins).astype(np.int64) * bins + np.floor(ys * bins).astype(np.int64)
            occupied.append(int(np.unique(ix).size))
    return occupied


def child_memory(mode: str, path: str, depth: int) -> dict:
    """Run one counting job in a fresh process and return its peak RSS above the baseline."""
    code = f"""
import json, resource, sys, numpy as np
sys.path.insert(0, {str(Path(__file__).resolve().parent.parent)!r})
from fractalseq.sources import open_source
from fractalseq.words._counts import count_words, WordCounter
from fractalseq.stream import from_codes
from fractalseq import alphabet as al
def rss_kb():
    for line in open('/proc/self/status'):
        if line.startswith('VmHWM'):
            return int(line.split()[1])
# warm up the kernels on a small input so compilation memory is in the baseline
w = count_words(from_codes(al.dna(), np.random.default_rng(0).integers(0, 4, 100000)), {depth}); w.distinct_all()
if {mode!r} == 'ladder':
    arr = open_source({path!r}).to_array()
    n = len(arr)
    base = rss_kb()
    wc = count_words(arr, {depth}); wc.distinct_all()
    peak = rss_kb()
else:
    stream = open_source({path!r})
    base = rss_kb()
    c = WordCounter(al.dna(), {depth})
    n = 0
    for ch in stream.chunks():
        c.add(ch.codes, ch.starts); n += len(ch.codes)
    wc = c.finish()
    peak = rss_kb()
print(json.dumps({{"symbols": n, "base_kb": base, "peak_kb": peak, "extra_bytes": (peak - base) * 1024}}))
"""
    env = dict(os.environ, NUMBA_NUM_THREADS="1")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--depth", type=int, default=16)
    ap.add_argument("--naive-prefix", type=int, default=1_000_000, help="symbols timed for the naive reference")
    ap.add_argument("--skip-memory", action="store_true")
    args = ap.parse_args()

    import numba

    from fractalseq import alphabet as al
    from fractalseq.words import _kernels as kernels
    from fractalseq.sources import open_source
    from fractalseq.stream import from_codes
    from fractalseq.words._counts import count_words

    genomes = klebsiella()
    path = genomes["Klebs_HS11286"]
    seq = sequence_bytes(path)
    lut = np.zeros(256, np.uint8)
    for i, ch in enumerate(b"ACGT"):
        lut[ch] = i
    raw = np.frombuffer(seq, np.uint8)
    arr = from_codes(al.dna(), lut[raw])
    n = len(arr)
    depth = args.depth

    # warm-up (compilation is cached, but load it)
    w = count_words(from_codes(al.dna(), arr.codes[:400_000]), depth, parallel=True)
    w.spectra()
    count_words(from_codes(al.dna(), arr.codes[:400_000]), depth).spectra()

    t_a, _ = best_of(lambda: np.bincount(lut[raw], minlength=4))

    numba.set_num_threads(1)

    def ladder(parallel=False):
        wc = count_words(arr, depth, parallel=parallel)
        return wc.distinct_all()[1:].tolist()

    t_c1, distinct = best_of(lambda: ladder(False))
    numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
    t_c2, distinct2 = best_of(lambda: ladder(True))
    numba.set_num_threads(1)
    assert distinct == distinct2

    # breakdown of (c)
    keys_t, (keys, tl, ta, cf) = best_of(
        lambda: kernels.full_words(arr.codes, arr.starts, depth, 2, True, np.zeros(0, np.uint32)), 3
    )

    def sort_only():
        k = keys.copy()
        t = time.perf_counter()
        k.sort()
        return time.perf_counter() - t, k

    sort_t = min(sort_only()[0] for _ in range(3))
    _, sk = sort_only()
    def runs_only():
        k = sk.copy()  # the kernel collapses its input in place
        t = time.perf_counter()
        kernels.runs_with_lcp(k, depth, 2, 32)
        return time.perf_counter() - t

    comp_t = min(runs_only() for _ in range(3))
    wc = count_words(arr, depth)
    spec_t, _ = best_of(lambda: (wc._cache.clear(), wc.spectra()), 3)

    # (b) naive, on a prefix
    pre = seq[: args.naive_prefix]
    t0 = time.perf_counter()
    occ = naive_ladder(pre, depth)
    t_b_prefix = time.perf_counter() - t0
    # cross-check below: naive box counts equal the distinct words of the prefix (transient dropped)
    t_b = t_b_prefix / len(pre) * n

    # end to end from the compressed file
    def end_to_end():
        s = open_source(str(path))
        wc2 = count_words(s, depth, parallel=True)
        wc2.distinct_all()
        return wc2

    numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
    t_e2e, wc_e2e = best_of(end_to_end, 2)
    numba.set_num_threads(1)

    result = {
        "genome": path.name,
        "symbols": n,
        "depth": depth,
        "a_bincount_floor_s": t_a,
        "b_naive_s_extrapolated": t_b,
        "b_naive_prefix_symbols": len(pre),
        "b_naive_box_counts_match_words": bool(
            occ == [count_words(from_codes(al.dna(), lut[np.frombuffer(pre, np.uint8)][depth - m + 1 :]), m).distinct(m) for m in range(1, depth + 1)]
        ),
        "c_ladder_one_thread_s": t_c1,
        "c_ladder_two_threads_s": t_c2,
        "c_end_to_end_from_xz_two_threads_s": t_e2e,
        "symbols_per_s": {"a": n / t_a, "b": n / t_b, "c1": n / t_c1, "c2": n / t_c2, "e2e": n / t_e2e},
        "ratio_b_over_c1": t_b / t_c1,
        "ratio_c1_over_a": t_c1 / t_a,
        "ratio_c1_over_c2": t_c1 / t_c2,
        "breakdown_one_thread_s": {"addresses": keys_t, "numpy_sort": sort_t, "runs_and_prefix_histogram": comp_t},
        "spectra_all_depths_s": spec_t,
        "distinct_per_depth": distinct,
        "targets": {"b_over_c1_at_least": 40, "c1_over_a_at_most": 4, "bytes_per_symbol_at_most": 24},
    }

    if not args.skip_memory:
        mem = child_memory("ladder", str(path), depth)
        result["memory_ladder"] = mem
        result["memory_ladder_bytes_per_symbol"] = mem["extra_bytes"] / mem["symbols"]
        # 10x larger file for dense depth 12
        big = DATA / "concat10x.fa"
        if not big.exists():
            parts = []
            order = list(genomes.values())
            total = 0
            i = 0
            while total < 10 * n:
                p = order[i % len(order)]
                body = lzma.decompress(p.read_bytes())
                parts.append(body.replace(b">", f">copy{i}_".encode()))
                total += len(sequence_bytes(p))
                i += 1
            big.write_bytes(b"".join(parts))
        one = child_memory("stream", str(path), 12)
        ten = child_memory("stream", str(big), 12)
        result["memory_dense12_stream"] = {"one_genome": one, "ten_times": ten}

    rows = [
        "| measure | value |",
        "|---|---|",
        f"| genome | {path.name}, {n:,} bases |",
        f"| (a) bytes→codes + np.bincount | {t_a*1e3:.1f} ms ({n/t_a/1e6:.0f} M symbols/s) |",
        f"| (b) naive Python chaos game + histogram2d, 16 scales | {t_b:.1f} s extrapolated from {len(pre):,} symbols ({n/t_b/1e6:.2f} M symbols/s) |",
        f"| (c) ladder 1..{depth}, one thread | {t_c1*1e3:.1f} ms ({n/t_c1/1e6:.1f} M symbols/s) |",
        f"| (c) ladder 1..{depth}, two threads | {t_c2*1e3:.1f} ms ({n/t_c2/1e6:.1f} M symbols/s) |",
        f"| (c) end to end from .xz, two threads | {t_e2e*1e3:.0f} ms |",
        f"| (b)/(c) one thread (target ≥ 40) | {t_b/t_c1:.0f}× |",
        f"| (c)/(a) one thread (target ≤ 4) | {t_c1/t_a:.2f}× |",
        f"| one/two threads | {t_c1/t_c2:.2f}× |",
        f"| breakdown (one thread): addresses / numpy sort / runs + prefix histogram | {keys_t*1e3:.1f} / {sort_t*1e3:.1f} / {comp_t*1e3:.1f} ms |",
        f"| frequency-of-frequencies of all 16 depths (for estimators, computed on demand) | {spec_t*1e3:.0f} ms |",
    ]
    if "memory_ladder" in result:
        d = result["memory_dense12_stream"]
        rows.append(f"| peak memory of the {depth}-deep ladder (target < 24 B/symbol) | {result['memory_ladder_bytes_per_symbol']:.1f} bytes per symbol |")
        rows.append(
            f"| dense depth 12, streamed: 1× genome vs 10× file | +{d['one_genome']['extra_bytes']/2**20:.0f} MiB ({d['one_genome']['symbols']:,} symbols) vs "
            f"+{d['ten_times']['extra_bytes']/2**20:.0f} MiB ({d['ten_times']['symbols']:,} symbols) |"
        )
    table = "\n".join(rows) + "\n"
    write_results("words", result, table)
    print(table)


if __name__ == "__main__":
    main()
