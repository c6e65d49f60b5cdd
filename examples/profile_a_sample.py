"""Profile one simulated sample and compare the estimates with the known truth.

**The data are invented.**  They come from the Kelpwater Marine Station scenario
(``fs.scenario``): a fictional station whose "symbiont samples" are
simulated from Markov chains, so their entropy rates and Rényi dimensions are
known in closed form.  No real organism or measurement is involved; genomic
output of fractalseq is for research, not for clinical decisions.

What it shows (Python API):

everything through the façade ``import fractalseq as fs``:

* ``fs.open_source`` reads a FASTA file into a stream;
* ``fs.count_words`` counts every word of length 1..N once;
* ``fs.h_difference`` and ``fs.dimension_spectrum`` read an entropy rate and the
  Rényi dimensions D_q off those counts;
* ``fs.profile_source`` does all of it (with bootstrap intervals) and its result
  becomes JSON with ``fs.write_json``.

Run::

    python examples/profile_a_sample.py [OUTPUT_FOLDER] [--quick] [--force]

Without a folder everything goes to a temporary folder that is removed at the end.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import fractalseq as fs

from _scenario_setup import make_scenario, run_example  # shared options, output folder and scenario of the examples

SAMPLE = "kelp-chain"  # a first-order Markov chain: h = 1.901 bits/symbol, D_2 = 1.842


def run(folder: Path, args: argparse.Namespace) -> None:
    length = 30_000 if args.quick else 120_000
    boot = 20 if args.quick else 100
    truth = make_scenario(folder, args, length=length)[1][SAMPLE]
    print(f"sample {truth.name}: {truth.description}, {truth.length:,} bases")

    # 1. the building blocks: one stream, one count of every word, two estimators
    arr = fs.open_source(truth.path, alphabet="dna").to_array()
    wc = fs.count_words(arr, 8)
    h = fs.h_difference(wc)  # H_{n+1} - H_n with the Grassberger correction, bits per symbol
    d2 = fs.dimension_spectrum(wc, qs=(2.0,), resampling=fs.Resampling.none()).get(2.0)
    print(f"entropy rate  truth {truth.entropy_rate_bits:.3f}  H(n+1)-H(n) at n={h.depth}: {h.estimate:.3f} bits/symbol")
    print(f"D_2 (counts)  truth {truth.dimension(2.0):.3f}  estimate {d2.estimate:.3f} (depths {d2.n_lo}-{d2.n_hi})")

    # 2. the whole profile, with block-bootstrap intervals
    res = fs.profile_source(arr, qs=(0.0, 1.0, 2.0), resampling=fs.Resampling(n_boot=boot, seed=args.seed))
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
    out = fs.write_json(folder / "profile.json", res.to_dict(), force=args.force)
    print(f"wrote {out}")


def main(argv: list[str] | None = None) -> int:
    return run_example(run, __doc__, argv)


if __name__ == "__main__":
    sys.exit(main())
