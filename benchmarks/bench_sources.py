"""Read speed of the FASTA reader, plain and compressed, against decompression alone.

Input: the Klebsiella pneumoniae HS11286 assembly (about 5.75 MB of FASTA, 5.68 Mbase, 7 records) from
Debian's ``kleborate-examples`` package (see benchmarks/genomes.py); the benchmark recompresses it
with gzip, bzip2, xz (as shipped) and Zstandard into a temporary folder.

For each variant, in one process, best of ``--repeat`` runs:

* ``read``: ``open_source(path)`` iterated to the end (decompression + FASTA scan + chunks), MB/s of
  decompressed FASTA;
* ``decompress only``: the same decompressor (stdlib gzip/bz2/lzma, zstandard) reading the whole
  file in 4 MiB blocks with no parsing;
* ``share``: decompress-only time / read time (1.0 = reading costs nothing beyond decompression).

For the plain file the reference is a ``numpy`` lookup-table translation of the raw bytes
(``table[np.frombuffer(data)]``) after reading the file, i.e. the cheapest vectorised pass.

Run: python benchmarks/bench_sources.py   (writes benchmarks/results/sources.json and sources.md)
"""

from __future__ import annotations

import argparse
import bz2
import gzip
import lzma
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

import zstandard  # noqa: E402
from genomes import klebsiella, write_results  # noqa: E402

from fractalseq.alphabet import dna  # noqa: E402
from fractalseq.sources import open_source  # noqa: E402

BLOCK = 1 << 22


def best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def read_all(path: Path) -> int:
    n = 0
    for chunk in open_source(path).chunks():
        n += chunk.codes.size
    return n


def decompress_only(kind: str, path: Path) -> None:
    if kind == "zstd":
        with open(path, "rb") as raw:
            reader = zstandard.ZstdDecompressor().stream_reader(raw, read_across_frames=True)
            while reader.read(BLOCK):
                pass
        return
    opener = {"gzip": gzip.open, "bzip2": bz2.open, "xz": lzma.open}[kind]
    with opener(path, "rb") as fh:
        while fh.read(BLOCK):
            pass


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    source = klebsiella()["Klebs_HS11286"]
    data = lzma.decompress(source.read_bytes())
    mb = len(data) / 1e6
    table = dna().byte_table()
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        files = {"plain": Path(folder) / "k.fna", "xz": source}
        files["plain"].write_bytes(data)
        for kind, comp in (
            ("gzip", lambda b: gzip.compress(b, compresslevel=6, mtime=0)),
            ("bzip2", bz2.compress),
            ("zstd", lambda b: zstandard.ZstdCompressor(level=3).compress(b)),
        ):
            files[kind] = Path(folder) / f"k.{kind}"
            files[kind].write_bytes(comp(data))
        symbols = read_all(files["plain"])  # also loads the numba kernels
        for kind in ("plain", "gzip", "bzip2", "xz", "zstd"):
            path = files[kind]
            assert read_all(path) == symbols
            t_read = best(lambda: read_all(path), args.repeat)
            if kind == "plain":
                t_ref = best(lambda: table[np.frombuffer(path.read_bytes(), dtype=np.uint8)], args.repeat)
                ref = "read file + numpy table lookup"
            else:
                t_ref = best(lambda: decompress_only(kind, path), args.repeat)
                ref = "decompress only"
            rows.append(
                {
                    "variant": kind,
                    "file_bytes": path.stat().st_size,
                    "read_seconds": round(t_read, 4),
                    "read_MB_per_s": round(mb / t_read, 1),
                    "reference": ref,
                    "reference_seconds": round(t_ref, 4),
                    "reference_MB_per_s": round(mb / t_ref, 1),
                    "share": round(t_ref / t_read, 3),
                }
            )
    result = {
        "input": "Klebs_HS11286.fna (kleborate-examples), decompressed FASTA",
        "fasta_MB": round(mb, 3),
        "symbols": symbols,
        "repeat": args.repeat,
        "rows": rows,
    }
    lines = [
        "# FASTA read speed",
        "",
        f"Input: Klebsiella pneumoniae HS11286 assembly, {mb:.2f} MB of FASTA, {symbols:,} bases kept; "
        f"best of {args.repeat} runs in one process. MB/s are of decompressed FASTA.",
        "",
        "| variant | file bytes | read s | read MB/s | reference | ref s | ref MB/s | ref/read |",
        "| --- | ---: | ---: | ---: | --- | ---: | ---: | ---: |",
    ]
    for r in rows:
        lines.append(
            f"| {r['variant']} | {r['file_bytes']:,} | {r['read_seconds']} | {r['read_MB_per_s']} | {r['reference']} "
            f"| {r['reference_seconds']} | {r['reference_MB_per_s']} | {r['share']} |"
        )
    lines += ["", "ref/read near 1 means reading is dominated by decompression.", ""]
    write_results("sources", result, "\n".join(lines))
    print("\n".join(lines))


if __name__ == "__main__":
    main()
