"""The predictor on event logs (large template alphabets) and its memory on a genome, through the command line.

Inputs: the real logs of reference/logs (provenance in reference/logs/README.md), this machine's
``/var/log/dpkg.log`` (Debian 12), and an invented log of 100,000 lines written by
benchmarks/synthetic_log.py (about 17,000 templates; invented, no real program wrote it).  A missing input is
skipped.  For each log:

* ``score --online`` and ``learn`` as a user runs them (``python -m fractalseq ... -q``) under
  ``/usr/bin/time -v``: wall seconds, lines per second (every line of the file; reading and template
  mining included) and peak resident memory; a command that fails is reported with its first error line;
* the online predictor alone on the symbols already read (:func:`online_code_length`, best of 3):
  symbols per second, bits per symbol, the coder's table bytes.

Genome: ``learn`` on one Klebsiella genome of benchmarks/genomes.py (kleborate-examples) under
``/usr/bin/time -v``: peak resident bytes per base.

The machine is shared (2 cores, other jobs): its load average is recorded beside the results.  Speed is
reported against the online predictor's speed on the same run's DNA (a ratio, as every benchmark here).

Run: python benchmarks/bench_predict_logs.py   (writes benchmarks/results/predict_logs.json and .md)
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from genomes import klebsiella, write_results  # noqa: E402
from synthetic_log import generate  # noqa: E402

LOGS = ROOT / "reference" / "logs"


def timed(args: list[str]) -> dict:
    """Run ``python -m fractalseq ARGS`` under /usr/bin/time -v: wall seconds, peak RSS, exit status, first error."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    out = subprocess.run(["/usr/bin/time", "-v", sys.executable, "-m", "fractalseq", *args], capture_output=True,
                         text=True, env=env, timeout=3600)
    err = out.stderr
    wall = re.search(r"Elapsed \(wall clock\) time \(h:mm:ss or m:ss\): (?:(\d+):)?(\d+):([\d.]+)", err)
    secs = (int(wall.group(1) or 0) * 3600 + int(wall.group(2)) * 60 + float(wall.group(3))) if wall else float("nan")
    rss = re.search(r"Maximum resident set size \(kbytes\): (\d+)", err)
    first = next((ln for ln in err.splitlines() if ln.startswith("error")), "")
    return {"seconds": secs, "peak_mib": int(rss.group(1)) / 1024 if rss else float("nan"), "exit": out.returncode,
            "error": first}


def predictor_alone(path: Path) -> dict:
    from fractalseq.predict._online import OnlineCoder, online_code_length
    from fractalseq.sources import open_source

    arr = open_source(str(path), fmt="log").to_array()
    online_code_length(arr)  # compile
    best = float("inf")
    for _ in range(3):
        t = time.perf_counter()
        res = online_code_length(arr)
        best = min(best, time.perf_counter() - t)
    coder = OnlineCoder(arr.alphabet, length_hint=len(arr))  # as a command sizes it (the log's line count)
    coder.feed(arr.codes, arr.starts)
    return {"templates": arr.alphabet.size, "symbols": len(arr), "symbols_per_s": len(arr) / best,
            "bits_per_symbol": res.bits_per_symbol, "top1": res.top1_accuracy, "table_mib": coder.table_bytes / 2**20,
            "layout": "top-k" if coder.sparse else ("packed" if coder.packed else "dense")}


def dna_speed() -> float:
    import numpy as np

    from fractalseq.alphabet import dna
    from fractalseq.predict._online import online_code_length
    from fractalseq.stream import from_codes

    arr = from_codes(dna(), np.random.default_rng(1).integers(0, 4, 1_000_000).astype(np.uint8))
    online_code_length(arr)
    t = time.perf_counter()
    online_code_length(arr)
    return len(arr) / (time.perf_counter() - t)


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="bench_predict_logs_"))
    syn = tmp / "synthetic-100k.log"
    syn.write_text("\n".join(generate()) + "\n", encoding="ascii")
    inputs = sorted(p for p in LOGS.glob("*.log") if p.stat().st_size > 10_000) + [Path("/var/log/dpkg.log"), syn]
    rows = []
    for path in inputs:
        if not path.exists():
            continue
        lines = sum(1 for _ in path.open("rb"))
        score = timed(["score", "--online", "-f", "log", str(path), "-q", "--json"])
        learn = timed(["learn", "-f", "log", str(path), "-o", str(tmp / "m.npz"), "--force", "-q"])
        row = {"input": path.name, "lines": lines, "score_online": score, "learn": learn, "predictor": predictor_alone(path)}
        for k in ("score_online", "learn"):
            row[k]["lines_per_s"] = lines / row[k]["seconds"]
        rows.append(row)
        print(json.dumps(row), flush=True)
    genome = {}
    try:
        name, fa = next(iter(klebsiella().items()))
        from fractalseq.sources import open_source

        bases = len(open_source(str(fa), fmt="fasta").to_array())
        g = timed(["learn", str(fa), "-o", str(tmp / "g.npz"), "--force", "-q"])
        genome = {"genome": name, "bases": bases, **g, "bytes_per_base": g["peak_mib"] * 2**20 / bases}
    except Exception as exc:  # genomes not available here
        genome = {"skipped": str(exc)}
    data = {"rows": rows, "genome_learn": genome, "dna_online_symbols_per_s": dna_speed(), "load": os.getloadavg()}
    md = ["| input | lines | templates | layout | score --online lines/s | peak MiB | learn lines/s | peak MiB | predictor alone sym/s | bits/symbol | tables MiB |",
          "| --- | ---: | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"]
    for r in rows:
        s, lr, p = r["score_online"], r["learn"], r["predictor"]
        ls = f"{lr['lines_per_s']:,.0f}" if lr["exit"] == 0 else f"failed ({lr['error'][:60]})"
        md.append(f"| {r['input']} | {r['lines']:,} | {p['templates']:,} | {p['layout']} | {s['lines_per_s']:,.0f} | {s['peak_mib']:.0f} | "
                  f"{ls} | {lr['peak_mib']:.0f} | {p['symbols_per_s']:,.0f} | {p['bits_per_symbol']:.4f} | {p['table_mib']:.1f} |")
    md.append("")
    md.append(f"DNA online predictor on the same run: {data['dna_online_symbols_per_s']:,.0f} symbols/s (reference for the ratios).")
    if "bytes_per_base" in genome:
        md.append(f"learn on {genome['genome']} ({genome['bases']:,} bases): peak {genome['peak_mib']:.0f} MiB, "
                  f"{genome['bytes_per_base']:.0f} B/base, {genome['seconds']:.1f} s.")
    md.append(f"Load average during the run: {data['load']}.")
    write_results("predict_logs", data, "\n".join(md) + "\n")


if __name__ == "__main__":
    main()
