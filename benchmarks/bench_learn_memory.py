"""Peak memory of ``learn`` as a whole process, in bytes per symbol, and the model it writes.

Each run is one process, ``/usr/bin/time -v python -m fractalseq learn FILE -o model.npz``
(peak resident set size, wall time), on phage lambda (``reference/lambda_virus.fa.gz``), the
Klebsiella HS11286 assembly (``benchmarks/genomes.py``, 5.7 Mbase) and invented order-2 Markov
sources over ACGT of 10, 30 and 50 Mbase by default (the simulator of ``bench_scale.py``); the
growth of the peak between two simulated sizes, per added symbol, is the marginal cost.  With ``--before DIR`` the same
commands also run with the package of another checkout (e.g. the code before a change), and the two
model files are compared byte for byte and array by array (``numpy.array_equal``); the fitted
``score`` of the lambda model is compared too.  Bytes per symbol include the interpreter, numba and the readers
(about 180 MiB) and the cell tables at the default cap (about 130 MiB for DNA): bytes per symbol fall
with the length.  Times are CPU seconds (user + system) of the process.

Run::

    python benchmarks/bench_learn_memory.py [--before /path/to/other/checkout] [--before-up-to 30] [--mbase 10 30 50]

Writes ``benchmarks/results/learn_memory.json`` and ``.md``.  Genomes are for benchmarking only;
genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import argparse
import filecmp
import json
import lzma
import os
import platform
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from bench_scale import simulate_fasta  # noqa: E402
from genomes import LAMBDA, klebsiella, write_results  # noqa: E402


def learn(tree: Path, path: Path, out: Path) -> dict:
    """Peak memory and time of ``learn`` run with the package found in ``tree`` (one process).

    The process runs in the output's folder: ``python -m`` puts the working folder first on the
    import path, so running from a checkout would import that checkout whatever PYTHONPATH says.
    """
    env = dict(os.environ, PYTHONPATH=str(tree))
    argv = [sys.executable, "-m", "fractalseq", "learn", str(path), "-o", str(out), "--json", "--quiet", "--force"]
    t0 = time.perf_counter()
    proc = subprocess.run(["/usr/bin/time", "-v", *argv], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env,
                          cwd=out.parent)
    wall = time.perf_counter() - t0
    m = re.search(r"Maximum resident set size \(kbytes\): (\d+)", proc.stderr)
    if proc.returncode != 0 or not m:
        raise SystemExit(f"learn failed with {tree}: {proc.stderr.strip().splitlines()[-1:]}")
    cpu = sum(float(x) for x in re.findall(r"(?:User|System) time \(seconds\): ([\d.]+)", proc.stderr))
    return {"seconds": round(wall, 2), "cpu_seconds": round(cpu, 2), "peak_bytes": int(m.group(1)) * 1024}


def same_arrays(a: Path, b: Path) -> bool:
    """Do two model files hold the same arrays (names, dtypes, values)?"""
    with np.load(a) as x, np.load(b) as y:
        return sorted(x.files) == sorted(y.files) and all(
            x[k].dtype == y[k].dtype and np.array_equal(x[k], y[k]) for k in x.files
        )


def fitted_bits(tree: Path, model: Path, data: Path) -> float:
    """Bits per symbol of ``score --model`` run with the package found in ``tree``."""
    env = dict(os.environ, PYTHONPATH=str(tree))
    out = subprocess.run([sys.executable, "-m", "fractalseq", "score", str(data), "--model", str(model), "--json", "--quiet"],
                         capture_output=True, text=True, env=env, check=True, cwd=model.parent).stdout
    return float(json.loads(out)["bits_per_symbol"])


def report(rows: list[dict]) -> None:
    """Write the rows (JSON and markdown table) and print the table."""
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}", "rows": rows}
    sims = [r for r in rows if r["input"].startswith("simulated")]
    for a, b in zip(sims, sims[1:]):
        b["after"]["marginal_bytes_per_added_symbol"] = round(
            (b["after"]["peak_bytes"] - a["after"]["peak_bytes"]) / (b["symbols"] - a["symbols"]), 1)
    lines = ["| input | symbols | peak before | B/symbol before | peak after | B/symbol after | CPU before | CPU after | same model file (bytes) |",
             "|---|---:|---:|---:|---:|---:|---:|---:|---|"]
    for r in rows:
        a, b = r["after"], r.get("before")
        mib = lambda x: f"{x['peak_bytes'] / 2**20:,.0f} MiB"  # noqa: E731
        secs = lambda x: f"{x['cpu_seconds']:.1f} s" if x else "-"  # noqa: E731
        lines.append(
            f"| {r['input']} | {r['symbols']:,} | {mib(b) if b else '-'} | {b['bytes_per_symbol'] if b else '-'} | {mib(a)} | "
            f"{a['bytes_per_symbol']} | {secs(b)} | "
            f"{a['cpu_seconds']:.1f} s | {r.get('same_model_bytes', '-')} |"
        )
    if len(sims) > 1:
        lines += ["", "Growth of the peak (after) per added symbol, from the previous simulated size: " + ", ".join(
            f"to {b['symbols'] / 1e6:g} Mbase {b['after']['marginal_bytes_per_added_symbol']} B" for b in sims[1:]) + "."]
    lines += ["", f"Machine: {data['machine']}; whole processes under /usr/bin/time -v; CPU = user + system seconds "
              "(shared machine: times are rough).", ""]
    write_results("learn_memory", data, "\n".join(lines))
    print("\n".join(lines))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--before", type=Path, default=None, help="Another checkout to run the same commands with.")
    ap.add_argument("--mbase", type=float, nargs="+", default=[10, 30, 50], help="Sizes of the simulated inputs (Mbase).")
    ap.add_argument("--before-up-to", type=float, default=float("inf"),
                    help="Run the other checkout only on inputs up to this many Mbase.")
    args = ap.parse_args()
    rows = []
    with tempfile.TemporaryDirectory(prefix="fractalseq-learnmem-") as tmp:
        work = Path(tmp)
        hs = work / "hs.fa"
        hs.write_bytes(lzma.decompress(klebsiella()["Klebs_HS11286"].read_bytes()))
        inputs = [("lambda (reference/lambda_virus.fa.gz)", LAMBDA, 48_502),
                  ("Klebs_HS11286 (kleborate-examples)", hs, 5_682_321)]
        for mb in args.mbase:
            sim = work / f"sim{mb:g}.fa"
            simulate_fasta(sim, int(mb * 1e6), 1)
            inputs.append((f"simulated order-2 Markov, {mb:g} Mbase", sim, int(mb * 1e6)))
        for i, (name, path, symbols) in enumerate(inputs):
            row = {"input": name, "symbols": symbols}
            for label, tree in (("after", ROOT), ("before", args.before)):
                if tree is None or (label == "before" and symbols > args.before_up_to * 1e6):
                    continue
                r = learn(tree, path, work / f"{label}{i}.npz")
                r["bytes_per_symbol"] = round(r["peak_bytes"] / symbols, 1)
                row[label] = r
            if "before" in row:
                row["same_model_arrays"] = same_arrays(work / f"after{i}.npz", work / f"before{i}.npz")
                row["same_model_bytes"] = filecmp.cmp(work / f"after{i}.npz", work / f"before{i}.npz", shallow=False)
                if i == 0:
                    row["fitted_bits_equal"] = fitted_bits(ROOT, work / "after0.npz", path) == fitted_bits(
                        args.before, work / "before0.npz", path)
            rows.append(row)
            print(row, flush=True)
            if path.parent == work and path.name.startswith("sim"):
                path.unlink()  # the simulated inputs are large: one at a time on disk
    report(rows)
    return 0


if __name__ == "__main__":
    sys.exit(main())
