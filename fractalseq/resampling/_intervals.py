"""Bootstrap intervals from replicates: centered (default), percentile, basic and bias-corrected."""

from __future__ import annotations

import numpy as np

from fractalseq.errors import ParameterError


INTERVALS = ("percentile", "basic", "bc", "centered")


def interval_from(
    estimate: np.ndarray, replicates: np.ndarray, level: float = 0.95, method: str = "centered"
) -> tuple[np.ndarray, np.ndarray]:
    """Bootstrap interval per column, ignoring non-finite replicates.

    ``percentile``: quantiles of the replicates; ``basic``: ``2 theta - q``
    reflected quantiles; ``bc``: bias-corrected percentile (Efron 1981; no
    acceleration); ``centered``: the estimate plus the quantiles of the
    replicates' deviations from their median (the shape of the bootstrap
    distribution without its shift: right when the estimator is nearly
    unbiased but resampling itself shifts the replicates, e.g. duplicated
    blocks adding coincidences to a collision count).  Columns with fewer
    than 10 finite replicates get NaN.
    """
    if method not in INTERVALS:
        raise ParameterError(f"Unknown interval method {method!r}; use one of {', '.join(INTERVALS)}.", parameter="method")
    if not 0.5 < level < 1:
        raise ParameterError(f"Confidence level {level} is outside (0.5, 1); use e.g. 0.95.", parameter="level")
    est = np.atleast_1d(np.asarray(estimate, dtype=np.float64))
    rep = np.asarray(replicates, dtype=np.float64).reshape(-1, est.size)
    lo = np.full(est.size, np.nan)
    hi = np.full(est.size, np.nan)
    a = (1.0 - level) / 2.0
    for j in range(est.size):
        r = rep[:, j]
        r = np.sort(r[np.isfinite(r)])
        if r.size < 10 or not np.isfinite(est[j]):
            continue
        if method == "percentile":
            lo[j], hi[j] = np.quantile(r, a), np.quantile(r, 1 - a)
        elif method == "basic":
            lo[j], hi[j] = 2 * est[j] - np.quantile(r, 1 - a), 2 * est[j] - np.quantile(r, a)
        elif method == "centered":
            med = np.median(r)
            lo[j], hi[j] = est[j] + np.quantile(r, a) - med, est[j] + np.quantile(r, 1 - a) - med
        else:
            frac = (np.sum(r < est[j]) + 0.5 * np.sum(r == est[j])) / r.size
            frac = min(max(frac, 0.5 / r.size), 1 - 0.5 / r.size)
            from scipy.special import ndtri  # loaded only for bias-corrected intervals

            z0 = float(ndtri(frac))
            za = float(ndtri(a))
            from scipy.special import ndtr

            p_lo, p_hi = float(ndtr(2 * z0 + za)), float(ndtr(2 * z0 - za))
            lo[j], hi[j] = np.quantile(r, p_lo), np.quantile(r, p_hi)
    return lo, hi
