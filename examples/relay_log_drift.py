"""Has this week's relay log drifted from last week's?  A drift test with the evidence.

**The data are invented.**  They come from the Kelpwater Marine Station scenario
(``fs.scenario``): the fictional station's telemetry relay writes a
log whose lines follow a known Markov chain of events.  The second week's batch
contains a failure mode (checksum mismatches followed by dropped frames) that
the first week never shows; the ground truth names the new templates.  Drift
reports on logs are no security guarantee: a stream can change in ways its word
statistics do not show.

What it shows (Python API):

everything through the façade ``import fractalseq as fs``:

* ``fs.line_template`` masks the variable parts of a line
  (times, numbers, hex, addresses, quoted values) so that each template is a symbol;
* ``fs.open_source`` with ``fmt="log"`` reads a log as a
  stream of templates and reports each template's count;
* ``fs.drift_test`` compares the two batches by block
  permutation tests and lists the words (here: templates) that changed most.

Run::

    python examples/relay_log_drift.py [OUTPUT_FOLDER] [--quick] [--force]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import fractalseq as fs

from _scenario_setup import make_scenario, run_example  # shared options, output folder and scenario of the examples


def fixed_words(template: str) -> str:
    """The longest fixed text of a scenario template ('frame <*> dropped after ...' -> 'dropped after ...')."""
    return max(template.split("<*>"), key=len).strip()


def run(folder: Path, args: argparse.Namespace) -> None:
    lines = 1_500 if args.quick else 6_000
    world, _ = make_scenario(folder, args, length=5_000, log_lines=lines)
    base_path, new_path = world.logs.baseline, world.logs.new
    first = Path(base_path).read_text().splitlines()[0]
    print(f"a line:       {first}")
    print(f"its template: {fs.line_template(first)}")

    baseline = fs.open_source(base_path, fmt="log")
    new = fs.open_source(new_path, fmt="log")
    for label, stream in (("week 1", baseline), ("week 2", new)):
        arr = stream.to_array()
        table = arr.report.extra["templates"]
        top = sorted(table, key=lambda t: -t["count"])[:3]
        print(f"{label}: {len(arr):,} lines, {len(table)} templates; most frequent:")
        for t in top:
            print(f"    {t['count']:>6,}  {t['template']}")

    permutations = 199 if args.quick else 999
    result = fs.drift_test([baseline], [new], fs.DriftOptions(permutations=permutations, seed=args.seed))
    print(result.verdict)
    for t in result.tests:
        print(f"  {t.figure:<13} statistic {t.statistic:10.4g}  adjusted p {t.p_adjusted:.3g}")
    print("templates contributing most to the difference:")
    for w in result.top_words[:4]:
        print(f"  {100 * w['share_of_statistic']:5.1f}%  {w['direction']:<12} "
              f"{w['baseline_count']:>5} -> {w['new_count']:>5}  {w['word']}")

    truth = world.logs
    found = [any(fixed_words(t) in w["word"] for w in result.top_words[:4]) for t in truth.new_templates]
    print(f"truth: changed = {truth.changed}; test says changed = {result.changed}")
    print(f"truth: new failure templates {[fixed_words(t) for t in truth.new_templates]}; "
          f"found among the top four: {sum(found)} of {len(found)}")
    out = fs.write_text(folder / "drift.json", result.to_json(), force=args.force)
    print(f"wrote {out}")
    print("Drift reports on logs are no security guarantee.")


def main(argv: list[str] | None = None) -> int:
    return run_example(run, __doc__, argv)


if __name__ == "__main__":
    sys.exit(main())
