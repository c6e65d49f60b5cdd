"""Why a D_q has no estimate: the flag names the rule that left too few levels, or the curvature.

Real logs of reference/logs (provenance in reference/logs/README.md) are short for their alphabets of templates;
the levels a fit may use keep at most one occupied box (distinct word) per 100 occurrences (the data limit of
the scaling range, REFERENCE-CHECKS rule 4, common practice: N/100 occurrences per word). The counts quoted in
the flag are checked against plain Python counts of the same symbols (``set`` of the codes and of the pairs).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from fractalseq.dimensions._levels import LevelData, range_shortfall
from fractalseq.dimensions._scaling_fit import choose_range
from fractalseq.dimensions._spectrum import dimension_spectrum
from fractalseq.resampling import Resampling
from fractalseq.sources import open_source

LOGS = Path(__file__).resolve().parents[1] / "reference" / "logs"


def _one_segment_codes(name: str):
    arr = open_source(str(LOGS / name), fmt="log").to_array()
    codes = [int(c) for c in arr.codes]
    assert list(arr.starts) == [0]  # one segment: every neighbouring pair is a word of depth 2
    return arr, codes


def test_a_log_too_short_for_depth_1_names_the_data_limit():
    # apt's terminal log excerpt: 1,197 templated lines of 27 templates; 27 > 1197 / 100, so not even depth 1 is usable
    arr, codes = _one_segment_codes("apt-term-excerpt.log")
    distinct = len(set(codes))
    assert distinct > len(codes) / 100
    res = dimension_spectrum(arr, qs=(0, 1, 2), resampling=Resampling.none())
    for d in res.dims:
        assert math.isnan(d.estimate)
        assert d.notes[-1] == (
            "too little data: no level with at most one occupied box (distinct word) per 100 occurrences; a fit needs 3 "
            f"(level 1: {distinct:,} occupied boxes in {len(codes):,} occurrences)"
        ), d.notes
        assert not any("fewer than 3 usable levels" in f for f in d.notes)


def test_a_log_with_one_usable_level_names_the_first_level_refused():
    # dpkg's log excerpt: 12 templates in 2,000 lines pass at depth 1 (12 <= 20); the pairs do not
    arr, codes = _one_segment_codes("dpkg-excerpt.log")
    pairs = set(zip(codes[:-1], codes[1:]))
    assert len(set(codes)) <= len(codes) / 100 < len(pairs)
    res = dimension_spectrum(arr, qs=(1, 2), resampling=Resampling.none(), falpha=True)
    want = ("too little data: 1 level with at most one occupied box (distinct word) per 100 occurrences; a fit needs 3 "
            f"(level 2: {len(pairs):,} occupied boxes in {len(codes) - 1:,} occurrences)")
    for d in res.dims:
        assert math.isnan(d.estimate) and d.notes[-1] == want, d.notes
    assert all(want in p.flags for p in res.falpha)


def test_a_curved_run_is_fitted_on_the_deepest_levels_not_refused():
    # y = x^2 has differences 2x + 1 (arithmetic): no three levels lie on a line, whatever their standard errors
    x = np.arange(1.0, 6.0)
    y = x**2
    tiny = np.full(5, 1e-12)
    choice = choose_range(x, y, tiny, tiny[:4], top=4)
    assert choice is not None and (choice.lo, choice.hi) == (2, 4)
    assert choice.flags == ("curved: no linear run of 3 levels; the deepest 3 were used",)
    # a straight line is taken whole; two levels are too few for any range
    straight = choose_range(x, 2 * x + 1, tiny, tiny[:4], top=4)
    assert straight is not None and (straight.lo, straight.hi, straight.flags) == (0, 4, ())
    assert choose_range(x, y, tiny, tiny[:4], top=1) is None


def _levels(est: np.ndarray, distinct, occurrences, unseen, data_limit: int, complete_limit: int) -> LevelData:
    L = est.shape[0]
    x = np.arange(1.0, L + 1)
    return LevelData(
        x, np.exp(-x), est, None, np.asarray(distinct, float), np.asarray(occurrences, float), np.asarray(unseen, float),
        data_limit, complete_limit, np.full((L, 1), 1e-6), np.full((L - 1, 1), 1e-6),
    )


def test_each_rule_is_named():
    est = np.zeros((4, 6))
    est[:, 0] = [1.0, 2.0, 3.0, 4.0]
    # q <= 0: every box hit up to level 1 only, while the data limit allows 3 levels
    d = _levels(est, [4, 16, 40, 90], [10_000] * 4, [0.0, 0.5, 3.0, 9.0], data_limit=2, complete_limit=0)
    assert range_shortfall(d, 0, 0.0, top=0) == (
        "too little data: 1 level where every box is hit (estimated unseen boxes < 0.1); a fit needs 3 "
        "(level 2: 0.5 unseen boxes estimated)"
    )
    # q < 0: the rarest box's rule
    assert range_shortfall(d, 0, -2.0, top=1, need=300.0) == (
        "too little data: 2 levels whose rarest box has >= 300 occurrences; a fit needs 3"
    )
    # levels enough, but the statistic is infinite from the third level on
    est[2:, 0] = np.inf
    d = _levels(est, [4, 16, 40, 90], [10_000] * 4, [0.0] * 4, data_limit=3, complete_limit=3)
    assert choose_range(d.x, d.est[:, 0], d.var[:, 0], d.dvar[:, 0], 3) is None
    assert range_shortfall(d, 0, 1.0, top=3) == (
        "too little data: the level statistic is not finite from level 3 on, which leaves fewer than 3 levels"
    )
