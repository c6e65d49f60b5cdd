"""Two-batch drift test: does the new batch come from the same source as the baseline?

Each batch (one or more streams) is cut into blocks of ``B`` symbols; the
n-words starting in each block are counted once (words crossing a block
edge belong to the block they start in; no word crosses a stream or segment
end).  Word counts add, so the table of any set of blocks is the sum of
their block tables, and a resampled statistic costs a sum of tables, not a
recount.

Figures tested (each gives a statistic and a p-value):

``words``
    G statistic (likelihood ratio) of homogeneity of the two batches'
    n-word distributions, ``G = 2 sum O ln(O/E)`` over the 2 x W table;
    effect size: Jensen–Shannon divergence (bits) of the two distributions.
``transitions``
    Conditional G statistic of the next symbol given the previous n-1
    (sum over contexts of the 2 x A homogeneity G); effect size: the
    conditional mutual information between batch and next symbol given the
    context, ``G / (2 T ln 2)`` bits.  A change in one transition
    probability shows here long before it shows in the word marginals.
``entropy_rate``
    Absolute difference of the entropy rates ``H_n - H_{n-1}`` (bits per
    symbol, Grassberger estimator, :func:`fractalseq.entropy._estimators.rate_from_counts`).
``D2``
    Absolute difference of the correlation dimensions
    ``D_2 = h_2 / log2(1/k)``, ``h_2`` the order-2 Rényi rate from the
    unbiased collision sums (:func:`fractalseq.entropy._estimators.renyi_rate_from_counts`).

p-values come from a **block permutation** test: the blocks of both batches
are pooled and the batch labels reassigned at random (keeping the number of
blocks per batch) ``R`` times; ``p = (1 + #{T* >= T}) / (R + 1)`` (Davison &
Hinkley 1997, *Bootstrap Methods and their Application*, eq. 4.11; blocks
keep the dependence within streams, common practice for dependent data).
The p-values of the figures are adjusted for multiplicity by Holm's step-down
method (Holm 1979, Scand. J. Statist. 6:65) or Benjamini–Hochberg (1995,
JRSS B 57:289).  The verdict is "changed" when the smallest adjusted p-value
is below ``alpha``.

Drift reports on logs are no security guarantee.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Callable, Sequence

import numpy as np

from fractalseq import __version__
from fractalseq.alphabet import Alphabet
from fractalseq.compare._blocks import BatchTables, batch_length, tables_for
from fractalseq.compare._distances import joint_alphabet, js_divergence
from fractalseq.compare._homogeneity import ADJUSTMENTS, _Figures, _xlogx, adjust_pvalues, conditional_g, g_statistic
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.results import Result, caution_for
from fractalseq.runner import Engine, SerialEngine
from fractalseq.stream import SymbolArray, SymbolStream

CAUTION = "Drift reports on logs are no security guarantee; genomic output is for research, not for clinical decisions."
FIGURES: tuple[str, ...] = ("words", "transitions", "entropy_rate", "D2")
#: Default: at least this many blocks in the shorter batch (when its length allows).
TARGET_BLOCKS = 64
#: Smallest automatic block length, in multiples of the depth.
MIN_BLOCK_DEPTHS = 10
#: Automatic depth: at most 3, and at least this many words per possible word in the shorter batch.
WORDS_PER_CELL = 10
_REPLICATE_BATCH = 64

__all__ = ["ADJUSTMENTS", "CAUTION", "FIGURES", "DriftOptions", "DriftResult", "DriftTest", "adjust_pvalues",
           "conditional_g", "drift_test", "g_statistic"]


# ================================================================ options
@dataclass(frozen=True)
class DriftOptions(Result):
    """Parameters of a drift test (its JSON form is the ``parameters`` of the drift document).

    Attributes
    ----------
    depth:
        Word length n (``None``: at most 3, fewer when ``A**n * 10`` exceeds the shorter batch).
    block:
        Block length in symbols (``None``: ``max(10 n, shorter batch / 64)``).
    permutations:
        Number of block permutations R (the smallest possible p is ``1/(R+1)``).
    alpha:
        Level of the verdict.
    adjust:
        ``holm`` or ``bh``.
    seed:
        Seed of the permutations.
    ratio:
        Contraction ratio k (D_2 is in units of ``log(1/k)``).
    figures:
        Figures tested (subset of ``words, transitions, entropy_rate, D2``).
    top:
        How many contributing words to list.
    """

    depth: int | None = None
    block: int | None = None
    permutations: int = 999
    alpha: float = 0.05
    adjust: str = "holm"
    seed: int = 0
    ratio: float = 0.5
    figures: tuple[str, ...] = FIGURES
    top: int = 10

    def check(self) -> None:
        """Raise :class:`ParameterError` (naming the parameter) if a value is impossible."""
        if self.depth is not None and (not isinstance(self.depth, (int, np.integer)) or self.depth < 1):
            raise ParameterError(f"depth must be a positive whole number, not {self.depth!r}.", parameter="depth")
        if self.block is not None and (not isinstance(self.block, (int, np.integer)) or self.block < 1):
            raise ParameterError(f"block must be a positive whole number of symbols, not {self.block!r}.", parameter="block")
        if not isinstance(self.permutations, (int, np.integer)) or self.permutations < 19:
            raise ParameterError("Use at least 19 permutations (the smallest p-value is 1/(R+1)).", parameter="permutations")
        from fractalseq.guards import check_memory

        # every permutation keeps one statistic per figure (8 bytes each) until the p-values are taken
        per = 8 * max(1, len(self.figures))
        check_memory(int(self.permutations) * per, f"{int(self.permutations)} permutations (their statistics, {per} bytes each)",
                     "permutations", "use fewer permutations")
        if not 0.0 < self.alpha < 1.0:
            raise ParameterError(f"The level alpha must lie strictly between 0 and 1, not {self.alpha}.", parameter="alpha")
        if self.adjust not in ADJUSTMENTS:
            raise ParameterError(f"Adjustment {self.adjust!r} is not one of {', '.join(ADJUSTMENTS)}.", parameter="adjust")
        if not 0.0 < self.ratio < 1.0:
            raise ParameterError(f"The ratio k must lie strictly between 0 and 1, not {self.ratio}.", parameter="ratio")
        bad = [f for f in self.figures if f not in FIGURES]
        if bad or not self.figures:
            raise ParameterError(
                f"Figures must be chosen from {', '.join(FIGURES)}; got {', '.join(bad) or 'none'}.", parameter="figures"
            )


# ================================================================ automatic choices
def _auto_depth(alphabet: Alphabet, shortest: int) -> int:
    from fractalseq.alphabet import require_two_symbols

    require_two_symbols(alphabet, "Each batch")
    n = 1
    while n < 3 and n < alphabet.max_depth and float(alphabet.size) ** (n + 1) * WORDS_PER_CELL <= shortest:
        n += 1
    return n


def _auto_block(depth: int, shortest: int) -> int:
    return int(max(MIN_BLOCK_DEPTHS * depth, shortest // TARGET_BLOCKS, 1))



# ================================================================= result
@dataclass(frozen=True)
class DriftTest(Result):
    """One figure's test: the statistic, the two batches' values, the effect size and the p-values."""

    figure: str
    statistic_name: str
    statistic: float
    baseline: float | None
    new: float | None
    effect: float
    effect_name: str
    standardized_effect: float | None
    p_value: float
    p_adjusted: float = math.nan


@dataclass(frozen=True)
class DriftResult(Result):
    """Outcome of :func:`drift_test`; its JSON form (:meth:`to_dict`) is the ``drift --json`` document.

    Attributes
    ----------
    changed:
        True when the smallest adjusted p-value is below ``alpha`` (and the test is not inconclusive).
    inconclusive:
        True when the design cannot reach an adjusted p-value below ``alpha`` (batches too short).
    p_value:
        The smallest adjusted p-value over the figures tested.
    depth, block:
        Word length and block length used (automatic choices resolved).
    tests:
        One :class:`DriftTest` per figure.
    top_words, top_contexts:
        The words and contexts contributing most to the difference.
    baseline, new:
        Per batch: inputs, lengths, symbols, blocks and words counted.
    alphabet:
        Name and size of the joint alphabet.
    parameters:
        The :class:`DriftOptions` of the test.
    notes:
        Sentences on limits and skipped figures.
    verdict, alpha, adjust, method:
        Derived from the above: the one-line verdict, the level, the adjustment and a sentence naming the method.
    command, fractalseq, caution:
        The document's kind, the package version, and the caution that fits the batches (logs, genomes, or both).
    """

    changed: bool
    inconclusive: bool
    p_value: float
    depth: int
    block: int
    tests: tuple[DriftTest, ...]
    top_words: tuple[dict, ...]
    top_contexts: tuple[dict, ...]
    baseline: dict
    new: dict
    alphabet: dict
    parameters: DriftOptions
    notes: tuple[str, ...] = ()
    verdict: str = field(init=False)
    alpha: float = field(init=False)
    adjust: str = field(init=False)
    method: str = field(init=False)
    command: str = field(default="drift", init=False)
    fractalseq: str = field(default=__version__, init=False)
    caution: str = field(default=CAUTION, init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "caution", caution_for([(self.alphabet or {}).get("name", "")]))
        opts = self.parameters
        method = (
            f"block permutation test, {opts.permutations} permutations of {self.block}-symbol blocks; "
            f"{'Holm' if opts.adjust == 'holm' else 'Benjamini-Hochberg'} adjustment across figures"
        )
        for name, value in (("verdict", _verdict(self.changed, self.inconclusive, self.p_value, opts.alpha)),
                            ("alpha", opts.alpha), ("adjust", opts.adjust), ("method", method),
                            ("notes", tuple(self.notes))):
            object.__setattr__(self, name, value)

    def to_json(self) -> str:
        """The ``drift --json`` document as deterministic JSON text."""
        return to_json(self.to_dict())


def _verdict(changed: bool, inconclusive: bool, p: float, alpha: float) -> str:
    """The plain one-line verdict."""
    if inconclusive:
        return (
            f"INCONCLUSIVE: the batches are too short to test at level {alpha:g} "
            f"(smallest adjusted p = {_fmt_p(p)}; see the notes)."
        )
    if changed:
        return f"CHANGED: the new batch differs from the baseline (smallest adjusted p = {_fmt_p(p)} < {alpha:g})."
    return (
        f"NO CHANGE DETECTED: the new batch is consistent with the baseline "
        f"(smallest adjusted p = {_fmt_p(p)} >= {alpha:g})."
    )


def _fmt_p(p: float) -> str:
    return f"{p:.3g}" if p >= 0.001 else f"{p:.1e}"


# ==================================================================== run
def drift_test(
    baseline: Sequence[SymbolArray | SymbolStream],
    new: Sequence[SymbolArray | SymbolStream],
    options: DriftOptions | None = None,
    engine: Engine | None = None,
    on_done: Callable[[int, object], None] | None = None,
) -> DriftResult:
    """Test whether ``new`` comes from the same source as ``baseline``.

    Parameters
    ----------
    baseline, new:
        The two batches, each one or more streams (files).  Alphabets
        learned separately (log templates, tokens) are joined by symbol text.
    options:
        Test parameters (:class:`DriftOptions`).
    engine:
        Where block tables are counted (default: serially); every engine
        gives the same result.
    on_done:
        Progress callback ``on_done(index, result)`` per counted piece.

    Returns
    -------
    DriftResult
    """
    options = options or DriftOptions()
    options.check()
    engine = engine or SerialEngine()
    if not baseline or not new:
        raise InputError("Drift needs a baseline and a new batch, each with at least one input.")
    joint = joint_alphabet([s.alphabet for s in list(baseline) + list(new)])
    notes: list[str] = []
    depth = options.depth
    block = options.block
    if depth is None or block is None:
        # the automatic rules need the batch lengths (streams not in memory are read once to count them)
        shortest = min(sum(batch_length(s) for s in batch) for batch in (baseline, new))
        if shortest == 0:
            raise InputError("A batch holds no symbols; give inputs with data.")
        if depth is None:
            depth = _auto_depth(joint, shortest)
        if block is None:
            block = _auto_block(depth, shortest)
    if depth > joint.max_depth:
        raise ParameterError(
            f"depth {depth} exceeds the address width for {joint.size} symbols; use a depth of {joint.max_depth} or less.",
            parameter="depth",
        )
    ta = tables_for(baseline, depth, block, engine, joint, on_done)
    tb = tables_for(new, depth, block, engine, joint, on_done)
    la, lb = sum(ta.lengths), sum(tb.lengths)
    if la == 0 or lb == 0:
        raise InputError("A batch holds no symbols; give inputs with data.")
    if ta.counts.sum() == 0 or tb.counts.sum() == 0:
        raise ParameterError(f"A batch has no word of length {depth}; use a smaller depth.", parameter="depth")
    if options.block is not None and ta.blocks + tb.blocks < 3:
        # one block per batch: no permutation can change anything, so the test could never say a thing
        raise ParameterError(
            f"Blocks of {block} symbols leave {ta.blocks} + {tb.blocks} blocks in the batches "
            f"({la} and {lb} symbols), too few to permute; use a block well below the shorter batch.",
            parameter="block",
        )
    if depth > 1 and float(joint.size) ** depth * WORDS_PER_CELL > min(la, lb):
        notes.append(f"few words per possible {depth}-word; the word tests have little power. Use a smaller --depth")
    return _permutation_test(ta, tb, depth, block, joint, options, notes)


def _permutation_test(
    ta: BatchTables, tb: BatchTables, depth: int, block: int, joint: Alphabet, options: DriftOptions, notes: list[str]
) -> DriftResult:
    words = np.unique(np.concatenate([ta.words, tb.words]))
    K = ta.blocks + tb.blocks
    U = words.size
    X = np.zeros((K, U), dtype=np.float64) if K * U <= 50_000_000 else None
    if X is None:
        from scipy.sparse import csr_matrix

        rows = np.concatenate([ta.block_ids, tb.block_ids + ta.blocks])
        cols = np.searchsorted(words, np.concatenate([ta.words, tb.words]))
        X = csr_matrix((np.concatenate([ta.counts, tb.counts]).astype(float), (rows, cols)), shape=(K, U))
    else:
        np.add.at(X, (ta.block_ids, np.searchsorted(words, ta.words)), ta.counts)
        np.add.at(X, (tb.block_ids + ta.blocks, np.searchsorted(words, tb.words)), tb.counts)
    total = np.asarray(X.sum(axis=0)).ravel()
    bits = np.uint64(joint.bits)
    context_addr = words >> bits if depth > 1 else np.zeros(U, np.uint64)
    ctx_words, context = np.unique(context_addr, return_inverse=True)
    n_ctx = ctx_words.size
    figures = [f for f in options.figures if not (f == "transitions" and depth == 1)]
    if "transitions" in options.figures and depth == 1:
        notes.append("depth 1 has no context: the transitions test was skipped (use --depth 2 or more)")

    fig = _Figures(total, context, n_ctx, depth, options.ratio)

    def stats(tab_a: np.ndarray) -> dict[str, np.ndarray]:
        tab_b = total[None, :] - tab_a
        out: dict[str, np.ndarray] = {}
        if "words" in figures:
            out["words"] = g_statistic(tab_a, tab_b)
        if "transitions" in figures:
            out["transitions"] = conditional_g(tab_a, tab_b, context, n_ctx)
        if "entropy_rate" in figures:
            out["entropy_rate"] = fig.rate(tab_b) - fig.rate(tab_a)
        if "D2" in figures:
            out["D2"] = fig.d2(tab_b) - fig.d2(tab_a)
        return out

    label = np.zeros(K, dtype=np.float64)
    label[: ta.blocks] = 1.0
    obs_a = np.asarray(label @ X).ravel()
    observed = stats(obs_a[None, :])
    rng = np.random.default_rng(options.seed)
    R = int(options.permutations)
    reps: dict[str, list[np.ndarray]] = {f: [] for f in figures}
    done = 0
    while done < R:
        r = min(_REPLICATE_BATCH, R - done)
        L = np.zeros((r, K), dtype=np.float64)
        for i in range(r):
            L[i, rng.permutation(K)[: ta.blocks]] = 1.0
        tab = np.asarray(L @ X) if not hasattr(X, "tocsr") else np.asarray((X.T @ L.T).T)
        for f, v in stats(tab).items():
            reps[f].append(v)
        done += r
    tests: list[DriftTest] = []
    obs_b = total - obs_a
    for f in figures:
        rep = np.concatenate(reps[f])
        obs = float(observed[f][0])
        if f in ("words", "transitions"):
            t_obs, t_rep = obs, rep
        else:
            t_obs, t_rep = abs(obs), np.abs(rep)
        finite = np.isfinite(t_rep)
        if not math.isfinite(t_obs):
            p = 1.0
            notes.append(f"{f} could not be estimated (too few words); its p-value is set to 1")
        else:
            tol = 1e-9 * max(1.0, abs(t_obs))
            exceed = int(np.count_nonzero(t_rep[finite] >= t_obs - tol))
            p = (1 + exceed) / (1 + int(finite.sum()))
        sd = float(np.std(rep[finite])) if finite.sum() > 1 else math.nan
        tests.append(_describe(f, obs, p, sd, obs_a, obs_b, fig, depth, options))
    adj = adjust_pvalues([t.p_value for t in tests], options.adjust)
    tests = [replace(t, p_adjusted=float(a)) for t, a in zip(tests, adj)]
    p_min = float(min(t.p_adjusted for t in tests))
    # the smallest p-value the design can reach: 1/(R+1), or 1/(number of distinct labellings)
    labellings = math.comb(K, ta.blocks)
    reachable = len(tests) * max(1.0 / (R + 1), 1.0 / labellings)
    inconclusive = reachable >= options.alpha
    if inconclusive:
        notes.append(
            f"with {ta.blocks} + {tb.blocks} blocks and {len(tests)} figures the smallest reachable adjusted p-value is "
            f"{min(reachable, 1.0):.3g}, not below {options.alpha:g}: the batches are too short for this test; "
            "use longer batches or a smaller --block"
        )
    changed = (p_min < options.alpha) and not inconclusive
    top_words = _top_words(words, obs_a, obs_b, depth, joint, options.top)
    top_contexts = _top_contexts(words, ctx_words, context, n_ctx, obs_a, obs_b, depth, joint, options.top) if depth > 1 else []
    side = lambda t: {"inputs": t.names, "lengths": t.lengths, "symbols": int(sum(t.lengths)), "blocks": t.blocks, "words": int(t.counts.sum())}  # noqa: E731
    return DriftResult(
        changed=changed, inconclusive=inconclusive, p_value=p_min, depth=depth, block=block, tests=tuple(tests),
        top_words=tuple(top_words), top_contexts=tuple(top_contexts), baseline=side(ta), new=side(tb),
        alphabet={"name": joint.name, "size": joint.size}, parameters=options, notes=tuple(notes),
    )


def _describe(f, obs, p, sd, obs_a, obs_b, fig, depth, options) -> DriftTest:
    if f == "words":
        jsd = js_divergence(obs_a, obs_b)
        return DriftTest(
            f, f"G (likelihood ratio) of homogeneity of the depth-{depth} word distributions", obs,
            None, None, jsd, "Jensen-Shannon divergence, bits", None, p,
        )
    if f == "transitions":
        T = float(obs_a.sum() + obs_b.sum())
        cmi = obs / (2.0 * T * math.log(2.0)) if T > 0 else math.nan
        return DriftTest(
            f, f"conditional G of the next symbol given the previous {depth - 1}", obs,
            None, None, cmi, "conditional mutual information of batch and next symbol, bits", None, p,
        )
    if f == "entropy_rate":
        a, b = float(fig.rate(obs_a)[0]), float(fig.rate(obs_b)[0])
        name = f"entropy rate H_{depth} - H_{depth - 1}, bits/symbol (Grassberger)"
    else:
        a, b = float(fig.d2(obs_a)[0]), float(fig.d2(obs_b)[0])
        name = f"correlation dimension D_2 (order-2 Renyi rate over log2(1/k), k = {options.ratio:g})"
    z = obs / sd if (sd and math.isfinite(sd) and sd > 0) else None
    return DriftTest(f, "absolute difference of " + name, abs(obs), a, b, obs, "new - baseline", z, p)


def _word_text(addr: int, n: int, joint: Alphabet) -> str:
    mask = (1 << joint.bits) - 1
    codes = [(int(addr) >> (joint.bits * (n - 1 - i))) & mask for i in range(n)]
    return joint.word(codes)


def _top_words(words, a, b, depth, joint, limit) -> list[dict]:
    na, nb = a.sum(), b.sum()
    c = a + b
    T = na + nb
    with np.errstate(divide="ignore", invalid="ignore"):
        ea, eb = na * c / T, nb * c / T
        contrib = 2.0 * (_xlogx(a) - a * np.log(np.where(ea > 0, ea, 1)) + _xlogx(b) - b * np.log(np.where(eb > 0, eb, 1)))
    G = contrib.sum()
    order = np.lexsort((words, -contrib))[:limit]
    out = []
    for i in order:
        fa, fb = a[i] / na, b[i] / nb
        out.append(
            {
                "word": _word_text(words[i], depth, joint),
                "baseline_count": int(a[i]),
                "new_count": int(b[i]),
                "baseline_frequency": float(fa),
                "new_frequency": float(fb),
                "direction": "more in new" if fb > fa else "less in new",
                "share_of_statistic": float(contrib[i] / G) if G > 0 else 0.0,
            }
        )
    return out


def _top_contexts(words, ctx_words, context, n_ctx, a, b, depth, joint, limit) -> list[dict]:
    G = conditional_g(a[None, :], b[None, :], context, n_ctx)[0]
    per = np.zeros(n_ctx)
    for j in range(n_ctx):
        sel = context == j
        per[j] = conditional_g(a[sel][None, :], b[sel][None, :], np.zeros(int(sel.sum()), np.int64), 1)[0]
    order = np.lexsort((ctx_words, -per))[:limit]
    mask = np.uint64((1 << joint.bits) - 1)
    out = []
    for j in order:
        sel = np.flatnonzero(context == j)
        sa, sb = a[sel], b[sel]
        if sa.sum() <= 0 or sb.sum() <= 0:
            changes = []
        else:
            pa, pb = sa / sa.sum(), sb / sb.sum()
            k = int(np.argmax(np.abs(pb - pa)))
            sym = joint.symbols[int(words[sel[k]] & mask)]
            changes = [{"next": sym, "baseline_probability": float(pa[k]), "new_probability": float(pb[k])}]
        out.append(
            {
                "context": _word_text(ctx_words[j], depth - 1, joint),
                "baseline_count": int(sa.sum()),
                "new_count": int(sb.sum()),
                "share_of_statistic": float(per[j] / G) if G > 0 else 0.0,
                "largest_change": changes,
            }
        )
    return out
