"""Event novelty between two batches of log lines: new, vanished, changed and bursting templates.

The drift test (:mod:`fractalseq.compare._drift`) compares word distributions
by block permutations; it cannot see a template that occurs in one batch only
(a template seen ``c`` times gives the same G contribution in whichever batch
it lands) nor a burst that fills one block.  This module asks four narrower
questions of the template id of every line, each with its own exact or
bounded p-value, and combines them by Holm's step-down method (Holm 1979,
Scand. J. Statist. 6:65).  Let ``n`` and ``m`` be the baseline's and the new
batch's numbers of lines and ``a_t``, ``b_t`` the counts of template ``t``.

``new_events`` (templates of the new batch absent from the baseline)
    Statistic ``X``: the number of distinct new templates.  Its null rate
    comes from the baseline itself, *leave blocks out*: the baseline is cut
    into ``K`` contiguous blocks of ``L`` lines and ``D`` counts the templates
    that occur in one block and nowhere else in the baseline.  With ``L = 1``
    this is the Good–Turing count of singletons, whose share ``N_1 / n``
    estimates the probability that the next line shows an unseen template
    (Good 1953, Biometrika 40:237, from memory); blocks of lines keep a burst
    of one rare event inside one block, so dependence between neighbouring
    lines does not make rare templates look common.  For a stationary
    source the expected number of new templates per line of the new batch is
    at most that of a block when ``L <= m`` (a batch of ``m`` lines is
    compared with ``n >= n - L`` lines, and the number of distinct templates
    grows less than linearly with length), so the comparison is
    conservative.  p-value: the conditional test of two Poisson counts,
    ``X | X + D ~ Binomial(X + D, m / (m + K L))``, upper tail
    (Przyborowski & Wilenski 1940, Biometrika 31:313; Lehmann & Romano,
    *Testing Statistical Hypotheses*, 3rd ed., sec. 4.5, from memory).  It
    carries the uncertainty of the baseline's estimate: a short baseline
    (small ``K L``) needs many more new templates before ``p`` gets small.
    One new event kind usually brings many lines at once, so lines are not
    Poisson counts; the second statistic counts the new *lines* divided by
    the dispersion index ``phi = sum s^2 / sum s`` of the clusters (``s`` the
    lines of each new template, of both batches pooled as the null pools
    them, or the baseline's alone once it has ``MIN_CLUSTERS`` of them): a
    compound Poisson count has variance ``phi`` times its mean, and
    scaled counts are compared like Poisson counts (quasi-Poisson; McCullagh
    & Nelder, *Generalized Linear Models*, 2nd ed., 1989, from memory), the
    binomial tail taken at non-integer counts by the incomplete beta
    function.  Family p-value: twice the smaller of the two (Bonferroni).
Lines of one template often come in runs (one package install writes a
dozen status lines), so line counts are over-dispersed.  Each template gets
a dispersion index ``phi_t >= 1`` from the baseline's blocks
(:func:`dispersion_index`, quasi-Poisson; a template absent from the
baseline gets the index of the baseline's leave-out templates); its counts
are divided by ``phi_t`` before the binomial tests below, which are exact
when ``phi_t = 1`` and use the incomplete-beta extension of the binomial
tail otherwise (:mod:`fractalseq.compare._pvalues`).

``vanished_events`` (baseline templates absent from the new batch)
    Conditional on ``c_t = a_t + b_t``, ``b_t ~ Binomial(c_t, pi)`` with
    ``pi = m / (n + m)`` when the template's share did not change; the exact
    one-sided p-value of ``b_t = 0`` is ``(1 - pi)**a_t`` (with dispersion,
    ``(1 - pi)**(a_t / phi_t)``).  Family p-value: Bonferroni over the
    templates whose smallest attainable p-value ``(1 - pi)**(c_t / phi_t)`` is
    at most ``alpha`` (Tarone 1990, Biometrics 46:515, from memory: the
    screen depends on the margins only, which the conditional tests treat as
    fixed, so it keeps the level).
``rate_changes`` (per-template share, both directions)
    The two-sided binomial test of ``b_t`` given ``c_t`` and ``pi`` (the
    conditional test of two Poisson rates; exact p-value as
    ``scipy.stats.binomtest`` when ``phi_t = 1``: the sum of the
    probabilities not above the observed one; twice the smaller scaled tail
    otherwise), Benjamini–Hochberg over the templates that pass the same
    margin screen (Benjamini & Hochberg 1995, JRSS B 57:289; screening
    discrete tests: Gilbert 2005, Appl. Statist. 54:143, from memory).
    Family p-value: the smallest BH-adjusted value, which is Simes' global
    p-value (Simes 1986, Biometrika 73:751).
``bursts`` (templates concentrated in a short stretch of the new batch)
    Statistic: the largest count ``S_t`` of template ``t`` in a window of
    ``w`` consecutive new lines.  Null model: the count of a window follows
    a negative binomial whose mean is ``w`` times the pooled rate
    ``c_t / (n + m)`` and whose dispersion is estimated by moments from the
    baseline's counts in non-overlapping windows of ``w`` lines (a template
    that comes in runs in the baseline is allowed runs in the new batch).
    Every window of ``w`` lines lies inside one of the ``ceil(m / w)``
    windows ``[j w, j w + 2 w)``, so ``P(S_t >= s) <= ceil(m / w) P(N_2w >= s)``
    (union bound; ``N_2w`` with twice the mean and the same size parameter,
    which over-states its variance).  Family: Bonferroni over the templates
    whose smallest attainable bound is at most ``alpha``.  Templates seen in
    fewer than two baseline windows have no dispersion estimate and are left
    to the rate test.

Nothing here is random, so the same input gives the same bytes (no seed is
needed).  Drift reports on logs are no security guarantee.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Mapping, Sequence

import numpy as np
from scipy import stats

from fractalseq.compare._pvalues import (
    benjamini_hochberg,
    binomial_greater,
    binomial_greater_scaled,
    binomial_two_sided,
    binomial_two_sided_scaled,
    holm,
)
from fractalseq.errors import InputError, ParameterError
from fractalseq.results import Result

__all__ = [
    "Burst", "EventBatch", "FamilyTest", "NewEvent", "NoveltyModel", "NoveltyOptions", "NoveltyResult", "RateChange",
    "VanishedEvent", "dispersion_index", "leave_blocks_out", "novelty_test",
]

FAMILIES: tuple[str, ...] = ("new_events", "vanished_events", "rate_changes", "bursts")
#: Fewest leave-out templates of the baseline for a dispersion index of its own (else both batches' are pooled).
MIN_CLUSTERS = 10
#: Fewest baseline windows for the burst test's dispersion estimate.
MIN_WINDOWS = 5


# ================================================================= inputs
@dataclass(frozen=True)
class NoveltyOptions:
    """Parameters of the event novelty test.

    Attributes
    ----------
    alpha:
        Level of the verdict (and of the margin screens).
    blocks:
        Number of baseline blocks ``K`` for the leave-blocks-out rate of new templates
        (blocks are never longer than the new batch).
    window:
        Window ``w`` of the burst statistic, in lines (capped at a fifth of the baseline and at the new batch).
    top:
        How many templates to list per section (the counts and p-values cover all).
    """

    alpha: float = 0.05
    blocks: int = 10
    window: int = 50
    top: int = 20

    def check(self) -> None:
        """Raise :class:`ParameterError` for impossible values."""
        if not 0.0 < self.alpha < 1.0:
            raise ParameterError(f"The level alpha must lie strictly between 0 and 1, not {self.alpha}.", parameter="alpha")
        for name, least in (("blocks", 2), ("window", 2), ("top", 0)):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
                raise ParameterError(f"The {name} parameter must be a whole number of at least {least}, not {value!r}.", parameter=name)


@dataclass(frozen=True)
class EventBatch:
    """The lines of one batch as template ids, with where each line came from.

    Attributes
    ----------
    ids:
        Template id of every non-blank line, in reading order.
    inputs:
        Names of the batch's inputs.
    input_of:
        Per line, the index of its input in ``inputs`` (default: all 0).
    line_numbers:
        Per line, its 1-based line number in its input (default: 1, 2, ...).
    examples:
        Template id -> the first line of the batch with that template (raw text).
    """

    ids: np.ndarray
    inputs: tuple[str, ...] = ("batch",)
    input_of: np.ndarray | None = None
    line_numbers: np.ndarray | None = None
    examples: Mapping[int, str] = field(default_factory=dict)

    def __post_init__(self) -> None:
        ids = np.asarray(self.ids, dtype=np.int64).ravel()
        if ids.size and ids.min() < 0:
            raise ParameterError("Template ids must be non-negative.", parameter="ids")
        object.__setattr__(self, "ids", ids)
        for name, default in (("input_of", np.zeros(ids.size, np.int64)), ("line_numbers", np.arange(1, ids.size + 1))):
            value = getattr(self, name)
            value = default if value is None else np.asarray(value, dtype=np.int64).ravel()
            if value.size != ids.size:
                raise ParameterError(f"{name} must hold one entry per line ({ids.size}), not {value.size}.", parameter=name)
            object.__setattr__(self, name, value)

    def where(self, position: int) -> tuple[str, int]:
        """Input name and line number of the line at ``position``."""
        return self.inputs[int(self.input_of[position])], int(self.line_numbers[position])


# ================================================================ results
@dataclass(frozen=True)
class NewEvent(Result):
    """A template of the new batch that never occurs in the baseline."""

    template: str
    lines: int
    share: float
    first_input: str
    first_line: int
    example: str


@dataclass(frozen=True)
class VanishedEvent(Result):
    """A baseline template with a clear count that is absent from the new batch."""

    template: str
    baseline_count: int
    expected_new: float
    p_value: float
    p_adjusted: float


@dataclass(frozen=True)
class RateChange(Result):
    """A template whose share differs between the batches (BH-adjusted ``q_value`` at most alpha)."""

    template: str
    baseline_count: int
    new_count: int
    baseline_share: float
    new_share: float
    rate_ratio: float
    direction: str
    p_value: float
    q_value: float


@dataclass(frozen=True)
class Burst(Result):
    """A template concentrated in a window of the new batch."""

    template: str
    count: int
    window: int
    expected: float
    first_input: str
    first_line: int
    last_line: int
    p_value: float
    p_adjusted: float


@dataclass(frozen=True)
class FamilyTest(Result):
    """One family of the novelty test: its statistic, p-value and Holm-adjusted p-value."""

    family: str
    statistic: float
    statistic_name: str
    tested: int
    p_value: float
    p_adjusted: float
    method: str


@dataclass(frozen=True)
class NoveltyModel(Result):
    """The baseline's leave-blocks-out rate of new templates (the null of ``new_events``)."""

    block_lines: int
    blocks: int
    unseen_templates: int
    rate_per_line: float
    expected_new_templates: float
    cluster_dispersion: float


