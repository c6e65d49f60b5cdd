"""Size and power of the event novelty test (new, vanished, rate-changed and bursting templates) by simulation.

Scenario (invented for this benchmark): a service whose log lines take one of
V templates, drawn independently from a fixed Zipf-like distribution
``p_k ~ 1 / k**s`` (seeds 20261204 + trial): a heavy tail (V = 2000,
s = 1.1: most templates are rare, about a tenth of a new batch's lines show
templates the baseline never saw) and a moderate one (V = 300, s = 1.5).

* **Size** — baseline and new batch are independent samples of the same
  distribution (5000 + 5000 lines, and a short baseline of 1000 lines against
  5000 new ones). Target: the verdict says "changed" in at most 6% of 200 trials
  (level 0.05).
* **Power, inserted service** — 150 lines of another service (20 templates
  the baseline distribution never produces, drawn uniformly) inserted as one
  stretch into the new batch. Target (moderate tail): detected in at least 80%
  of trials; the heavy tail's natural novelty hides 150 lines much more often
  (reported, no target).
* **Power, burst** — 30 extra lines of one mid-frequency template (rank 50,
  about 1 line in 400) packed into 40 consecutive lines of the new batch.

Each trial runs :func:`fractalseq.compare._novelty.novelty_test` with its
defaults (level 0.05, 10 leave-out blocks, window 50).  Trials use seeds
0..trials-1; the whole run is deterministic.

Writes benchmarks/results/novelty.json and novelty.md.

Usage: python benchmarks/bench_novelty.py [--trials 200]
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

from fractalseq.compare._novelty import FAMILIES, EventBatch, novelty_test  # noqa: E402
from fractalseq.io._outputs import to_json, write_text  # noqa: E402

OTHER = 20
TAILS = {"heavy": (2000, 1.1), "moderate": (300, 1.5)}
DIST_SEED = 20261204


def distribution(vocabulary: int, exponent: float) -> np.ndarray:
    p = 1.0 / np.arange(1, vocabulary + 1) ** exponent
    return p / p.sum()


def trial(kind: str, seed: int, p: np.ndarray, n: int, m: int) -> dict:
    VOCABULARY = p.size
    rng = np.random.default_rng([DIST_SEED, seed])
    base = rng.choice(VOCABULARY, size=n, p=p)
    new = rng.choice(VOCABULARY, size=m, p=p)
    if kind == "inserted":
        at = int(rng.integers(0, m))
        other = VOCABULARY + rng.integers(0, OTHER, size=150)
        new = np.concatenate([new[:at], other, new[at:]])
    elif kind == "burst":
        at = int(rng.integers(0, m - 40))
        spots = at + np.sort(rng.choice(40, size=30, replace=False))
        new = new.copy()
        new[spots] = 49
    names = [f"t{i}" for i in range(VOCABULARY + OTHER)]
    res = novelty_test(EventBatch(base), EventBatch(new), names)
    fam = {f.family: f.p_adjusted for f in res.families}
    return {"changed": res.changed, **{f: fam[f] < 0.05 for f in FAMILIES}}


def rate(rows: list[dict], key: str) -> float:
    return float(np.mean([r[key] for r in rows]))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=200)
    args = ap.parse_args()
    cases = [
        (f"{tail}_{name}", tail, kind, n, m)
        for tail in TAILS
        for name, kind, n, m in (
            ("size", "stationary", 5000, 5000),
            ("size_short_baseline", "stationary", 1000, 5000),
            ("power_inserted_service", "inserted", 5000, 5000),
            ("power_burst", "burst", 5000, 5000),
        )
    ]
    results = {}
    t0 = time.perf_counter()
    for name, tail, kind, n, m in cases:
        p = distribution(*TAILS[tail])
        rows = [trial(kind, s, p, n, m) for s in range(args.trials)]
        results[name] = {
            "scenario": kind, "tail": {"templates": TAILS[tail][0], "exponent": TAILS[tail][1]},
            "baseline_lines": n, "new_lines": m, "trials": args.trials,
            "changed_rate": rate(rows, "changed"), "family_rates": {f: rate(rows, f) for f in FAMILIES},
        }
        print(name, results[name]["changed_rate"], results[name]["family_rates"], flush=True)
    doc = {
        "benchmark": "event novelty test: size and power",
        "scenario": "invented: V templates, p_k ~ 1/k^s (heavy: V = 2000, s = 1.1; moderate: V = 300, s = 1.5), independent lines; "
                    "inserted service: 150 lines of "
                    f"{OTHER} unseen templates; burst: 30 extra lines of the rank-50 template within 40 lines",
        "targets": {"size": "changed_rate <= 0.06 (both tails, both baselines)", "moderate_power_inserted_service": "changed_rate >= 0.80"},
        "results": results,
        "seconds": round(time.perf_counter() - t0, 1),
    }
    out = ROOT / "benchmarks" / "results"
    write_text(out / "novelty.json", to_json(doc), force=True)
    lines = [
        "# Event novelty test: size and power", "",
        f"Scenario ({doc['scenario']}). {args.trials} trials per case, level 0.05, defaults of `novelty_test`.", "",
        "| case | baseline | new | changed | new events | vanished | rate changes | bursts |",
        "| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for name, r in results.items():
        fr = r["family_rates"]
        lines.append(
            f"| {name} | {r['baseline_lines']} | {r['new_lines']} | {r['changed_rate']:.3f} | {fr['new_events']:.3f} | "
            f"{fr['vanished_events']:.3f} | {fr['rate_changes']:.3f} | {fr['bursts']:.3f} |"
        )
    lines += ["", "Targets: size (changed rate) at most 0.06; power for the inserted service (moderate tail) at least 0.80.",
              "Family columns: share of trials whose Holm-adjusted family p-value is below 0.05."]
    write_text(out / "novelty.md", "\n".join(lines) + "\n", force=True)
    ok = all(r["changed_rate"] <= 0.06 for k, r in results.items() if "_size" in k) \
        and results["moderate_power_inserted_service"]["changed_rate"] >= 0.80
    print(json.dumps({"ok": ok, "seconds": doc["seconds"]}))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
