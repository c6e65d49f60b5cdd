"""Dump the log outputs of one tree of the package, and compare two dumps byte for byte.

A change meant to make the template miner faster must not change a single result.  This script runs
``fractalseq templates FILE --json`` and ``fractalseq score --online -f log FILE --json`` (each as its own
process, with the package imported from ``--tree``) on every real log at hand and on the invented log of
``synthetic_log.py``, and writes each output to ``OUT/<log>.<command>.json``; ``compare A B`` then lists the
files that differ (exit 1 when any does).

Inputs: every log of ``reference/logs`` (dpkg, apt term, gdb check, jtreg, the fail2ban sample logs...;
provenance in reference/logs/README.md), this machine's ``/var/log/dpkg.log`` and ``/var/log/apt/term.log``,
the Debian build logs ``/usr/share/doc/gdb/check.log.gz`` and the openjdk-17 test logs when installed, and
the 100,000-line invented log (written once to ``--synthetic``, same bytes every time: fixed seed).
A missing input is skipped and named.

Run: python benchmarks/log_outputs.py dump OUT [--tree DIR]
     python benchmarks/log_outputs.py compare OUT_A OUT_B
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
LOGS = ROOT / "reference" / "logs"
MACHINE = [
    Path("/var/log/dpkg.log"),
    Path("/var/log/apt/term.log"),
    Path("/usr/share/doc/gdb/check.log.gz"),
    *sorted(Path("/usr/share/doc/openjdk-17-jdk-headless/test-amd64").glob("*.log*")),
]
COMMANDS = {
    "templates": ["templates", "{path}", "--json"],
    "score-online": ["score", "--online", "-f", "log", "{path}", "--json"],
}


def inputs(synthetic: Path) -> list[Path]:
    """The logs to run, in a fixed order (missing machine logs are left out)."""
    found = sorted(p for p in LOGS.iterdir() if p.suffix == ".log")
    found += [p for p in MACHINE if p.is_file()]
    if not synthetic.is_file():
        sys.path.insert(0, str(HERE))
        from synthetic_log import generate  # noqa: E402

        synthetic.parent.mkdir(parents=True, exist_ok=True)
        synthetic.write_text("\n".join(generate()) + "\n", encoding="ascii")
    return found + [synthetic]


def dump(out: Path, tree: Path, synthetic: Path) -> None:
    out.mkdir(parents=True, exist_ok=True)
    env = {**os.environ, "PYTHONPATH": str(tree)}
    for path in inputs(synthetic):
        for name, argv in COMMANDS.items():
            args = [a.format(path=path) for a in argv]
            proc = subprocess.run([sys.executable, "-m", "fractalseq", *args], capture_output=True, env=env, cwd=tree,
                                  timeout=3600)
            target = out / f"{path.name}.{name}.json"
            target.write_bytes(proc.stdout + f"\n-- exit {proc.returncode}\n".encode() + proc.stderr)
            print(f"{target.name}: exit {proc.returncode}, {len(proc.stdout):,} bytes", flush=True)
    missing = [str(p) for p in MACHINE if not p.is_file()]
    if missing:
        print("skipped (missing): " + ", ".join(missing))


def compare(a: Path, b: Path) -> int:
    names = sorted({p.name for p in a.iterdir()} | {p.name for p in b.iterdir()})
    bad = [n for n in names if not (a / n).is_file() or not (b / n).is_file() or (a / n).read_bytes() != (b / n).read_bytes()]
    for n in bad:
        print(f"differs: {n}")
    print(f"{len(names) - len(bad)} of {len(names)} outputs byte-identical")
    return 1 if bad else 0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = ap.add_subparsers(dest="what", required=True)
    d = sub.add_parser("dump")
    d.add_argument("out", type=Path)
    d.add_argument("--tree", type=Path, default=ROOT, help="tree the package is imported from (default: this one)")
    d.add_argument("--synthetic", type=Path, default=Path("/tmp/fractalseq-log-outputs/synthetic-100k.log"))
    c = sub.add_parser("compare")
    c.add_argument("a", type=Path)
    c.add_argument("b", type=Path)
    args = ap.parse_args()
    if args.what == "dump":
        dump(args.out, args.tree.resolve(), args.synthetic.resolve())
    else:
        sys.exit(compare(args.a, args.b))


if __name__ == "__main__":
    main()
