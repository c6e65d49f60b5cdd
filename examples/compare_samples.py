"""Survey the simulated samples: which are alike, and do the figures match the truth?

**The data are invented.**  They come from the Kelpwater Marine Station scenario
(:mod:`fractalseq.datasets._scenario`): five fictional "symbiont samples" simulated from
known sources — two independent ones (uniform and AT-rich), a first-order
Markov chain, a "sticky" chain that tends to repeat its base, and a second
draw of the same first-order chain with a tandem-repeat island inserted.
The ground truth says which samples share a source.  Genomic output of
fractalseq is for research, not for clinical decisions.

What it shows (Python API):

* :func:`fractalseq.jobs._survey.expand_inputs` and :func:`fractalseq.jobs._survey.run_survey`
  profile every source (serially here; pass an engine from :mod:`fractalseq.jobs._engines`
  to use processes or a Dask cluster — same numbers);
* the result's Jensen–Shannon distances and clustering (``result.js``, ``result.clustering``);
* :func:`fractalseq.compare._distances.word_matrix` and :func:`fractalseq.compare._distances.js_divergence`
  on two word tables from :func:`fractalseq.words._counts.count_words`: the same distance by hand;
* :func:`fractalseq.jobs._survey.write_outputs` writes the CSV/JSON/HTML report.

Run::

    python examples/compare_samples.py [OUTPUT_FOLDER] [--quick] [--force]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

from fractalseq.compare._distances import js_divergence, word_matrix
from fractalseq.sources import open_source
from fractalseq.jobs._survey import SurveyOptions, expand_inputs, run_survey, write_outputs
from fractalseq.words._counts import count_words

from _scenario_setup import make_scenario, run_example  # shared options, output folder and scenario of the examples


def run(folder: Path, args: argparse.Namespace) -> None:
    length = 20_000 if args.quick else 60_000
    _, truth = make_scenario(folder, args, length=length)
    specs = expand_inputs([str(folder / "scenario" / "samples")])  # every file of the folder, sorted by name
    result = run_survey(specs, SurveyOptions(alphabet="dna", seed=args.seed))
    names = [n.removesuffix(".fa") for n in result.names]

    print(f"{'sample':<14}{'D_2 truth':>10}{'D_2 est.':>10}{'h truth':>9}{'h est.':>9}  (bits/symbol; D_q at k = 1/2)")
    for name, src in zip(names, result.sources):
        t = truth[name]
        h = src["entropy_rate_bits"]["grassberger"]["estimate"]
        print(f"{name:<14}{t.dimension(2.0):>10.3f}{src['D2']['estimate']:>10.3f}{t.entropy_rate_bits:>9.3f}{h:>9.3f}")
    island = truth["kelp-island"].island
    print(f"(kelp-island's truth is its chain's; its repeat island at {island[0]:,}-{island[1]:,} pulls the estimates down)")

    # nearest neighbours by the Jensen-Shannon divergence of word distributions
    js = np.array(result.js, dtype=float)
    np.fill_diagonal(js, np.inf)
    print(f"Jensen-Shannon divergence of the depth-{result.js_depth} word distributions (bits):")
    for i, name in enumerate(names):
        j = int(np.argmin(js[i]))
        print(f"  nearest to {name:<13} {names[j]:<13} {js[i, j]:.5f}")
    a, b = result.clustering.top_split()
    print("top split of the clustering: {" + ", ".join(names[i] for i in a) + "} vs {" + ", ".join(names[i] for i in b) + "}")
    same = {"kelp-chain", "kelp-island"}
    i, j = names.index("kelp-chain"), names.index("kelp-island")
    verdict = "agrees" if int(np.argmin(js[i])) == j else "does NOT agree"
    print(f"truth: {' and '.join(sorted(same))} come from the same chain; the nearest-neighbour table {verdict}")

    # the same distance by hand, from two word-count tables
    n = result.js_depth
    tables = [count_words(open_source(truth[name].path, alphabet="dna"), n).words(n) for name in sorted(same)]
    _, matrix = word_matrix(tables)  # align the two sparse tables on the union of their words
    print(f"by hand: JS(kelp-chain, kelp-island) = {js_divergence(matrix[0], matrix[1]):.5f} bits at depth {n} "
          f"(survey: {result.js[i][j]:.5f})")

    written = write_outputs(result, folder / "survey", force=args.force)
    print(f"wrote {len(written)} files to {folder / 'survey'}")


def main(argv: list[str] | None = None) -> int:
    return run_example(run, __doc__, argv)


if __name__ == "__main__":
    sys.exit(main())
