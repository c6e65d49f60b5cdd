"""The scaling fit: scaling range, weighted least-squares slope and its interval, for every q.

Weights and range come from the counts (:mod:`fractalseq.dimensions._level_variance`);
bootstrap replicates are refitted with the same weights over the same range
and only give the interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from fractalseq.dimensions._levels import LevelData, negative_q_min_count, range_shortfall
from fractalseq.dimensions._parameters import MIN_LEVELS, NEGATIVE_Q, RESOLUTION, Z_LINEAR
from fractalseq.dimensions._spectrum_results import DimensionEstimate, FAlphaPoint, is_reliable
from fractalseq.resampling import _bootstrap as bs


def wls_coefficients(x: np.ndarray, var: np.ndarray, floor: float) -> np.ndarray:
    """Coefficients ``c`` with ``slope = c @ y`` for the weighted least-squares line (weights ``1/max(var, floor)``)."""
    w = 1.0 / np.maximum(np.where(np.isfinite(var), var, np.inf), floor)
    if not np.all(np.isfinite(w)) or w.sum() <= 0:
        w = np.ones_like(x)
    xb = np.sum(w * x) / np.sum(w)
    sxx = np.sum(w * (x - xb) ** 2)
    return w * (x - xb) / sxx


def wls_fit(x: np.ndarray, y: np.ndarray, var: np.ndarray, floor: float) -> tuple[float, float, float]:
    """Weighted least-squares line: ``(slope, intercept, slope standard error from the residuals)``."""
    w = 1.0 / np.maximum(np.where(np.isfinite(var), var, np.inf), floor)
    if not np.all(np.isfinite(w)) or w.sum() <= 0:
        w = np.ones_like(x)
    W = w.sum()
    xb = np.sum(w * x) / W
    yb = np.sum(w * y) / W
    sxx = np.sum(w * (x - xb) ** 2)
    slope = float(np.sum(w * (x - xb) * (y - yb)) / sxx)
    icpt = float(yb - slope * xb)
    if x.size > 2:
        res = y - icpt - slope * x
        s2 = float(np.sum(w * res**2) / (x.size - 2))
        se = math.sqrt(s2 / sxx) if s2 >= 0 else float("nan")
    else:
        se = float("nan")
    return slope, icpt, se


@dataclass(frozen=True)
class RangeChoice:
    lo: int  # index into the levels, inclusive
    hi: int  # inclusive
    how: str
    flags: tuple[str, ...] = ()


def choose_range(
    x: np.ndarray,
    est: np.ndarray,
    var: np.ndarray,
    dvar: np.ndarray,
    top: int,
    resolution: float = RESOLUTION,
    z: float = Z_LINEAR,
    cov: np.ndarray | None = None,
) -> RangeChoice | None:
    """Longest run of levels ``0..top`` (indices, inclusive) that is linear; ties to the deepest.

    ``est`` is the level statistic (e.g. ``H_q``) per level, ``var`` its
    count-based variance per level (the fit weights) and ``dvar`` the
    count-based variance of each difference ``est[i+1] - est[i]``
    (:mod:`fractalseq.dimensions._level_variance`).  A run is linear when every
    difference (per unit of ``x``) lies within ``z`` standard errors plus
    ``resolution`` of the run's WLS slope.  With ``cov`` (the ``(L, L)``
    batch-means covariance of the levels) the standard error is that of the
    difference *minus the slope*, which moves with it; without it, that of the
    difference alone.  No bootstrap replicate enters, so the choice does not
    depend on the number of replicates or the seed.
    """
    L = int(top) + 1
    if L < MIN_LEVELS:
        return None
    y = est[:L]
    bad = ~np.isfinite(y)
    if bad.any():
        L = int(np.argmax(bad))
        if L < MIN_LEVELS:
            return None
        y = y[:L]
    xs = x[:L]
    dx = np.diff(xs)
    d_est = np.diff(y) / dx
    v = np.where(np.isfinite(var[:L]), var[:L], 0.0)
    d_se = np.sqrt(np.where(np.isfinite(dvar[: L - 1]), dvar[: L - 1], 0.0)) / dx
    floor = (resolution * float(np.mean(dx))) ** 2
    C = None
    if cov is not None and np.all(np.isfinite(cov[:L, :L])):
        C = cov[:L, :L]
    for length in range(L, MIN_LEVELS - 1, -1):
        for b in range(L - 1, length - 2, -1):
            a = b - length + 1
            c = wls_coefficients(xs[a : b + 1], v[a : b + 1], floor)
            slope = float(c @ y[a : b + 1])
            e = d_est[a:b] - slope
            se = d_se[a:b] if C is None else _deviation_se(C, xs, c, a, b)
            if np.all(np.abs(e) <= z * se + resolution):
                return RangeChoice(a, b, "automatic: longest linear run")
    a = L - MIN_LEVELS
    return RangeChoice(a, L - 1, "automatic", ("curved: no linear run of 3 levels; the deepest 3 were used",))


def _deviation_se(C: np.ndarray, xs: np.ndarray, c: np.ndarray, a: int, b: int) -> np.ndarray:
    """Standard errors of ``(y[i+1] - y[i]) / dx_i - c @ y[a:b+1]`` for i = a..b-1, given ``Cov(y) = C``."""
    out = np.empty(b - a)
    for k, i in enumerate(range(a, b)):
        u = np.zeros(C.shape[0])
        u[a : b + 1] -= c
        dx = xs[i + 1] - xs[i]
        u[i + 1] += 1.0 / dx
        u[i] -= 1.0 / dx
        out[k] = math.sqrt(max(float(u @ C @ u), 0.0))
    return out


@dataclass(frozen=True)
class SlopeFit:
    estimate: float
    low: float
    high: float
    stderr: float
    fit_stderr: float
    replicates_used: int
    local: np.ndarray  # per-level differences (slope units)


def fit_slope(
    x: np.ndarray,
    est: np.ndarray,
    var: np.ndarray,
    reps: np.ndarray | None,
    lo: int,
    hi: int,
    level: float,
    interval: str,
    bracket: bool = False,
    resolution: float = RESOLUTION,
) -> SlopeFit:
    """WLS slope over levels ``lo..hi`` with its interval (and optional finite-depth bracket).

    The weights ``1 / var`` come from the counts (``var`` per level, see
    :mod:`fractalseq.dimensions._level_variance`); each bootstrap replicate in
    ``reps`` ``(R, L)`` is refitted with the same weights over the same range,
    so the slope is the same linear map of every replicate's level statistics
    and the point estimate does not depend on the replicates.
    """
    xs = x[lo : hi + 1]
    y = est[lo : hi + 1]
    dx = np.diff(x)
    local = np.diff(est) / dx
    have = reps is not None and reps.shape[0] >= 10
    R = None
    if have:
        R = reps[:, lo : hi + 1]
        R = R[np.all(np.isfinite(R), axis=1)]
        have = R.shape[0] >= 10
    v = var[lo : hi + 1]
    v = np.where(np.isfinite(v), v, 0.0)
    floor = (resolution * float(np.mean(np.diff(xs)))) ** 2
    c = wls_coefficients(xs, v, floor)
    slope = float(c @ y)
    _, _, fit_se = wls_fit(xs, y, v, floor)
    if not np.all(np.isfinite(y)):
        return SlopeFit(float("nan"), float("nan"), float("nan"), float("nan"), float("nan"), 0, local)
    if have:
        s_rep = R @ c
        lo_i, hi_i = bs.interval_from(np.array([slope]), s_rep[:, None], level, interval)
        low, high = float(lo_i[0]), float(hi_i[0])
        se = float(s_rep.std(ddof=1))
        used = int(s_rep.size)
    else:
        from scipy.special import ndtri

        zq = float(-ndtri((1 - level) / 2))
        se = float("nan")
        low, high = (slope - zq * fit_se, slope + zq * fit_se) if np.isfinite(fit_se) else (float("nan"),) * 2
        used = 0
    if bracket:
        mid = (lo + hi + 1) // 2
        deep = local[mid:hi]
        deep = deep[np.isfinite(deep)]
        if deep.size:
            low = float(np.nanmin([low, deep.min(), slope]))
            high = float(np.nanmax([high, deep.max(), slope]))
    return SlopeFit(slope, low, high, se, fit_se, used, local)


def estimate_all(
    data: LevelData,
    qs: np.ndarray,
    user_range: tuple[int, int] | None,
    level: float,
    interval: str,
    route_method: Callable[[float], str],
    level_name: Callable[[int], int],
    want_falpha: bool,
    scale_factor: float = 1.0,
) -> tuple[list[DimensionEstimate], list[FAlphaPoint]]:
    """Ranges, fits and intervals for every q (shared by both routes).

    ``scale_factor`` divides slopes (``ln(1/k)`` when the abscissa is the depth).
    """
    Q = qs.size
    dims: list[DimensionEstimate] = []
    fal: list[FAlphaPoint] = []
    for j, q in enumerate(qs):
        flags: list[str] = []
        if q < 0:
            flags.append(NEGATIVE_Q)
        top = data.complete_limit if q <= 0 else data.data_limit
        rarest = None  # the occurrences the rarest box needs, when that rule sets the deepest level
        if q < 0:
            need = negative_q_min_count(q)
            mins = data.est[:, 3 * Q + 2]
            neg_top = -1
            for i in range(mins.size):
                if not mins[i] >= need:
                    break
                neg_top = i
            if neg_top < top:
                top = neg_top
                rarest = need
                if user_range is None:
                    flags.append(f"range limited to levels whose rarest box has >= {need:.0f} occurrences")
                elif user_range[1] > neg_top:
                    flags.append(f"range goes past the levels whose rarest box has >= {need:.0f} occurrences")
        H = data.est[:, j]
        Hr = data.reps[:, :, j] if data.reps is not None else None
        if user_range is not None:
            lo, hi = user_range
            rule = "set by the user"
            if hi > data.data_limit:
                flags.append("range goes past the data limit (too few occurrences per word)")
            if q <= 0 and hi > data.complete_limit:
                flags.append("range goes past the depth where every box is hit")
            choice = RangeChoice(lo, hi, rule)
        else:
            choice = choose_range(data.x, H, data.var[:, j], data.dvar[:, j], top, cov=data.cov_of(j))
            if choice is not None:
                rule = choice.how
                flags.extend(choice.flags)
        local_all = np.diff(data.est[:, j]) / np.diff(data.x) if data.x.size > 1 else np.zeros(0)
        if choice is None:
            flags.append(range_shortfall(data, j, float(q), top, rarest))
            dims.append(
                DimensionEstimate(
                    q=float(q), estimate=float("nan"), low=float("nan"), high=float("nan"), reliable=False,
                    notes=tuple(flags), stderr=float("nan"), fit_stderr=float("nan"), n_lo=None, n_hi=None,
                    eps_lo=None, eps_hi=None, method=route_method(q), range_rule="none",
                    local=tuple(local_all / scale_factor),
                )
            )
            if want_falpha:
                fal.append(FAlphaPoint(float(q), *(float("nan"),) * 6, None, None, tuple(flags)))
            continue
        fit = fit_slope(data.x, H, data.var[:, j], Hr, choice.lo, choice.hi, level, interval, bracket=(q <= 0))
        if data.reps is not None and fit.replicates_used < 0.95 * data.reps.shape[0]:
            flags.append(f"only {fit.replicates_used} of {data.reps.shape[0]} replicates usable")
        sf = scale_factor
        dims.append(
            DimensionEstimate(
                q=float(q), estimate=fit.estimate / sf, low=fit.low / sf, high=fit.high / sf,
                reliable=is_reliable(fit.estimate, tuple(flags)), notes=tuple(flags), stderr=fit.stderr / sf,
                fit_stderr=fit.fit_stderr / sf, n_lo=level_name(choice.lo), n_hi=level_name(choice.hi),
                eps_lo=float(data.eps[choice.lo]), eps_hi=float(data.eps[choice.hi]), method=route_method(q),
                range_rule=rule, local=tuple(fit.local / sf),
            )
        )
        if want_falpha:
            # alpha, f are slopes against ln eps = -x: negate
            Ar = -data.reps[:, :, Q + j] if data.reps is not None else None
            Fr = -data.reps[:, :, 2 * Q + j] if data.reps is not None else None
            # same weights (those of H_q) and range as D_q
            fa = fit_slope(data.x, -data.est[:, Q + j], data.var[:, j], Ar, choice.lo, choice.hi, level, interval)
            ff = fit_slope(data.x, -data.est[:, 2 * Q + j], data.var[:, j], Fr, choice.lo, choice.hi, level, interval)
            fal.append(
                FAlphaPoint(
                    float(q), fa.estimate / sf, fa.low / sf, fa.high / sf, ff.estimate / sf, ff.low / sf, ff.high / sf,
                    level_name(choice.lo), level_name(choice.hi), tuple(f for f in flags if f == NEGATIVE_Q),
                )
            )
    return dims, fal