@dataclass(frozen=True)
class NoveltyResult(Result):
    """Outcome of :func:`novelty_test`; its JSON is the ``novelty`` key of ``fractalseq drift --json`` on logs."""

    verdict: str
    changed: bool
    p_value: float
    alpha: float
    method: str
    baseline_lines: int
    new_lines: int
    templates: int
    families: tuple[FamilyTest, ...]
    new_events: tuple[NewEvent, ...]
    new_templates: int
    novel_lines: int
    novel_share: float
    model: NoveltyModel
    vanished_events: tuple[VanishedEvent, ...]
    rate_changes: tuple[RateChange, ...]
    bursts: tuple[Burst, ...]
    notes: tuple[str, ...] = ()


# ================================================================= the test
def novelty_test(
    baseline: EventBatch, new: EventBatch, templates: Sequence[str], options: NoveltyOptions | None = None
) -> NoveltyResult:
    """Test the new batch's events against the baseline's: new, vanished, changed and bursting templates.

    Parameters
    ----------
    baseline, new:
        The batches' lines as ids into ``templates`` (one template table for both).
    templates:
        Template text of every id.
    options:
        Level, blocks, window and listing length (default :class:`NoveltyOptions`).

    Returns
    -------
    NoveltyResult
        The four family tests (Holm-adjusted), the verdict and the listed templates.

    Raises
    ------
    InputError
        When a batch holds no line.
    ParameterError
        When an id has no template text or an option is impossible.
    """
    options = options or NoveltyOptions()
    options.check()
    n, m = baseline.ids.size, new.ids.size
    if n == 0 or m == 0:
        raise InputError("The novelty test needs lines in both batches.")
    T = len(templates)
    if max(int(baseline.ids.max()), int(new.ids.max())) >= T:
        raise ParameterError("A template id has no template text.", parameter="templates")
    a = np.bincount(baseline.ids, minlength=T)
    b = np.bincount(new.ids, minlength=T)
    pi = m / (n + m)
    alpha = options.alpha
    notes: list[str] = []

    fam_a, new_events, model, novel_lines = _new_events(baseline, new, a, b, templates, options, notes)
    phi, J = dispersion_index(baseline.ids, T, max(1, min(n // options.blocks, m)))
    if J < MIN_WINDOWS:
        notes.append("the baseline is too short to estimate how lines of one template cluster; "
                     "the vanished and rate tests treat lines as independent")
    # templates absent from the baseline cluster as the baseline's own rare templates do
    phi[a == 0] = model.cluster_dispersion
    fam_b, vanished = _vanished(a, b, pi, phi, templates, options)
    fam_c, changes = _rate_changes(a, b, pi, phi, n, m, templates, options)
    fam_d, bursts = _bursts(baseline, new, a, b, templates, options, notes)
    families = [fam_a, fam_b, fam_c, fam_d]
    tested = [f for f in families if f.tested > 0]
    adj = holm([f.p_value for f in tested])
    by_name = {f.family: float(q) for f, q in zip(tested, adj)}
    families = [_with_adjusted(f, by_name.get(f.family, 1.0)) for f in families]
    p_min = min(by_name.values(), default=1.0)
    changed = p_min < alpha
    worst = min(tested, key=lambda f: by_name[f.family]).family if tested else "none"
    if changed:
        verdict = f"EVENTS CHANGED: {worst.replace('_', ' ')} (smallest Holm-adjusted p = {_fmt_p(p_min)} < {alpha:g})."
    else:
        verdict = f"EVENTS CONSISTENT: no new, vanished, changed or bursting templates at level {alpha:g} (smallest Holm-adjusted p = {_fmt_p(p_min)})."
    return NoveltyResult(
        verdict, bool(changed), float(p_min), alpha,
        "four families (new templates, vanished templates, per-template rates, bursts), Holm-adjusted across families",
        int(n), int(m), int(np.count_nonzero((a + b) > 0)), tuple(families), new_events,
        int(np.count_nonzero((a == 0) & (b > 0))), int(novel_lines), float(novel_lines / m), model,
        vanished, changes, bursts, tuple(notes),
    )


def _with_adjusted(f: FamilyTest, p_adj: float) -> FamilyTest:
    return replace(f, p_adjusted=p_adj)


def _fmt_p(p: float) -> str:
    return f"{p:.3g}" if p >= 0.001 else f"{p:.1e}"


def _first_positions(ids: np.ndarray, T: int) -> np.ndarray:
    """First position of every template in ``ids`` (``-1`` when absent)."""
    first = np.full(T, -1, dtype=np.int64)
    uniq, idx = np.unique(ids, return_index=True)
    first[uniq] = idx
    return first


def leave_blocks_out(ids: np.ndarray, block_lines: int) -> tuple[int, int]:
    """Blocks and the number of templates that occur in exactly one block and nowhere else.

    The first ``K = len(ids) // block_lines`` blocks of ``block_lines`` lines
    are the leave-out blocks; the remaining lines only ever serve as the
    reference.  Returns ``(K, D)``.
    """
    K, sizes = _leave_out_sizes(ids, block_lines)
    return K, int(sizes.size)


def _leave_out_sizes(ids: np.ndarray, block_lines: int) -> tuple[int, np.ndarray]:
    """Blocks, and the line count of every template confined to one leave-out block."""
    n = ids.size
    K = n // block_lines
    if K == 0:
        return 0, np.zeros(0, np.int64)
    block = np.arange(n, dtype=np.int64) // block_lines
    block[K * block_lines:] = -1
    T = int(ids.max()) + 1
    lo = np.full(T, np.iinfo(np.int64).max)
    hi = np.full(T, -2, dtype=np.int64)
    np.minimum.at(lo, ids, block)
    np.maximum.at(hi, ids, block)
    present = hi > -2
    confined = np.flatnonzero(present & (lo == hi) & (lo >= 0))
    return K, np.bincount(ids, minlength=T)[confined]


def dispersion_index(baseline: np.ndarray, T: int, block_lines: int) -> tuple[np.ndarray, int]:
    """Per template, the dispersion index of its counts over the baseline's blocks, and the number of blocks.

    The baseline is cut into ``J`` blocks of ``block_lines`` lines (an
    incomplete last block left out); for template ``t`` with ``c`` lines in
    them, ``phi_t = max(1, X^2 / (J - 1))`` with ``X^2 = J sum_j x_j^2 / c - c``
    the Pearson statistic of equal counts per block (the quasi-Poisson
    estimate of dispersion; McCullagh & Nelder 1989, from memory).  A
    template whose lines come in runs gets ``phi > 1``; independent lines give
    ``phi`` near 1; a template absent from the blocks gets 1.  With fewer than
    ``MIN_WINDOWS`` blocks every ``phi`` is 1.
    """
    J = baseline.size // block_lines
    phi = np.ones(T)
    if J < MIN_WINDOWS:
        return phi, J
    key = baseline[: J * block_lines] * np.int64(J) + np.arange(J * block_lines) // block_lines
    cells, per_cell = np.unique(key, return_counts=True)
    owner = cells // J
    c = np.bincount(owner, weights=per_cell, minlength=T)
    sq = np.bincount(owner, weights=per_cell.astype(float) ** 2, minlength=T)
    seen = c > 0
    phi[seen] = np.maximum(1.0, (J * sq[seen] / c[seen] - c[seen]) / (J - 1))
    return phi, J


def _new_events(baseline, new, a, b, templates, options, notes):
    n, m = baseline.ids.size, new.ids.size
    novel = np.flatnonzero((a == 0) & (b > 0))
    X = int(novel.size)
    novel_lines = int(b[novel].sum())
    L = max(1, min(n // options.blocks, m))
    K, sizes = _leave_out_sizes(baseline.ids, L)
    D = int(sizes.size)
    exposure = K * L
    if K < 2:
        notes.append(f"the baseline is too short to estimate how often new templates appear ({n} lines); new templates were not tested")
        p, tested = 1.0, 0
    else:
        share = m / (m + exposure)
        p_templates = binomial_greater(X, X + D, share)
        # lines: new templates bring clusters of lines; counts divided by the dispersion index
        # sum(s^2) / sum(s) of the clusters of both batches behave like Poisson counts (quasi-Poisson)
        clusters = (sizes if D >= MIN_CLUSTERS else np.concatenate([sizes, b[novel]])).astype(float)
        phi = float((clusters**2).sum() / clusters.sum()) if clusters.size else 1.0
        p_lines = binomial_greater_scaled(novel_lines / phi, (novel_lines + float(sizes.sum())) / phi, share)
        p, tested = min(1.0, 2.0 * min(p_templates, p_lines)), 1
    rate = D / exposure if exposure else math.nan
    phi_base = float((sizes.astype(float) ** 2).sum() / sizes.sum()) if D else 1.0
    model = NoveltyModel(int(L), int(K), int(D), float(rate), float(rate * m) if exposure else math.nan, phi_base)
    first = _first_positions(new.ids, len(templates))
    order = sorted(novel, key=lambda t: (-int(b[t]), int(first[t])))[: options.top]
    events = []
    for t in order:
        inp, line = new.where(int(first[t]))
        events.append(NewEvent(templates[t], int(b[t]), float(b[t] / m), inp, line, new.examples.get(int(t), "")))
    fam = FamilyTest(
        "new_events", float(X), "distinct templates of the new batch absent from the baseline", tested, float(p), math.nan,
        f"conditional binomial of {X} new templates ({novel_lines} lines) against {D} ({int(sizes.sum())} lines) in {K} leave-out "
        f"baseline blocks of {L} lines; lines scaled by their dispersion index; Bonferroni over the two",
    )
    return fam, tuple(events), model, novel_lines


def _vanished(a, b, pi, phi, templates, options):
    c = a + b
    log_q = math.log1p(-pi)
    screen = np.flatnonzero((a > 0) & (c / phi * log_q <= math.log(options.alpha)))
    gone = screen[b[screen] == 0]
    p = np.exp(a[gone] / phi[gone] * log_q) if gone.size else np.zeros(0)
    k = int(screen.size)
    p_family = float(min(1.0, k * p.min())) if gone.size else 1.0
    order = np.lexsort((gone, p))[: options.top] if gone.size else []
    events = tuple(
        VanishedEvent(templates[gone[i]], int(a[gone[i]]), float(a[gone[i]] * pi / (1 - pi)), float(p[i]), float(min(1.0, k * p[i])))
        for i in order
    )
    fam = FamilyTest(
        "vanished_events", float(gone.size), "baseline templates with a clear count absent from the new batch", k, p_family, math.nan,
        f"binomial (1 - pi)^(count / phi), pi = {pi:.4g}, phi the template's dispersion index; "
        f"Bonferroni over {k} templates whose count can reach alpha",
    )
    return fam, events


def _rate_p(k: float, c: float, pi: float, phi: float) -> float:
    """Two-sided p-value of ``k`` of ``c`` lines in the new batch: exact binomial, or dispersion-scaled when ``phi > 1``."""
    if phi <= 1.0:
        return binomial_two_sided(int(k), int(c), pi)
    return binomial_two_sided_scaled(k / phi, c / phi, pi)


def _rate_changes(a, b, pi, phi, n, m, templates, options):
    c = a + b
    screen = [int(t) for t in np.flatnonzero(c > 0) if min(_rate_p(0, c[t], pi, phi[t]), _rate_p(c[t], c[t], pi, phi[t])) <= options.alpha]
    screen_arr = np.asarray(screen, dtype=np.int64)
    p = np.asarray([_rate_p(b[t], c[t], pi, phi[t]) for t in screen_arr])
    q = benjamini_hochberg(p)
    p_family = float(q.min()) if q.size else 1.0
    hits = np.flatnonzero(q <= options.alpha)
    hits = hits[np.lexsort((screen_arr[hits], p[hits]))][: options.top] if hits.size else hits
    changes = []
    for i in hits:
        t = int(screen_arr[i])
        fa, fb = a[t] / n, b[t] / m
        ratio = fb / fa if fa > 0 else math.inf
        changes.append(RateChange(templates[t], int(a[t]), int(b[t]), float(fa), float(fb), float(ratio),
                                  "more in new" if fb > fa else "less in new", float(p[i]), float(q[i])))
    fam = FamilyTest(
        "rate_changes", float(np.count_nonzero(q <= options.alpha)), "templates whose share changed (BH q <= alpha)",
        int(screen_arr.size), p_family, math.nan,
        f"two-sided binomial per template, pi = {pi:.4g} (exact; counts divided by the template's dispersion index "
        f"when above 1); Benjamini-Hochberg over {screen_arr.size} templates whose count can reach alpha; family p = Simes",
    )
    return fam, tuple(changes)


def _max_window(pos: np.ndarray, w: int) -> tuple[int, int]:
    """Largest number of sorted positions in a window of ``w`` consecutive positions, and where it starts (an index)."""
    ends = np.searchsorted(pos, pos + w, side="left")
    counts = ends - np.arange(pos.size)
    i = int(np.argmax(counts))
    return int(counts[i]), i


def _tail_2w(s: int, mean_w: float, size: float | None, n_windows: int) -> float:
    """Union bound ``ceil(m / w) * P(N >= s)``, ``N`` a negative binomial (Poisson when ``size`` is None) of mean ``2 mean_w``."""
    mu = 2.0 * mean_w
    if size is None:
        tail = stats.poisson.sf(s - 1, mu)
    else:
        tail = stats.nbinom.sf(s - 1, size, size / (size + mu))
    return float(min(1.0, n_windows * tail))


def _bursts(baseline, new, a, b, templates, options, notes):
    n, m = baseline.ids.size, new.ids.size
    w = min(options.window, n // MIN_WINDOWS, m)
    empty = FamilyTest("bursts", 0.0, "templates concentrated in a window of the new batch", 0, 1.0, math.nan, "not tested")
    if w < 2:
        notes.append("a batch is too short for the burst test (it needs five baseline windows of at least two lines)")
        return empty, ()
    nb_windows = n // w
    n_windows = -(-m // w)
    # per (template, baseline window) counts, kept sparse: sums, sums of squares, windows seen
    key = baseline.ids[: nb_windows * w] * nb_windows + np.arange(nb_windows * w) // w
    cells, per_cell = np.unique(key, return_counts=True)
    owner = cells // nb_windows
    total = np.bincount(owner, weights=per_cell, minlength=a.size)
    squares = np.bincount(owner, weights=per_cell.astype(float) ** 2, minlength=a.size)
    seen = np.bincount(owner, minlength=a.size)
    order = np.argsort(new.ids, kind="stable")
    starts = np.searchsorted(new.ids[order], np.arange(a.size + 1))
    rows = []
    for t in np.flatnonzero((b >= 2) & (seen >= 2)):
        mu_b = float(total[t]) / nb_windows
        var = (float(squares[t]) - nb_windows * mu_b * mu_b) / (nb_windows - 1)
        size = mu_b * mu_b / (var - mu_b) if var > mu_b else None
        mean_w = w * float(a[t] + b[t]) / (n + m)
        if _tail_2w(min(int(b[t]), w), mean_w, size, n_windows) > options.alpha:
            continue  # cannot reach alpha even with every occurrence in one window
        pos = order[starts[t] : starts[t + 1]]
        s, i = _max_window(pos, w)
        last = pos[i + s - 1]
        rows.append((int(t), s, mean_w, _tail_2w(s, mean_w, size, n_windows), int(pos[i]), int(last)))
    k = len(rows)
    if k == 0:
        fam = FamilyTest("bursts", 0.0, "templates concentrated in a window of the new batch", 0, 1.0, math.nan,
                         f"window {w} lines; no template has counts that could show a burst")
        return fam, ()
    rows.sort(key=lambda r: (r[3], r[0]))
    p_family = float(min(1.0, k * rows[0][3]))
    out = []
    for t, s, mean_w, p, first, last in rows[: options.top]:
        if min(1.0, k * p) > options.alpha:
            break
        inp, line = new.where(first)
        out.append(Burst(templates[t], s, int(w), float(mean_w), inp, line, new.where(last)[1], float(p), float(min(1.0, k * p))))
    fam = FamilyTest(
        "bursts", float(rows[0][1]), f"largest count of one template in {w} consecutive new lines", k, p_family, math.nan,
        f"negative binomial fitted to {nb_windows} baseline windows, union bound over {n_windows} windows; Bonferroni over {k} templates",
    )
    return fam, tuple(out)
