"""Learn a next-symbol predictor on one simulated sample and test it on another.

**The data are invented.**  They come from the Kelpwater Marine Station scenario
(``fs.scenario``): the fictional samples ``kelp-chain`` and
``kelp-island`` are two independent draws of the same first-order Markov chain
(the second with a repeat island inserted), so the true next-symbol
probabilities are the rows of the chain's transition matrix, and the best
possible code length is the chain's entropy rate.  Genomic output of
fractalseq is for research, not for clinical decisions.

What it shows (Python API):

everything through the façade ``import fractalseq as fs``:

* ``fs.CellPredictor`` — ``fit`` on a training stream,
  ``predict_proba`` for contexts, ``bits_per_symbol`` on held-out data (``score`` is the mean
  log2-likelihood per symbol, higher is better), ``save``/``load`` of the model file (no pickle);
* ``fs.online_code_length`` — predict-then-update code length
  of a stream with no training data: an upper bound on its information content.

Run::

    python examples/predict_next_symbol.py [OUTPUT_FOLDER] [--quick] [--force]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

import fractalseq as fs

from _scenario_setup import make_scenario, run_example  # shared options, output folder and scenario of the examples


def run(folder: Path, args: argparse.Namespace) -> None:
    length = 40_000 if args.quick else 200_000
    _, truth = make_scenario(folder, args, length=length)
    train = fs.open_source(truth["kelp-chain"].path, alphabet="dna")
    test = fs.open_source(truth["kelp-island"].path, alphabet="dna")
    other = fs.open_source(truth["kelp-sticky"].path, alphabet="dna")
    h = truth["kelp-chain"].entropy_rate_bits

    # The simulated chain has no second strand, so reverse-complement counting (the DNA default) is off.
    model = fs.CellPredictor(max_depth=8, reverse_complement=False).fit(train)
    path = model.save(folder / "kelp-chain.model.npz", force=args.force)
    model = fs.CellPredictor.load(path)  # what a later session would do
    print(f"learned on kelp-chain ({model.n_symbols_:,} symbols, cell depths {list(model.ladder_)}), saved to {path.name}")

    # next-symbol probabilities after a one-symbol context against the chain's true transition matrix
    proba = model.predict_proba(list("ACGT"))
    worst = float(np.abs(proba - fs.scenario.ORDER1).max())
    print("P(next | previous symbol), estimate vs truth:")
    for i, prev in enumerate("ACGT"):
        est = " ".join(f"{p:.3f}" for p in proba[i])
        true = " ".join(f"{p:.3f}" for p in fs.scenario.ORDER1[i])
        print(f"  after {prev}: {est}   truth {true}")
    print(f"largest error of a probability: {worst:.3f}")

    # code lengths: fitted model on held-out data, and online (no training), against the entropy rate
    lo, hi = truth["kelp-island"].island
    arr = test.to_array()
    print(f"bits/symbol  truth (entropy rate) {h:.3f}")
    print(f"  fitted model on kelp-island before its island (same chain, held out): {model.bits_per_symbol(arr.slice(0, lo)):.3f}")
    print(f"  fitted model on the repeat island {lo:,}-{hi:,} (never seen in training): {model.bits_per_symbol(arr.slice(lo, hi)):.3f}")
    print(f"  fitted model on kelp-sticky (another chain, truth {truth['kelp-sticky'].entropy_rate_bits:.3f}): "
          f"{model.bits_per_symbol(other):.3f}")
    online = fs.online_code_length(train, reverse_complement=False)
    print(f"  online predict-then-update on kelp-chain (upper bound): {online.bits_per_symbol:.3f}, "
          f"top-1 accuracy {online.top1_accuracy:.3f}")


def main(argv: list[str] | None = None) -> int:
    return run_example(run, __doc__, argv)


if __name__ == "__main__":
    sys.exit(main())
