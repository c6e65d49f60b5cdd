"""Peak memory and time of whole commands on large simulated inputs, through the command line.

Each measurement is one process, ``/usr/bin/time -v python -m fractalseq ...``: the peak resident
set size (``Maximum resident set size``) and the wall time, with bytes per symbol. Inputs are
simulated FASTA written to a temporary folder (an invented order-2 Markov source over ACGT with a
fixed seed, 80 bases a line): one record, and a multi-record assembly of 24 records. Commands:

* ``count --depth 16`` (word counts up to 16-words),
* ``profile`` (default settings: 100 bootstrap replicates) and ``profile --quick``,
* ``learn`` (fitted model, up to ``--learn-max`` Mbase: it is the memory-hungriest command),
* ``score --online`` (default baselines: the KT Markov model) and ``--baselines none``.

Speed is given as a ratio to a reference measured in the same run: ``xz -9`` on the same FASTA file
(seconds per Mbase). On a real genome (a Klebsiella assembly from ``benchmarks/genomes.py``, 5.7 Mbase,
E. coli-sized) the quick online score is timed against ``xz -9`` of the same bases, both as whole
processes; the start-up of a command (``import fractalseq`` and a first numba call served from the
cache) is measured on a tiny input.

Run::

    python benchmarks/bench_scale.py                       # 10 and 50 Mbase
    python benchmarks/bench_scale.py --sizes 10,50,100     # add 100 Mbase (needs ~3 GB free)
    python benchmarks/bench_scale.py --gigabase            # also one simulated 1-Gbase input (long)
    python benchmarks/bench_scale.py --profile-only --sizes 10,50,96 --before ../old-checkout
                                                           # profile only, this tree against another one
    python benchmarks/bench_scale.py --profile-workers 2 --sizes 100
                                                           # profile serial and on 2 workers (same JSON?)
    python benchmarks/bench_scale.py --count-workers 2 --sizes 100,300
                                                           # count --depth 16 serial and on 2 workers, 5 pairs each
    python benchmarks/bench_scale.py --cpu-split 2 --sizes 20
                                                           # CPU of the parent and of its 2 workers
    python benchmarks/bench_scale.py --gigabase-only       # profile, count and score of 1 Gbase (~1 CPU hour, ~5 GB)

Writes ``benchmarks/results/scale.json`` and ``scale.md`` (``scale_profile.*`` with ``--profile-only``,
``scale_gigabase.*`` with ``--gigabase-only``). The genomes are for benchmarking only;
genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import argparse
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
from numba import njit

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

from genomes import klebsiella, write_results  # noqa: E402

RECORDS_MULTI = 24
LINE = 80


@njit(cache=True)
def _markov2(u, cum, out, state):
    for i in range(u.size):
        s = 0
        while s < 3 and u[i] > cum[state, s]:
            s += 1
        out[i] = s
        state = ((state * 4) + s) & 15
    return state


def simulate_fasta(path: Path, bases: int, records: int, seed: int = 1) -> None:
    """An invented order-2 Markov source over ACGT (transition rows from a Dirichlet draw), as FASTA."""
    rng = np.random.default_rng(seed)
    cum = np.cumsum(rng.dirichlet(np.ones(4) * 2.0, size=16), axis=1)
    letters = np.frombuffer(b"ACGT", np.uint8)
    per = bases // records
    state = 0
    with open(path, "wb") as f:
        for r in range(records):
            f.write(f">sim{r} invented order-2 Markov sequence for benchmarks\n".encode())
            n = per if r < records - 1 else bases - per * (records - 1)
            done = 0
            while done < n:
                m = min(1 << 22, n - done)
                m -= m % LINE if m > LINE else 0
                out = np.empty(m, np.uint8)
                state = _markov2(rng.random(m), cum, out, state)
                text = letters[out]
                full = m // LINE * LINE
                lines = np.concatenate([text[:full].reshape(-1, LINE), np.full((full // LINE, 1), 10, np.uint8)], axis=1)
                f.write(lines.tobytes())
                if m > full:
                    f.write(text[full:].tobytes() + b"\n")
                done += m


def time_v(text: str) -> tuple[float, int | None]:
    """CPU seconds (user + system) and peak RSS in bytes from the report of ``/usr/bin/time -v``."""
    m = re.search(r"Maximum resident set size \(kbytes\): (\d+)", text)
    cpu = sum(float(x) for x in re.findall(r"(?:User|System) time \(seconds\): ([0-9.]+)", text))
    return cpu, int(m.group(1)) * 1024 if m else None


def timed(argv: list[str], stdout=subprocess.DEVNULL, root: Path = ROOT) -> dict:
    """Wall time, CPU time (user + system, all threads) and peak RSS of one process (``/usr/bin/time -v``),
    with ``root`` as the code imported (``PYTHONPATH``)."""
    env = dict(os.environ, PYTHONPATH=str(root))
    t0 = time.perf_counter()
    proc = subprocess.run(["/usr/bin/time", "-v", *argv], stdout=stdout, stderr=subprocess.PIPE, text=True, env=env)
    wall = time.perf_counter() - t0
    cpu, rss = time_v(proc.stderr)
    if proc.returncode != 0:
        tail = proc.stderr.strip().splitlines()[-25:]
        print("\n".join(tail), file=sys.stderr)
    return {"seconds": round(wall, 2), "cpu_seconds": round(cpu, 2), "peak_bytes": rss, "exit": proc.returncode}


def fs(*args: str) -> list[str]:
    return [sys.executable, "-m", "fractalseq", *map(str, args)]


def commands(path: Path, work: Path, mbase: float, learn_max: float) -> dict[str, list[str]]:
    out = {
        "count --depth 16": fs("count", path, "--depth", "16", "--json", "--quiet"),
        "profile": fs("profile", path, "--json", "--quiet"),
        "profile --quick": fs("profile", path, "--quick", "--json", "--quiet"),
        "score --online": fs("score", "--online", path, "--json", "--quiet"),
        "score --online --baselines none": fs("score", "--online", path, "--baselines", "none", "--json", "--quiet"),
    }
    if mbase <= learn_max:
        out["learn"] = fs("learn", path, "-o", work / "model.npz", "--json", "--quiet", "--force")
    return out


def genome_bases(path: Path, dest: Path) -> tuple[Path, Path, int]:
    """The genome as plain FASTA and as bare bases (what ``xz`` compresses), and its length."""
    text = lzma.decompress(path.read_bytes()).decode()
    fasta = dest / "genome.fa"
    fasta.write_text(text)
    bases = "".join(line.strip() for line in text.splitlines() if not line.startswith(">"))
    raw = dest / "genome.txt"
    raw.write_text(bases)
    return fasta, raw, len(bases)


def profile_scale(sizes: list[float], gigabase: bool, before: Path | None, work: Path) -> int:
    """``profile --json`` of multi-record inputs through the command line, with this tree and optionally
    ``before`` (another checkout): peak memory, bytes per symbol, CPU seconds, and whether the two
    JSON documents are the same bytes.  Writes ``scale_profile.{json,md}``."""
    rows = []
    inputs = list(sizes) + ([1000.0] if gigabase else [])
    for mbase in inputs:
        path = work / f"sim{int(mbase)}m_{RECORDS_MULTI}r.fa"
        simulate_fasta(path, int(mbase * 1e6), RECORDS_MULTI)
        symbols = int(mbase * 1e6)
        docs = {}
        for tree, root in (("before", before), ("after", ROOT)):
            if root is None:
                continue
            out = work / f"{tree}.json"
            with open(out, "wb") as fh:
                r = timed(fs("profile", path, "--json", "--quiet"), stdout=fh, root=root)
            docs[tree] = out.read_bytes()
            row = {"tree": tree, "mbase": mbase, "records": RECORDS_MULTI, "symbols": symbols, **r,
                   "bytes_per_symbol": round(r["peak_bytes"] / symbols, 1) if r["peak_bytes"] else None,
                   "cpu_seconds_per_mbase": round(r["cpu_seconds"] / mbase, 3)}
            rows.append(row)
            print(row, flush=True)
        if len(docs) == 2:
            rows[-1]["same_json"] = docs["before"] == docs["after"]
        path.unlink()
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}",
            "before": str(before) if before else None, "rows": rows}
    lines = ["| code | Mbase | records | peak memory | bytes/symbol | CPU time | CPU s/Mbase | wall time | same JSON |",
             "|---|---:|---:|---:|---:|---:|---:|---:|---|"]
    for r in rows:
        mem = f"{r['peak_bytes'] / 2**20:,.0f} MiB" if r["peak_bytes"] else "-"
        ok = "" if r["exit"] == 0 else f" (exit {r['exit']})"
        same = {True: "yes", False: "no"}.get(r.get("same_json"), "")
        lines.append(f"| {r['tree']}{ok} | {r['mbase']:g} | {r['records']} | {mem} | {r['bytes_per_symbol']} | "
                     f"{r['cpu_seconds']:.1f} s | {r['cpu_seconds_per_mbase']:.2f} | {r['seconds']:.0f} s | {same} |")
    lines += ["", f"Machine: {data['machine']}. CPU time is user + system of the whole process.", ""]
    write_results("scale_profile", data, "\n".join(lines))
    print("\n".join(lines))
    return 0


def profile_workers(sizes: list[float], workers: int, work: Path) -> int:
    """``profile --json`` of one simulated input per size, serial and with ``--workers N``, as whole
    processes: wall and CPU seconds (user + system of the parent and its waited-for workers), the
    largest resident set of any one of those processes, the load average before and after each run,
    and whether the two documents are the same bytes.  Writes ``scale_profile_workers.{json,md}``."""
    rows = []
    for mbase in sizes:
        path = work / f"sim{int(mbase)}m_{RECORDS_MULTI}r.fa"
        simulate_fasta(path, int(mbase * 1e6), RECORDS_MULTI)
        docs = {}
        for label, extra in (("serial", []), (f"--workers {workers}", ["--workers", str(workers)])):
            out = work / "out.json"
            before = os.getloadavg()
            with open(out, "wb") as fh:
                r = timed(fs("profile", path, "--json", "--quiet", *extra), stdout=fh)
            after = os.getloadavg()
            docs[label] = out.read_bytes()
            row = {"run": label, "mbase": mbase, "records": RECORDS_MULTI, **r,
                   "load_before": [round(x, 2) for x in before], "load_after": [round(x, 2) for x in after]}
            rows.append(row)
            print(row, flush=True)
        rows[-1]["same_json"] = docs["serial"] == docs[f"--workers {workers}"]
        rows[-1]["speed_up_wall"] = round(rows[-2]["seconds"] / rows[-1]["seconds"], 2)
        path.unlink()
    for r in rows:
        r["cores_used"] = round(r["cpu_seconds"] / r["seconds"], 2) if r["seconds"] else None
    old = HERE / "results" / "scale_profile_workers.json"
    if old.exists():  # rows of earlier runs at other sizes are kept
        import json

        sizes_now = {r["mbase"] for r in rows}
        rows = [r for r in json.loads(old.read_text()).get("rows", []) if r["mbase"] not in sizes_now] + rows
        rows.sort(key=lambda r: r["mbase"])
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}", "rows": rows}
    lines = ["| run | Mbase | records | wall time | CPU time (all processes) | cores used (CPU/wall) | largest process | "
             "load before -> after (1 min) | same JSON | wall speed-up |",
             "|---|---:|---:|---:|---:|---:|---:|---|---|---:|"]
    for r in rows:
        mem = f"{r['peak_bytes'] / 2**20:,.0f} MiB" if r["peak_bytes"] else "-"
        ok = "" if r["exit"] == 0 else f" (exit {r['exit']})"
        same = {True: "yes", False: "no"}.get(r.get("same_json"), "")
        used = r.get("cores_used") or round(r["cpu_seconds"] / r["seconds"], 2)
        lines.append(f"| `{r['run']}`{ok} | {r['mbase']:g} | {r['records']} | {r['seconds']:.1f} s | {r['cpu_seconds']:.1f} s | "
                     f"{used:.2f} | {mem} | {r['load_before'][0]:.2f} -> {r['load_after'][0]:.2f} | {same} | "
                     f"{r.get('speed_up_wall', '')} |")
    lines += ["", f"Machine: {data['machine']}. Each run is one `python -m fractalseq profile --json` process under "
              "`/usr/bin/time -v`; its CPU time includes the worker processes it waited for, and the memory column "
              "is the largest resident set of any single process (not their sum).", ""]
    write_results("scale_profile_workers", data, "\n".join(lines))
    print("\n".join(lines))
    return 0


def count_workers(sizes: list[float], workers: int, repeats: int, work: Path) -> int:
    """``count --depth 16 --json`` of one simulated 24-record input per size, serial and with ``--workers N``
    (split by address: each worker reads the file and counts one slice of the words), as whole processes,
    ``repeats`` pairs run alternately (the machine's noise shows in the spread).  Wall and CPU seconds,
    the largest process, the load before and after, whether the documents are the same bytes, and the
    speed-up of each pair and of the median walls.  Writes ``scale_count_workers.{json,md}``."""
    rows, summary = [], []
    for mbase in sizes:
        path = work / f"sim{int(mbase)}m_{RECORDS_MULTI}r.fa"
        simulate_fasta(path, int(mbase * 1e6), RECORDS_MULTI)
        timed(fs("count", path, "--depth", "16", "--quiet", "--workers", str(workers)))  # warm the page cache and kernels
        walls: dict[str, list[float]] = {"serial": [], "workers": []}
        for rep in range(repeats):
            docs = {}
            for label, extra in (("serial", []), ("workers", ["--workers", str(workers)])):
                out = work / "out.json"
                before = os.getloadavg()
                with open(out, "wb") as fh:
                    r = timed(fs("count", path, "--depth", "16", "--json", "--quiet", *extra), stdout=fh)
                after = os.getloadavg()
                docs[label] = out.read_bytes()
                walls[label].append(r["seconds"])
                row = {"run": "serial" if label == "serial" else f"--workers {workers}", "mbase": mbase, "repeat": rep + 1,
                       **r, "load_before": round(before[0], 2), "load_after": round(after[0], 2)}
                rows.append(row)
                print(row, flush=True)
            rows[-1]["same_json"] = docs["serial"] == docs["workers"]
            rows[-1]["speed_up_wall"] = round(rows[-2]["seconds"] / rows[-1]["seconds"], 2)
        med = {k: float(np.median(v)) for k, v in walls.items()}
        summary.append({"mbase": mbase, "median_serial_s": med["serial"], "median_workers_s": med["workers"],
                        "speed_up_of_medians": round(med["serial"] / med["workers"], 2),
                        "pair_speed_ups": [r["speed_up_wall"] for r in rows if r["mbase"] == mbase and "speed_up_wall" in r]})
        path.unlink()
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}",
            "workers": workers, "rows": rows, "summary": summary}
    lines = ["| run | Mbase | repeat | wall time | CPU time (all processes) | largest process | load before -> after (1 min) | "
             "same JSON | wall speed-up of the pair |", "|---|---:|---:|---:|---:|---:|---|---|---:|"]
    for r in rows:
        mem = f"{r['peak_bytes'] / 2**20:,.0f} MiB" if r["peak_bytes"] else "-"
        ok = "" if r["exit"] == 0 else f" (exit {r['exit']})"
        same = {True: "yes", False: "no"}.get(r.get("same_json"), "")
        lines.append(f"| `{r['run']}`{ok} | {r['mbase']:g} | {r['repeat']} | {r['seconds']:.2f} s | {r['cpu_seconds']:.1f} s | "
                     f"{mem} | {r['load_before']:.2f} -> {r['load_after']:.2f} | {same} | {r.get('speed_up_wall', '')} |")
    lines += ["", "| Mbase | median wall, serial | median wall, workers | speed-up of the medians | speed-ups of the pairs |",
              "|---:|---:|---:|---:|---|"]
    for s_ in summary:
        lines.append(f"| {s_['mbase']:g} | {s_['median_serial_s']:.2f} s | {s_['median_workers_s']:.2f} s | "
                     f"**{s_['speed_up_of_medians']:.2f}×** | {', '.join(f'{x:.2f}' for x in s_['pair_speed_ups'])} |")
    lines += ["", f"Machine: {data['machine']}. Each run is one `python -m fractalseq count FILE --depth 16 --json --quiet` "
              "process under `/usr/bin/time -v`, serial and with `--workers` alternately; CPU time includes the worker "
              "processes, the memory column is the largest single process.", ""]
    write_results("scale_count_workers", data, "\n".join(lines))
    print("\n".join(lines))
    return 0


def cpu_split(sizes: list[float], workers: int, work: Path) -> int:
    """Where the CPU of ``profile_source(..., engine=ProcessEngine(N))`` goes: the parent's own CPU
    seconds and its workers' (``getrusage``; neither depends on the machine's load), against the
    serial profile's CPU seconds in this process, and the bound they set on two idle cores.
    Writes ``scale_profile_cpu_split.{json,md}``."""
    import resource

    from fractalseq.io._outputs import to_json
    from fractalseq.jobs._engines import ProcessEngine
    from fractalseq.jobs._profile import profile_source
    from fractalseq.sources import open_source

    def cpu(who: int) -> float:
        r = resource.getrusage(who)
        return r.ru_utime + r.ru_stime

    rows = []
    for mbase in sizes:
        path = work / f"sim{int(mbase)}m_{RECORDS_MULTI}r.fa"
        simulate_fasta(path, int(mbase * 1e6), RECORDS_MULTI)
        arr = open_source(str(path)).to_array()
        t0 = cpu(resource.RUSAGE_SELF)
        serial = profile_source(arr).to_dict()
        t1 = cpu(resource.RUSAGE_SELF)
        c0 = cpu(resource.RUSAGE_CHILDREN)
        with ProcessEngine(workers) as eng:
            split = profile_source(arr, engine=eng).to_dict()
        t2, c1 = cpu(resource.RUSAGE_SELF), cpu(resource.RUSAGE_CHILDREN)
        serial.pop("timings", None)
        split.pop("timings", None)
        row = {"mbase": mbase, "workers": workers, "serial_cpu": round(t1 - t0, 1), "parent_cpu": round(t2 - t1, 1),
               "workers_cpu": round(c1 - c0, 1), "same_result": to_json(serial) == to_json(split)}
        row["bound_speed_up"] = round(row["serial_cpu"] / max(row["parent_cpu"], (row["parent_cpu"] + row["workers_cpu"]) / 2), 2)
        rows.append(row)
        print(row, flush=True)
        path.unlink()
    old = HERE / "results" / "scale_profile_cpu_split.json"
    if old.exists():  # rows of earlier runs at other sizes are kept
        import json

        sizes_now = {r["mbase"] for r in rows}
        rows = sorted([r for r in json.loads(old.read_text()).get("rows", []) if r["mbase"] not in sizes_now] + rows,
                      key=lambda r: r["mbase"])
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}", "rows": rows}
    lines = ["| Mbase | serial CPU | parent CPU | workers' CPU | same result | bound on 2 idle cores |",
             "|---:|---:|---:|---:|---|---:|"]
    for r in rows:
        lines.append(f"| {r['mbase']:g} | {r['serial_cpu']:.1f} s | {r['parent_cpu']:.1f} s | {r['workers_cpu']:.1f} s | "
                     f"{'yes' if r['same_result'] else 'no'} | {r['bound_speed_up']:.2f}x |")
    lines += ["", "In one process: the stream read once, then `profile_source` serially and on "
              f"`ProcessEngine({workers})` (the parent's reading and start-up excluded; the workers' start and their own reading of the "
              "file are in the workers' CPU). The bound is serial CPU / max(parent CPU, "
              "(parent + workers) / 2): the speed-up if two idle cores were kept busy all the time (an upper bound, "
              f"not a measured time). Machine: {data['machine']}.", ""]
    write_results("scale_profile_cpu_split", data, "\n".join(lines))
GIGA_COMMANDS = {  # name -> (Mbase, arguments after the input path); the first row is the per-base reference
    "profile (reference)": (10.0, ("profile", "--json", "--quiet")),
    "profile (100 Mbase)": (100.0, ("profile", "--json", "--quiet")),
    "profile": (1000.0, ("profile", "--json", "--quiet")),
    "count --depth 16": (1000.0, ("count", "--depth", "16", "--json", "--quiet")),
    "score --online --baselines none": (1000.0, ("score", "--online", "--baselines", "none", "--json", "--quiet")),
}


def _measured_row(text: str | None) -> dict:
    """A row from a saved ``/usr/bin/time -v`` report (``None``: not run); a process stopped by a
    signal keeps its peak and CPU time so far, with ``exit`` naming the signal."""
    if text is None:
        return {"cpu_seconds": None, "peak_bytes": None, "exit": "not run"}
    cpu, peak = time_v(text)
    sig = re.search(r"Command terminated by signal (\d+)", text)
    status = re.search(r"Exit status: (\d+)", text)
    exit_ = f"signal {sig.group(1)}" if sig else int(status.group(1)) if status else None
    return {"cpu_seconds": round(cpu, 2), "peak_bytes": peak, "exit": exit_}


def gigabase(work: Path, measured: Path | None, notes: dict[str, str]) -> int:
    """The 1-Gbase rows: ``profile``, ``count --depth 16`` and ``score --online --baselines none`` of one
    simulated 24-record 1-Gbase assembly, ``profile`` of the 100-Mbase one, and of the 10-Mbase one as the per-base reference
    (CPU seconds per Mbase, ratio 1 Gbase / 10 Mbase).  With ``measured``, the reports of
    ``/usr/bin/time -v`` of the same commands, already run one process each, are read from
    ``measured/NAME.time`` (NAME: ``profile10m``, ``profile100m``, ``profile1g``, ``count1g``, ``score1g``; a missing
    file is a command not run) instead of running them; ``notes`` are written beside the rows.
    ``learn`` is not run at 1 Gbase: it needs about 22 bytes per symbol (see "Memory of learn" in the
    README).  Writes ``scale_gigabase.{json,md}``."""
    files = {"profile (reference)": "profile10m", "profile (100 Mbase)": "profile100m", "profile": "profile1g", "count --depth 16": "count1g",
             "score --online --baselines none": "score1g"}
    rows = []
    for name, (mbase, args) in GIGA_COMMANDS.items():
        if measured is not None:
            f = measured / f"{files[name]}.time"
            r = _measured_row(f.read_text() if f.exists() else None)
        else:
            path = work / f"sim{int(mbase)}m_{RECORDS_MULTI}r.fa"
            if not path.exists():
                simulate_fasta(path, int(mbase * 1e6), RECORDS_MULTI)
            r = timed(fs(args[0], path, *args[1:]))
        symbols = int(mbase * 1e6)
        rows.append({"command": name, "mbase": mbase, "records": RECORDS_MULTI, "symbols": symbols, **r,
                     "bytes_per_symbol": round(r["peak_bytes"] / symbols, 2) if r["peak_bytes"] else None,
                     "cpu_seconds_per_mbase": round(r["cpu_seconds"] / mbase, 3) if r["cpu_seconds"] is not None else None,
                     "note": notes.get(name, "")})
        print(rows[-1], flush=True)
    ref = rows[0]["cpu_seconds_per_mbase"]
    for r in rows[1:]:
        if r["command"].startswith("profile") and r["exit"] == 0 and ref:
            r["rate_vs_reference"] = round(r["cpu_seconds_per_mbase"] / ref, 3)
    data = {"machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}",
            "input": f"simulated order-2 Markov DNA, {RECORDS_MULTI} records (simulate_fasta, seed 1)",
            "measured_separately": measured is not None, "rows": rows}
    lines = ["| command | Mbase | peak memory | bytes/symbol | CPU time | CPU s/Mbase | per-base CPU / 10-Mbase profile | note |",
             "|---|---:|---:|---:|---:|---:|---:|---|"]
    for r in rows:
        mem = f"{r['peak_bytes'] / 2**20:,.0f} MiB" if r["peak_bytes"] else "-"
        ok = "" if r["exit"] == 0 else f" ({r['exit'] if isinstance(r['exit'], str) else 'exit ' + str(r['exit'])})"
        rate = f"{r['rate_vs_reference']:.2f}" if "rate_vs_reference" in r else ""
        cpu = f"{r['cpu_seconds']:.1f} s" if r["cpu_seconds"] is not None else "-"
        per = f"{r['cpu_seconds_per_mbase']:.2f}" if r["cpu_seconds_per_mbase"] is not None else "-"
        lines.append(f"| `{r['command']}`{ok} | {r['mbase']:g} | {mem} | {r['bytes_per_symbol'] or '-'} | {cpu} | {per} | {rate} | {r['note']} |")
    lines += ["", f"Machine: {data['machine']}. CPU time is user + system of the whole process (`/usr/bin/time -v`); "
              "`learn` is not run at 1 Gbase (about 22 bytes per symbol at 30 Mbase: 22 GB).", ""]
    write_results("scale_gigabase", data, "\n".join(lines))
    print("\n".join(lines))
    return 0


def scale_table(data: dict) -> str:
    """The markdown tables of ``scale.json``: wall and CPU time (user + system, whole process) per command."""
    lines = [
        "| command | Mbase | records | peak memory | bytes/symbol | wall time | CPU time | CPU s/Mbase | xz -9 wall / this wall |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for r in data["rows"]:
        cpu = r.get("cpu_seconds")
        cpu_cells = f"{cpu:.1f} s | {cpu / r['mbase']:.2f}" if cpu is not None else "- | -"
        mem = f"{r['peak_bytes'] / 2**20:,.0f} MiB" if r["peak_bytes"] else "-"
        ok = "" if r["exit"] == 0 else f" (exit {r['exit']})"
        lines.append(f"| `{r['command']}`{ok} | {r['mbase']:g} | {r['records']} | {mem} | {r['bytes_per_symbol']} | "
                     f"{r['seconds']:.1f} s | {cpu_cells} | {r['speed_vs_xz']:.2f}× |")
    g = data.get("genome", {})
    if "xz -9" in g:
        lines += ["", f"Real genome {g['genome']}, {g['bases']:,} bases, whole processes:", "",
                  "| command | time | peak memory | time / xz -9 |", "|---|---:|---:|---:|"]
        lines.append(f"| `xz -9` (bases only) | {g['xz -9']['seconds']:.1f} s | {g['xz -9']['peak_bytes'] / 2**20:,.0f} MiB | 1.00 |")
        for name in ("score --online --baselines none", "score --online", "score --online --baselines all"):
            r = g[name]
            lines.append(f"| `{name}` | {r['seconds']:.1f} s | {r['peak_bytes'] / 2**20:,.0f} MiB | {r['ratio_to_xz']:.2f} |")
    st = data["startup"]
    lines += ["", f"Start-up (1,000-base input, numba cache warm): `import fractalseq` {st['import_seconds']:.2f} s; "
              f"`count` {st['count_tiny_seconds']:.2f} s; `score --online --baselines none` {st['score_online_tiny_seconds']:.2f} s; "
              f"`profile --boot 0` {st['profile_tiny_seconds']:.2f} s.",
              f"Reference: {data['reference']['command']}, {data['reference']['seconds_per_mbase']:.2f} s/Mbase. "
              f"Machine: {data['machine']}.", ""]
    return "\n".join(lines)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", default="10,50", help="Mbase of the simulated inputs, comma-separated.")
    ap.add_argument("--gigabase", action="store_true", help="Also one simulated 1-Gbase input (count, profile --quick, score).")
    ap.add_argument("--learn-max", type=float, default=10, help="Largest input (Mbase) given to learn.")
    ap.add_argument("--skip", default="", help="Commands to leave out, comma-separated (e.g. 'profile').")
    ap.add_argument("--multi-max", type=float, default=50, help="Largest size that also gets the multi-record input.")
    ap.add_argument("--profile-only", action="store_true",
                    help="Only `profile` of the 24-record inputs at --sizes (and --gigabase); writes scale_profile.{json,md}.")
    ap.add_argument("--before", type=Path, default=None,
                    help="With --profile-only: another checkout whose `profile` is measured on the same inputs (JSON compared).")
    ap.add_argument("--profile-workers", type=int, default=0, metavar="N",
                    help="Only `profile` of one 24-record input per size, serial and with --workers N (JSON compared); "
                         "writes scale_profile_workers.{json,md}.")
    ap.add_argument("--count-workers", type=int, default=0, metavar="N",
                    help="Only `count --depth 16` of one 24-record input per size, serial and with --workers N, "
                         "--repeats pairs (JSON compared); writes scale_count_workers.{json,md}.")
    ap.add_argument("--repeats", type=int, default=5, help="With --count-workers: serial/workers pairs per size.")
    ap.add_argument("--cpu-split", type=int, default=0, metavar="N",
                    help="Only the CPU of `profile_source` serially and on N local workers (parent and workers apart); "
                         "writes scale_profile_cpu_split.{json,md}.")
    ap.add_argument("--gigabase-only", action="store_true",
                    help="Only the 1-Gbase rows (profile, count --depth 16, score --online --baselines none) and the "
                         "10-Mbase profile as the per-base reference; writes scale_gigabase.{json,md}.")
    ap.add_argument("--measured", type=Path, default=None,
                    help="With --gigabase-only: read the /usr/bin/time -v reports of the same commands from this folder.")
    ap.add_argument("--note", action="append", default=[], metavar="COMMAND=TEXT",
                    help="With --gigabase-only: a note beside a command's row (repeatable).")
    ap.add_argument("--render", action="store_true",
                    help="Only re-write scale.md from benchmarks/results/scale.json (no measurement).")
    args = ap.parse_args()
    if args.render:
        data = json.loads((HERE / "results" / "scale.json").read_text())
        text = scale_table(data)
        write_results("scale", data, text)
        print(text)
        return 0
    sizes = [float(s) for s in args.sizes.split(",") if s.strip()]
    if args.cpu_split:
        with tempfile.TemporaryDirectory(prefix="fractalseq-scale-") as tmp:
            return cpu_split(sizes, args.cpu_split, Path(tmp))
    if args.count_workers:
        with tempfile.TemporaryDirectory(prefix="fractalseq-scale-") as tmp:
            return count_workers(sizes, args.count_workers, args.repeats, Path(tmp))
    if args.profile_workers:
        with tempfile.TemporaryDirectory(prefix="fractalseq-scale-") as tmp:
            return profile_workers(sizes, args.profile_workers, Path(tmp))
    if args.gigabase_only:
        with tempfile.TemporaryDirectory(prefix="fractalseq-scale-") as tmp:
            return gigabase(Path(tmp), args.measured, dict(n.split("=", 1) for n in args.note))
    if args.profile_only:
        with tempfile.TemporaryDirectory(prefix="fractalseq-scale-") as tmp:
            return profile_scale(sizes, args.gigabase, args.before, Path(tmp))
    skip = {s.strip() for s in args.skip.split(",") if s.strip()}
    rows: list[dict] = []
    extra: dict = {}
    with tempfile.TemporaryDirectory(prefix="fractalseq-scale-") as tmp:
        work = Path(tmp)
        # start-up: import, and a whole command on a tiny input (numba kernels from the cache)
        tiny = work / "tiny.fa"
        simulate_fasta(tiny, 1000, 1)
        timed(fs("count", tiny, "--quiet"))  # fill the cache once
        extra["startup"] = {
            "import_seconds": timed([sys.executable, "-c", "import fractalseq"])["seconds"],
            "count_tiny_seconds": timed(fs("count", tiny, "--quiet"))["seconds"],
            "score_online_tiny_seconds": timed(fs("score", "--online", tiny, "--baselines", "none", "--quiet"))["seconds"],
            "profile_tiny_seconds": timed(fs("profile", tiny, "--quiet", "--boot", "0"))["seconds"],
        }
        print("start-up:", extra["startup"], flush=True)
        # the E. coli-sized real genome: quick online score against xz -9, whole processes
        try:
            gpath = klebsiella()["Klebs_HS11286"]
            fasta, raw, L = genome_bases(gpath, work)
            g = {"genome": "Klebs_HS11286 (kleborate-examples)", "bases": L}
            g["xz -9"] = timed(["xz", "-9", "-c", str(raw)])
            for name, argv in (
                ("score --online --baselines none", fs("score", "--online", fasta, "--baselines", "none", "--quiet")),
                ("score --online", fs("score", "--online", fasta, "--quiet")),
                ("score --online --baselines all", fs("score", "--online", fasta, "--baselines", "all", "--quiet")),
            ):
                g[name] = timed(argv)
                g[name]["ratio_to_xz"] = round(g[name]["seconds"] / g["xz -9"]["seconds"], 2)
            extra["genome"] = g
            print("genome:", g, flush=True)
        except Exception as exc:  # no network or no apt: say so in the results
            extra["genome"] = {"skipped": f"{type(exc).__name__}: {exc}"}
        inputs = [(s, 1) for s in sizes] + [(s, RECORDS_MULTI) for s in sizes if s <= args.multi_max]
        if args.gigabase:
            inputs.append((1000.0, RECORDS_MULTI))
        reference = None
        for mbase, records in inputs:
            path = work / f"sim{int(mbase)}m_{records}r.fa"
            simulate_fasta(path, int(mbase * 1e6), records)
            symbols = int(mbase * 1e6)
            if reference is None:  # xz -9 seconds per Mbase on the first input: the speed reference
                ref = timed(["xz", "-9", "-T1", "-c", str(path)])
                reference = ref["seconds"] / mbase
                extra["reference"] = {"command": "xz -9 -T1 (same FASTA file)", "mbase": mbase, **ref,
                                      "seconds_per_mbase": round(reference, 3)}
            cmds = commands(path, work, mbase, args.learn_max)
            if mbase >= 1000:  # the gigabase run: the bounded commands only
                cmds = {k: v for k, v in cmds.items() if k in ("count --depth 16", "profile --quick", "score --online --baselines none")}
            for name, argv in cmds.items():
                if name.split()[0] in skip or name in skip:
                    continue
                r = timed(argv)
                row = {
                    "command": name, "mbase": mbase, "records": records, "symbols": symbols, **r,
                    "bytes_per_symbol": round(r["peak_bytes"] / symbols, 1) if r["peak_bytes"] else None,
                    "seconds_per_mbase": round(r["seconds"] / mbase, 3),
                    "speed_vs_xz": round(reference / (r["seconds"] / mbase), 3),
                }
                rows.append(row)
                print(row, flush=True)
            path.unlink()
    data = {
        "machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}",
        "rows": rows, **extra,
    }
    text = scale_table(data)
    write_results("scale", data, text)
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
