"""Generalised (Rényi) dimensions D_q and the f(alpha) spectrum, with intervals.

Word-count route
----------------
For non-overlapping maps (hypercube corners, ratio ``k <= 1/2``) the
occupied boxes of side ``k**n`` are the distinct n-words and box masses are
n-word frequencies, so the Rényi block entropy

    H_q(n) = ln( sum_w p_w**q ) / (1 - q)      (H_1 = -sum p ln p, H_0 = ln #words)

grows like ``D_q * n * ln(1/k)``.  ``D_q`` is the weighted least-squares
slope of ``H_q(n)`` against ``n ln(1/k)`` over a scaling range of depths,
i.e. a weighted average of the differences ``(H_q(n+1) - H_q(n)) / ln(1/k)``
(differences, not ratios ``H_q(n) / (n ln(1/k))``, which carry an O(1/n)
bias for correlated sources).  Estimators of the partition sum:

* ``q = 0``: the number of distinct words (exact box counts);
* ``q = 1``: Shannon entropy with the Miller (1955) correction ``(m - 1) / 2N``;
* ``q > 1``: the falling-factorial sum ``sum c!/(c-q)! / (N!/(N-q)!)``,
  unbiased for integer ``q`` under multinomial sampling (for ``q = 2`` the
  collision estimator ``sum c (c-1) / (N (N-1))``);
* other ``q``: plug-in ``sum (c/N)**q``.  Negative ``q`` is dominated by the
  rarest boxes and is flagged as unreliable.

Scaling range
-------------
Automatic unless given: the deepest depth used must keep the number of
distinct words below ``N / STARVE`` (data starvation; for plug-in
estimators this is the rule ``A**(n+1) <= N/100``), and for ``q <= 0``
every box must be hit (no sign of unseen words by Chao's 1984 estimate
``f1**2 / (2 f2) < 0.1`` from the words seen once and twice); for ``q < 0``
the rarest box must also be seen at least ``q (q - 1) / 0.02`` times (its
term of the partition sum is then biased by less than 1%).  Among depths 1..that limit the
longest run whose differences all agree with the run's slope within
``Z_LINEAR`` standard errors (plus a resolution of 0.001 in dimension
units) is taken; ties go to the deepest run.  The standard errors are
count-based, never bootstrap replicates
(:mod:`fractalseq.dimensions._level_variance`): with the stream, batch means
of the delta-method influence values give the covariance of the levels, and
the test uses the standard error of each difference minus the run's slope;
with word counts only, the multinomial standard error of each difference.

Intervals
---------
By the block bootstrap of :mod:`fractalseq.resampling._bootstrap` (word counts of
blocks re-weighted, never recounted); ``centered`` intervals by default
(the estimate plus the replicates' spread around their median), chosen by
the calibration benchmark.  The fit weights are the inverse count-based
(multinomial delta-method) variances of ``H_q(n)``, so the point estimate
and its scaling range do not depend on the number of replicates or the
seed; each replicate is refitted with the same weights over the same range,
so its slope is the same linear function of its block entropies.  The
reported ``stderr`` is the bootstrap standard deviation of the slope;
``fit_stderr`` is the textbook WLS standard error from the residuals, which
ignores that the ``H_q(n)`` are nested and correlated (shown for reference
only).  For ``q <= 0`` the counts are exact and the error is the finite
depth, so the interval is widened to contain the per-depth differences of
the deeper half of the range (the finite-depth bracket).

f(alpha)
--------
Direct method of Chhabra & Jensen (1989, Phys. Rev. Lett. 62:1327):
``mu_w(q) = p_w**q / sum p**q``; ``alpha(q)`` and ``f(q)`` are the slopes of
``sum mu ln p`` and ``sum mu ln mu`` against ``ln eps = -n ln(1/k)``.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.dimensions._level_variance import (
    BatchSums, covariance_from_level_sums, streamed_batch_covariance, word_level_variances,
)
from fractalseq.dimensions._levels import (
    LevelData, LevelStats, level_stats, level_vector, limits_from, replicate_vectors, spectra_vectors,
)
from fractalseq.dimensions._parameters import (
    AUTO_ADDRESS_BITS,
    MIN_LEVELS,
    NEGATIVE_Q,
    OVERLAP,
    RESOLUTION,
    STARVE,
    TRANSIENT,
    UNSEEN_MAX,
    Z_LINEAR,
    check_qs,
    method_name,
)
from fractalseq.dimensions._scaling_fit import choose_range, estimate_all, fit_slope
from fractalseq.dimensions._spectrum_results import DimensionEstimate, FAlphaPoint, SpectrumResult
from fractalseq.entropy._renyi_rates import RateEstimate, renyi_rate_bits
from fractalseq.errors import InputError, ParameterError
from fractalseq.resampling import _bootstrap as bs
from fractalseq.resampling._options import Resampling, as_resampling
from fractalseq.resampling._plan import block_major_weights
from fractalseq.resampling._streamed import streamed_replicate_spectra
from fractalseq.dimensions._spectrum_tasks import depth_levels, sums_fit
from fractalseq.resampling._spectra_tasks import keep_spectra, on_workers
from fractalseq.runner import Engine
from fractalseq.resampling._word_labels import WordIndex
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words._counts import WordCounts, count_words

__all__ = [
    "AUTO_ADDRESS_BITS", "DimensionEstimate", "FAlphaPoint", "LevelData", "LevelStats", "MIN_LEVELS", "NEGATIVE_Q",
    "OVERLAP", "RESOLUTION", "RateEstimate", "STARVE", "SpectrumResult", "TRANSIENT", "UNSEEN_MAX", "Z_LINEAR",
    "binomial_dimension", "check_qs", "choose_range", "dimension_spectrum", "estimate_all",
    "fit_slope", "level_stats", "level_vector", "method_name", "rates_from", "replicate_vectors",
]


def rates_from(
    data: LevelData, qs: np.ndarray, order: int | None, level: float, interval: str, corrected: bool = True
) -> list[RateEstimate]:
    """Conditional-form rates ``(H_q(n+1) - H_q(n)) / ln 2`` (bits) from word-route level data.

    The order n is the user's, or the middle of the automatic linear run of
    ``H_q(n)`` (converged, and away from the starved deep end).  For ``q <= 0``
    the counts are exact and the interval also holds the deeper differences
    of the run (the finite-order bracket, as for D_0).  The rate itself is
    :func:`fractalseq.entropy._renyi_rates.renyi_rate_bits`, the one home of h_q.
    """
    top = data.est.shape[0]  # levels are depths 1..top
    out = []
    for j, q in enumerate(qs):
        flags = [NEGATIVE_Q] if q < 0 else []
        H = data.est[:, j]
        Hr = data.reps[:, :, j] if data.reps is not None else None
        o: int | None
        choice = None
        if order is not None:
            o = int(order) if 1 <= int(order) <= top - 1 else None
        else:
            lim = data.complete_limit if q <= 0 else data.data_limit
            choice = choose_range(data.x, H, data.var[:, j], data.dvar[:, j], lim, cov=data.cov_of(j))
            o = None if choice is None else max((choice.lo + choice.hi + 1) // 2, 1)
        est = lo = hi = se = float("nan")
        if o is None or not (np.isfinite(H[o]) and np.isfinite(H[o - 1])):
            flags.append("too little data")
        else:
            deeper = None
            if q <= 0 and choice is not None:
                # exact counts: the error is the finite order, so hold the deeper differences of the run too
                deeper = H[o : choice.hi + 1] - H[o - 1 : choice.hi]
            est, lo, hi, se = renyi_rate_bits(
                H[o - 1], H[o], None if Hr is None else Hr[:, o - 1], None if Hr is None else Hr[:, o],
                level, interval, deeper,
            )
            if Hr is None:
                flags.append("no bootstrap: no interval")
        method = "conditional form H_q(n+1) - H_q(n): " + method_name(float(q), corrected)
        out.append(
            RateEstimate(
                q=float(q), estimate=est, low=lo, high=hi, reliable=bool(math.isfinite(est)) and q >= 0,
                notes=tuple(flags), stderr=se, order=o, method=method,
            )
        )
    return out


def _counts_for(arr: SymbolArray, starve: float, max_depth: int | None, need: int | None) -> WordCounts:
    """Count words deep enough that the deepest level is starved of data (or the user's depth)."""
    A = max(arr.alphabet.size, 2)
    cap = arr.alphabet.max_depth if max_depth is None else min(int(max_depth), arr.alphabet.max_depth)
    if need is not None:
        if need > cap:
            raise ParameterError(f"Depth {need} exceeds the deepest countable {cap}; choose a shallower range.", parameter="depth_range")
        return count_words(arr, need)
    T = len(arr)
    depth = int(min(cap, max(MIN_LEVELS + 1, math.ceil(math.log(max(T / starve, 2.0)) / math.log(A)) + 2)))
    if max_depth is None:
        # deepen automatically only while addresses fit 32 bits (low-entropy streams stop there)
        cap = max(depth, min(cap, AUTO_ADDRESS_BITS // arr.alphabet.bits))
    while True:
        wc = count_words(arr, depth)
        s = wc.spectrum(depth)
        if s.distinct > s.total / starve or depth >= cap:
            return wc
        depth = min(cap, 2 * depth)


def _word_level_data(
    wc: WordCounts,
    arr: SymbolArray | None,
    qs: np.ndarray,
    ratio: float,
    top_depth: int,
    starve: float,
    n_boot: int,
    seed: int,
    block: bs.BlockLength | None,
    scheme: str,
    corrected: bool,
    auto: bs.BlockLength | None = None,
    variances: bool = True,
    engine: Engine | None = None,
    ahead: Sequence[int] = (),
    release: bool = False,
) -> LevelData:
    """The levels' statistics; ``release``: ``wc`` is this call's own, discarded once read (before the passes
    over ``arr``, so its leaf table is not held beside the block weights and the batch sums)."""
    depths = np.arange(1, top_depth + 1)
    L = depths.size
    K = 3 * qs.size + 3
    est = np.empty((L, K))
    distinct = np.empty(L)
    occ = np.empty(L)
    unseen = np.empty(L)
    for i, n in enumerate(depths):
        sp = wc.spectrum(int(n))
        st = level_stats(sp.value, sp.multiplicity, qs, corrected)
        est[i] = st.vector()
        distinct[i], occ[i], unseen[i] = st.distinct, st.total, st.unseen
    if release and L < wc.depth:  # the levels read, exactly (a small table): the deep leaves go now
        own, wc = wc, wc.truncate(L)
        own.discard()
        del own
    if variances:
        var, dvar = word_level_variances(wc, L, qs)
    else:  # a probe of the limits: its variances are never read (the deep levels' are the costly ones)
        var, dvar = np.full((L, qs.size), np.nan), np.full((max(L - 1, 0), qs.size), np.nan)
    if release:
        wc.discard()
    reps = None
    cov = None
    if arr is not None:
        # every position labelled once per depth, chunk by chunk (no length-sized array): the
        # batch-means covariance of the levels (range rule) and, with replicates, the bootstrap
        # (interval) share the labels
        boot = n_boot > 0 and block is not None
        streamed = scheme == "nonoverlapping"
        plan = bs.make_plan(len(arr), block.length, n_boot, seed, scheme) if boot and block is not None and not streamed else None
        drawn = boot and block is not None and streamed  # block weights, drawn here or by each worker
        # batches as long as the automatic bootstrap blocks (whatever block length the interval uses)
        if auto is None:
            auto = bs.choose_block_length(arr, L, scheme="nonoverlapping")
        # drawn after the block length is chosen (its own generator), so the two are not held together
        weights = block_major_weights(len(arr), block.length, n_boot, seed) if drawn and not on_workers(engine) else None
        reps = np.empty((n_boot, L, K)) if plan is not None or drawn else None
        batches = BatchSums(len(arr), L, qs.size, batch=auto.length) if not streamed else None
        levels = []
        ell = block.length if block is not None else 1
        ahead_set = {int(n) for n in ahead}
        made_ahead: dict[int, tuple] = {}  # in process: the depths the rate intervals will ask for (keep_spectra)
        mapped: list | None = None
        sums: list = []  # the tasks' batch sums, level by level, and the levels' totals
        totals: list[float] = []
        fits = False
        if drawn and on_workers(engine):  # one task per depth on the engine's workers (the arrays of the loop below)
            fits = sums_fit(len(arr), auto.length, L, qs.size)
            extra = sorted({int(n) for n in ahead} - {int(n) for n in depths})
            mapped = depth_levels(arr, [int(n) for n in depths], ell, n_boot, seed, auto.length if fits else None, qs, engine,
                                  extra=extra)
            keep_spectra(arr, ell, n_boot, seed, {int(n): mapped[i][:2] for i, n in enumerate([*depths, *extra]) if int(n) in ahead})
        for i, n in enumerate(depths):
            if streamed:
                if mapped is not None:
                    (counts, spectra, level_sums), mapped[i] = mapped[i], None
                    if level_sums is not None:  # labelled once, by the task
                        sums.append(level_sums)
                        totals.append(float(np.sum(counts)))
                    elif not fits:  # too many sums to hold: labelled here for the covariance
                        levels.append((WordIndex(arr, int(n)).labels, counts))
                    if reps is not None and spectra is not None:
                        reps[:, i] = spectra_vectors(spectra, n_boot, qs, corrected)
                    del counts, spectra, level_sums
                    continue
                index = WordIndex(arr, int(n))
                counts, spectra = streamed_replicate_spectra(index, int(n), ell, weights)
                levels.append((index.labels, counts))
                if drawn and int(n) in ahead_set:  # the same arrays the entropy-rate bootstrap would make
                    made_ahead[int(n)] = (counts, spectra)
                if reps is not None and spectra is not None:
                    reps[:, i] = spectra_vectors(spectra, n_boot, qs, corrected)
                del index, counts, spectra
                continue
            assert batches is not None
            labels, words = bs.word_labels(arr, int(n))
            counts = np.bincount(labels[labels >= 0], minlength=words.size)
            batches.add_counts(i, labels, counts, qs)
            if reps is not None and plan is not None:
                reps[:, i] = replicate_vectors(labels, int(n), words.size, plan, qs, corrected)
            del labels, words, counts  # one depth's labels at a time
        if made_ahead:
            keep_spectra(arr, ell, n_boot, seed, made_ahead)
        del made_ahead
        weights = plan = None  # the replicates are tallied: release the block weights before the batch sums
        if batches is not None:
            cov = batches.covariance()
        elif fits:  # every level's sums from its task (none: fewer than 10 batches, no covariance)
            cov = covariance_from_level_sums(sums, np.array(totals)) if len(sums) == L else None
        else:
            cov = streamed_batch_covariance(len(arr), auto.length, levels, qs)
        del sums
        del levels
    x = depths * math.log(1.0 / ratio)
    dl, cl = limits_from(distinct, occ, unseen, starve)
    return LevelData(x, ratio ** depths.astype(float), est, reps, distinct, occ, unseen, dl, cl, var, dvar, cov, starve=starve)


def _overlapping(alphabet: Alphabet, ratio: float, corners) -> tuple[bool, str]:
    from fractalseq import encoding

    layout = encoding.corner_layout(alphabet.size, corners)
    chk = encoding.overlap_check(ratio, layout)
    return chk.overlapping, chk.reason


def dimension_spectrum(
    data: SymbolArray | SymbolStream | WordCounts,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    ratio: float = 0.5,
    depth_range: tuple[int, int] | None = None,
    resampling: Resampling | None = None,
    corners: np.ndarray | None = None,
    falpha: bool = True,
    starve: float = STARVE,
    corrected: bool = True,
    max_depth: int | None = None,
    rates: bool = False,
    engine: Engine | None = None,
    ahead: Sequence[int] = (),
) -> SpectrumResult:
    """Rényi dimensions D_q of a stream's encoding from its word counts.

    Parameters
    ----------
    data:
        The stream (needed for bootstrap intervals) or its :class:`WordCounts`
        (then only fit standard errors are available).
    qs:
        Orders q (any finite numbers; q < 0 is flagged as unreliable).
    ratio:
        Contraction ratio k of the encoding.  Only ``ln(1/k)`` enters, and only
        when the maps do not overlap (hypercube corners: ``k <= 1/2``); for
        overlapping maps a stream is sent to :func:`fractalseq.dimensions._geometry.geometric_spectrum`.
    depth_range:
        ``(n_lo, n_hi)`` word lengths to fit over; automatic when ``None``.
    resampling:
        Block bootstrap settings (:class:`~fractalseq.resampling.Resampling`: replicates, seed,
        block length, scheme, level, interval method); ``None``: ``Resampling()``;
        ``Resampling.none()`` skips the bootstrap.
    corners:
        Custom corner layout (default binary hypercube corners).
    falpha:
        Also estimate f(alpha) at the same qs.
    starve:
        The deepest depth keeps distinct words <= occurrences / ``starve``.
    corrected:
        Bias-corrected estimators (default) or plain plug-in.
    max_depth:
        Deepest depth counted (default: the address width).
    rates:
        Also give the conditional-form Rényi entropy rates h_q in bits from the
        same bootstrap (``result.rates``; see :func:`rates_from`).
    engine:
        Where the per-depth bootstrap passes run (:mod:`fractalseq.resampling._spectra_tasks`, one
        task per depth); ``None`` or the serial engine: in this process. The result is the same.
    ahead:
        Word lengths whose replicate spectra a block bootstrap of the same stream, block length and
        seed will ask for next (a profile's entropy-rate intervals): on an engine their tasks run
        beside the spectrum's and the results wait for it
        (:func:`fractalseq.resampling._spectra_tasks.depth_spectra`); in process the spectrum keeps
        those of its own levels (the same arrays) for that bootstrap instead of it making them again.

    Returns
    -------
    SpectrumResult
    """
    from fractalseq.encoding import check_ratio

    qv = check_qs(qs)
    k = check_ratio(ratio)
    rs = as_resampling(resampling)
    n_boot, seed, scheme, level, interval = rs.n_boot, rs.seed, rs.scheme, rs.level, rs.interval
    if starve <= 1:
        raise ParameterError(f"The starvation factor must exceed 1 (default {STARVE}), not {starve}.", parameter="starve")
    arr: SymbolArray | None
    if isinstance(data, WordCounts):
        wc0: WordCounts | None = data
        arr = None
        alphabet = data.alphabet
    elif isinstance(data, (SymbolArray, SymbolStream)):
        arr = data.to_array() if isinstance(data, SymbolStream) else data
        wc0 = None
        alphabet = arr.alphabet
    else:
        raise InputError("dimension_spectrum needs a SymbolArray, SymbolStream or WordCounts.")
    overlapping, reason = _overlapping(alphabet, k, corners)
    if overlapping:
        if arr is None:
            raise ParameterError(
                f"Word counts give box counts only for non-overlapping maps, and {reason}; "
                "pass the stream itself so geometric box counting is used.",
                parameter="data",
            )
        from fractalseq import encoding
        from fractalseq.dimensions import _geometry as geometry

        pts = encoding.points(arr, k, corners, drop=0)
        valid = geometry.transient_mask(arr, TRANSIENT)
        res = geometry.geometric_spectrum(
            pts, qv, scales=None, resampling=rs, valid=valid, falpha=falpha, starve=starve, corrected=corrected,
            scale_range=depth_range,
        )
        return SpectrumResult(
            res.route, k, res.length, res.dims, res.falpha, res.levels, res.data_limit, res.complete_limit,
            res.block, res.scheme, res.n_boot, res.seed, res.level, res.interval, res.flags + (OVERLAP + ": " + reason,),
        )
    user = None
    if depth_range is not None:
        try:
            lo, hi = (int(depth_range[0]), int(depth_range[1]))
        except (TypeError, ValueError, IndexError):
            raise ParameterError("depth_range must be two whole numbers (n_lo, n_hi).", parameter="depth_range") from None
        if lo < 1 or hi - lo < 1:
            raise ParameterError(f"Depth range ({lo}, {hi}) needs 1 <= n_lo < n_hi; e.g. (4, 10).", parameter="depth_range")
        user = (lo, hi)
    flags: list[str] = []
    if arr is not None:
        if len(arr) == 0:
            raise InputError("The stream is empty; there is nothing to measure.")
        wc = _counts_for(arr, starve, max_depth, user[1] if user else None)
    else:
        assert wc0 is not None
        wc = wc0
        if user and user[1] > wc.depth:
            raise ParameterError(f"Depth range ends at {user[1]} but the counts go to depth {wc.depth}; count deeper.", parameter="depth_range")
        if n_boot:
            flags.append("word counts only: no bootstrap (it needs the stream); intervals from the fit residuals")
    # levels used: up to the data limit (or the user's end)
    probe = _word_level_data(wc, None, qv, k, wc.depth, starve, 0, seed, None, scheme, corrected, variances=False)
    top = (user[1] if user else probe.data_limit + 1)
    top = max(min(top, wc.depth), 0)
    if top < 1:  # the probe is the result: give it its variances
        probe = _word_level_data(wc, None, qv, k, wc.depth, starve, 0, seed, None, scheme, corrected)
    block = None
    if arr is not None and n_boot > 0 and top >= 1:
        block = bs.resolve_block(arr, top, rs.block_length, scheme)
        if block.blocks < bs.MIN_BLOCKS:
            flags.append(f"only {block.blocks} blocks of {block.length} symbols: intervals are unreliable")
    if top >= 1:
        # the bootstrap's own automatic block is the batch length too: chosen once
        auto = block if block is not None and rs.block_length is None and scheme == "nonoverlapping" else None
        ld = _word_level_data(
            wc, arr, qv, k, top, starve, n_boot if arr is not None else 0, seed, block, scheme, corrected, auto,
            engine=engine, ahead=ahead, release=wc0 is None,
        )
        # limits are computed on the probe (all counted depths) so a user range cannot move them
        ld.data_limit = min(probe.data_limit, top - 1)
        ld.complete_limit = min(probe.complete_limit, top - 1)
        ld.limits_of = probe
    else:
        ld = probe
    if n_boot == 0:
        flags.append("no bootstrap: intervals from the WLS residual standard error, which ignores dependence")
    user_idx = (user[0] - 1, user[1] - 1) if user else None
    dims, fal = estimate_all(
        ld, qv, user_idx, level, interval, lambda q: "word counts: " + method_name(q, corrected),
        lambda i: int(i + 1), falpha, scale_factor=1.0,
    )
    levels = tuple(
        {
            "n": int(i + 1),
            "eps": float(k ** (i + 1)),
            "distinct": int(probe.distinct[i]),
            "occurrences": int(probe.occurrences[i]),
            "unseen": float(probe.unseen[i]),
        }
        for i in range(probe.distinct.size)
    )
    return SpectrumResult(
        "word counts", k, int(wc.length), tuple(dims), tuple(fal), levels,
        int(probe.data_limit + 1) if probe.data_limit >= 0 else None,
        int(probe.complete_limit + 1) if probe.complete_limit >= 0 else None,
        block, scheme, int(n_boot if arr is not None else 0), int(seed), float(level), interval, tuple(flags),
        tuple(rates_from(ld, qv, None, level, interval, corrected)) if rates and top >= 1 else (),
    )


def binomial_dimension(p: float, q: float) -> float:
    """D_q of the binomial measure, ``log2(p**q + (1-p)**q) / (1 - q)`` (q = 1: binary entropy in bits).

    Halsey, Jensen, Kadanoff, Procaccia & Shraiman 1986, Phys. Rev. A 33:1141.
    Used by tests and benchmarks as ground truth.
    """
    if q == 1:
        return float(-(p * math.log2(p) + (1 - p) * math.log2(1 - p)))
    return float(math.log2(p**q + (1 - p) ** q) / (1 - q))
