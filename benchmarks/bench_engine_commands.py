"""One large source on the engines: ``learn``, ``score`` (and ``scan``) serially and with ``--workers 2``.

All data are invented here (simulated order-2 Markov DNA, the generator of
``bench_survey_scale.py``), so nothing is downloaded.  Every command runs as a whole
process through the command line under ``nice -n 10``.  Reported per command: CPU
seconds (user + system of the command and of every process it waited for, so the
workers are included), wall seconds, the peak resident memory of the whole process
tree (the command plus its workers, sampled from ``/proc`` every 0.2 s) and of the
command's own process, the load average before and after, and whether the serial and
the ``--workers 2`` outputs are the same bytes.  Speed is the ratio serial / workers in
the same run; on a shared 2-core machine the wall ratio depends on what else runs
(the load average says how busy it was).

Sections (``--only learn,score,scan``; each replaces its own entry in the JSON):

learn
    ``fractalseq learn`` of a ``--mbase`` FASTA (model files compared byte for byte).
score
    ``fractalseq score --model M --piece 2^22`` of a second ``--mbase`` FASTA with the model of the first.
scan
    ``fractalseq scan --piece 2^22`` of the second FASTA.

For ``score`` and ``scan`` the bytes the parent sends to its workers (pickled task
arguments) are measured in a run of their own (``sent_bytes.py``, a processes engine that
counts them).  With ``--before TREE`` (e.g. an older checkout) the same ``score`` and
``scan`` runs are made from that tree too, in the same run, and its outputs compared with
this tree's; ``--fasta PATH`` scores and scans that FASTA instead of the simulated one,
``--train-mbase`` sets the size of the training FASTA of the model.

Writes benchmarks/results/engine_commands.json and engine_commands.md.

Usage: python benchmarks/bench_engine_commands.py [--mbase 24] [--only learn,score]
       python benchmarks/bench_engine_commands.py --only score,scan --fasta /tmp/sim20.fa --train-mbase 5 --before /path/to/main
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from bench_survey_scale import write_fasta  # noqa: E402

from fractalseq.io._outputs import to_json, write_text  # noqa: E402

DATA = HERE / "data" / "engine_commands"
RESULTS = HERE / "results"
CLI = [sys.executable, "-m", "fractalseq"]
ENV = {**os.environ, "PYTHONPATH": str(ROOT)}
#: Piece size of score and scan in both modes (the same piece gives the same bytes); 2^22 symbols makes
#: five pieces of a 20-Mbase input, where the default 2^24 would leave one worker a piece a fifth the size.
PIECE = 1 << 22


def _tree_rss(root: int) -> int:
    """Resident bytes of ``root`` and all its descendants (from /proc)."""
    children: dict[int, list[int]] = {}
    rss: dict[int, int] = {}
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/stat") as fh:
                parts = fh.read().rsplit(")", 1)[1].split()
            ppid, pages = int(parts[1]), int(parts[21])
        except (OSError, IndexError, ValueError):
            continue
        children.setdefault(ppid, []).append(int(d))
        rss[int(d)] = pages * os.sysconf("SC_PAGE_SIZE")
    total, todo = 0, [root]
    while todo:
        p = todo.pop()
        total += rss.get(p, 0)
        todo.extend(children.get(p, []))
    return total


def run(args: list[str], tree: Path = ROOT) -> dict:
    """Run one command of the package in ``tree`` under ``nice -n 10`` and measure it (see the module docstring)."""
    load0 = os.getloadavg()[0]
    t0 = time.perf_counter()
    p = subprocess.Popen(["nice", "-n", "10", "/usr/bin/time", "-f", "peak_kib=%M cpu=%U+%S", *CLI, *args],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, env={**ENV, "PYTHONPATH": str(tree)}, cwd=str(tree))
    peak = [0]
    done = threading.Event()

    def sample():
        while not done.is_set():
            peak[0] = max(peak[0], _tree_rss(p.pid))
            done.wait(0.2)

    th = threading.Thread(target=sample, daemon=True)
    th.start()
    out, err = p.communicate()
    done.set()
    th.join()
    wall = time.perf_counter() - t0
    err = err.decode(errors="replace")
    if p.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(args)} failed: {err.strip()}")
    line = next((ln for ln in reversed(err.splitlines()) if ln.startswith("peak_kib=")), "peak_kib=0 cpu=0+0")
    own, cpu = line.split()
    user, system = cpu.split("=", 1)[1].split("+")
    return {
        "wall_s": round(wall, 2), "cpu_s": round(float(user) + float(system), 2),
        "peak_tree_mib": round(peak[0] / 2**20, 1), "peak_own_mib": round(int(own.split("=", 1)[1]) / 1024, 1),
        "load_before": round(load0, 2), "load_after": round(os.getloadavg()[0], 2), "stdout": out,
    }


def sent(args: list[str], tree: Path) -> dict:
    """Bytes the parent sends to two workers for one command (``sent_bytes.py`` run against ``tree``)."""
    out = subprocess.run(["nice", "-n", "10", sys.executable, str(HERE / "sent_bytes.py"), *args], capture_output=True, text=True,
                         env={**ENV, "PYTHONPATH": str(tree)}, cwd=str(tree))
    if out.returncode != 0:
        raise SystemExit(f"sent_bytes {' '.join(args)} failed: {out.stderr.strip()}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def compare(name: str, serial_args: list[str], workers_args: list[str], files: tuple[Path, Path] | None = None,
            tree: Path = ROOT, keep: bool = False) -> dict:
    s = run(serial_args, tree)
    w = run(workers_args, tree)
    so, wo = s.pop("stdout"), w.pop("stdout")
    if files is not None:  # the learn document names its model file
        wo = wo.replace(str(files[1]).encode(), str(files[0]).encode())
    same = so == wo
    if files is not None:
        same = same and files[0].read_bytes() == files[1].read_bytes()
    r = {
        "command": name, "serial": s, "workers2": w, "identical": same,
        "cpu_ratio": round(w["cpu_s"] / s["cpu_s"], 3) if s["cpu_s"] else None,
        "wall_speedup": round(s["wall_s"] / w["wall_s"], 3) if w["wall_s"] else None,
    }
    if keep:
        r["stdout"] = so
    return r


def engine_section(name: str, base: list[str], sent_args: list[str], before: Path | None) -> dict:
    """Serial and ``--workers 2`` runs of one command from this tree (and from ``before``), with the bytes sent."""
    r = compare(name, base, [*base, "--workers", "2"], keep=before is not None)
    r["sent"] = sent(sent_args, ROOT)
    if before is not None:
        b = compare(name, base, [*base, "--workers", "2"], tree=before, keep=True)
        b["sent"] = sent(sent_args, before)
        r["same_as_before"] = r.pop("stdout") == b.pop("stdout")
        b["tree"] = str(before)
        r["before"] = b
    return r


def input_note(doc: dict, r: dict) -> str:
    """What a section was measured on (sections keep the run they were measured in)."""
    if "input" not in r:
        return f"measured in an earlier run on {doc['symbols'] / 1e6:.0f}-Mbase simulated FASTA files (training and test)"
    model = f", model learned from {r['train_symbols'] / 1e6:.0f} Mbase of simulated FASTA" if "train_symbols" in r else ""
    return f"input {r['input']}{model}"


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--mbase", type=int, default=24)
    ap.add_argument("--only", default="learn,score,scan")
    ap.add_argument("--before", type=Path, default=None, help="another checkout to run score and scan from (same run)")
    ap.add_argument("--fasta", type=Path, default=None, help="score and scan this FASTA instead of the simulated one")
    ap.add_argument("--train-mbase", type=int, default=None, help="Mbase of the model's training FASTA (default --mbase)")
    ap.add_argument("--markdown-only", action="store_true", help="rewrite the markdown table from the JSON and stop")
    args = ap.parse_args()
    if args.markdown_only:
        write_markdown(json.loads((RESULTS / "engine_commands.json").read_text()))
        return 0
    want = args.only.split(",")
    n = args.mbase * 1_000_000
    tn = (args.train_mbase or args.mbase) * 1_000_000
    train = write_fasta(DATA / f"train{tn // 1_000_000}M.fa", tn, seed=11, records=4)
    test = args.fasta.resolve() if args.fasta is not None else write_fasta(DATA / f"test{args.mbase}M.fa", n, seed=12, records=6)
    warm = write_fasta(DATA / "warm.fa", 50_000, seed=1)
    model_a, model_b = DATA / "a.npz", DATA / "b.npz"
    out = RESULTS / "engine_commands.json"
    doc = json.loads(out.read_text()) if out.exists() else {}
    doc["symbols"] = n
    doc["cores"] = os.cpu_count()
    doc["input"] = str(test) if args.fasta is not None else "simulated (seed 12, 6 records)"
    doc["train_symbols"] = tn
    run(["count", str(warm), "--depth", "4", "--json", "-q"])  # numba caches warm
    if args.before is not None:
        run(["count", str(warm), "--depth", "4", "--json", "-q"], args.before)
    if "learn" not in want and not model_a.exists():  # the model only
        run(["learn", str(train), "--json", "-q", "--force", "-o", str(model_a)])
    if "learn" in want:
        base = ["learn", str(train), "--json", "-q", "--force"]
        r = compare("learn", [*base, "-o", str(model_a)], [*base, "-o", str(model_b), "--workers", "2"], (model_a, model_b))
        r["note"] = "model files compared byte for byte; the JSON names the model file, so it is compared with the name replaced"
        doc["learn"] = r
        print(json.dumps(r), flush=True)
    if "score" in want:
        base = ["score", str(test), "--model", str(model_a), "--json", "-q", "--piece", str(PIECE)]
        doc["score"] = engine_section("score --model", base, ["score", str(test), str(model_a), str(PIECE)], args.before)
        doc["score"].update(input=doc["input"], train_symbols=tn)
        print(json.dumps(doc["score"]), flush=True)
    if "scan" in want:
        base = ["scan", str(test), "--json", "-q", "--piece", str(PIECE)]
        doc["scan"] = engine_section("scan", base, ["scan", str(test), str(PIECE)], args.before)
        doc["scan"]["input"] = doc["input"]
        print(json.dumps(doc["scan"]), flush=True)
    RESULTS.mkdir(exist_ok=True)
    write_text(out, to_json(doc), force=True)
    write_markdown(doc)
    return 0


def write_markdown(doc: dict) -> None:
    """benchmarks/results/engine_commands.md from the JSON document."""
    n = doc["symbols"]
    rows = ["| command | tree | mode | CPU s | wall s | peak MiB (tree) | peak MiB (own) | load before/after | bytes sent to workers | same bytes |",
            "| --- | --- | --- | ---: | ---: | ---: | ---: | --- | ---: | --- |"]
    for key in ("learn", "score", "scan"):
        r = doc.get(key)
        if not r:
            continue
        for label, t in (("before", r.get("before")), ("this", r)):
            if t is None:
                continue
            for mode in ("serial", "workers2"):
                m = t[mode]
                moved = f"{t['sent']['sent_bytes']:,}" if mode == "workers2" and "sent" in t else "-"
                rows.append(f"| {r['command']} | {label} | {mode} | {m['cpu_s']} | {m['wall_s']} | {m['peak_tree_mib']} | "
                            f"{m['peak_own_mib']} | {m['load_before']} / {m['load_after']} | {moved} | {'yes' if t['identical'] else 'NO'} |")
    md = [f"# One large source on the engines ({n / 1e6:.0f} Mbase, {doc['cores']} cores, nice -n 10)", "",
          "Serial and `--workers 2` runs of the same command, whole processes. CPU seconds include the workers; "
          "the wall ratio depends on the load of the shared machine (load averages beside). `score` and `scan` "
          "use `--piece 4194304` (2^22) in both modes. What each command ran on is listed below the table. "
          "\"bytes sent\": the pickled task arguments "
          "the parent hands its two workers (measured in a run of its own); \"same bytes\": the `--workers 2` output "
          "equals the serial one of the same tree; \"before\" rows are the same commands run from another checkout "
          "in the same run.", "", *rows, ""]
    for key in ("learn", "score", "scan"):
        r = doc.get(key)
        if r:
            md.append(f"- {r['command']} ({input_note(doc, r)}): wall speed-up {r['wall_speedup']}x, CPU ratio "
                      f"(workers / serial) {r['cpu_ratio']}.")
            if r.get("before"):
                b = r["before"]
                md.append(f"  Before: wall speed-up {b['wall_speedup']}x, CPU ratio {b['cpu_ratio']}; bytes sent "
                          f"{b['sent']['sent_bytes']:,} in {b['sent']['tasks']} tasks, now {r['sent']['sent_bytes']:,} in "
                          f"{r['sent']['tasks']} tasks; output the same bytes as before: {'yes' if r.get('same_as_before') else 'NO'}.")
    write_text(RESULTS / "engine_commands.md", "\n".join(md) + "\n", force=True)


if __name__ == "__main__":
    raise SystemExit(main())
