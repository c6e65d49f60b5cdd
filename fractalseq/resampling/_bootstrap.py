"""Block bootstrap of word-count statistics without recounting resampled streams.

Word counts add: the table of a resampled stream is the sum of the tables of
the blocks it is made of (words that would straddle two glued blocks are not
real words of the source and are left out).  So every position of the stream
is given, once, the index of the word that starts there in the table of all
distinct words (its *label*); a replicate's table at depth ``n`` is then the
sum, over the blocks drawn, of the labels of the words lying wholly inside
each block -- for disjoint blocks exactly ``sum_b w_b * table_b`` with
multinomial block weights ``w_b``.  Nothing is re-encoded, re-sorted or
recounted per replicate; a replicate costs one pass over integer labels.

Three resampling schemes are offered:

``"nonoverlapping"`` (default)
    the stream is cut into ``ceil(T / l)`` disjoint blocks, and a replicate
    draws as many blocks with replacement (multinomial weights on the block
    tables; Carlstein 1986, Ann. Statist. 14:1171).
``"moving"``
    blocks of length ``l`` starting anywhere (Kuensch 1989, Ann. Statist.
    17:1217), truncated to ``T`` positions.
``"stationary"``
    blocks of geometric length with mean ``l`` starting anywhere, wrapped
    circularly (Politis & Romano 1994, JASA 89:1303).

The block length is chosen from the data when not given: the automatic rule
of Politis & White (2004, Econometric Reviews 23:53; corrected by Patton,
Politis & White 2009, Econometric Reviews 28:372) applied to the series of
conditional surprisals ``-ln p(x_t | previous symbols)``, with a floor of
``BLOCK_MULTIPLE`` times the deepest word length (an n-word statistic
depends on windows of n symbols, so blocks must be much longer than n).
Which value was used, and why, is reported with every result.

Intervals (:func:`interval_from`): ``centered`` (default), ``percentile``,
``basic`` and ``bc``.  The calibration study
(``benchmarks/bench_calibration.py``) chose ``centered``: resampling blocks
shifts the replicates of some statistics away from the estimate (a block
drawn twice adds coincidences to collision counts; rare words drop out),
and an interval that keeps the bootstrap spread but not that shift covered
the truth 93-97% of the time where percentile intervals fell to 87%.

Same input, same seed: same replicates, byte for byte.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, ClassVar, Iterable, Mapping, Sequence

import numpy as np

from fractalseq.errors import InputError, ParameterError
from fractalseq.resampling._block_length import (
    BLOCK_MULTIPLE,
    MIN_BLOCKS,
    BlockLength,
    autocovariances,
    choose_block_length,
    politis_white,
    resolve_block,
    surprisal_series,
    user_block_length,
)
from fractalseq.resampling._block_tables import BlockTables, block_tables, replicate_table, weighted_table
from fractalseq.resampling._intervals import INTERVALS, interval_from
from fractalseq.resampling._options import Resampling, as_resampling
from fractalseq.resampling._plan import SCHEMES, ResamplePlan, block_major_weights, make_plan
from fractalseq.resampling._replicates import CountSpectrum
from fractalseq.resampling._streamed import streamed_replicate_spectra
from fractalseq.resampling._spectra_tasks import depth_spectra, kept_spectra, on_workers
from fractalseq.runner import Engine
from fractalseq.resampling._word_labels import DENSE_LABEL_CELLS, WordIndex, rank_sorted_keys, word_labels
from fractalseq.results import Result
from fractalseq.stream import SymbolArray, SymbolStream

__all__ = [
    "BLOCK_MULTIPLE", "BlockLength", "BlockTables", "BootstrapResult", "DENSE_LABEL_CELLS", "INTERVALS", "MIN_BLOCKS",
    "ResamplePlan", "Resampling", "SCHEMES", "autocovariances", "block_bootstrap", "block_tables", "choose_block_length",
    "interval_from", "make_plan", "politis_white", "rank_sorted_keys", "replicate_table", "resolve_block", "run_block_bootstrap",
    "surprisal_series", "user_block_length", "weighted_table", "word_labels",
]


@dataclass(frozen=True)
class BootstrapResult(Result):
    """A statistic of a stream with its block-bootstrap replicates.

    Attributes
    ----------
    estimate:
        The statistic on the whole stream (all words, none dropped), shape ``(k,)``.
    replicates:
        ``(n_boot, k)`` statistic of each replicate (not in the JSON form).
    depths:
        Word lengths the statistic was given.
    block:
        The block length used and the rule that chose it.
    scheme, n_boot, seed, length:
        Resampling scheme, replicate count, seed, positions resampled.
    notes:
        Limits of the intervals (too few blocks...).
    level, interval_method:
        Confidence level and interval method of ``low``/``high`` (JSON key ``interval``).
    standard_error, low, high:
        Bootstrap standard error (JSON key ``stderr`` too) and interval per component (derived
        from the replicates).
    """

    _aliases: ClassVar[Mapping[str, str]] = {"stderr": "standard_error", "interval": "interval_method"}

    estimate: np.ndarray
    replicates: np.ndarray = field(metadata={"json": False})
    depths: tuple[int, ...] = ()
    block: BlockLength | None = None
    scheme: str = "nonoverlapping"
    n_boot: int = 0
    seed: int = 0
    length: int = 0
    notes: tuple[str, ...] = field(default=())
    level: float = 0.95
    interval_method: str = "centered"
    standard_error: np.ndarray = field(init=False)
    low: np.ndarray = field(init=False)
    high: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        se = np.full(self.estimate.size, np.nan)
        for j in range(self.estimate.size):
            r = self.replicates[:, j]
            r = r[np.isfinite(r)]
            if r.size >= 2:
                se[j] = r.std(ddof=1)
        lo, hi = interval_from(self.estimate, self.replicates, self.level, self.interval_method)
        object.__setattr__(self, "standard_error", se)
        object.__setattr__(self, "low", lo)
        object.__setattr__(self, "high", hi)

    @property
    def block_length(self) -> int:
        return self.block.length if self.block is not None else 0

    def stderr(self) -> np.ndarray:
        """Bootstrap standard error per component (finite replicates only)."""
        return self.standard_error

    def interval(self, level: float = 0.95, method: str = "centered") -> tuple[np.ndarray, np.ndarray]:
        """``(low, high)`` arrays at any level and method; see :func:`interval_from`."""
        return interval_from(self.estimate, self.replicates, level, method)


def _as_array(arr: SymbolArray | SymbolStream) -> SymbolArray:
    if isinstance(arr, SymbolStream):
        return arr.to_array()
    if not isinstance(arr, SymbolArray):
        raise InputError("The bootstrap needs the stream itself (a SymbolArray or SymbolStream), not word counts.")
    return arr


def block_bootstrap(
    arr: SymbolArray | SymbolStream,
    depths: Sequence[int],
    statistic: Callable[[dict[int, np.ndarray]], Iterable[float] | float],
    resampling: Resampling | None = None,
    spectra: bool = False,
    batch_statistic: Callable[[dict], np.ndarray] | None = None,
    engine: Engine | None = None,
) -> BootstrapResult:
    """Block bootstrap of any statistic of word counts.

    Parameters
    ----------
    arr:
        The stream.
    depths:
        Word lengths whose counts the statistic needs.
    statistic:
        Called with ``{n: counts}`` where ``counts[i]`` is the (replicate)
        count of the i-th distinct n-word of the *whole* stream, in address
        order (``int64``; zero for words absent from a replicate, so ignore
        zeros when counting distinct words).  Returns a number or a vector.
        For the whole stream the counts equal
        :meth:`fractalseq.words._counts.WordCounts.counts`.
    resampling:
        Replicates (``n_boot``, 0: estimate only), ``seed`` (the same seed
        gives identical replicates), ``block_length`` (chosen from the data
        when ``None``, see :func:`choose_block_length`; the rule used is in
        ``result.block.rule``) and ``scheme`` (``"nonoverlapping"``,
        ``"moving"`` or ``"stationary"``); ``None``: ``Resampling()``.  Its
        ``level`` and ``interval`` are for the caller:
        ``result.interval(resampling.level, resampling.interval)``.
    spectra:
        The statistic depends on the counts only through their spectrum (how
        many words occur ``v`` times; entropies do): it is then called with
        ``{n: spectrum}`` objects having ``value`` and ``multiplicity``
        arrays, and with non-overlapping blocks all replicates' spectra are
        built in one pass (:mod:`fractalseq.resampling._replicates`), much faster than
        one table per replicate.
    batch_statistic:
        With ``spectra`` and non-overlapping blocks: the same statistic for
        all replicates at once, called with ``{n: ReplicateSpectra}`` and
        returning an ``(n_boot, k)`` array (e.g. built on
        :func:`fractalseq.entropy._estimators.replicate_rates`); ``statistic`` still
        gives the estimate on the whole stream.
    engine:
        With ``spectra`` and non-overlapping blocks: where each depth's pass runs (one task per
        depth, :mod:`fractalseq.resampling._spectra_tasks`); ``None``: in this process. The
        result is the same.

    Returns
    -------
    BootstrapResult
    """
    rs = as_resampling(resampling)
    return run_block_bootstrap(
        arr, depths, statistic, rs.n_boot, rs.seed, rs.block_length, rs.scheme, spectra, batch_statistic, engine
    )


def run_block_bootstrap(
    arr: SymbolArray | SymbolStream,
    depths: Sequence[int],
    statistic: Callable[[dict[int, np.ndarray]], Iterable[float] | float],
    n_boot: int,
    seed: int,
    block_length: "int | BlockLength | None",
    scheme: str,
    spectra: bool = False,
    batch_statistic: Callable[[dict], np.ndarray] | None = None,
    engine: Engine | None = None,
) -> BootstrapResult:
    """:func:`block_bootstrap` with plain settings (unchecked beyond ``n_boot >= 0``; any replicate count)."""
    arr = _as_array(arr)
    depths = tuple(sorted({int(d) for d in depths}))
    if not depths:
        raise ParameterError("Give at least one word length to the bootstrap.", parameter="depths")
    if n_boot < 0:
        raise ParameterError(f"The number of bootstrap replicates must be 0 or more, not {n_boot}.", parameter="n_boot")
    T = len(arr)
    arr.require_length(max(depths) + 1, "the bootstrap")
    block = resolve_block(arr, max(depths), block_length, scheme)
    notes: list[str] = []
    if block.blocks < MIN_BLOCKS:
        notes.append(f"only {block.blocks} blocks: intervals are unreliable")
    if spectra and (scheme == "nonoverlapping" or not n_boot):
        full, specs = {}, {}
        mapped = depth_spectra(arr, depths, block.length, n_boot, seed, engine) if on_workers(engine) else None
        held = kept_spectra(arr, depths, block.length, n_boot, seed) if mapped is None else {}
        weights = block_major_weights(T, block.length, n_boot, seed) if n_boot and mapped is None and len(held) < len(depths) else None
        for i, n in enumerate(depths):  # labelled chunk by chunk (no length-sized array), the same spectra
            if mapped is not None:
                (counts, spec), mapped[i] = mapped[i], None
            elif n in held:  # made by the spectrum's pass over the same blocks and seed: the same arrays
                counts, spec = held.pop(n)
            else:
                counts, spec = streamed_replicate_spectra(WordIndex(arr, n), n, block.length, weights)
            full[n] = CountSpectrum.of_counts(counts)
            if spec is not None:
                specs[n] = spec
            del counts
        estimate = np.atleast_1d(np.asarray(statistic(full), dtype=np.float64)).copy()
        reps = np.full((n_boot, estimate.size), np.nan)
        if batch_statistic is not None and n_boot:
            reps[:] = np.asarray(batch_statistic(specs), dtype=np.float64).reshape(n_boot, estimate.size)
        for r in range(n_boot if batch_statistic is None else 0):
            reps[r] = np.asarray(statistic({n: CountSpectrum(*s.spectrum(r)) for n, s in specs.items()}), dtype=np.float64)
        return BootstrapResult(estimate, reps, depths, block, scheme, int(n_boot), int(seed), T, tuple(notes))
    labels = {n: word_labels(arr, n)[0] for n in depths}
    sizes = {n: int(labels[n].max()) + 1 if labels[n].size and labels[n].max() >= 0 else 0 for n in depths}
    full = {n: np.bincount(labels[n][labels[n] >= 0], minlength=sizes[n]).astype(np.int64) for n in depths}
    if spectra:
        full = {n: CountSpectrum.of_counts(c) for n, c in full.items()}
    estimate = np.atleast_1d(np.asarray(statistic(full), dtype=np.float64)).copy()
    reps = np.full((n_boot, estimate.size), np.nan)
    if n_boot:
        plan = make_plan(T, block.length, n_boot, seed, scheme)
        weights = plan.block_weights() if scheme == "nonoverlapping" else None
        btabs = {n: block_tables(labels[n], n, block.length) for n in depths} if weights is not None else {}
        for r in range(n_boot):
            tables = {}
            for n in depths:
                buf = np.zeros(sizes[n], dtype=np.int64)
                if weights is not None:
                    bt = btabs[n]
                    weighted_table(bt.ptr, bt.label, bt.count, weights[r], buf)
                else:
                    s, ln = plan.blocks(r)
                    replicate_table(labels[n], n, s, ln, buf)
                tables[n] = CountSpectrum.of_counts(buf) if spectra else buf
            reps[r] = np.asarray(statistic(tables), dtype=np.float64)
    return BootstrapResult(estimate, reps, depths, block, scheme, int(n_boot), int(seed), T, tuple(notes))
