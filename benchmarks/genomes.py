"""Locate (and if needed fetch) the real genomes used by the benchmarks.

The four Klebsiella pneumoniae assemblies ship in Debian's ``kleborate-examples``
package (``/usr/share/doc/kleborate/examples/data/*.fna.xz``).  They are fetched
with ``apt-get download`` into ``benchmarks/data/`` (not committed) when they
are not there yet.  Genomes are for benchmarking only; output is for research.
"""

from __future__ import annotations

import glob
import os
import subprocess
from pathlib import Path

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
PACKAGE = "kleborate-examples"
SUBDIR = "usr/share/doc/kleborate/examples/data"
NAMES = ("Klebs_HS11286", "Klebs_Kp1084", "MGH78578", "NTUH-K2044")
LAMBDA = HERE.parent / "reference" / "lambda_virus.fa.gz"


def klebsiella() -> dict[str, Path]:
    """Paths of the four assemblies (``name -> .fna.xz``), fetching the package if needed."""
    target = DATA / PACKAGE / SUBDIR
    if not all((target / f"{n}.fna.xz").exists() for n in NAMES):
        DATA.mkdir(parents=True, exist_ok=True)
        extracted = DATA / PACKAGE
        debs = glob.glob(str(DATA / f"{PACKAGE}_*.deb"))
        if not debs:
            env = dict(os.environ)
            try:
                subprocess.run(["apt-get", "download", PACKAGE], cwd=DATA, check=True, env=env)
            except subprocess.CalledProcessError:
                subprocess.run(["apt-get", "update"], check=True)
                subprocess.run(["apt-get", "download", PACKAGE], cwd=DATA, check=True, env=env)
            debs = glob.glob(str(DATA / f"{PACKAGE}_*.deb"))
        subprocess.run(["dpkg-deb", "-x", debs[0], str(extracted)], check=True)
    return {n: target / f"{n}.fna.xz" for n in NAMES}


def write_results(name: str, data: dict, table_md: str) -> None:
    """Write ``benchmarks/results/NAME.json`` and ``NAME.md``."""
    import json

    out = HERE / "results"
    out.mkdir(exist_ok=True)
    (out / f"{name}.json").write_text(json.dumps(data, indent=2, sort_keys=True) + "\n")
    (out / f"{name}.md").write_text(table_md)
