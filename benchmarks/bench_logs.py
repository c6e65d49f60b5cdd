"""Template mining on real event logs: lines per second, peak memory of a whole run, grouping accuracy.

Inputs (real logs, none written for this project): this machine's ``/var/log/dpkg.log`` and
``/var/log/apt/term.log`` (Debian 12), GDB's DejaGnu test log ``/usr/share/doc/gdb/check.log.gz`` (Debian
package ``gdb``; 100,014 lines whose test names have any number of words), and the logs of
``reference/logs`` (provenance in reference/logs/README.md).  A missing input is skipped (and listed).

* ``in-process``: :func:`fractalseq.jobs._templates.mine_logs` on the file (reading, decompression,
  header splitting, masking, grouping, merge pass, each line's template id), best of ``--repeat`` runs;
  lines/s counts every line of the file.
* ``whole process``: ``python -m fractalseq templates FILE --json > /dev/null`` under ``/usr/bin/time -v``
  (start-up and JSON writing included): wall seconds and peak resident memory.
* grouping accuracy (Zhu et al. 2019, "Tools and Benchmarks for Automated Log Parsing", ICSE-SEIP: a line is
  right when the lines sharing its template are exactly those sharing its label) on the labelled logs of
  reference/logs (labels written from the programs' message formats by reference/logs/label_rules.py).
* survey of real logs: consecutive pieces of five logs of reference/logs surveyed together; same-log and
  different-log Jensen-Shannon divergences and the purity of the survey's clustering cut into five clusters.
* speed (``--speed``, on by default): lines per CPU-second of reading + templating (``mine_logs``, best of
  ``--repeat`` runs, in a child process) and of ``score --online -f log`` (whole process under
  ``/usr/bin/time``: lines per wall second and per CPU second, interpreter start-up included; and the
  command alone, run in-process after the imports and one untimed run: lines per CPU second) on ``/var/log/dpkg.log``, the GDB
  check excerpt, the apt term excerpt, the whole GDB check log (100,014 lines) and the invented 100,000-line log of ``synthetic_log.py`` (about 17,600
  templates).  With ``--before DIR`` the same two in-process figures are measured with that tree too.
* ``--before DIR``: the log reader's first pass (``logs.learn``, present in every version) measured with the
  package imported from DIR (e.g. an older commit's tree from ``git archive COMMIT fractalseq | tar -x -C DIR``)
  and from this tree, for a before/after table.

The machine is shared: its load average is recorded beside the results.

Run: python benchmarks/bench_logs.py [--repeat 5] [--before DIR] [--speed-only]
(writes benchmarks/results/logs.json and logs.md; --speed-only redoes the speed table only)
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
from collections import defaultdict
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from genomes import write_results  # noqa: E402

LOGS = ROOT / "reference" / "logs"
MACHINE = [Path("/var/log/dpkg.log"), Path("/var/log/apt/term.log"), Path("/usr/share/doc/gdb/check.log.gz")]
LABELLED = ["dpkg-excerpt", "apt-term-excerpt", "jtreg-output-excerpt", "gdb-check-excerpt", "fail2ban-sshd"]

# score --online run in-process (after the imports and one untimed run, which loads the compiled kernels from
# numba's cache once per process): CPU seconds of the command alone
_SCORE = r"""
import contextlib, io, json, sys, time
from fractalseq.cli.app import main
path, repeat = sys.argv[1], int(sys.argv[2])
best = float("inf")
for i in range(repeat + 1):
    sys.argv = ["fractalseq", "score", "--online", "-f", "log", path, "--json"]
    c = time.process_time()
    with contextlib.redirect_stdout(io.StringIO()):
        try:
            main()
        except SystemExit as stop:
            if stop.code:
                raise
    if i:
        best = min(best, time.process_time() - c)
