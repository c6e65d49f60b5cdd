"""Shannon entropy rates of a stream's word counts (difference and ratio forms) and their bootstrap intervals."""

from __future__ import annotations

import dataclasses
import math
from typing import TYPE_CHECKING

from fractalseq.entropy._entropy_estimate import EntropyEstimate
from fractalseq.entropy._renyi_rates import renyi_rate_from_counts
from fractalseq.entropy._shannon import _rate_depth, _wc_info, method_name, rate_from_counts, ratio_from_counts
from fractalseq.errors import InputError, ParameterError

if TYPE_CHECKING:  # for annotations only: the bootstrap module is imported where it is used
    from fractalseq.resampling._options import Resampling


def h_difference(wc, depth: int | None = None, method: str = "grassberger") -> EntropyEstimate:
    """Entropy rate by the difference ``H_{n+1} - H_n`` (bits per symbol).

    Parameters
    ----------
    wc:
        :class:`~fractalseq.words._counts.WordCounts` counted to depth ``>= n + 1``.
    depth:
        ``n``; by default the largest ``n >= 0`` with ``A**(n+1) <= length/100``
        (REFERENCE-CHECKS rule 4), limited by the counted depth.
    method:
        ``plugin``, ``miller-madow`` or ``grassberger`` (applied to both block entropies).
    """
    method = method_name(method)
    A, _, L = _wc_info(wc)
    n, ok, notes = _rate_depth(wc, depth, 1)
    c0 = None if n == 0 else wc.spectrum(n)
    h = rate_from_counts(c0, wc.spectrum(n + 1), method)
    return EntropyEstimate(
        quantity="entropy rate", method=f"difference/{method}", estimate=h, unit="bits/symbol",
        fraction_of_max=h / math.log2(A), depth=n, reliable=ok, note="; ".join(notes),
        details={"rule": "largest n with A^(n+1) <= length/100", "length": L},
    )


def h_ratio(wc, depth: int | None = None, method: str = "grassberger") -> EntropyEstimate:
    """Entropy rate by the ratio ``H_n / n`` (bits per symbol).

    Default depth: the largest ``n >= 1`` with ``A**n <= length/100``.  Biased
    upward by ``O(1/n)`` for correlated sources; prefer :func:`h_difference`.
    """
    method = method_name(method)
    A, _, L = _wc_info(wc)
    n, ok, notes = _rate_depth(wc, depth, 0)
    h = ratio_from_counts(wc.spectrum(n), n, method)
    notes.append("ratio H_n/n carries an O(1/n) bias on correlated sources; prefer the difference")
    return EntropyEstimate(
        quantity="entropy rate", method=f"ratio/{method}", estimate=h, unit="bits/symbol",
        fraction_of_max=h / math.log2(A), depth=n, reliable=ok, note="; ".join(notes),
        details={"rule": "largest n with A^n <= length/100", "length": L},
    )


def bootstrap_rate(
    est: EntropyEstimate,
    stream,
    resampling: "Resampling | None" = None,
) -> EntropyEstimate:
    """Attach a block-bootstrap interval to a rate from :func:`h_difference`, :func:`h_ratio` or :func:`h_renyi`.

    The same statistic (:func:`rate_from_counts`, :func:`ratio_from_counts`
    or :func:`renyi_rate_from_counts`) is recomputed on weighted block count
    tables by :func:`fractalseq.resampling._bootstrap.block_bootstrap` (no recounting);
    the block length is chosen from the data unless given.  The interval,
    its level, the bootstrap standard error and the block rule go into the
    result (``low``, ``high``, ``details``, ``note``).

    Parameters
    ----------
    est:
        An estimate made from the counts of ``stream``.
    stream:
        The :class:`~fractalseq.stream.SymbolArray` (or stream) the counts came from.
    resampling:
        The bootstrap settings (:class:`~fractalseq.resampling.Resampling`; ``None``:
        ``Resampling()``).  Its ``interval`` method is ``centered`` by default, as everywhere
        in the package (chosen by the calibration study); ``percentile``, ``basic`` and ``bc``
        are the others.
    """
    from fractalseq.resampling import _bootstrap as bs
    from fractalseq.resampling._options import as_resampling

    rs = as_resampling(resampling)
    n_boot, seed, level, scheme, interval = rs.n_boot, rs.seed, rs.level, rs.scheme, rs.interval

    if est.depth is None or est.quantity not in ("entropy rate", "Renyi entropy rate"):
        raise ParameterError(f"A bootstrap interval is available for depth-based entropy rates, not for {est.method}.", parameter="est")
    n = int(est.depth)
    kind, _, meth = est.method.partition("/")
    if est.quantity == "Renyi entropy rate":
        q = float(est.q)
        unbiased = meth == "factorial-moment"
        depths = (n + 1,) if n == 0 else (n, n + 1)

        def statistic(t):
            return renyi_rate_from_counts(t.get(n), t[n + 1], q, unbiased)

    elif kind == "difference":
        depths = (n + 1,) if n == 0 else (n, n + 1)

        def statistic(t):
            return rate_from_counts(t.get(n), t[n + 1], meth)

    elif kind == "ratio":
        depths = (n,)

        def statistic(t):
            return ratio_from_counts(t[n], n, meth)

    else:
        raise ParameterError(f"A bootstrap interval is not available for the {est.method} estimate.", parameter="est")
    res = bs.block_bootstrap(
        stream, depths, statistic, rs, spectra=True
    )
    if not math.isclose(float(res.estimate[0]), est.estimate, rel_tol=1e-9, abs_tol=1e-12):
        raise InputError("The stream given to the bootstrap is not the one the counts came from; pass the same input.")
    lo, hi = res.interval(level, interval)
    how = f"{level:.0%} {interval} block bootstrap, {n_boot} replicates, block length {res.block_length}"
    out = est.with_interval(float(lo[0]), float(hi[0]), how)
    details = dict(out.details)
    details["bootstrap"] = {
        "stderr": float(res.stderr()[0]), "level": level, "interval": interval, "n_boot": int(n_boot),
        "seed": int(seed), "scheme": scheme, "block": res.block.to_dict(), "notes": list(res.notes),
    }
    reliable = out.reliable and not res.notes and math.isfinite(lo[0]) and math.isfinite(hi[0])
    return dataclasses.replace(out, details=details, reliable=reliable,
                               note="; ".join([out.note] + list(res.notes)) if res.notes else out.note)
