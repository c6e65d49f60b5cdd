"""A count-based next-symbol predictor on the cells of the contractive encoding.

A history falls, at every depth ``n``, in the cell of all histories sharing
its last ``n`` symbols (in the encoding with ratio ``k <= 1/2``, the box of
side ``k**n`` its point lies in).  Each cell keeps the counts of the symbols
that followed it; a prediction blends the counts of the cells a history falls
in, from coarse to fine.

Two modes
---------
*online* (:func:`~fractalseq.predict._online.online_code_length`, :meth:`CellPredictor.score_online`)
    Predict, then update, over one stream.  Cells of several depths live in
    tables of bounded size (direct for shallow depths, hashed buckets with
    pruning of the rarest cell for deep ones); their estimates
    ``(c_s + alpha) / (N + A alpha)`` are mixed geometrically with weights
    learned online (see :mod:`fractalseq.predict._online_kernel`).  For DNA the deep
    cells are also updated with the reverse complement of each word, so a
    repeat read on the other strand is recognised.  Alphabets of more than 256
    symbols (event-log templates) use cells that keep their 8 most frequent
    next symbols, blended from coarse to fine over an order-0 estimate (see
    :mod:`fractalseq.predict._online_sparse`).  The total code length is
    an upper bound on the information content of the stream (it is the length
    an arithmetic coder driven by these probabilities would need, within 2 bits).
*fitted* (:meth:`CellPredictor.fit`, :meth:`~CellPredictor.bits_per_symbol`, :meth:`~CellPredictor.predict_proba`)
    Exact counts of the training data (mergeable: counts of two parts add up
    to the counts of the whole), blended from coarse to fine by interpolated
    absolute discounting,
    ``p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (N + beta_n)``,
    starting from the uniform distribution (``u`` = distinct symbols of the
    cell).  The concentration ``beta_n`` and discount ``d_n`` of each depth
    are chosen by leave-one-out likelihood of the training counts (a pure
    function of the counts).  Scoring held-out data does not change the model.

Evaluation beside every score: log-loss in bits per symbol, top-1 and top-3
accuracy, expected calibration error, and two baselines computed in the same
run (:mod:`fractalseq.predict._baselines`).

Where things live: parameters and their checks in :mod:`~fractalseq.predict._params`,
the online coder in :mod:`~fractalseq.predict._online`, cell tables, pruning and the
blend's parameters in :mod:`~fractalseq.predict._cells`, results in
:mod:`~fractalseq.predict._results`, the model file in :mod:`~fractalseq.predict._modelfile`
(a plain state; :meth:`CellPredictor.to_state` / :meth:`CellPredictor.from_state`), this
module holds the estimator.

Genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import inspect
import math
from typing import Any, Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ModelFileError, ParameterError
from fractalseq.predict import _fitted_kernels as FK
from fractalseq.predict._baselines import (
    baseline_kinds,
    kt_bits_by_order,
)
from fractalseq.predict._cells import CellTable, capped_cell_tables, fit_blend, narrow, prune_cells, to_u32
from fractalseq.io._npz import ArrayPieces
from fractalseq.predict._modelfile import ModelState, read_state, write_state
from fractalseq.predict._online import evaluate_online, markov_online_baseline, online_code_length  # noqa: F401 (online_code_length: callers import it from here)
from fractalseq.predict._params import (
    DEFAULT_FITTED_CELLS,
    Source,
    as_source,
    baseline_orders,
    check_depths,
    default_depths,
    use_reverse,
)
from fractalseq.predict._results import (
    DEFAULT_TOP_WINDOWS,
    DEFAULT_WINDOW,
    PredictionResult,
)

_INDEX_ATTRS = ("_model", "_top0", "_sq0", "_mark", "_depth_arr", "_index_bytes")
#: Most frequent symbols of the depth-0 cell always among the scoring candidates (see _fitted_kernels.fitted_score).
TOP0 = 4


# ------------------------------------------------------------- fitted mode
def _lower_first(text: str) -> str:
    """A sentence used inside another one: its first letter in lower case."""
    return text[:1].lower() + text[1:]


def _check_fitted(model: "CellPredictor") -> None:
    if not hasattr(model, "cells_"):
        raise ParameterError("This predictor is not fitted yet; call fit() or load a model file first.")


class CellPredictor:
    """Count-based next-symbol predictor on the cells of the encoding (scikit-learn style).

    Parameters
    ----------
    depths:
        Cell depths (symbols of context) to use; default: a ladder up to
        ``max_depth`` (:func:`default_depths`; 3, 6, 10, 14, 20 for DNA).
    max_depth:
        Deepest cell when ``depths`` is not given (default: about 40 bits of context, 20 for DNA).
    smoothing:
        Additive constant ``alpha`` of each cell's estimate ``(c_s + alpha) / (N + A alpha)``
        (0.5 = Krichevsky–Trofimov).  Online, cells deeper than ``A**n > 2**20`` use
        ``alpha / 4`` and beyond ``2**26`` ``alpha / 16``; fitted, ``A alpha`` is the
        smallest concentration ``beta_n`` tried (the grid is ``A alpha 2**k``, k = 0..17, reaching down to about 1/2 when ``A alpha > 64``).
    discount:
        Fitted mode: absolute discount ``d`` of every count in the coarse-to-fine blend,
        ``"auto"`` (chosen per depth among 0, 0.25, 0.5, 0.75) or a number in [0, 1).
    max_cells:
        Memory cap.  Online: rows of the count tables (default 2**24, less for large
        alphabets so the tables stay under 256 MiB; tables are sized by the input's length
        when it is known, and above 256 symbols they start small and double up to the cap);
        fitted: cells kept (default 2**23), the rarest cells of the deepest depths are pruned
        first; the cap holds while the cell tables are built (a deep depth is built in address
        parts and never held whole), with the cells that pruning at the end would keep.
    learning_rate:
        Online mode: step of the mixing-weight update (alphabets of at most 256 symbols; larger ones
        blend with fixed parameters and ignore it).
    reverse_complement:
        ``"auto"`` (on for DNA/RNA), ``True`` or ``False``: also count each word read on the other strand
        (online: for cells of depth 5 and more, :data:`IR_MIN_DEPTH`; fitted: every depth).

    Attributes
    ----------
    alphabet_ : Alphabet
    depths_ : tuple of int
        Depths of the fitted cells (0 .. K for the Markov baseline, then the ladder).
    cells_ : dict of int to ndarray
        Sorted cell addresses per depth.
    counts_ : dict of int to CellTable
        The symbols seen after each cell and their counts, per depth (sparse: only symbols seen are stored;
        ``counts_[n].dense(A)`` gives the ``(cells, A)`` matrix).
    n_symbols_, n_segments_ : int
        Training symbols and segments.
    pruned_cells_ : int
        Cells dropped to respect ``max_cells``.
    reverse_complement_ : bool
    baseline_order_ : int
        Order of the fixed-order KT baseline, chosen on the training data.
    baseline_bits_ : dict of int to float
        Training bits per symbol of every candidate order.
    concentration_, discount_ : dict of int to float
        Blend parameters of every depth (leave-one-out choice).
    reader_ : dict
        How the training data were read (the ``reader`` argument of :meth:`fit`), e.g. numeric cut points.

    Examples
    --------
    >>> import numpy as np
    >>> from fractalseq.alphabet import dna
    >>> from fractalseq.stream import from_codes
    >>> train = from_codes(dna(), np.tile([0, 1, 2, 3], 1000))
    >>> model = CellPredictor(max_depth=4).fit(train)
    >>> model.predict_proba(["ACG"]).argmax(axis=1).tolist()
    [3]
    """

    def __init__(
        self,
        depths: Sequence[int] | None = None,
        max_depth: int | None = None,
        smoothing: float = 0.5,
        discount: float | str = "auto",
        max_cells: int | None = None,
        learning_rate: float = 0.002,
        reverse_complement: bool | str = "auto",
    ) -> None:
        self.depths = depths
        self.max_depth = max_depth
        self.smoothing = smoothing
        self.discount = discount
        self.max_cells = max_cells
        self.learning_rate = learning_rate
        self.reverse_complement = reverse_complement

    # -------------------------------------------------------- sklearn API
    @classmethod
    def _param_names(cls) -> tuple[str, ...]:
        """Names of the constructor's parameters, read from its signature."""
        sig = inspect.signature(cls.__init__)
        return tuple(n for n, p in sig.parameters.items() if n != "self" and p.kind == p.POSITIONAL_OR_KEYWORD)

    def get_params(self, deep: bool = True) -> dict:
        """Constructor parameters (introspected from ``__init__``, as scikit-learn does)."""
        return {name: getattr(self, name) for name in self._param_names()}

    def set_params(self, **params) -> "CellPredictor":
        """Set constructor parameters (unknown names raise :class:`ParameterError`); learned state is untouched until the next fit."""
        names = self._param_names()
        for k, v in params.items():
            if k not in names:
                raise ParameterError(f"CellPredictor has no parameter {k!r}; use one of {', '.join(names)}.", parameter=k)
            setattr(self, k, v)
        return self

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.get_params().items())
        return f"CellPredictor({args})"

    def _online_params(self) -> dict:
        return {k: v for k, v in self.get_params().items() if k != "discount"}

    def _reset(self) -> None:
        """Forget everything learned (attributes ending in ``_`` and the private index arrays)."""
        for name in [k for k in vars(self) if k.endswith("_") or k in _INDEX_ATTRS]:
            delattr(self, name)

    def _validate(self, alphabet: Alphabet) -> tuple[tuple[int, ...], bool]:
        s = self.smoothing
        if not (isinstance(s, (int, float)) and not isinstance(s, bool) and s > 0 and math.isfinite(s)):
            raise ParameterError(f"The smoothing must be a positive number (e.g. 0.5), not {s!r}.", parameter="smoothing")
        d = self.discount
        if d != "auto" and not (isinstance(d, (int, float)) and not isinstance(d, bool) and 0 <= d < 1):
            raise ParameterError(f"The discount must be 'auto' or lie in [0, 1), not {d!r}.", parameter="discount")
        if self.max_cells is not None and (isinstance(self.max_cells, bool) or int(self.max_cells) < 1):
            raise ParameterError(f"max_cells must be a positive number of cells, not {self.max_cells!r}.", parameter="max_cells")
        reverse = use_reverse(alphabet, self.reverse_complement)
        ladder = check_depths(
            self.depths if self.depths is not None else default_depths(alphabet, self.max_depth), alphabet, reverse
        )
        return ladder, reverse

    def count_depth(self, alphabet: Alphabet) -> int:
        """Word depth that :meth:`fit_counts` needs over ``alphabet``: the deepest cell or baseline order, plus one."""
        ladder, _ = self._validate(alphabet)
        return max(max(ladder), baseline_orders(alphabet)) + 1

    # ---------------------------------------------------------------- fit
    def fit(self, source: Source, reader: dict | None = None) -> "CellPredictor":
        """Count the cells of a training stream (read chunk by chunk); returns ``self``.

        Parameters
        ----------
        source:
            The training data.
        reader:
            How the training data were read (numeric cut points, column, ...; the keyword
            options of :func:`fractalseq.sources.open_source`), kept as ``reader_`` and in the
            model file so that new data can be read the same way.  Default: nothing special.

        Every fit starts from scratch: all learned state of a previous fit is forgotten.
        """
        from fractalseq.words._counts import count_words

        self._reset()
        src = as_source(source)
        wc = count_words(src, self.count_depth(src.alphabet), compact=True)
        if wc.length == 0:
            raise InputError(f"{getattr(src, 'name', 'The input')} holds no symbols to learn from; check the input.")
        return self.fit_counts(wc, reader=reader, consume=True)

    def fit_counts(self, counts, reader: dict | None = None, consume: bool = False) -> "CellPredictor":
        """Fit from :class:`~fractalseq.words._counts.WordCounts` (deep enough for every depth), e.g. one piece of a large input.

        ``reader`` is as in :meth:`fit`.  With ``consume`` the counts are handed over: their tables
        are dropped (:meth:`~fractalseq.words._counts.WordCounts.discard`) as soon as the cell tables
        are built, before the blend is fitted, so a caller that counted only to fit holds them no
        longer than needed.  All learned state of a previous fit is forgotten first.
        """
        self._reset()
        if reader is not None and not isinstance(reader, dict):
            raise ParameterError(f"reader must be a dictionary of reader options, not {type(reader).__name__}.", parameter="reader")
        alphabet = counts.alphabet
        if counts.length == 0:
            raise InputError("The word counts hold no symbols to learn from; check the input.")
        ladder, reverse = self._validate(alphabet)
        K_b = baseline_orders(alphabet)
        fit_depths = tuple(sorted(set(range(K_b + 1)) | set(ladder)))
        if counts.depth < fit_depths[-1] + 1:
            raise ParameterError(
                f"Word counts of depth {counts.depth} cannot feed cells of depth {fit_depths[-1]}; count to depth {fit_depths[-1] + 1}.",
                parameter="counts",
            )
        # depth by depth, each deep depth cut to the cell cap as soon as it is built (the same cells
        # the cap keeps at the end, see capped_cell_tables), then the cap over all depths
        n_symbols, n_segments = int(counts.length), int(counts.segments)
        # handed-over counts are dropped as soon as they are read for the last time (before the tables are joined)
        tables, pruned = capped_cell_tables(counts, fit_depths, reverse, K_b, self._cap(),
                                            release=counts.discard if consume else None)
        tables, more = prune_cells(tables, K_b, self._cap())
        self._install(alphabet, ladder, reverse, K_b, tables, n_symbols, n_segments, pruned + more, reader)
        return self

    def _cap(self) -> int:
        """The cell cap of the fitted model (``max_cells`` or the default)."""
        return DEFAULT_FITTED_CELLS if self.max_cells is None else int(self.max_cells)

    def _install(self, alphabet, ladder, reverse, K_b, tables, n_symbols, n_segments, pruned, reader=None) -> None:
        # reader options of the training data, JSON-ready (tuples as lists) as the model file keeps them
        self.reader_: dict = {k: (list(v) if isinstance(v, tuple) else v) for k, v in (reader or {}).items()}
        self.alphabet_ = alphabet
        self.ladder_ = tuple(ladder)
        self.reverse_complement_ = bool(reverse)
        self.baseline_max_order_ = int(K_b)
        self.n_symbols_ = int(n_symbols)
        self.n_segments_ = int(n_segments)
        cap = self._cap()
        tables = {n: narrow(t, alphabet.bits, n) for n, t in tables.items()}  # the table types (no copy when they are)
        tables, more = prune_cells(tables, K_b, cap)
        self.pruned_cells_ = int(pruned) + more
        self.max_cells_ = cap
        self.depths_ = tuple(sorted(tables))
        self.cells_ = {n: tables[n].cells for n in self.depths_}
        self.counts_ = {n: tables[n] for n in self.depths_}
        # baseline order chosen on the training data (closed form from the counts)
        strands = 2 if reverse else 1
        bits = kt_bits_by_order({k: tables[k] for k in range(K_b + 1)}, strands * self.n_symbols_, alphabet.size)
        per = {k: v / (strands * self.n_symbols_) for k, v in bits.items()}
        self.baseline_bits_ = per
        self.baseline_order_ = int(min(per, key=lambda k: (per[k], k)))
        self.concentration_, self.discount_ = fit_blend(self.depths_, self.counts_, alphabet, float(self.smoothing), self.discount)
        # the scoring index (about 60 bytes a cell) is built on first use: learning only saves the tables

    def _ensure_index(self) -> None:
        """Build the scoring index of the fitted cells unless it is there."""
        if not hasattr(self, "_model"):
            self._build_index()

    def _build_index(self) -> None:
        a = self.alphabet_
        A = a.size
        ds = self.depths_
        tabs = [self.counts_[n] for n in ds]
        sizes = [t.size for t in tabs]
        dstart = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
        addr = np.concatenate([t.cells for t in tabs] + [np.zeros(0, np.uint64)]).astype(np.uint64)
        entries = np.cumsum([0] + [int(t.ptr[-1]) for t in tabs])
        ptr = np.concatenate([t.ptr[:-1] + e for t, e in zip(tabs, entries)] + [np.array([entries[-1]])]).astype(np.int64)
        syms = np.concatenate([t.syms for t in tabs] + [np.zeros(0, np.uint32)]).astype(np.uint32)
        counts = np.concatenate([t.counts for t in tabs] + [np.zeros(0, np.uint32)]).astype(np.float64)
        tot = np.concatenate([t.totals() for t in tabs] + [np.zeros(0, np.int64)]).astype(np.float64)
        used = np.diff(ptr).astype(np.float64)
        self._depth_arr = np.array(ds, dtype=np.int64)
        beta = np.array([self.concentration_[n] for n in ds], dtype=np.float64)
        disc = np.array([self.discount_[n] for n in ds], dtype=np.float64)
        masks = np.array([(1 << (a.bits * n)) - 1 for n in ds], dtype=np.uint64)
        size = 1 << max(4, int(math.ceil(math.log2(max(2 * addr.size, 2)))))
        index = np.zeros(size, dtype=np.int64)
        FK.build_index(addr, dstart, self._depth_arr, index)
        self._model = (self._depth_arr, masks, dstart, addr, ptr, syms, counts, tot, used, index, beta, disc)
        self._index_bytes = int(sum(x.nbytes for x in self._model))
        # the depth-0 cell: its most frequent symbols (count descending, code ascending) and sum of squares
        k = min(TOP0, A)
        if ds and ds[0] == 0 and tabs[0].size:
            t0 = tabs[0]
            c0 = t0.counts.astype(np.float64)
            s0 = t0.syms.astype(np.int64)
            full = np.zeros(A)
            full[s0] = c0
            self._top0 = np.lexsort((np.arange(A), -full))[:k].astype(np.int64)
            esc, den = beta[0] + disc[0] * s0.size, float(c0.sum()) + beta[0]
            p_seen = (np.maximum(c0 - disc[0], 0.0) + esc / A) / den
            self._sq0 = float(np.sum(p_seen**2) + (A - s0.size) * (esc / A / den) ** 2)
        else:
            self._top0 = np.arange(k, dtype=np.int64)
            self._sq0 = 1.0 / A
        self._mark = np.zeros(A, np.int64)

    @property
    def n_cells_(self) -> int:
        """Cells stored."""
        _check_fitted(self)
        return int(sum(c.size for c in self.cells_.values()))

    # -------------------------------------------------------------- merge
    def merge(self, other: "CellPredictor") -> "CellPredictor":
        """A new model whose counts are the sums of both (exact unless either was pruned)."""
        _check_fitted(self)
        _check_fitted(other)
        if not self.alphabet_.same_symbols(other.alphabet_):
            raise ModelFileError(
                f"Cannot merge models over different alphabets ({self.alphabet_.name} vs {other.alphabet_.name}); "
                "learn both with the same alphabet."
            )
        if self.depths_ != other.depths_ or self.reverse_complement_ != other.reverse_complement_:
            raise ModelFileError("Cannot merge models with different cell depths or strand settings; learn both alike.")
        if self.reader_ != other.reader_:
            raise ModelFileError("Cannot merge models whose training data were read differently (numeric cut points, column); learn both alike.")
        b = self.alphabet_.bits
        tables = {n: to_u32(self.counts_[n].merge(other.counts_[n], b)) for n in self.depths_}
        out = CellPredictor(**self.get_params())
        out._install(
            self.alphabet_, self.ladder_, self.reverse_complement_, self.baseline_max_order_, tables,
            self.n_symbols_ + other.n_symbols_, self.n_segments_ + other.n_segments_,
            self.pruned_cells_ + other.pruned_cells_, self.reader_,
        )
        return out

    # ------------------------------------------------------------ predict
    def _contexts(self, contexts) -> tuple[np.ndarray, np.ndarray]:
        a = self.alphabet_
        parts = []
        for ctx in contexts:
            if isinstance(ctx, str):
                try:
                    codes = a.encode(ctx) if a.single_characters else a.encode(ctx.split())
                except InputError as exc:
                    raise InputError(f"The context {ctx!r} holds a symbol outside the {a.name} alphabet; {exc}") from None
            else:
                codes = np.asarray(ctx, dtype=np.int64)
                if codes.ndim != 1 or (codes.size and (codes.min() < 0 or codes.max() >= a.size)):
                    raise InputError(f"Context codes must be a list of integers in 0..{a.size - 1}.")
            parts.append(np.asarray(codes, dtype=np.int64)[-(a.max_depth - 1) :] if len(codes) else np.zeros(0, np.int64))
        offsets = np.zeros(len(parts) + 1, dtype=np.int64)
        offsets[1:] = np.cumsum([p.size for p in parts])
        flat = np.concatenate(parts) if parts else np.zeros(0, np.int64)
        return flat, offsets

    def predict_proba(self, contexts) -> np.ndarray:
        """Probabilities of every next symbol after each context.

        Parameters
        ----------
        contexts:
            A sequence of contexts, each a string of symbols (space-separated for
            multi-character symbols) or a sequence of codes.  Only the last
            ``max(depths_)`` symbols matter.

        Returns
        -------
        numpy.ndarray
            ``(len(contexts), A)``; each row sums to one.
        """
        return self._proba(contexts)[0]

    def _proba(self, contexts) -> tuple[np.ndarray, np.ndarray]:
        _check_fitted(self)
        if isinstance(contexts, str):
            contexts = [contexts]
        flat, offsets = self._contexts(contexts)
        self._ensure_index()
        m = offsets.size - 1
        out = np.zeros((m, self.alphabet_.size), dtype=np.float64)
        deepest = np.zeros(m, dtype=np.int64)
        FK.fitted_proba(flat, offsets, self.alphabet_.size, self.alphabet_.bits, self._model, out, deepest)
        return out, deepest

    def next_symbols(self, context, top: int = 5) -> list[dict]:
        """The ``top`` most likely next symbols after one context, with probabilities and the deepest cell's counts."""
        p, deepest = self._proba([context])
        p = p[0]
        order = np.lexsort((np.arange(p.size), -p))[: max(1, int(top))]
        di = int(deepest[0])
        depth = self.depths_[di] if di >= 0 else None
        counts = None
        if di >= 0:
            flat, offsets = self._contexts([context])
            b = self.alphabet_.bits
            a_ = 0
            for c in flat[max(0, flat.size - depth) :] if depth else []:
                a_ = (a_ << b) | int(c)
            table = self.counts_[depth]
            i = int(np.searchsorted(table.cells, np.uint64(a_)))
            if i < table.size and table.cells[i] == a_:
                lo, hi = int(table.ptr[i]), int(table.ptr[i + 1])
                counts = dict(zip(table.syms[lo:hi].tolist(), table.counts[lo:hi].tolist()))
        return [
            {
                "symbol": self.alphabet_.symbols[int(s)],
                "probability": float(p[s]),
                "count_in_deepest_cell": None if counts is None else int(counts.get(int(s), 0)),
                "deepest_cell_depth": depth,
            }
            for s in order
        ]

    # -------------------------------------------------------------- score
    def _check_alphabet(self, alphabet: Alphabet, where: str) -> None:
        if not self.alphabet_.same_symbols(alphabet):
            raise ModelFileError(
                f"The model was learned on the {self.alphabet_.name} alphabet ({self.alphabet_.describe_symbols(6)}) "
                f"but {where} uses {alphabet.name} ({alphabet.describe_symbols(6)}); "
                + self._reading_hint()
            )

    def _reading_hint(self) -> str:
        """How to read data the way the training data were read (for the mismatch message)."""
        name = self.alphabet_.name
        if name.startswith(("threshold", "quantile", "ordinal")):
            return "read it with the model's own numeric settings (no bins, thresholds or ordinal patterns of its own) or learn a model on this kind of data."
        if name == "templates":
            return "read it as a log (format 'log') or learn a model on this kind of data."
        return f"read it with the alphabet {name if name != 'learned' else 'symbols:...'} or learn a model on this kind of data."

    def score(self, source: Source) -> float:
        """Mean log2-likelihood per symbol of held-out data under the fitted model (higher is better; scikit-learn's convention).

        It is ``-bits_per_symbol(source)``; :meth:`evaluate` gives the full report.
        """
        return -self.bits_per_symbol(source)

    def bits_per_symbol(self, source: Source) -> float:
        """Code length of held-out data under the fitted model, in bits per symbol (lower is better)."""
        return self.evaluate(source, baselines=False, window=None).bits_per_symbol

    def evaluate(
        self,
        source: Source,
        *,
        window: int | None = DEFAULT_WINDOW,
        keep_surprisal: bool = False,
        baselines: bool | str = True,
        top_windows: int = DEFAULT_TOP_WINDOWS,
        engine=None,
        piece: int | None = None,
        model_path=None,
        on_done=None,
    ) -> PredictionResult:
        """Score held-out data with the fitted model: code length, accuracy, calibration and baselines.

        Parameters
        ----------
        source:
            Held-out data over the model's alphabet.
        window:
            Window (symbols) of the per-window code lengths (``None``: no windows).
        keep_surprisal:
            Keep the bits of every position in ``result.surprisal``.
        baselines:
            ``"all"`` (or ``True``): the fixed-order KT baseline and the compressors on the same data;
            ``"markov"``: the KT baseline only; ``"none"`` (or ``False``): neither. A baseline not
            computed is absent from ``result.baselines``.
        top_windows:
            How many of the most surprising windows the result lists.
        engine, piece:
            The source is scored in pieces of ``piece`` symbols (default 2**24) on ``engine``
            (default: serially) and the pieces' totals are added in order, so every engine gives
            the same bytes for the same ``piece`` (:mod:`fractalseq.predict._split_score`).
        model_path:
            The file this model was loaded from: worker processes load it once instead of
            receiving the tables with every piece.
        on_done:
            Called as ``on_done(index, part)`` when a piece is scored.
        """
        from fractalseq.predict._split_score import evaluate_pieces

        _check_fitted(self)
        src = as_source(source)
        self._check_alphabet(src.alphabet, getattr(src, "name", "stream"))
        want_markov, want_compressors = baseline_kinds(baselines)
        return evaluate_pieces(
            self, src, window=window, keep_surprisal=keep_surprisal, want_markov=want_markov,
            want_compressors=want_compressors, top_windows=top_windows, engine=engine, piece=piece,
            model_path=model_path, on_done=on_done,
        )

    def score_online(self, source: Source, **kwargs) -> PredictionResult:
        """Online code length of a stream with this predictor's parameters (no fitting needed); see :func:`evaluate_online`."""
        return evaluate_online(source, **kwargs, **self._online_params())

    # ---------------------------------------------------------- persistence
    def to_state(self, lazy: bool = False) -> ModelState:
        """The fitted model as a plain state (JSON-ready header and cell tables) for :mod:`fractalseq.predict._modelfile`.

        With ``lazy`` each ``words_<n>`` entry is an :class:`~fractalseq.io._npz.ArrayPieces` that makes
        the array (8 bytes an entry) in pieces of about 2**20 entries when the file is written, instead
        of the array itself: not even one depth's word array is held whole.
        """
        _check_fitted(self)
        arrays: dict[str, Any] = {}
        b = self.alphabet_.bits
        for n in self.depths_:
            table = self.counts_[n]
            arrays[f"words_{n}"] = (ArrayPieces(np.dtype(np.uint64), int(table.syms.size), lambda t=table: t.word_pieces(b))
                                    if lazy else table.words(b))
            arrays[f"counts_{n}"] = np.ascontiguousarray(table.counts, dtype=np.uint32)
        params = {k: (list(v) if isinstance(v, (tuple, np.ndarray)) else v) for k, v in self.get_params().items()}
        if isinstance(params.get("depths"), list):
            params["depths"] = [int(d) for d in params["depths"]]
        header = {
            "alphabet": self.alphabet_.to_dict(),
            "params": params,
            "ladder": list(self.ladder_),
            "depths": list(self.depths_),
            "reverse_complement": bool(self.reverse_complement_),
            "training": {
                "symbols": self.n_symbols_,
                "segments": self.n_segments_,
                "pruned_cells": self.pruned_cells_,
                "max_cells": self.max_cells_,
            },
            "baseline": {
                "max_order": self.baseline_max_order_,
                "order": self.baseline_order_,
                "bits_per_symbol_by_order": {str(k): v for k, v in self.baseline_bits_.items()},
            },
            # how the training data were read (numeric cut points, column), so new data are read the same way
            "reader": dict(self.reader_),
        }
        return ModelState(header=header, arrays=arrays)

    @classmethod
    def from_state(cls, state: ModelState) -> "CellPredictor":
        """Rebuild a fitted model from a state written by :meth:`to_state` (as read by :func:`~fractalseq.predict._modelfile.read_state`)."""
        where = state.origin or "The model state"
        header = state.header
        try:
            alphabet = Alphabet.from_dict(header["alphabet"])
            depths = [int(n) for n in header["depths"]]
            ladder = tuple(int(n) for n in header["ladder"])
            params = dict(header["params"])
            training = header["training"]
            K_b = int(header["baseline"]["max_order"])
            reverse = bool(header["reverse_complement"])
            n_symbols, n_segments = int(training["symbols"]), int(training["segments"])
            pruned = int(training.get("pruned_cells", 0))
        except (KeyError, TypeError, ValueError, InputError):
            raise ModelFileError(f"{where} has an incomplete model header; learn the model again.") from None
        reader = header.get("reader", {})
        if not isinstance(reader, dict):
            raise ModelFileError(f"{where} has a damaged reader section in its header; learn the model again.")
        known = set(cls().get_params())
        model = cls(**{k: v for k, v in params.items() if k in known})
        lr = model.learning_rate
        try:  # the header's settings are checked exactly as fit checks them, before any table is trusted
            expected_ladder, _ = model._validate(alphabet)
            if not (isinstance(lr, (int, float)) and not isinstance(lr, bool) and 0 <= lr < 1):
                raise ParameterError(f"the learning rate must lie in [0, 1), not {lr!r}", parameter="learning_rate")
        except (ParameterError, TypeError, ValueError) as exc:
            raise ModelFileError(
                f"{where} declares settings no model can have ({_lower_first(str(exc).rstrip('.'))}); learn the model again."
            ) from None
        if tuple(expected_ladder) != ladder or K_b < 0 or sorted(set(depths)) != sorted(set(range(K_b + 1)) | set(ladder)):
            raise ModelFileError(f"{where} lists cell depths that do not match its settings; learn the model again.")
        tables = {n: CellTable.from_words(w, c, alphabet.bits) for n, (w, c) in state.tables(depths, alphabet).items()}
        try:
            model._install(alphabet, ladder, reverse, K_b, tables, n_symbols, n_segments, 0, reader)
            model._build_index()  # checks the tables' consistency before any of them is trusted
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"{where} does not describe a consistent model ({exc}); learn the model again.") from None
        model.pruned_cells_ = pruned  # cells pruned when the model was learned (the file keeps the rest)
        return model

    def save(self, path, force: bool = False):
        """Write the fitted model (see :mod:`fractalseq.predict._modelfile`); refuses to overwrite without ``force``."""
        return write_state(self.to_state(lazy=True), path, force=force)

    @classmethod
    def load(cls, path) -> "CellPredictor":
        """Read a model written by :meth:`save` (checksums verified, never uses pickle)."""
        return cls.from_state(read_state(path))


def save_model(model: CellPredictor, path, force: bool = False):
    """Write a fitted :class:`CellPredictor` to ``path`` (see :meth:`CellPredictor.save`)."""
    return model.save(path, force=force)


def load_model(path) -> CellPredictor:
    """Read a model file written by :func:`save_model` (see :meth:`CellPredictor.load`)."""
    return CellPredictor.load(path)