print(json.dumps({"cpu_seconds": best}))
"""

SPEED_LOGS = [Path("/var/log/dpkg.log"), LOGS / "gdb-check-excerpt.log", LOGS / "apt-term-excerpt.log",
              Path("/usr/share/doc/gdb/check.log.gz")]


def score_in_process(path: Path, repeat: int, tree: Path) -> float:
    env = {**os.environ, "PYTHONPATH": str(tree), "NUMBA_NUM_THREADS": "1"}
    out = subprocess.run([sys.executable, "-c", _SCORE, str(path.resolve()), str(repeat)], capture_output=True, text=True,
                         env=env, cwd=tree, check=True, timeout=3600)
    return json.loads(out.stdout)["cpu_seconds"]


def score_whole_process(path: Path, tree: Path = ROOT) -> dict:
    # as an installed package runs: bytecode written (a PYTHONDONTWRITEBYTECODE inherited from the shell would make
    # every run compile the package's sources again, about 0.25 CPU s) and numba's cache filled by an untimed run
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    env.update(PYTHONPATH=str(tree), NUMBA_NUM_THREADS="1")
    argv = [sys.executable, "-m", "fractalseq", "score", "--online", "-f", "log", str(path), "--json"]
    with open(os.devnull, "wb") as null:
        subprocess.run(argv, stdout=null, stderr=subprocess.DEVNULL, env=env, timeout=3600, check=True)
        proc = subprocess.run(["/usr/bin/time", "-f", "%e %U %S", *argv], stdout=null, stderr=subprocess.PIPE, text=True,
                              env=env, timeout=3600)
    if proc.returncode != 0:
        raise RuntimeError(f"score failed on {path}: {proc.stderr[-500:]}")
    wall, user, system = (float(x) for x in proc.stderr.strip().splitlines()[-1].split())
    return {"wall_seconds": wall, "cpu_seconds": round(user + system, 2)}


def speed_rows(repeat: int, before: Path | None, scratch: Path) -> list[dict]:
    """Reading + templating and ``score --online`` lines per second (see the module docstring)."""
    from synthetic_log import generate

    synth = scratch / "synthetic-100k.log"
    synth.write_text("\n".join(generate()) + "\n", encoding="ascii")
    rows = []
    for path in [p for p in SPEED_LOGS if p.exists() and os.access(p, os.R_OK)] + [synth]:
        reps = 1 if path == synth or path.suffix == ".gz" else repeat
        m = measure(path, reps, ROOT)
        n = m["lines"]
        whole = score_whole_process(path)
        cpu = score_in_process(path, reps, ROOT)
        row = {"log": "synthetic_log.py (invented)" if path == synth else (f"reference/logs/{path.name}" if path.parent == LOGS else str(path)),
               "lines": n, "templates": m["templates"], "mine_lines_per_cpu_s": round(n / m["cpu_seconds"]),
               "score_lines_per_cpu_s": round(n / cpu), "score_whole_wall_s": whole["wall_seconds"],
               "score_whole_cpu_s": whole["cpu_seconds"], "score_whole_lines_per_s": round(n / whole["wall_seconds"]),
               "score_whole_lines_per_cpu_s": round(n / max(whole["cpu_seconds"], 1e-9))}
        if before is not None:
            b = measure(path, reps, before)
            row.update(before_templates=b["templates"], before_mine_lines_per_cpu_s=round(n / b["cpu_seconds"]),
                       before_score_lines_per_cpu_s=round(n / score_in_process(path, reps, before)),
                       before_score_whole_cpu_s=score_whole_process(path, before)["cpu_seconds"])
        rows.append(row)
        print(row, flush=True)
    return rows


def speed_markdown(rows: list[dict], before: str | None) -> list[str]:
    md = ["", "Speed on one core: reading + templating (`mine_logs`, lines per CPU second, best of the runs), "
          "`score --online -f log` in-process after the imports and one untimed run (lines per CPU second; the first run "
          "of a process also loads the compiled kernels from numba's cache, about 1 s) and as a whole process "
          "(`/usr/bin/time`, start-up of Python, numpy and numba included: lines per wall second and per CPU second)"
          + (f"; before: {before}" if before else "") + ":", ""]
    head = "| log | lines | templates | templating lines/CPU s | score --online lines/CPU s | whole process s (CPU s) | whole lines/s (per CPU s) |"
    sep = "| --- | ---: | ---: | ---: | ---: | ---: | ---: |"
    if before:
        head += " templating before | score before | whole process CPU s before | speed-up templating | speed-up score |"
        sep += " ---: | ---: | ---: | ---: | ---: |"
    md += [head, sep]
    for r in rows:
        line = (f"| {r['log']} | {r['lines']:,} | {r['templates']:,} | {r['mine_lines_per_cpu_s']:,} | {r['score_lines_per_cpu_s']:,} "
                f"| {r['score_whole_wall_s']} ({r['score_whole_cpu_s']}) | {r['score_whole_lines_per_s']:,} ({r['score_whole_lines_per_cpu_s']:,}) |")
        if before:
            line += (f" {r['before_mine_lines_per_cpu_s']:,} | {r['before_score_lines_per_cpu_s']:,} "
                     f"| {r.get('before_score_whole_cpu_s', '')} "
                     f"| {r['mine_lines_per_cpu_s'] / r['before_mine_lines_per_cpu_s']:.2f}x "
                     f"| {r['score_lines_per_cpu_s'] / r['before_score_lines_per_cpu_s']:.2f}x |")
        md.append(line)
    md += ["", "In-process, `score` used to rebuild the command line's click command on every call (typer reads the "
           "signatures of all eleven commands: about 11 ms, more than the scoring of these logs); it is built once per "
           "process now (`cli.app._command`). What is left besides reading and templating is 1-3 ms a log (the "
           "predictor, its Markov baseline and the JSON), so the score follows the miner (the slowest real log, the apt term excerpt with 27 templates "
           "and carriage-return progress lines, has nearly every message new: package names and versions). "
           "A whole process is mostly start-up, unchanged: about 0.85 CPU s on a quiet machine, of which Python 0.02, "
           "numpy 0.07, numba 0.17, scipy.special 0.12 (the Markov baseline's log-gamma; now imported only when a "
           "baseline is computed, so `--baselines none` skips it), typer and rich 0.03, the command modules 0.03, and "
           "numba's first call (its compiler's registries and the cached kernels) 0.35-0.4; the run itself is about "
           "0.02 of it. Whole-process runs are timed with bytecode written (a `PYTHONDONTWRITEBYTECODE` in the "
           "environment made every run compile the package's sources, about 0.25 CPU s more)."]
    return md


# measured in a child process so that --before can import another tree of the package
_MEASURE = r"""
import json, sys, time
from fractalseq.sources.rawio import locate
from fractalseq.sources import logs
path, repeat, how = sys.argv[1], int(sys.argv[2]), sys.argv[3]
mine_logs = None
if how == "mine_logs":
    from fractalseq.jobs._templates import mine_logs
