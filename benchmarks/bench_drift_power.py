"""Size and power of ``fractalseq drift`` by simulation.

Scenario (invented for this benchmark): a 4-symbol order-2 Markov chain whose
16 transition rows are drawn once from a Dirichlet(5, 5, 5, 5) distribution
(seed 20240611).

* **Size** — baseline and new batch are two independent samples of 10^5
  symbols from the same chain; the verdict should say "changed" in at most
  5% of trials (target: the rate of adjusted p < 0.05 is at most 6% over 200
  trials).
* **Power** — the new batch comes from the chain with one transition
  probability changed by 0.05: in the context of median stationary
  probability, 0.05 moves from the most to the least likely next symbol.
  Target: detected in at least 80% of 200 trials.

Each trial runs the library's drift test with its defaults (depth 3, blocks
of 1562 symbols, 999 block permutations, Holm adjustment across the four
figures).  Trials run on the local process engine.

Writes benchmarks/results/drift_power.json and drift_power.md.

Usage: python benchmarks/bench_drift_power.py [--trials 200] [--workers 2]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from fractalseq.alphabet import dna  # noqa: E402
from fractalseq.compare._drift import FIGURES, DriftOptions, drift_test  # noqa: E402
from fractalseq.jobs._engines import ProcessEngine, SerialEngine  # noqa: E402
from fractalseq.datasets._markov import simulate_markov, stationary  # noqa: E402
from fractalseq.io._outputs import to_json, write_text  # noqa: E402
from fractalseq.stream import from_codes  # noqa: E402

LENGTH = 100_000
CHAIN_SEED = 20240611
SHIFT = 0.05


def chains() -> tuple[np.ndarray, np.ndarray, dict]:
    """The null chain and the changed chain (one transition probability moved by 0.05)."""
    rng = np.random.default_rng(CHAIN_SEED)
    P = rng.dirichlet(np.full(4, 5.0), size=16)
    pi = stationary(P, order=2)
    ctx = int(np.argsort(pi)[len(pi) // 2])
    hi, lo = int(np.argmax(P[ctx])), int(np.argmin(P[ctx]))
    Q = P.copy()
    Q[ctx, hi] -= SHIFT
    Q[ctx, lo] += SHIFT
    info = {
        "context": "ACGT"[ctx // 4] + "ACGT"[ctx % 4],
        "context_stationary_probability": float(pi[ctx]),
        "from_symbol": "ACGT"[hi],
        "to_symbol": "ACGT"[lo],
        "row_before": P[ctx].tolist(),
        "row_after": Q[ctx].tolist(),
    }
    return P, Q, info


def trial(task: tuple[str, int]) -> dict:
    kind, i = task
    P, Q, _ = chains()
    base = simulate_markov(P, LENGTH, seed=10_000 + 2 * i, order=2)
    new = simulate_markov(P if kind == "size" else Q, LENGTH, seed=10_001 + 2 * i, order=2)
    res = drift_test([from_codes(dna(), base, name="baseline")], [from_codes(dna(), new, name="new")], DriftOptions(seed=i))
    return {"changed": res.changed, "p_value": res.p_value, "raw": {t.figure: t.p_value for t in res.tests}}


def summarise(rows: list[dict]) -> dict:
    n = len(rows)
    out = {
        "trials": n,
        "rate_changed": sum(r["changed"] for r in rows) / n,
        "rate_raw_p_below_0.05": {f: sum(r["raw"][f] < 0.05 for r in rows) / n for f in FIGURES},
    }
    k = sum(r["changed"] for r in rows)
    # Wilson 95% interval for the rate (Wilson 1927, JASA 22:209)
    z = 1.959963984540054
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    out["rate_changed_interval95"] = [float(centre - half), float(centre + half)]
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--trials", type=int, default=200)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    _, _, info = chains()
    engine = ProcessEngine(args.workers) if args.workers > 1 else SerialEngine()
    t0 = time.perf_counter()
    with engine:
        size_rows = engine.map(trial, [("size", i) for i in range(args.trials)])
        power_rows = engine.map(trial, [("power", i) for i in range(args.trials)])
    elapsed = time.perf_counter() - t0
    size, power = summarise(size_rows), summarise(power_rows)
    result = {
        "benchmark": "drift size and power",
        "scenario": "invented: 4-symbol order-2 Markov chain, Dirichlet(5) rows, seed %d" % CHAIN_SEED,
        "length_per_batch": LENGTH,
        "change": info,
        "test": "fractalseq.compare._drift.drift_test defaults: depth 3, auto blocks, 999 block permutations, Holm over 4 figures, alpha 0.05",
        "size": size,
        "power": power,
        "targets": {"size_at_most": 0.06, "power_at_least": 0.80},
        "passed": {"size": size["rate_changed"] <= 0.06, "power": power["rate_changed"] >= 0.80},
        "seconds": round(elapsed, 1),
    }
    out = ROOT / "benchmarks" / "results"
    write_text(out / "drift_power.json", to_json(result), force=True)
    md = [
        "# Drift test: size and power (simulation)",
        "",
        f"Scenario: {result['scenario']}; {LENGTH} symbols per batch; {args.trials} trials each.",
        f"Change for power: context {info['context']} (stationary probability {info['context_stationary_probability']:.4f}), "
        f"P(next = {info['from_symbol']}) - 0.05 and P(next = {info['to_symbol']}) + 0.05.",
        "",
        "| quantity | rate of 'changed' (adjusted p < 0.05) | 95% interval | target | met |",
        "| --- | --- | --- | --- | --- |",
        f"| size (no change) | {size['rate_changed']:.3f} | {size['rate_changed_interval95'][0]:.3f}-{size['rate_changed_interval95'][1]:.3f} | <= 0.06 | {'yes' if result['passed']['size'] else 'NO'} |",
        f"| power (one transition +-0.05) | {power['rate_changed']:.3f} | {power['rate_changed_interval95'][0]:.3f}-{power['rate_changed_interval95'][1]:.3f} | >= 0.80 | {'yes' if result['passed']['power'] else 'NO'} |",
        "",
        "Raw (unadjusted) rate of p < 0.05 per figure:",
        "",
        "| figure | size | power |",
        "| --- | --- | --- |",
    ]
    for f in FIGURES:
        md.append(f"| {f} | {size['rate_raw_p_below_0.05'][f]:.3f} | {power['rate_raw_p_below_0.05'][f]:.3f} |")
    md += ["", f"Run time: {elapsed:.0f} s with {args.workers} worker processes.", ""]
    write_text(out / "drift_power.md", "\n".join(md), force=True)
    print(json.dumps({"size": size["rate_changed"], "power": power["rate_changed"], "seconds": round(elapsed, 1)}))
    return 0 if all(result["passed"].values()) else 1


if __name__ == "__main__":
    sys.exit(main())
