"""Change points in series of window figures: PELT with a BIC-like penalty.

Method
------
The figures (one column each) are standardised by a robust noise scale and
segmented by exact penalised least squares for changes in mean, solved with
PELT (Killick, Fearnhead & Eckley 2012, JASA 107:1590): minimise

    sum over segments of  w * sum_f sum_i (x_if - mean_f)**2   +   beta * (#segments - 1)

The noise scale of a figure is ``MAD(x[i + L] - x[i]) / (0.6745 * sqrt 2)``
with ``L`` the number of steps per window, so that differences are taken
between windows that do not overlap (the median absolute deviation scaled
to a standard deviation for Gaussian noise, common practice), floored at 1%
of the figure's median magnitude (changes much smaller than that are not
reported).  Overlapping
windows repeat each symbol about ``L`` times, so the cost is weighted by
``w = 1 / L`` and the series is treated as ``n_eff = n / L`` independent
observations.  The default penalty is BIC-like (Schwarz 1978, Ann. Statist.
6:461): ``beta = (F + 1) * ln(n_eff)`` for ``F`` figures (F means and one
location per change).  Segments are at least ``L`` windows long.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError

_MAD_TO_SD = 1.0 / (0.6744897501960817 * math.sqrt(2.0))


@njit(cache=True)
def _pelt(c1, c2, weight, penalty, min_size):
    """PELT for a change in mean of several standardised columns.

    ``c1`` and ``c2`` are ``(n + 1, F)`` cumulative sums of ``x`` and ``x**2``.
    Returns ``last`` with ``last[t]`` the start of the last segment of the
    optimal segmentation of ``x[:t]``.
    """
    n = c1.shape[0] - 1
    F = c1.shape[1]
    best = np.full(n + 1, np.inf)
    best[0] = -penalty
    last = np.zeros(n + 1, dtype=np.int64)
    cand = np.zeros(n + 1, dtype=np.int64)
    ncand = 0
    vals = np.empty(n + 1)
    for t in range(min_size, n + 1):
        # admit s = t - min_size as a candidate start
        s_new = t - min_size
        if s_new == 0 or (s_new >= min_size and np.isfinite(best[s_new])):
            cand[ncand] = s_new
            ncand += 1
        bt = np.inf
        bs = 0
        for j in range(ncand):
            s = cand[j]
            m = t - s
            cost = 0.0
            for f in range(F):
                a = c1[t, f] - c1[s, f]
                b = c2[t, f] - c2[s, f]
                cost += b - a * a / m
            v = best[s] + weight * cost + penalty
            vals[j] = v - penalty
            if v < bt:
                bt = v
                bs = s
        best[t] = bt
        last[t] = bs
        # prune: s can never be optimal again if best[s] + cost(s, t) > best[t]
        k = 0
        for j in range(ncand):
            if vals[j] <= bt:
                cand[k] = cand[j]
                k += 1
        ncand = k
    return last


def pelt(x: np.ndarray, penalty: float, min_size: int = 1, weight: float = 1.0) -> list[int]:
    """Segment starts (excluding 0) of the penalised least-squares segmentation of ``x``.

    Parameters
    ----------
    x:
        ``(n,)`` or ``(n, F)`` series (already standardised).
    penalty:
        Cost of one more segment (``beta``).
    min_size:
        Shortest segment, in samples.
    weight:
        Multiplier of the squared-error cost.
    """
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    n = x.shape[0]
    if penalty < 0 or not math.isfinite(penalty):
        raise ParameterError(f"The change-point penalty must be a non-negative number, not {penalty}.", parameter="penalty")
    if n < 2 * min_size:
        return []
    c1 = np.vstack([np.zeros((1, x.shape[1])), np.cumsum(x, axis=0)])
    c2 = np.vstack([np.zeros((1, x.shape[1])), np.cumsum(x * x, axis=0)])
    last = _pelt(c1, c2, float(weight), float(penalty), int(min_size))
    breaks = []
    t = n
    while t > 0:
        s = int(last[t])
        if s > 0:
            breaks.append(s)
        t = s
    return sorted(breaks)


def noise_scale(x: np.ndarray, lag: int = 1) -> float:
    """Robust noise standard deviation from lag-``lag`` differences (MAD / (0.6745 sqrt 2))."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    lag = max(1, int(lag))
    if x.size <= lag:
        return math.nan
    d = x[lag:] - x[:-lag]
    return float(np.median(np.abs(d - np.median(d))) * _MAD_TO_SD)


