"""Run the test suite (or some of its files) several times in a row and record every outcome.

A flaky test blocks every landing, so the suite must pass many times in a row on the
2-core machine (``--runs 10`` is the project's bar).  Each run is a fresh
``python -m pytest`` process with a JUnit XML report; the script records, per run, the
exit status, the counts (passed, failed, errors, skipped), the ids of the tests that did
not pass and the wall time (for information only: nothing here is a speed check).  At the
end it lists every test that failed in some runs and passed in others (flaky) and those
that failed in all runs.

Writes ``benchmarks/results/suite_repeat.json`` and ``suite_repeat.md`` (or the names
given with ``--name``).  Exit status 0 when every run passed, 1 otherwise.

Usage::

    python benchmarks/run_suite_repeatedly.py --runs 10                 # the whole suite, ten times
    python benchmarks/run_suite_repeatedly.py --runs 1 tests/test_pipes.py tests/test_stale_parts.py
    python benchmarks/run_suite_repeatedly.py --runs 3 -- -m 'not slow'  # extra pytest arguments after --
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time
import xml.etree.ElementTree as ET
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from fractalseq.io._outputs import to_json, write_text  # noqa: E402


def outcomes(junit: Path, messages: dict[str, str] | None = None) -> dict[str, str]:
    """Test id -> ``passed`` / ``failed`` / ``error`` / ``skipped`` from a JUnit XML report.

    With ``messages``, the report's text of each failure or error is stored there (its last 4,000
    characters: the assertion and the lines around it).
    """
    result: dict[str, str] = {}
    if not junit.exists():
        return result
    for case in ET.parse(junit).getroot().iter("testcase"):
        test_id = f"{case.get('classname', '')}::{case.get('name', '')}"
        kinds = {child.tag for child in case}
        if messages is not None:
            for child in case:
                if child.tag in ("failure", "error"):
                    messages[test_id] = ((child.get("message") or "") + "\n" + (child.text or ""))[-4000:]
        if "failure" in kinds:
            result[test_id] = "failed"
        elif "error" in kinds:
            result[test_id] = "error"
        elif "skipped" in kinds:
            result[test_id] = "skipped"
        else:
            result[test_id] = "passed"
    return result


def run_once(index: int, targets: list[str], extra: list[str]) -> dict:
    """One fresh pytest process over ``targets``; its status, counts and the tests that did not pass."""
    with tempfile.TemporaryDirectory(prefix="suite-run-") as tmp:
        junit = Path(tmp) / "junit.xml"
        cmd = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", f"--junitxml={junit}", *extra, *targets]
        env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
        start = time.perf_counter()
        done = subprocess.run(cmd, cwd=ROOT, env=env, capture_output=True, text=True)
        seconds = time.perf_counter() - start
        messages: dict[str, str] = {}
        cases = outcomes(junit, messages)
    counts = {k: sum(1 for v in cases.values() if v == k) for k in ("passed", "failed", "error", "skipped")}
    bad = sorted(t for t, v in cases.items() if v in ("failed", "error"))
    tail = [ln for ln in done.stdout.splitlines() if ln.strip()][-1:] or [""]
    return {"run": index, "exit_status": done.returncode, **counts, "not_passed": bad,
            "seconds": round(seconds, 1), "summary": tail[0], "messages": {t: messages.get(t, "") for t in bad}}


def markdown(doc: dict) -> str:
    lines = [
        "# The test suite run repeatedly",
        "",
        f"Targets: {' '.join(doc['targets']) or 'the whole suite'}; extra pytest arguments: {' '.join(doc['pytest_args']) or 'none'}.",
        f"Machine: {doc['machine']['cpus']} cores, Python {doc['machine']['python']}. Runs: {doc['runs']}; "
        f"all passed: {'yes' if doc['all_passed'] else 'no'}.",
        "",
        "| run | exit | passed | failed | errors | skipped | wall time (s) |",
        "| ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for r in doc["results"]:
        lines.append(f"| {r['run']} | {r['exit_status']} | {r['passed']} | {r['failed']} | {r['error']} | {r['skipped']} | {r['seconds']} |")
    lines.append("")
    if doc["flaky"]:
        lines.append("Flaky (failed in some runs, passed in others): " + ", ".join(f"`{t}`" for t in doc["flaky"]) + ".")
    if doc["always_failing"]:
        lines.append("Failed in every run: " + ", ".join(f"`{t}`" for t in doc["always_failing"]) + ".")
    if not doc["flaky"] and not doc["always_failing"]:
        lines.append("No test failed in any run.")
    lines.append("")
    lines.append("Wall times are for information only (the machine is shared); no check depends on them.")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--runs", type=int, default=10, help="How many runs in a row (default 10).")
    ap.add_argument("--name", default="suite_repeat", help="Base name of the result files in benchmarks/results/.")
    ap.add_argument("targets", nargs="*", help="Test files or node ids (default: the whole suite); pytest arguments after --.")
    args, extra = ap.parse_known_args(argv)
    if "--" in (argv if argv is not None else sys.argv[1:]):
        raw = argv if argv is not None else sys.argv[1:]
        extra = raw[raw.index("--") + 1:]
        args.targets = [t for t in args.targets if t not in extra]
    if args.runs < 1:
        ap.error("--runs must be at least 1")
    results = []
    for i in range(1, args.runs + 1):
        r = run_once(i, args.targets, extra)
        results.append(r)
        print(f"run {i}/{args.runs}: exit {r['exit_status']}, {r['passed']} passed, {r['failed']} failed, "
              f"{r['error']} errors, {r['skipped']} skipped ({r['seconds']} s)", flush=True)
        for test_id in r["not_passed"]:  # at once: a long loop must not hide a failure until its end
            print(f"  not passed: {test_id}\n" + "\n".join("    " + ln for ln in r["messages"][test_id].splitlines()[-25:]), flush=True)
    seen_bad: dict[str, int] = {}
    for r in results:
        for t in r["not_passed"]:
            seen_bad[t] = seen_bad.get(t, 0) + 1
    doc = {
        "runs": args.runs,
        "targets": args.targets,
        "pytest_args": extra,
        "machine": {"cpus": os.cpu_count(), "python": platform.python_version(), "system": platform.system()},
        "all_passed": all(r["exit_status"] == 0 for r in results),
        "flaky": sorted(t for t, n in seen_bad.items() if n < args.runs),
        "always_failing": sorted(t for t, n in seen_bad.items() if n == args.runs),
        "results": results,
    }
    out = HERE / "results"
    write_text(out / f"{args.name}.json", to_json(doc), force=True)
    write_text(out / f"{args.name}.md", markdown(doc), force=True)
    print(f"wrote {out / (args.name + '.json')} and {out / (args.name + '.md')}")
    return 0 if doc["all_passed"] else 1


if __name__ == "__main__":
    sys.exit(main())
