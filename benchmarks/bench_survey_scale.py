"""Scale: one big source counted across workers, and surveys of many small sources.

All data are invented here (simulated Markov chains with seeded transition matrices), so the
benchmark needs no download.  Every command runs as a whole process through the command line
(``python -m fractalseq``), as a user would run it; speed is a ratio to a reference run of the
same script (serial), never an absolute target in a test.

Sections (``--only count,survey,many``):

count
    ``fractalseq count --depth D`` of one simulated FASTA of ``--mbase`` million symbols, serially
    and with ``--workers 2`` (each worker reads its own byte range of the file, with D-1 lookahead
    symbols, and counts it; the parent adds the two tables up).  Reports wall and CPU seconds
    (user + system of the command and its workers), the speed-up (target >= 1.6x on two idle
    cores), the ratio of CPU seconds, and whether the two JSON documents are byte-identical; then
    where the time of the split goes, measured in this process in CPU seconds (a worker's start-up
    in a fresh interpreter, counting one range, the size and pickling of its table, the parent's
    addition of the tables and the ladder of the sum).
survey
    ``fractalseq survey`` of 400 simulated sources of 20 kb with ``--workers 2`` (target < 40 s),
    the same serially, and the per-source overhead of the serial survey beyond the profile itself
    (sum of ``profile_source`` times measured in one process; target <= 50 ms per source).
many
    ``fractalseq survey --from-list`` of ``--many`` sources of 2 kb (default 2000), peak memory of
    the command (``resource`` of the child) and its time.

Writes benchmarks/results/survey_scale.json and survey_scale.md.  The load average of the
machine before and after each section is recorded: other jobs on a shared machine lower the
speed-up.

Usage: python benchmarks/bench_survey_scale.py [--only count] [--mbase 100] [--many 2000]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from fractalseq.io._outputs import to_json, write_text  # noqa: E402

DATA = HERE / "data" / "scale"
RESULTS = HERE / "results"
CLI = [sys.executable, "-m", "fractalseq"]
ENV = {**os.environ, "PYTHONPATH": str(ROOT)}


def _chain(seed: int) -> np.ndarray:
    return np.random.default_rng(seed).dirichlet(np.full(4, 1.5), size=16)


def write_fasta(path: Path, n: int, seed: int, records: int = 1, width: int = 80) -> Path:
    """An invented order-2 Markov DNA sequence of ``n`` symbols as FASTA (written in blocks)."""
    from fractalseq.datasets._markov import simulate_markov

    if path.exists() and path.stat().st_size > n:
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    P = _chain(seed % 7)
    per = n // records
    tmp = path.with_suffix(".tmp")
    with open(tmp, "w") as fh:
        for r in range(records):
            fh.write(f">sim{seed}_{r} invented order-2 Markov chain\n")
            left, block = per, 0
            while left > 0:
                m = min(left, 8_000_000)
                x = simulate_markov(P, m, seed=seed * 1000 + r * 100 + block, order=2)
                text = np.frombuffer(b"ACGT", np.uint8)[x].tobytes().decode()
                fh.write("\n".join(text[i : i + width] for i in range(0, len(text), width)) + "\n")
                left -= m
                block += 1
    tmp.rename(path)
    return path


def run(args: list[str]) -> tuple[float, str, int, float, float]:
    """Run a command under ``nice -n 10``; wall time, standard output, exit status, peak memory (MiB), CPU seconds.

    The peak comes from ``/usr/bin/time`` (``%M``, maximum resident set of the command's own process; worker
    processes it starts are not included).  CPU seconds are user + system time of the command and of every
    process it waited for (its worker processes included), so they do not depend on how busy the machine is.
    """
    t0 = time.perf_counter()
    p = subprocess.run(["nice", "-n", "10", "/usr/bin/time", "-f", "peak_kib=%M cpu=%U+%S", *CLI, *args],
                       capture_output=True, text=True, env=ENV, cwd=ENV["PYTHONPATH"])  # python -m puts the cwd first on the path
    dt = time.perf_counter() - t0
    if p.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(args)} failed: {p.stderr.strip()}")
    line = next((ln for ln in reversed(p.stderr.splitlines()) if ln.startswith("peak_kib=")), "peak_kib=0 cpu=0+0")
    peak, cpu = line.split()
    user, system = cpu.split("=", 1)[1].split("+")
    return dt, p.stdout, p.returncode, int(peak.split("=", 1)[1]) / 1024, float(user) + float(system)


#: A worker's start-up in a fresh interpreter: imports, then the first (tiny) range counted (numba caches loaded).
STARTUP_CODE = (
    "import sys,time; t=time.process_time(); import fractalseq.words._pieces as P; t1=time.process_time();"
    "from fractalseq.jobs._inputs import ReaderOptions; from fractalseq.sources.ranges import plan_ranges;"
    "s=ReaderOptions().open(sys.argv[1]); r=plan_ranges(s.byte_reader, 1<<16, int(sys.argv[2])-1)[0];"
    "t2=time.process_time(); P.count_range((r,int(sys.argv[2]))); print(t1-t, time.process_time()-t2)"
)


def count_breakdown(path: Path, depth: int) -> dict:
    """Where the CPU of a two-range split goes (this process; compiled kernels already cached)."""
    import pickle

    from fractalseq.jobs._inputs import ReaderOptions
    from fractalseq.sources.ranges import plan_ranges
    from fractalseq.words import _pieces as P

    boot = subprocess.run(["nice", "-n", "10", sys.executable, "-c", STARTUP_CODE, str(path), str(depth)],
                          capture_output=True, text=True, env=ENV, check=True, cwd=ENV["PYTHONPATH"])
    t_import, t_first = (float(x) for x in boot.stdout.split())
    stream = ReaderOptions().open(path)
    reader = stream.byte_reader
    t = time.process_time()
    ranges = plan_ranges(reader, -(-reader.size // 2), depth - 1)
    t_plan = time.process_time() - t
    results, t_count, t_dump, t_load, sizes = [], 0.0, 0.0, 0.0, []
    for r in ranges:
        t = time.process_time()
        res = P.count_range((r, depth))
        t_count += time.process_time() - t
        t = time.process_time()
        blob = pickle.dumps(res, protocol=pickle.HIGHEST_PROTOCOL)
        t_dump += time.process_time() - t
        sizes.append(len(blob))
        t = time.process_time()
        results.append(pickle.loads(blob))
        t_load += time.process_time() - t
        del blob, res
    t = time.process_time()
    wc = results[0][0]
    for res in results[1:]:
        wc = wc + res[0]
    t_add = time.process_time() - t
    t = time.process_time()
    P.settle_storage(P._wide_counts(wc)).ladder()
    t_ladder = time.process_time() - t
    return {
        "worker_import_cpu_s": round(t_import, 2), "worker_first_kernels_cpu_s": round(t_first, 2), "plan_cpu_s": round(t_plan, 3),
        "ranges": len(ranges), "count_ranges_cpu_s": round(t_count, 2), "table_mib_per_range": round(max(sizes) / 2**20, 1),
        "pickle_cpu_s": round(t_dump, 2), "unpickle_cpu_s": round(t_load, 2), "parent_add_cpu_s": round(t_add, 2),
        "ladder_cpu_s": round(t_ladder, 2),
    }


def section_count(mbase: int, depth: int) -> dict:
    path = write_fasta(DATA / f"sim{mbase}M.fa", mbase * 1_000_000, seed=3)
    load0 = os.getloadavg()
    warm = str(DATA / "warm.fa") if (DATA / "warm.fa").exists() else str(write_fasta(DATA / "warm.fa", 50_000, 1))
    run(["count", warm, "--depth", str(depth), "--json"])
    run(["count", warm, "--depth", str(depth), "--json", "--workers", "2", "--piece", "20000"])  # compiles the workers' kernels once
    _, _, _, _, cpu_start = run(["count", warm, "--depth", str(depth), "--json", "--quiet"])
    t_serial, out_serial, _, peak_serial, cpu_serial = run(["count", str(path), "--depth", str(depth), "--json", "--quiet"])
    t_par, out_par, _, peak_par, cpu_par = run(["count", str(path), "--depth", str(depth), "--json", "--quiet", "--workers", "2"])
    # the route before byte ranges, still taken by inputs the workers cannot read apart: the parent reads the file and
    # sends pieces of 2^24 symbols (the error policy keeps the file off the byte-range route; this file has no unknown byte)
    t_old, out_old, _, peak_old, cpu_old = run(["count", str(path), "--depth", str(depth), "--json", "--quiet", "--workers", "2",
                                                "--unknown", "error"])
    load1 = os.getloadavg()
    return {
        "symbols": mbase * 1_000_000, "depth": depth, "serial_s": round(t_serial, 2), "workers2_s": round(t_par, 2),
        "speedup": round(t_serial / t_par, 3), "identical_json": out_serial == out_par,
        "startup_cpu_s": round(cpu_start, 2), "serial_cpu_s": round(cpu_serial, 2), "workers2_cpu_s": round(cpu_par, 2),
        "cpu_ratio": round(cpu_serial / cpu_par, 3), "peak_mib_serial": round(peak_serial, 1), "peak_mib_workers2": round(peak_par, 1),
        "parent_pieces_s": round(t_old, 2), "parent_pieces_cpu_s": round(cpu_old, 2), "peak_mib_parent_pieces": round(peak_old, 1),
        "parent_pieces_identical_json": out_old == out_serial,
        "breakdown": count_breakdown(path, depth),
        "load_before": round(load0[0], 2), "load_after": round(load1[0], 2),
        "load_1_5_15_before": [round(x, 2) for x in load0], "load_1_5_15_after": [round(x, 2) for x in load1],
    }


def _sources(n: int, length: int, tag: str) -> Path:
    folder = DATA / f"{tag}_{n}x{length}"
    listing = folder / "list.txt"
    if listing.exists():
        return listing
    folder.mkdir(parents=True, exist_ok=True)
    from fractalseq.datasets._markov import simulate_markov

    names = []
    for i in range(n):
        p = folder / f"s{i:05d}.fa"
        x = simulate_markov(_chain(i % 5), length, seed=10_000 + i, order=2)
        p.write_text(f">s{i} invented\n" + np.frombuffer(b"ACGT", np.uint8)[x].tobytes().decode() + "\n")
        names.append(p.name)
    listing.write_text("\n".join(names) + "\n")
    return listing


#: In one process: the sources profiled alone, then surveyed serially (compile time paid first); CPU seconds.
OVERHEAD_CODE = (
    "import sys,time,os; from fractalseq.jobs._files import survey_files; from fractalseq.jobs._survey import SurveyOptions;"
    "from fractalseq.jobs._profile import DEFAULT_BOOT, profile_source; from fractalseq.resampling._options import Resampling;"
    "from fractalseq.jobs._inputs import ReaderOptions; d=os.path.dirname(sys.argv[1]);"
    "p=[os.path.join(d,l.strip()) for l in open(sys.argv[1]) if l.strip()]; o=SurveyOptions(); r=ReaderOptions();"
    "survey_files(p[:2], o); t=time.process_time(); arrs=[r.read(x) for x in p];"
    "[profile_source(a, depth=o.depth, ratio=o.ratio, resampling=Resampling(n_boot=DEFAULT_BOOT, seed=o.seed)) for a in arrs];"
    "tp=time.process_time()-t; t=time.process_time(); res=survey_files(p, o); ts=time.process_time()-t;"
    "t=time.process_time(); doc=res.to_json(); tj=time.process_time()-t;"
    "print(tp, ts, tj, doc==sys.stdin.read())"
)


def section_survey(n: int = 400, length: int = 20_000) -> dict:
    """400 sources of 20 kb: whole commands (serial and 2 workers), start-up, and the overhead beyond the profiles."""
    listing = _sources(n, length, "survey")
    load0 = os.getloadavg()[0]
    _, _, _, _, cpu_start = run(["survey", str(listing.parent / "s00000.fa"), "--no-cache", "--json", "--quiet"])
    t_ser, out_ser, _, peak_ser, cpu_ser = run(["survey", "--from-list", str(listing), "--no-cache", "--json", "--quiet"])
    t_par, out_par, _, peak_par, cpu_par = run(["survey", "--from-list", str(listing), "--engine", "processes", "--workers", "2",
                                                "--no-cache", "--json", "--quiet"])
    out = DATA / f"survey_out_{n}"
    shutil.rmtree(out, ignore_errors=True)  # no cache of an earlier run
    t_out, _, _, peak_out, cpu_out = run(["survey", "--from-list", str(listing), "--engine", "processes", "--workers", "2",
                                          "--out", str(out), "--force", "--quiet"])
    prof = subprocess.run(["nice", "-n", "10", sys.executable, "-c", OVERHEAD_CODE, str(listing)], input=out_par,
                          capture_output=True, text=True, env=ENV, check=True, cwd=ENV["PYTHONPATH"])
    t_profiles, t_serial, t_json, same = prof.stdout.split()
    t_profiles, t_serial, t_json = float(t_profiles), float(t_serial), float(t_json)
    return {
        "sources": n, "length": length,
        "startup_cpu_s": round(cpu_start, 2),
        "serial_s": round(t_ser, 1), "serial_cpu_s": round(cpu_ser, 1), "peak_mib_serial": round(peak_ser, 1),
        "workers2_s": round(t_par, 1), "workers2_cpu_s": round(cpu_par, 1), "peak_mib_workers2": round(peak_par, 1),
        "speedup_wall": round(t_ser / t_par, 3),
        "workers2_cpu_s_per_core": round(cpu_par / 2, 1),
        "out_s": round(t_out, 1), "out_cpu_s": round(cpu_out, 1), "peak_mib_out": round(peak_out, 1),
        "identical_json": out_ser == out_par and same == "True",
        "profiles_only_cpu_s": round(t_profiles, 2), "survey_in_process_cpu_s": round(t_serial, 2), "json_text_cpu_s": round(t_json, 2),
        "overhead_ms_per_source": round(1000 * (t_serial - t_profiles) / n, 1),
        "json_bytes": len(out_par.encode()),
        "load_before": round(load0, 2), "load_after": round(os.getloadavg()[0], 2),
    }


def section_many(n: int, length: int = 2_000, quick: bool = True) -> dict:
    """``--from-list`` of ``n`` small sources with ``--out`` (cache, HTML, matrix file), ``--quick`` by default."""
    listing = _sources(n, length, "many")
    load0 = os.getloadavg()[0]
    out = DATA / f"many_out_{n}"
    shutil.rmtree(out, ignore_errors=True)  # no cache of an earlier run
    t, _, _, peak, cpu = run(["survey", "--from-list", str(listing), "--engine", "processes", "--workers", "2", "--out", str(out),
                              "--force", "--quiet", *(["--quick"] if quick else [])])
    size = {f.name: f.stat().st_size for f in out.iterdir() if f.is_file()}
    return {
        "sources": n, "length": length, "quick": quick, "workers2_s": round(t, 1), "cpu_s": round(cpu, 1), "peak_mib": round(peak, 1),
        "html_bytes": size.get("survey.html"), "json_bytes": size.get("survey.json"), "npz_bytes": size.get("distances.npz"),
        "load_before": round(load0, 2), "load_after": round(os.getloadavg()[0], 2),
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--only", default="count,survey,many")
    ap.add_argument("--mbase", type=int, default=100)
    ap.add_argument("--depth", type=int, default=12)
    ap.add_argument("--many", type=int, default=10_000)
    ap.add_argument("--tree", default=None, help="run the commands from another source tree (a before/after comparison); "
                    "its figures are stored under survey_<label>")
    ap.add_argument("--label", default="before")
    args = ap.parse_args()
    if args.tree:
        ENV["PYTHONPATH"] = str(Path(args.tree).resolve())
    RESULTS.mkdir(exist_ok=True)
    path = RESULTS / "survey_scale.json"
    doc = json.loads(path.read_text()) if path.exists() else {}
    if "count" in doc and "symbols" in doc["count"]:
        doc["count"] = {f"depth{doc['count']['depth']}": doc["count"]}
    doc["machine"] = {"cores": os.cpu_count()}
    doc["note"] = "invented data (simulated Markov chains); whole processes through the command line; ratios, not absolute targets"
    for name in args.only.split(","):
        if name == "count":
            doc.setdefault("count", {})[f"depth{args.depth}"] = section_count(args.mbase, args.depth)
        elif name == "survey":
            doc[f"survey_{args.label}" if args.tree else "survey"] = section_survey()
            if args.tree:
                doc[f"survey_{args.label}"]["tree"] = args.label
        elif name == "many":
            doc["many"] = section_many(args.many)
        print(name, json.dumps(doc.get(f"survey_{args.label}" if args.tree and name == "survey" else name)), flush=True)
    write_text(path, to_json(doc), force=True)
    lines = ["# Scale: split counting and large surveys", "", doc["note"] + ".", ""]
    if "count" in doc:
        lines += ["Count of one FASTA: whole commands under `nice -n 10`; CPU = user + system of the command and its workers; "
                  "start-up = the serial command on a 50 kb file.", "",
                  "| count | symbols | depth | serial s | 2 workers s | speed-up | start-up CPU s | serial CPU s | 2 workers CPU s | "
                  "CPU ratio | parent sends pieces: s / CPU s | identical JSON | load before/after |",
                  "|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
        for c in doc["count"].values():
            lines.append(f"| one FASTA | {c['symbols']:,} | {c['depth']} | {c['serial_s']} | {c['workers2_s']} | {c['speedup']}x | "
                         f"{c.get('startup_cpu_s', '')} | {c.get('serial_cpu_s', '')} | {c.get('workers2_cpu_s', '')} | "
                         f"{c.get('cpu_ratio', '')} | {c.get('parent_pieces_s', '')} / {c.get('parent_pieces_cpu_s', '')} | "
                         f"{c['identical_json'] and c.get('parent_pieces_identical_json', True)} | {c['load_before']}/{c['load_after']} |")
        lines.append("")
        parts = [c for c in doc["count"].values() if "breakdown" in c]
        if parts:
            lines += ["Where the split's CPU goes (in one process, CPU s): a worker's start-up (imports; first range: compiled "
                      "kernels loaded), counting both ranges, pickling and unpickling a table, the parent's addition and ladder.", "",
                      "| depth | worker imports | first kernels | count both ranges | MiB per table | pickle | unpickle | parent add | ladder |",
                      "|---|---|---|---|---|---|---|---|---|"]
            for c in parts:
                b = c["breakdown"]
                lines.append(f"| {c['depth']} | {b['worker_import_cpu_s']} | {b['worker_first_kernels_cpu_s']} | {b['count_ranges_cpu_s']} | "
                             f"{b['table_mib_per_range']} | {b['pickle_cpu_s']} | {b['unpickle_cpu_s']} | {b['parent_add_cpu_s']} | "
                             f"{b['ladder_cpu_s']} |")
            lines.append("")
    runs = [(k, doc[k]) for k in sorted(doc) if k.startswith("survey_")] + ([("survey", doc["survey"])] if "serial_cpu_s" in doc.get("survey", {}) else [])
    if runs:
        s0 = runs[-1][1]
        lines += [f"Survey of {s0['sources']} sources of {s0['length']:,} symbols: whole commands under `nice -n 10`; CPU = user + system "
                  "of the command and its worker processes; 'in process' = profiles alone vs a serial survey in one process (CPU s).", "",
                  "| code | start-up CPU s | serial wall s | serial CPU s | 2 workers wall s | 2 workers CPU s | CPU s per core (2 workers) | "
                  "2 workers --out wall s | --out CPU s | identical JSON | overhead ms/source (in process) | load before/after |",
                  "|---|---|---|---|---|---|---|---|---|---|---|---|"]
        for key, s in runs:
            label = s.get("tree", "this tree") if key != "survey" else "this tree"
            lines.append(f"| {label} | {s['startup_cpu_s']} | {s['serial_s']} | {s['serial_cpu_s']} | {s['workers2_s']} | {s['workers2_cpu_s']} | "
                         f"{s['workers2_cpu_s_per_core']} | {s['out_s']} | {s['out_cpu_s']} | {s['identical_json']} | "
                         f"{s['overhead_ms_per_source']} (profiles {s['profiles_only_cpu_s']} s, survey {s['survey_in_process_cpu_s']} s) | "
                         f"{s['load_before']}/{s['load_after']} |")
        lines.append("")
    if "many" in doc and "cpu_s" in doc["many"]:
        m = doc["many"]
        lines += ["| many | sources x length | mode | 2 workers wall s | CPU s | peak MiB | survey.json bytes | distances.npz bytes | survey.html bytes |",
                  "|---|---|---|---|---|---|---|---|---|",
                  f"| --from-list --out | {m['sources']:,} x {m['length']:,} | {'--quick' if m['quick'] else 'full'} | {m['workers2_s']} | {m['cpu_s']} | "
                  f"{m['peak_mib']} | {m['json_bytes']} | {m['npz_bytes']} | {m['html_bytes']} |", ""]
    write_text(RESULTS / "survey_scale.md", "\n".join(lines), force=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
