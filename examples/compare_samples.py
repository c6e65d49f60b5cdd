"""Survey the simulated samples: which are alike, and do the figures match the truth?

**The data are invented.**  They come from the Kelpwater Marine Station scenario
(``fs.scenario``): five fictional "symbiont samples" simulated from
known sources — two independent ones (uniform and AT-rich), a first-order
Markov chain, a "sticky" chain that tends to repeat its base, and a second
draw of the same first-order chain with a tandem-repeat island inserted.
The ground truth says which samples share a source.  Genomic output of
fractalseq is for research, not for clinical decisions.

What it shows (Python API):

everything through the façade ``import fractalseq as fs``:

* ``fs.survey_files`` expands a folder into sources and profiles every one (serially
  here; pass ``engine=fs.make_engine("processes", 2)`` to use processes, or a Dask
  scheduler — same numbers), exactly as ``fractalseq survey`` does;
* the result's Jensen–Shannon distances and clustering (``result.js``, ``result.clustering``);
* ``fs.js_divergence`` on two word tables from ``fs.count_words``: the same distance by hand;
* ``fs.write_survey`` writes the CSV/JSON/HTML report.

Run::

    python examples/compare_samples.py [OUTPUT_FOLDER] [--quick] [--force]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

import fractalseq as fs

from _scenario_setup import make_scenario, run_example  # shared options, output folder and scenario of the examples


def run(folder: Path, args: argparse.Namespace) -> None:
    length = 20_000 if args.quick else 60_000
    _, truth = make_scenario(folder, args, length=length)
    # every file of the folder, sorted by name, read as DNA
    result = fs.survey_files([str(folder / "scenario" / "samples")], fs.SurveyOptions(alphabet="dna", seed=args.seed))
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
    (wa, ca), (wb, cb) = [fs.count_words(fs.open_source(truth[name].path, alphabet="dna"), n).words(n) for name in sorted(same)]
    union = np.union1d(wa, wb)  # align the two sparse tables (sorted word addresses) on the union of their words
    pa, pb = np.zeros(union.size), np.zeros(union.size)
    pa[np.searchsorted(union, wa)], pb[np.searchsorted(union, wb)] = ca, cb
    print(f"by hand: JS(kelp-chain, kelp-island) = {fs.js_divergence(pa, pb):.5f} bits at depth {n} "
          f"(survey: {result.js[i][j]:.5f})")

    written = fs.write_survey(result, folder / "survey", force=args.force)
    print(f"wrote {len(written)} files to {folder / 'survey'}")


def main(argv: list[str] | None = None) -> int:
    return run_example(run, __doc__, argv)


if __name__ == "__main__":
    sys.exit(main())
