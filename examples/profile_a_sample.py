"""Profile one simulated sample and compare the estimates with the known truth.

**The data are invented.**  They come from the Kelpwater Marine Station scenario
(:mod:`fractalseq.scenario`): a fictional station whose "symbiont samples" are
simulated from Markov chains, so their entropy rates and Rényi dimensions are
known in closed form.  No real organism or measurement is involved; genomic
output of fractalseq is for research, not for clinical decisions.

What it shows (Python API):

* :func:`fractalseq.sources.open_source` reads a FASTA file into a stream;
* :func:`fractalseq.words.count_words` counts every word of length 1..N once;
* :func:`fractalseq.entropy.h_difference` and :func:`fractalseq.spectrum.dimension_spectrum`
  read an entropy rate and the Rényi dimensions D_q off those counts;
* :func:`fractalseq.profile.profile_source` does all of it (with bootstrap intervals)
  and its result becomes JSON with :func:`fractalseq.outputs.write_json`.

Run::

    python examples/profile_a_sample.py [OUTPUT_FOLDER] [--quick] [--force]

Without a folder everything goes to a temporary folder that is removed at the end.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from pathlib import Path

from fractalseq import entropy, scenario, spectrum
from fractalseq.errors import FractalseqError
from fractalseq.outputs import prepare_folder, write_json
from fractalseq.profile import profile_source
from fractalseq.sources import open_source
from fractalseq.words import count_words

SAMPLE = "kelp-chain"  # a first-order Markov chain: h = 1.901 bits/symbol, D_2 = 1.842


def parse(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("folder", nargs="?", help="output folder (default: a temporary folder)")
    p.add_argument("--quick", action="store_true", help="small sizes (also: FRACTALSEQ_EXAMPLES_QUICK=1)")
    p.add_argument("--seed", type=int, default=7, help="seed of the invented scenario")
    p.add_argument("--force", action="store_true", help="overwrite files in the output folder")
    args = p.parse_args(argv)
    args.quick = args.quick or os.environ.get("FRACTALSEQ_EXAMPLES_QUICK", "") not in ("", "0")
    return args


def run(folder: Path, args: argparse.Namespace) -> None:
    length = 30_000 if args.quick else 120_000
    boot = 20 if args.quick else 100
    world = scenario.generate(folder / "scenario", seed=args.seed, length=length, log_lines=200, force=args.force)
    truth = next(s for s in world.sources if s.name == SAMPLE)
    print(f"{world.note}")
    print(f"sample {truth.name}: {truth.description}, {truth.length:,} bases")

    # 1. the building blocks: one stream, one count of every word, two estimators
    arr = open_source(truth.path, alphabet="dna").to_array()
    wc = count_words(arr, 8)
    h = entropy.h_difference(wc)  # H_{n+1} - H_n with the Grassberger correction, bits per symbol
    d2 = spectrum.dimension_spectrum(wc, qs=(2.0,), n_boot=0).get(2.0)
    print(f"entropy rate  truth {truth.entropy_rate_bits:.3f}  H(n+1)-H(n) at n={h.depth}: {h.estimate:.3f} bits/symbol")
    print(f"D_2 (counts)  truth {truth.dimension(2.0):.3f}  estimate {d2.estimate:.3f} (depths {d2.n_lo}-{d2.n_hi})")

    # 2. the whole profile, with block-bootstrap intervals
    res = profile_source(arr, qs=(0.0, 1.0, 2.0), n_boot=boot, seed=args.seed)
    print(f"profile of {res.length:,} symbols, {boot} bootstrap replicates, k = {res.ratio:g}:")
    for q in (0.0, 1.0, 2.0):
        d = res.spectrum.get(q)
        inside = "inside" if d.low <= truth.dimension(q) <= d.high else "OUTSIDE"
        print(f"  D_{q:g}: truth {truth.dimension(q):.3f}  estimate {d.estimate:.3f}  "
              f"interval [{d.low:.3f}, {d.high:.3f}] ({inside})")
    rates = res.to_dict()["entropy_rate_bits"]
    g = rates["grassberger"]
    print(f"  entropy rate (Grassberger): truth {truth.entropy_rate_bits:.3f}  estimate {g['estimate']:.3f}  "
          f"interval [{g['low']:.3f}, {g['high']:.3f}]")
    for name in ("lz76", "compressors", "online_predictor"):
        if name in rates:
            print(f"  {name}: {rates[name]['estimate']:.3f} bits/symbol ({rates[name]['kind']})")
    out = write_json(folder / "profile.json", res.to_dict(), force=args.force)
    print(f"wrote {out}")


def main(argv: list[str] | None = None) -> int:
    args = parse(argv)
    try:
        if args.folder:
            run(prepare_folder(Path(args.folder), args.force), args)
        else:
            with tempfile.TemporaryDirectory() as tmp:
                run(Path(tmp), args)
    except FractalseqError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
