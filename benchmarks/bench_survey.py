"""Survey of real genomes: speed-up of two local worker processes over serial, and the clustering.

Data: the four Klebsiella pneumoniae assemblies of Debian's ``kleborate-examples``
(fetched into benchmarks/data/ by benchmarks/genomes.py when absent) and the
phage lambda genome in reference/ (bowtie2-examples; reference/PROVENANCE.md).

1. Speed: ``run_survey`` of the four assemblies serially, then on the local
   process engine with two workers (pool start-up included), both without a
   cache, in the same process.  Target: at least 1.6x faster.  The two results
   must be identical (JSON bytes).
2. Clustering: the survey of the four assemblies plus lambda; the phage should
   stand apart (the root of the dendrogram splits it from the bacteria).

Writes benchmarks/results/survey.json and survey.md.  Genomic output is for
research, not for clinical decisions.

Usage: python benchmarks/bench_survey.py [--workers 2]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from genomes import LAMBDA, klebsiella  # noqa: E402

from fractalseq.jobs._engines import ProcessEngine, SerialEngine  # noqa: E402
from fractalseq.io._outputs import to_json, write_text  # noqa: E402
from fractalseq.jobs._survey import SurveyOptions, expand_inputs, run_survey  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    kleb = klebsiella()
    specs = expand_inputs([str(p) for p in kleb.values()])
    opts = SurveyOptions(seed=0)
    # warm the JIT caches of this process so that the serial time is not charged compile time
    run_survey(expand_inputs([str(LAMBDA)]), opts, SerialEngine())

    load_before = os.getloadavg()
    t0 = time.perf_counter()
    serial = run_survey(specs, opts, SerialEngine())
    t_serial = time.perf_counter() - t0
    t0 = time.perf_counter()
    with ProcessEngine(args.workers) as eng:
        par = run_survey(specs, opts, eng)
    t_par = time.perf_counter() - t0
    load_after = os.getloadavg()
    speedup = t_serial / t_par
    identical = serial.to_json() == par.to_json()

    all_specs = expand_inputs([str(p) for p in kleb.values()] + [str(LAMBDA)])
    with ProcessEngine(args.workers) as eng:
        full = run_survey(all_specs, opts, eng)
    a, b = full.clustering.top_split()
    lam = full.names.index(LAMBDA.name)
    apart = [lam] in (a, b)
    js = full.js
    result = {
        "benchmark": "survey of real genomes",
        "data": {"klebsiella": {k: str(v) for k, v in kleb.items()}, "lambda": str(LAMBDA)},
        "lengths": {s["name"]: s["length"] for s in full.sources},
        "workers": args.workers,
        "seconds_serial": round(t_serial, 2),
        "seconds_processes": round(t_par, 2),
        "speedup": round(speedup, 3),
        "target_speedup": 1.6,
        "identical_results": identical,
        "cpus": os.cpu_count(),
        "load_average_before_after": [round(load_before[0], 2), round(load_after[0], 2)],
        "distance_depth": full.js_depth,
        "js_divergence_bits": {"names": full.names, "matrix": js.tolist()},
        "top_split": [[full.names[i] for i in a], [full.names[i] for i in b]],
        "lambda_stands_apart": apart,
        "passed": {"speedup": speedup >= 1.6, "identical": identical, "lambda_apart": apart},
    }
    out = HERE / "results"
    write_text(out / "survey.json", to_json(result), force=True)
    lines = [
        "# Survey of real genomes",
        "",
        "Four Klebsiella pneumoniae assemblies (Debian kleborate-examples) and phage lambda (reference/).",
        "",
        "| quantity | value | target |",
        "| --- | --- | --- |",
        f"| serial survey of the 4 assemblies | {t_serial:.1f} s | |",
        f"| {args.workers} local worker processes | {t_par:.1f} s | |",
        f"| speed-up | {speedup:.2f}x | >= 1.6x |",
        f"| identical results (JSON bytes) | {'yes' if identical else 'NO'} | yes |",
        f"| lambda apart at the root of the clustering | {'yes' if apart else 'NO'} | yes |",
        f"| machine | {os.cpu_count()} CPUs, 1-min load {load_before[0]:.1f} before / {load_after[0]:.1f} after | |",
        "",
        f"Jensen-Shannon divergence (bits) of depth-{full.js_depth} words:",
        "",
        "| | " + " | ".join(full.names) + " |",
        "| --- " * (len(full.names) + 1) + "|",
    ]
    for n, row in zip(full.names, js.tolist()):
        lines.append(f"| {n} | " + " | ".join(f"{v:.4f}" for v in row) + " |")
    lines += ["", "Genomic output is for research, not for clinical decisions.", ""]
    write_text(out / "survey.md", "\n".join(lines), force=True)
    print(to_json({k: result[k] for k in ("seconds_serial", "seconds_processes", "speedup", "identical_results", "lambda_stands_apart")}))
    return 0 if all(result["passed"].values()) else 1


if __name__ == "__main__":
    sys.exit(main())