@dataclass(frozen=True)
class Segmentation:
    """Change points of a multi-figure series.

    Attributes
    ----------
    method, penalty_rule:
        Text naming the method and how the penalty was set.
    penalty:
        ``beta`` used.
    breaks:
        Indices where a new segment starts (0 excluded), sorted.
    n:
        Series length.
    noise:
        Per figure, the noise scale used to standardise it.
    """

    method: str
    penalty_rule: str
    penalty: float
    breaks: list[int]
    n: int
    noise: dict[str, float]

    def segments(self) -> list[tuple[int, int]]:
        """``[start, end)`` index ranges of the segments."""
        cuts = [0] + list(self.breaks) + [self.n]
        return [(cuts[i], cuts[i + 1]) for i in range(len(cuts) - 1)]

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "penalty": self.penalty,
            "penalty_rule": self.penalty_rule,
            "breaks": list(self.breaks),
            "noise": dict(self.noise),
        }


def segment_series(
    series: Mapping[str, Sequence[float]],
    penalty: float | str = "bic",
    overlap: int = 1,
    rel_floor: float = 0.01,
) -> Segmentation:
    """Change points of several aligned series (PELT, Gaussian change in mean).

    Parameters
    ----------
    series:
        Figure name -> values (same length; NaN values are filled with the
        figure's median).
    penalty:
        ``"bic"`` for ``(F + 1) ln(n / overlap)``, or a number (in units of
        standardised squared error per independent window).
    overlap:
        Steps per window ``L`` (1 when windows do not overlap): the lag of
        the noise estimate, the cost weight ``1/L`` and the shortest segment.
    rel_floor:
        Each noise scale is at least this fraction of the figure's median
        magnitude, so that very steady figures (a predictor's code length on
        random data varies by 0.05%) do not turn slow drifts of a fraction of
        a percent into change points.
    """
    names = [k for k in series]
    if not names:
        raise ParameterError("No series to segment.")
    cols = []
    noise: dict[str, float] = {}
    L = max(1, int(overlap))
    n = len(series[names[0]])
    for k in names:
        x = np.asarray(series[k], dtype=float)
        if x.size != n:
            raise ParameterError("All series to segment must have the same length.")
        med = float(np.nanmedian(x)) if np.isfinite(x).any() else 0.0
        x = np.where(np.isfinite(x), x, med)
        sd = noise_scale(x, L)
        floor = rel_floor * abs(med)
        if not (math.isfinite(sd) and sd > 0):
            sd = float(np.std(x)) or 1.0
        sd = max(sd, floor)
        noise[k] = sd
        cols.append((x - med) / sd)
    X = np.stack(cols, axis=1) if cols else np.zeros((n, 0))
    n_eff = max(n / L, 2.0)
    if penalty == "bic":
        beta = (len(names) + 1) * math.log(n_eff)
        rule = f"BIC-like: (figures + 1) x ln(windows / overlap) = {len(names) + 1} x ln({n_eff:.1f})"
    else:
        try:
            beta = float(penalty)
        except (TypeError, ValueError):
            raise ParameterError(f"The penalty must be 'bic' or a number, not {penalty!r}.", parameter="penalty") from None
        rule = "set by the user"
    breaks = pelt(X, beta, min_size=L, weight=1.0 / L)
    method = (
        "PELT (Killick et al. 2012), change in mean of the figures standardised by a robust noise scale "
        f"(MAD of lag-{L} differences), cost weighted by 1/{L} for overlapping windows, segments of at least {L} windows"
    )
    return Segmentation(method, rule, float(beta), breaks, n, noise)