best = cpu = float("inf")
for _ in range(repeat):
    t, c = time.perf_counter(), time.process_time()
    if mine_logs is not None:
        run = mine_logs([path])
        n_lines, n_templates = run.inputs[0].lines, len(run.templates)
    else:  # the log reader's first pass (in every version of the package)
        table = logs.learn(locate(path), 1 << 20)
        n_lines, n_templates = table.lines, len(table.entries)
    best = min(best, time.perf_counter() - t)
    cpu = min(cpu, time.process_time() - c)
print(json.dumps({"seconds": best, "cpu_seconds": cpu, "lines": n_lines, "templates": n_templates}))
"""


def measure(path: Path, repeat: int, tree: Path, how: str = "mine_logs") -> dict:
    env = {**os.environ, "PYTHONPATH": str(tree)}
    # run inside the tree: ``python -c`` puts the working folder first on the import path
    out = subprocess.run([sys.executable, "-c", _MEASURE, str(path.resolve()), str(repeat), how], capture_output=True, text=True,
                         env=env, cwd=tree, check=True, timeout=3600)
    return json.loads(out.stdout)


def whole_process(path: Path) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    with open(os.devnull, "wb") as null:
        proc = subprocess.run(["/usr/bin/time", "-v", sys.executable, "-m", "fractalseq", "templates", str(path), "--json"],
                              stdout=null, stderr=subprocess.PIPE, text=True, env=env, timeout=3600)
    if proc.returncode != 0:
        raise RuntimeError(f"templates failed on {path}: {proc.stderr[-500:]}")
    rss = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", proc.stderr).group(1))
    wall = re.search(r"Elapsed \(wall clock\) time \(h:mm:ss or m:ss\): (\S+)", proc.stderr).group(1)
    secs = 0.0
    for part in wall.split(":"):
        secs = secs * 60 + float(part)
    return {"wall_seconds": round(secs, 2), "peak_rss_MB": round(rss / 1024, 1)}


def grouping_accuracy(pred: list, truth: list) -> float:
    """Zhu et al. 2019 grouping accuracy (see the module docstring)."""
    gp: dict = defaultdict(set)
    gt: dict = defaultdict(set)
    for i, (p, t) in enumerate(zip(pred, truth)):
        gp[p].add(i)
        gt[t].add(i)
    return sum(gp[p] == gt[t] for p, t in zip(pred, truth)) / len(pred)


def accuracy_rows() -> list[dict]:
    from fractalseq.sources.miner import mine

    rows = []
    for name in LABELLED:
        log, lab = LOGS / f"{name}.log", LOGS / f"{name}.labels"
        if not lab.exists():
            continue
        lines = log.read_bytes().decode("utf-8").split("\n")
        labels = lab.read_text(encoding="utf-8").split("\n")
        if lines[-1] == "":
            lines.pop()
        labels = labels[: len(lines)]
        keep = [i for i, ln in enumerate(lines) if ln.strip() and labels[i]]
        texts, ids = mine([lines[i].rstrip("\r") for i in keep])
        truth = [labels[i] for i in keep]
        rows.append({"log": name, "lines": len(keep), "kinds": len(set(truth)), "templates": len(texts),
                     "grouping_accuracy": round(grouping_accuracy(ids, truth), 4)})
    return rows


#: the survey of real logs: (log, first line, last line, pieces) -- as tests/test_survey_logs.py cuts them
SURVEY_PIECES = [
    ("dpkg-excerpt", 1, 2000, 3),
    ("apt-term-excerpt", 1, 1200, 3),
    ("gdb-check-excerpt", 1, 3000, 3),
    ("fail2ban-sshd", 1, 399, 2),
    ("jtreg-output-excerpt", 150, 351, 2),
]


def survey_figures() -> dict:
    """Survey of consecutive pieces of five real logs: same-log and different-log distances, purity, seconds."""
    import tempfile
    import time
    from collections import Counter

    import numpy as np
    from scipy.cluster.hierarchy import fcluster

    from fractalseq.jobs._files import survey_files
    from fractalseq.jobs._inputs import ReaderOptions
    from fractalseq.jobs._survey import SurveyOptions

    with tempfile.TemporaryDirectory() as d:
        paths, logs = [], []
        for name, first, last, k in SURVEY_PIECES:
            lines = (LOGS / f"{name}.log").read_bytes().split(b"\n")[first - 1 : last]
            step = len(lines) // k
            for i in range(k):
                part = lines[i * step : (i + 1) * step if i < k - 1 else len(lines)]
                p = Path(d) / f"{name}-{i + 1}.log"
                p.write_bytes(b"\n".join(part) + b"\n")
                paths.append(str(p))
                logs.append(name)
        t = time.perf_counter()
        res = survey_files(paths, SurveyOptions.from_reader(ReaderOptions(fmt="log")))
        seconds = time.perf_counter() - t
    js = np.asarray(res.js)
    same = np.equal.outer(logs, logs)
    off = ~np.eye(len(logs), dtype=bool)
    within, between = js[same & off], js[~same]
    clusters = fcluster(np.asarray(res.clustering.linkage, dtype=float), t=len(SURVEY_PIECES), criterion="maxclust")
    by: dict = {}
    for c, g in zip(clusters, logs):
        by.setdefault(c, Counter())[g] += 1
    purity = sum(cnt.most_common(1)[0][1] for cnt in by.values()) / len(logs)
    per_log = {name: round(float(js[np.ix_([i for i, g in enumerate(logs) if g == name], [i for i, g in enumerate(logs) if g == name])][np.triu_indices(k, 1)].max()), 4)
               for name, _, _, k in SURVEY_PIECES}
    return {"pieces": len(paths), "logs": len(SURVEY_PIECES), "alphabet": res.js_alphabet, "depth": res.js_depth,
            "within_max": round(float(within.max()), 4), "within_mean": round(float(within.mean()), 4),
            "between_min": round(float(between.min()), 4), "between_mean": round(float(between.mean()), 4),
            "purity": purity, "within_max_per_log": per_log, "seconds": round(seconds, 2)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--before", type=Path, default=None, help="tree of an older version of the package, measured too")
    parser.add_argument("--before-label", default=None, help="how to name that version in the results (default: its path)")
    parser.add_argument("--speed-only", action="store_true", help="only the speed table (keeps the other results of logs.json)")
    args = parser.parse_args()
    import tempfile

    with tempfile.TemporaryDirectory() as scratch:
        speed = speed_rows(args.repeat, args.before, Path(scratch))
    before_name = (args.before_label or str(args.before)) if args.before else None
    if args.speed_only:
        old = json.loads((HERE / "results" / "logs.json").read_text(encoding="utf-8"))
        old["speed"] = speed
        old["speed_before"] = before_name
        md = (HERE / "results" / "logs.md").read_text(encoding="utf-8").rstrip("\n").split("\n")
        if "<!-- speed -->" in md:
            md = md[: md.index("<!-- speed -->")]
        md += ["<!-- speed -->", *speed_markdown(speed, before_name)[1:], ""]
        write_results("logs", old, "\n".join(md))
        return
    load_start = os.getloadavg()
    inputs = [p for p in MACHINE if p.exists() and os.access(p, os.R_OK)]
    skipped = [str(p) for p in MACHINE if p not in inputs]
    inputs += sorted(LOGS.glob("*.log"))
    rows = []
    for path in inputs:
        big = path.stat().st_size > 2_000_000 or path.suffix == ".gz"
        m = measure(path, max(1, args.repeat // 2) if big else args.repeat, ROOT)
        row = {
            "log": str(path) if path.parent != LOGS else f"reference/logs/{path.name}",
            "bytes": path.stat().st_size, "lines": m["lines"], "templates": m["templates"],
            "seconds": round(m["seconds"], 4), "lines_per_s": round(m["lines"] / m["seconds"]),
            "cpu_seconds": round(m["cpu_seconds"], 4), "lines_per_cpu_s": round(m["lines"] / m["cpu_seconds"]),
            **whole_process(path),
        }
        if args.before is not None and path in MACHINE:
            # the same function in both versions: the log reader's first pass (logs.learn)
            b = measure(path, 1 if big else args.repeat, args.before, "learn")
            a = measure(path, 1 if big else args.repeat, ROOT, "learn")
            row.update(before_seconds=round(b["seconds"], 3), before_lines_per_s=round(b["lines"] / b["seconds"]),
                       before_lines_per_cpu_s=round(b["lines"] / b["cpu_seconds"]), before_templates=b["templates"],
                       learn_seconds=round(a["seconds"], 3), learn_lines_per_s=round(a["lines"] / a["seconds"]),
                       learn_lines_per_cpu_s=round(a["lines"] / a["cpu_seconds"]))
        rows.append(row)
        print(row, flush=True)
    acc = accuracy_rows()
    survey = survey_figures()
    print(survey, flush=True)
    result = {"repeat": args.repeat, "rows": rows, "accuracy": acc, "survey": survey, "skipped": skipped,
              "load_average_1_5_15": {"start": [round(x, 2) for x in load_start],
                                      "end": [round(x, 2) for x in os.getloadavg()]},
              "cpus": os.cpu_count(), "python": sys.version.split()[0],
              "before": before_name, "speed": speed, "speed_before": before_name}
    md = [
        "# Template mining on real logs",
        "",
        f"In-process: reading + templating (`mine_logs`), best of {args.repeat} runs (of {max(1, args.repeat // 2)} "
        "for the gdb log); lines/s counts every line, per second of wall-clock time and per second of the process's "
        "CPU time (the fairer figure on a loaded machine). Whole process: `python -m fractalseq templates FILE --json "
        "> /dev/null` under `/usr/bin/time -v`. "
        f"Load average at start {result['load_average_1_5_15']['start']}, at end {result['load_average_1_5_15']['end']} "
        f"on {os.cpu_count()} CPUs (a shared machine: timings are pessimistic).",
        "",
        "| log | lines | templates | in-process s | lines/s | lines per CPU s | whole process s | peak RSS MB |",
        "| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for r in rows:
        md.append(f"| {r['log']} | {r['lines']:,} | {r['templates']:,} | {r['seconds']} | {r['lines_per_s']:,} "
                  f"| {r['lines_per_cpu_s']:,} | {r['wall_seconds']} | {r['peak_rss_MB']} |")
    before = [r for r in rows if "before_seconds" in r]
    if before:
        md += ["", f"Before / after, the log reader's first pass (`logs.learn`) in both versions (before: "
               f"{args.before_label or args.before}; best of as many runs, one for the gdb log):", "",
               "| log | templates before | lines/s before | lines per CPU s before | templates after | lines/s after "
               "| lines per CPU s after | speed-up (CPU) |",
               "| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"]
        for r in before:
            md.append(f"| {r['log']} | {r['before_templates']:,} | {r['before_lines_per_s']:,} | {r['before_lines_per_cpu_s']:,} "
                      f"| {r['templates']:,} | {r['learn_lines_per_s']:,} | {r['learn_lines_per_cpu_s']:,} "
                      f"| {r['learn_lines_per_cpu_s'] / r['before_lines_per_cpu_s']:.1f}x |")
    md += ["", "Grouping accuracy (Zhu et al. 2019) on the labelled logs of reference/logs:", "",
           "| log | lines | labelled kinds | templates | grouping accuracy |", "| --- | ---: | ---: | ---: | ---: |"]
    for a in acc:
        md.append(f"| {a['log']} | {a['lines']:,} | {a['kinds']} | {a['templates']} | {a['grouping_accuracy']} |")
    md += ["", f"Survey of {survey['pieces']} consecutive pieces of {survey['logs']} real logs of reference/logs "
           f"(`survey --format log`; Jensen-Shannon divergence of the depth-{survey['depth']} template distributions "
           f"over one table of templates joined across the survey, `{survey['alphabet']}`; {survey['seconds']} s):", "",
           "| same-log divergence, max | same-log, mean | different-log, min | different-log, mean | purity (5 clusters) |",
           "| ---: | ---: | ---: | ---: | ---: |",
           f"| {survey['within_max']} | {survey['within_mean']} | {survey['between_min']} | {survey['between_mean']} "
           f"| {survey['purity']} |", "",
           "Largest same-log divergence per log: " + ", ".join(f"{k} {v}" for k, v in survey["within_max_per_log"].items()) + "."]
    if skipped:
        md += ["", "Skipped (missing or unreadable here): " + ", ".join(skipped)]
    md += ["", "<!-- speed -->", *speed_markdown(speed, before_name)[1:], ""]
    write_results("logs", result, "\n".join(md))


if __name__ == "__main__":
    main()
