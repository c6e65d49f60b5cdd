"""CPU and peak memory of the streamed batch-means covariance of a spectrum's levels, this tree against another.

In-process, one child process per tree: the stream is read whole (``open_source(path).to_array()``),
each level's ``WordIndex`` and occurrences are built, numba is warmed on a tiny stream, the peak
resident size is reset (``/proc/self/clear_refs``), and then ``streamed_batch_covariance`` of the
levels 1..N runs once; its CPU seconds (``time.process_time``), the process's peak resident size
during the call and the result are reported. The two trees' results are compared (largest relative
difference over the finite entries). Speed is the ratio of the two trees' CPU seconds in the same run.

Run::

    python benchmarks/bench_batch_covariance.py INPUT.fa --before ../old-checkout [--depth 12] [--batch 100]
    python benchmarks/bench_batch_covariance.py INPUT.fa --depth 11 --batch 112 --out batch_covariance_gigabase

Writes ``benchmarks/results/batch_covariance.{json,md}`` (or ``NAME.{json,md}`` with ``--out NAME``). The input is a simulated FASTA (invented
order-2 Markov source, see ``bench_scale.py``); genomic output is for research, not clinical decisions.
"""

from __future__ import annotations

import argparse
import inspect
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

#: The orders q of the profile's f(alpha) spectrum.
QS = (-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0)


def _status(key: str) -> int:
    """A ``/proc/self/status`` field in KiB."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    return -1


def _levels(arr, depth: int, wl):
    """Each level's labeller and occurrences, in the form the tree's function takes."""
    import fractalseq.dimensions._level_variance as lv

    by_labels = "cells" not in inspect.signature(lv.streamed_batch_covariance).parameters
    out = []
    for n in range(1, depth + 1):
        index = wl.WordIndex(arr, n)
        out.append((index.labels if by_labels else index.chunks, index.counts()))
    return out


def child(path: str, depth: int, batch: int, save: str) -> None:
    """Measure one tree (the one on ``sys.path``); print a JSON line, save the covariance."""
    import fractalseq as fs
    import fractalseq.dimensions._level_variance as lv
    import fractalseq.resampling._word_labels as wl
    from fractalseq import alphabet as al
    from fractalseq.stream import SymbolArray

    qs = np.array(QS)
    rng = np.random.default_rng(1)
    small = SymbolArray(al.dna(), rng.integers(0, 4, 5_000).astype(np.uint8), np.array([0]))
    lv.streamed_batch_covariance(len(small), 20, _levels(small, 3, wl), qs)  # numba compiled or loaded
    arr = fs.open_source(path).to_array()
    levels = _levels(arr, depth, wl)
    Path("/proc/self/clear_refs").write_text("5")  # reset the peak resident size
    before = _status("VmRSS")
    t0 = time.process_time()
    cov = lv.streamed_batch_covariance(len(arr), batch, levels, qs)
    cpu = time.process_time() - t0
    peak = _status("VmHWM")
    np.save(save, cov)
    print(json.dumps({"module": lv.__file__, "length": len(arr), "cpu_s": cpu, "rss_before_kib": before,
                      "peak_kib": peak, "peak_above_kib": peak - before}))


def run(tree: Path, args, save: Path) -> dict:
    env = dict(os.environ, PYTHONPATH=str(tree))
    cmd = [sys.executable, str(Path(__file__).resolve()), args.input, "--child", "--depth", str(args.depth),
           "--batch", str(args.batch), "--save", str(save)]
    r = subprocess.run(cmd, env=env, capture_output=True, text=True, check=True)
    return json.loads(r.stdout.strip().splitlines()[-1])


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("input")
    ap.add_argument("--before", type=Path, help="another checkout to measure against")
    ap.add_argument("--depth", type=int, default=12)
    ap.add_argument("--batch", type=int, default=100)
    ap.add_argument("--out", default="batch_covariance", help="results name (benchmarks/results/NAME.{json,md})")
    ap.add_argument("--child", action="store_true")
    ap.add_argument("--save")
    args = ap.parse_args()
    if args.child:
        child(args.input, args.depth, args.batch, args.save)
        return 0
    from genomes import write_results

    rows = {}
    with tempfile.TemporaryDirectory() as tmp:
        trees = {"this tree": ROOT} | ({"before": args.before.resolve()} if args.before else {})
        for name, tree in trees.items():
            rows[name] = run(tree, args, Path(tmp) / f"{len(rows)}.npy")
            rows[name]["result"] = np.load(Path(tmp) / f"{len(rows) - 1}.npy")
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}",
            "input": args.input, "depth": args.depth, "batch": args.batch, "qs": list(QS), "runs": {}}
    for name, r in rows.items():
        data["runs"][name] = {k: v for k, v in r.items() if k != "result"}
    lines = ["| tree | Mbase | levels | batch | CPU s | peak above start | ratio to before |", "|---|---:|---:|---:|---:|---:|---:|"]
    ref = rows.get("before")
    for name, r in rows.items():
        ratio = f"{r['cpu_s'] / ref['cpu_s']:.3f}" if ref else ""
        lines.append(f"| {name} | {r['length'] / 1e6:.1f} | {args.depth} | {args.batch} | {r['cpu_s']:.1f} | "
                     f"{r['peak_above_kib'] / 1024:,.0f} MiB | {ratio} |")
    if ref:
        a, b = rows["this tree"]["result"], ref["result"]
        fin = np.isfinite(a) & np.isfinite(b)
        rel = float(np.max(np.abs(a[fin] - b[fin]) / np.maximum(np.abs(b[fin]), np.finfo(float).tiny)))
        same_nan = bool(np.array_equal(np.isnan(a), np.isnan(b)))
        data["max_relative_difference"] = rel
        data["same_nan_entries"] = same_nan
        lines += ["", f"Largest relative difference of the covariances (finite entries): {rel:.3g}; "
                  f"the same entries are NaN: {same_nan}."]
    lines += ["", f"Machine: {data['machine']}. One child process per tree, `nice -n 10` on a shared machine; "
              "CPU s by `time.process_time` around the call, peak by `/proc/self/status` (VmHWM reset before the call)."]
    write_results(args.out, data, "\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
