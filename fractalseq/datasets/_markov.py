"""Exact closed forms and fast simulators for known symbol sources.

Used by the tests, the benchmarks and the demo as ground truth: a source
whose entropy rate, Rényi entropy rates and block sums are known exactly.

Conventions
-----------
An order-``m`` Markov chain over ``A`` symbols is given by a transition
matrix ``P`` of shape ``(A**m, A)``: row ``c`` is the distribution of the
next symbol after the context ``c``, where a context ``x_1 .. x_m`` has the
index ``sum_i x_i * A**(m - i)`` (first symbol most significant, the same
order as word addresses in :mod:`fractalseq.words._counts`).  An ``(A, A)`` matrix
is a first-order chain.  The chain on contexts (the *expanded* chain) is a
first-order chain on ``A**m`` states with ``c -> (c * A + x) mod A**m``.

Closed forms (natural logarithms inside, results in bits unless ``base`` says otherwise):

* Shannon entropy rate ``h = sum_c pi_c H(P_c)`` for a stationary chain
  (Cover & Thomas 2006, *Elements of Information Theory*, 2nd ed., §4.2, Thm 4.2.4).
* Rényi entropy rate ``h_q = ln rho([P_ij^q]) / (1 - q)`` for ``q != 1``,
  ``rho`` the Perron–Frobenius eigenvalue (Rached, Alajaji & Campbell 2001,
  IEEE Trans. Inf. Theory 47(4):1553–1561).  ``q = 0`` gives the topological
  entropy of the support, ``ln rho(adjacency)`` (Lind & Marcus 1995, ch. 4).
* Exact block sums ``sum_{|w|=n} p(w)^q = mu^q (M_q)^(n-m) 1`` by the transfer
  matrix ``M_q = [P_ij^q]`` of the expanded chain, for any start ``mu``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError

LN2 = math.log(2.0)
#: Golden ratio.
PHI = (1.0 + math.sqrt(5.0)) / 2.0


# ------------------------------------------------------------------ shapes
def chain_shape(P: np.ndarray, order: int | None = None) -> tuple[np.ndarray, int, int]:
    """Validate a transition matrix; return it as float64 with ``(A, m)``.

    Parameters
    ----------
    P:
        ``(A**m, A)`` row-stochastic matrix.
    order:
        ``m``; inferred from the shape when ``None``.
    """
    P = np.asarray(P, dtype=np.float64)
    if P.ndim != 2 or P.shape[1] < 1:
        raise ParameterError("A transition matrix must be two-dimensional with one column per symbol.")
    A = P.shape[1]
    if order is None:
        if A == 1:
            order = 1
        else:
            order = int(round(math.log(P.shape[0]) / math.log(A)))
    if order < 1 or P.shape[0] != A**order:
        raise ParameterError(
            f"A transition matrix of shape {P.shape} is not (A**m, A) for order {order}; give A**m rows, one per context."
        )
    if np.any(P < 0) or np.any(~np.isfinite(P)):
        raise ParameterError("Transition probabilities must be finite and non-negative.")
    if not np.allclose(P.sum(axis=1), 1.0, atol=1e-9):
        raise ParameterError("Every row of the transition matrix must sum to 1; normalise the rows.")
    return P, A, int(order)


def expand(P: np.ndarray, order: int | None = None) -> np.ndarray:
    """First-order transition matrix on contexts, shape ``(A**m, A**m)``.

    For ``m = 1`` this is ``P`` itself.
    """
    P, A, m = chain_shape(P, order)
    S = A**m
    M = np.zeros((S, S))
    ctx = np.arange(S)
    for x in range(A):
        M[ctx, (ctx * A + x) % S] += P[:, x]
    return M


def _perron(M: np.ndarray) -> float:
    """Largest real eigenvalue (spectral radius) of a non-negative matrix."""
    ev = np.linalg.eigvals(M)
    return float(np.max(np.abs(ev)))


# -------------------------------------------------------------- stationary
def stationary(P: np.ndarray, order: int | None = None) -> np.ndarray:
    """Stationary distribution over the ``A**m`` contexts.

    Solves ``pi M = pi``, ``sum pi = 1`` for the expanded chain.  For a
    reducible chain the solution is not unique; the least-squares solution
    returned is then one of them (a warning is not raised).
    """
    M = expand(P, order)
    S = M.shape[0]
    lhs = np.vstack([M.T - np.eye(S), np.ones((1, S))])
    rhs = np.zeros(S + 1)
    rhs[-1] = 1.0
    pi, *_ = np.linalg.lstsq(lhs, rhs, rcond=None)
    pi = np.clip(pi, 0.0, None)
    return pi / pi.sum()


def symbol_marginal(P: np.ndarray, order: int | None = None) -> np.ndarray:
    """Stationary probability of each symbol (length ``A``)."""
    P, A, m = chain_shape(P, order)
    pi = stationary(P, m)
    return pi.reshape(A, -1).sum(axis=1)


def _log(x: float, base: float | None) -> float:
    return x if base is None else x / math.log(base)


def _row_entropy(P: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(P > 0, -P * np.log(np.where(P > 0, P, 1.0)), 0.0)
    return t.sum(axis=1)


# ------------------------------------------------------------ entropy rates
def entropy_rate(P: np.ndarray, order: int | None = None, base: float | None = 2.0) -> float:
    """Shannon entropy rate of the stationary chain, ``sum_c pi_c H(P_c)``.

    Cover & Thomas 2006, §4.2, Theorem 4.2.4.  ``base=2`` gives bits per
    symbol, ``base=None`` nats.
    """
    P, A, m = chain_shape(P, order)
    pi = stationary(P, m)
    return _log(float(pi @ _row_entropy(P)), base)


def renyi_rate(P: np.ndarray, q: float, order: int | None = None, base: float | None = 2.0) -> float:
    """Rényi entropy rate ``h_q = ln rho([P_ij^q]) / (1 - q)`` (``q = 1``: Shannon).

    Rached, Alajaji & Campbell 2001, IEEE Trans. Inf. Theory 47(4):1553–1561,
    for an irreducible chain (the rate does not depend on the start).  For
    ``q = 0`` zero probabilities stay zero (``0**0 := 0``) and the result is
    the topological entropy of the chain's support.
    """
    q = float(q)
    if q == 1.0:
        return entropy_rate(P, order, base)
    M = expand(P, order)
    Mq = np.where(M > 0, np.power(np.where(M > 0, M, 1.0), q), 0.0)
    return _log(math.log(_perron(Mq)) / (1.0 - q), base)


def topological_rate(adjacency: np.ndarray, base: float | None = 2.0) -> float:
    """Topological entropy ``ln rho(B)`` of the shift of finite type with 0/1 matrix ``B``.

    Lind & Marcus 1995, *An Introduction to Symbolic Dynamics and Coding*, ch. 4.
    """
    B = np.asarray(adjacency, dtype=np.float64)
    if B.ndim != 2 or B.shape[0] != B.shape[1]:
        raise ParameterError("An adjacency matrix must be square.")
    return _log(math.log(_perron((B > 0).astype(float))), base)


# -------------------------------------------------------------- block sums
def _start(P: np.ndarray, A: int, m: int, initial: np.ndarray | None) -> np.ndarray:
    if initial is None:
        return stationary(P, m)
    mu = np.asarray(initial, dtype=np.float64)
    if mu.shape != (A**m,) or np.any(mu < 0) or not math.isclose(mu.sum(), 1.0, abs_tol=1e-9):
        raise ParameterError(f"The initial distribution must be {A**m} non-negative numbers summing to 1 (one per context).")
    return mu


def log_block_sum(
    P: np.ndarray, n: int, q: float, order: int | None = None, initial: np.ndarray | None = None
) -> float:
    """Exact ``ln sum_{|w|=n} p(w)**q`` over all n-words of the chain (nats).

    The sum is ``mu^q (M_q)^(n-m) 1`` with ``M_q = [M_ij^q]`` on the expanded
    chain and ``mu`` the distribution of the first ``m`` symbols (stationary
    by default).  Powers are renormalised at every step, so ``n`` may be large.
    For ``n < m`` the words are the first ``n`` symbols of the start.
    ``q = 0`` counts the words of positive probability.
    """
    P, A, m = chain_shape(P, order)
    if n < 1:
        raise ParameterError("Block length n must be at least 1.")
    mu = _start(P, A, m, initial)

    def powq(x: np.ndarray) -> np.ndarray:
        return np.where(x > 0, np.power(np.where(x > 0, x, 1.0), q), 0.0)

    if n <= m:
        p = mu.reshape(A**n, -1).sum(axis=1)
        return float(math.log(powq(p).sum()))
    M = powq(expand(P, m))
    v = powq(mu)
    logscale = 0.0
    for _ in range(n - m):
        v = v @ M
        s = v.sum()
        if s <= 0:
            return -math.inf
        logscale += math.log(s)
        v = v / s
    return logscale


def block_entropy_exact(
    P: np.ndarray,
    n: int,
    q: float = 1.0,
    order: int | None = None,
    initial: np.ndarray | None = None,
    base: float | None = 2.0,
) -> float:
    """Exact block entropy of the chain's n-words: Shannon (``q = 1``) or Rényi order ``q``.

    Shannon: ``H_n = H(mu) + sum_{t < n - m} sum_c mu_t(c) H(P_c)`` with
    ``mu_{t+1} = mu_t M`` (chain rule; Cover & Thomas 2006, §2.5).  Rényi:
    ``ln(sum p(w)^q) / (1 - q)`` from :func:`log_block_sum`.
    """
    P, A, m = chain_shape(P, order)
    if n < 1:
        raise ParameterError("Block length n must be at least 1.")
    if float(q) != 1.0:
        return _log(log_block_sum(P, n, q, m, initial) / (1.0 - float(q)), base)
    mu = _start(P, A, m, initial)
    if n <= m:
        p = mu.reshape(A**n, -1).sum(axis=1)
        p = p[p > 0]
        return _log(float(-(p * np.log(p)).sum()), base)
    p = mu[mu > 0]
    H = float(-(p * np.log(p)).sum())
    M = expand(P, m)
    hrow = _row_entropy(P)
    v = mu.copy()
    for _ in range(n - m):
        H += float(v @ hrow)
        v = v @ M
    return _log(H, base)


# -------------------------------------------------------- golden-mean facts
def golden_mean_matrix(p: float | None = None) -> np.ndarray:
    """Transition matrix ``[[1-p, p], [1, 0]]`` of a chain on the golden-mean shift (no ``11``).

    ``p = None`` gives the Parry (maximal-entropy) measure, ``p = 1/phi**2``
    (Lind & Marcus 1995, §13.3), whose entropy rate is ``log2 phi``.
    """
    if p is None:
        p = 1.0 / PHI**2
    if not 0.0 < p < 1.0:
        raise ParameterError(f"The golden-mean probability p must lie in (0, 1), not {p}.")
    return np.array([[1.0 - p, p], [1.0, 0.0]])


# --------------------------------------------------------------- simulators
def _code_dtype(A: int) -> np.dtype:
    return np.dtype(np.uint8) if A <= 256 else np.dtype(np.uint32)


def _cumulative(P: np.ndarray) -> np.ndarray:
    """Row-wise cumulative probabilities, ``inf`` from each row's last positive entry on.

    The ``inf`` guards against rounding: a uniform just below 1 can never select
    a symbol of probability zero.
    """
    cum = np.cumsum(P, axis=1)
    last = P.shape[1] - 1 - np.argmax(P[:, ::-1] > 0, axis=1)
    cols = np.arange(P.shape[1])
    cum[cols[None, :] >= last[:, None]] = np.inf
    return cum


@njit(cache=True)
def _walk(cum, ctx0, u, A, S, out):
    """Walk an order-m chain: ``cum`` is the (S, A) row-wise cumulative matrix."""
    ctx = ctx0
    for t in range(u.shape[0]):
        r = u[t]
        # binary search for the first column with cum > r
        lo = 0
        hi = A - 1
        while lo < hi:
            mid = (lo + hi) // 2
            if cum[ctx, mid] > r:
                hi = mid
            else:
                lo = mid + 1
        out[t] = lo
        ctx = (ctx * A + lo) % S


@njit(cache=True)
def _decode_context(ctx, A, m, out):
    for i in range(m):
        out[m - 1 - i] = ctx % A
        ctx //= A


def simulate_markov(
    P: np.ndarray,
    n: int,
    seed: int | None = 0,
    order: int | None = None,
    initial: np.ndarray | None = None,
) -> np.ndarray:
    """Simulate ``n`` symbols of an order-m Markov chain (deterministic for a seed).

    Parameters
    ----------
    P:
        ``(A**m, A)`` transition matrix (``(A, A)`` for first order).
    n:
        Number of symbols.
    seed:
        Seed of ``numpy.random.default_rng``; the same seed gives the same symbols.
    order:
        ``m``; inferred from the shape when ``None``.
    initial:
        Distribution of the first ``m`` symbols (one entry per context);
        stationary by default, so the output is a stationary sample.

    Returns
    -------
    numpy.ndarray
        ``uint8`` codes (``uint32`` beyond 256 symbols).
    """
    P, A, m = chain_shape(P, order)
    n = int(n)
    if n < 0:
        raise ParameterError("The number of symbols must be non-negative.")
    rng = np.random.default_rng(seed)
    mu = _start(P, A, m, initial)
    S = A**m
    ctx0 = int(rng.choice(S, p=mu))
    first = np.zeros(m, dtype=np.int64)
    _decode_context(ctx0, A, m, first)
    out = np.empty(max(n, m), dtype=_code_dtype(A))
    out[:m] = first
    cum = _cumulative(P)
    if n > m:
        u = rng.random(n - m)
        _walk(cum, ctx0, u, A, S, out[m:])
    return out[:n]


def bernoulli(n: int, p: float = 0.5, seed: int | None = 0) -> np.ndarray:
    """``n`` independent binary symbols with ``P(1) = p`` (``uint8``)."""
    if not 0.0 <= p <= 1.0:
        raise ParameterError(f"The Bernoulli probability must lie in [0, 1], not {p}.")
    rng = np.random.default_rng(seed)
    return (rng.random(int(n)) < p).astype(np.uint8)


def iid(n: int, probs: np.ndarray, seed: int | None = 0) -> np.ndarray:
    """``n`` independent symbols with the given probabilities (``uint8``/``uint32``)."""
    probs = np.asarray(probs, dtype=np.float64)
    if probs.ndim != 1 or np.any(probs < 0) or not math.isclose(probs.sum(), 1.0, abs_tol=1e-9):
        raise ParameterError("Symbol probabilities must be non-negative and sum to 1.")
    rng = np.random.default_rng(seed)
    cum = _cumulative(probs[None, :])[0]
    return np.searchsorted(cum, rng.random(int(n)), side="right").astype(_code_dtype(probs.size))


def golden_mean(n: int, seed: int | None = 0, p: float | None = None) -> np.ndarray:
    """Binary symbols with no ``11``: the chain ``[[1-p, p], [1, 0]]`` (Parry measure when ``p`` is None).

    Entropy rate ``H(p) / (1 + p)`` bits (Cover & Thomas 2006, Problem 4.7),
    ``log2 phi`` for the Parry measure.
    """
    return simulate_markov(golden_mean_matrix(p), n, seed)


@njit(cache=True)
def _logistic(n, r, x0, burn, out):
    x = x0
    for _ in range(burn):
        x = r * x * (1.0 - x)
    for t in range(n):
        out[t] = 1 if x >= 0.5 else 0
        x = r * x * (1.0 - x)
    return x


def logistic_symbols(n: int, r: float = 4.0, x0: float = 0.3, burn: int = 1000) -> np.ndarray:
    """Symbols of the logistic map ``x -> r x (1 - x)`` with the partition at 1/2.

    Symbol 0 for ``x < 1/2``, 1 otherwise, after ``burn`` discarded steps.
    Deterministic (float64 orbit from ``x0``).  At ``r = 4`` the symbolic
    dynamics is the full binary shift with one bit per step (Ulam & von
    Neumann 1947); inside the period-3 window (``r = 3.83``) the symbols are
    periodic, ``(011)`` repeated.
    """
    if not 0.0 < r <= 4.0:
        raise ParameterError(f"The logistic parameter r must lie in (0, 4], not {r}.")
    if not 0.0 < x0 < 1.0:
        raise ParameterError(f"The start x0 must lie in (0, 1), not {x0}.")
    out = np.empty(int(n), dtype=np.uint8)
    _logistic(int(n), float(r), float(x0), int(burn), out)
    return out
