"""Baselines the predictor is always shown beside.

* The best single fixed-order adaptive Markov model with Krichevsky–Trofimov
  estimates (Krichevsky & Trofimov 1981): the symbol after context ``c`` gets
  probability ``(n_c(s) + 1/2) / (n_c + A/2)`` from the counts seen so far.
  Because that sequential rule is exchangeable within a context, the code
  length of a whole stream needs only the final counts:
  ``-log2 prod_c [Gamma(A/2) / Gamma(n_c + A/2)] prod_s [Gamma(n_c(s) + 1/2) / Gamma(1/2)]``,
  and with prior counts ``m`` (a model trained before) the same ratio with
  ``m + n`` against ``m``.  Positions with fewer than ``k`` symbols of their
  segment before them are charged ``log2 A`` bits each (no context yet).
* The standard library's general-purpose compressors (``lzma`` preset
  ``9 | PRESET_EXTREME``, ``bz2`` level 9, ``zlib`` level 9) on the same
  symbols, once as text (one byte per symbol) and once packed ``b`` bits per
  symbol.
"""

from __future__ import annotations

import bz2
import lzma
import math
import zlib
from dataclasses import dataclass

import numpy as np

from fractalseq.alphabet import Alphabet

LN2 = math.log(2.0)

#: Which baselines a score computes: none, the KT Markov model only (cheap, the default), or also the compressors.
BASELINE_CHOICES = ("none", "markov", "all")


def baseline_kinds(baselines: "bool | str") -> tuple[bool, bool]:
    """``(markov, compressors)`` for a choice of :data:`BASELINE_CHOICES` (``True``: all, ``False``: none)."""
    if isinstance(baselines, bool):
        return baselines, baselines
    if baselines not in BASELINE_CHOICES:
        from fractalseq.errors import ParameterError

        raise ParameterError(
            f"Baselines {baselines!r} is not one of {', '.join(BASELINE_CHOICES)}.", parameter="baselines"
        )
    return baselines != "none", baselines == "all"


def _gammaln():
    # scipy.special is imported when a code length is first computed, not with the package: its import (about
    # 30-90 ms of a process's start-up) is then paid only by runs that compute a KT baseline
    from scipy.special import gammaln

    return gammaln


def kt_bits(counts: np.ndarray, prior: np.ndarray | None = None) -> float:
    """Adaptive KT code length (bits) of the symbols counted in ``counts`` (cells x A).

    Parameters
    ----------
    counts:
        ``(cells, A)`` symbol counts per context cell of the coded data.
    prior:
        Optional ``(cells, A)`` counts seen before (same cell order), e.g. the
        training counts of a fitted model; ``None`` starts from zero.
    """
    n = np.asarray(counts, dtype=np.float64)
    if n.size == 0:
        return 0.0
    A = n.shape[1]
    m = np.zeros_like(n) if prior is None else np.asarray(prior, dtype=np.float64)
    tot_m = m.sum(axis=1)
    tot = tot_m + n.sum(axis=1)
    gammaln = _gammaln()
    nats = np.sum(gammaln(tot + A / 2.0) - gammaln(tot_m + A / 2.0))
    nats -= np.sum(gammaln(m + n + 0.5) - gammaln(m + 0.5))
    return float(nats / LN2)


def kt_bits_sparse(totals: np.ndarray, counts: np.ndarray, A: int, prior_totals=None, prior_counts=None) -> float:
    """:func:`kt_bits` from the totals of every cell and the non-zero counts only (zero counts add nothing).

    ``prior_totals`` / ``prior_counts``: counts seen before, aligned with ``totals`` / ``counts``.
    """
    gammaln = _gammaln()
    if prior_totals is None and prior_counts is None:
        # the same terms as below with zero priors (0 + x is x), made in place: one array a cell and one an entry
        t = np.array(totals, dtype=np.float64)
        t += A / 2.0
        gammaln(t, out=t)
        t -= gammaln(np.full(1, A / 2.0))[0]
        nats = np.sum(t)
        del t
        c = np.array(counts, dtype=np.float64)
        c += 0.5
        gammaln(c, out=c)
        c -= gammaln(np.full(1, 0.5))[0]
        nats -= np.sum(c)
        return float(nats / LN2)
    tot_m = np.zeros(len(totals)) if prior_totals is None else np.asarray(prior_totals, dtype=np.float64)
    m = np.zeros(len(counts)) if prior_counts is None else np.asarray(prior_counts, dtype=np.float64)
    tot = tot_m + np.asarray(totals, dtype=np.float64)
    nats = np.sum(gammaln(tot + A / 2.0) - gammaln(tot_m + A / 2.0))
    nats -= np.sum(gammaln(m + np.asarray(counts, dtype=np.float64) + 0.5) - gammaln(m + 0.5))
    return float(nats / LN2)


def kt_bits_by_order(cell_tables: dict, length: int, A: int) -> dict[int, float]:
    """Code length (bits) of the order-k adaptive KT model for every order in ``cell_tables``.

    ``cell_tables[k]`` is the :class:`~fractalseq.predict._cells.CellTable` of depth k of the coded data;
    ``length`` is the number of symbols (positions without a full context are charged ``log2 A`` bits).
    """
    out = {}
    for k, table in sorted(cell_tables.items()):
        totals = table.totals()
        covered = int(totals.sum())
        out[k] = kt_bits_sparse(totals, table.counts, A) + (length - covered) * math.log2(A)
    return out


def kt_bits_after_training(train, table, length: int, A: int, b: int) -> float:
    """Order-k adaptive KT code length of new data (a :class:`~fractalseq.predict._cells.CellTable`) whose model
    starts from the training counts (another one, same depth)."""
    totals = table.totals()
    covered = int(totals.sum())
    if table.size == 0:
        return length * math.log2(A)
    prior_tot = np.zeros(table.size)
    prior = np.zeros(table.counts.size)
    if train.size:
        i = np.minimum(np.searchsorted(train.cells, table.cells), train.size - 1)
        hit = train.cells[i] == table.cells
        prior_tot[hit] = train.totals()[i[hit]]
        tw, w = train.words(b), table.words(b)
        j = np.minimum(np.searchsorted(tw, w), tw.size - 1)
        hw = tw[j] == w
        prior[hw] = train.counts[j[hw]]
    return kt_bits_sparse(totals, table.counts, A, prior_tot, prior) + (length - covered) * math.log2(A)


@dataclass(frozen=True)
class MarkovBaseline:
    """The best single fixed-order adaptive KT Markov model.

    Attributes
    ----------
    order:
        Order chosen on the training part.
    bits_per_symbol:
        Its code length on the scored data, bits per symbol.
    training:
        What the order was chosen on (``"model training data"`` or ``"first half"``).
    candidates:
        Bits per symbol of every candidate order on the training part.
    best_order_in_hindsight, best_in_hindsight:
        The order that would have been best on the scored data itself, and its bits per symbol (online mode).
    """

    order: int
    bits_per_symbol: float
    training: str
    candidates: dict
    best_order_in_hindsight: int | None = None
    best_in_hindsight: float | None = None

    def to_dict(self) -> dict:
        return {
            "order": self.order,
            "bits_per_symbol": self.bits_per_symbol,
            "order_chosen_on": self.training,
            "candidate_bits_per_symbol": {str(k): v for k, v in self.candidates.items()},
            "best_order_in_hindsight": self.best_order_in_hindsight,
            "best_in_hindsight_bits_per_symbol": self.best_in_hindsight,
        }


def symbol_bytes(codes: np.ndarray, alphabet: Alphabet) -> bytes:
    """The symbols as bytes: their characters for one-byte symbols, else their codes (1 or 2 bytes)."""
    codes = np.asarray(codes)
    if alphabet.single_characters and all(ord(s) < 256 for s in alphabet.symbols):
        lut = np.array([ord(s) for s in alphabet.symbols], dtype=np.uint8)
        return lut[codes].tobytes()
    if alphabet.size <= 256:
        return codes.astype(np.uint8).tobytes()
    return codes.astype("<u2").tobytes()


def packed_bytes(codes: np.ndarray, bits: int) -> bytes:
    """The codes packed ``bits`` bits each, first symbol in the most significant bits."""
    codes = np.asarray(codes, dtype=np.uint64)
    if codes.size == 0:
        return b""
    shifts = np.arange(bits - 1, -1, -1, dtype=np.uint64)
    bitarr = ((codes[:, None] >> shifts[None, :]) & np.uint64(1)).astype(np.uint8).ravel()
    return np.packbits(bitarr).tobytes()


class CompressorMeter:
    """Feed symbols chunk by chunk; get the bits per symbol of lzma, bz2 and zlib at the end.

    The compressors see the symbols as text (one byte per symbol, see
    :func:`symbol_bytes`) and, for alphabets of fewer than 8 bits, packed
    ``b`` bits per symbol; memory stays bounded by the compressors' own windows.
    """

    def __init__(self, alphabet: Alphabet) -> None:
        self.alphabet = alphabet
        self.n = 0
        self._carry = np.zeros(0, dtype=np.int64)
        period = math.lcm(alphabet.bits, 8) // alphabet.bits
        self._period = period
        self._variants = ["text"] + (["packed"] if alphabet.bits < 8 else [])
        self._comp = {
            v: {
                "lzma": lzma.LZMACompressor(preset=9 | lzma.PRESET_EXTREME),
                "bz2": bz2.BZ2Compressor(9),
                "zlib": zlib.compressobj(9),
            }
            for v in self._variants
        }
        self._size = {(v, k): 0 for v in self._variants for k in ("lzma", "bz2", "zlib")}

    def _push(self, variant: str, data: bytes) -> None:
        if not data:
            return
        for k, c in self._comp[variant].items():
            self._size[(variant, k)] += len(c.compress(data))

    def feed(self, codes: np.ndarray) -> None:
        """Add a chunk of codes."""
        codes = np.asarray(codes)
        self.n += int(codes.size)
        self._push("text", symbol_bytes(codes, self.alphabet))
        if "packed" in self._variants:
            allc = np.concatenate([self._carry, codes.astype(np.int64)]) if self._carry.size else codes.astype(np.int64)
            whole = (allc.size // self._period) * self._period
            self._push("packed", packed_bytes(allc[:whole], self.alphabet.bits))
            self._carry = allc[whole:]

    def result(self) -> dict[str, float]:
        """Finish every compressor; bits per symbol keyed ``lzma_text``, ``bz2_packed``..."""
        if "packed" in self._variants and self._carry.size:
            self._push("packed", packed_bytes(self._carry, self.alphabet.bits))
            self._carry = self._carry[:0]
        n = max(self.n, 1)
        out = {}
        for v in self._variants:
            for k, c in self._comp[v].items():
                self._size[(v, k)] += len(c.flush())
                out[f"{k}_{v}"] = 8.0 * self._size[(v, k)] / n
        return out


def compressor_bits(codes: np.ndarray, alphabet: Alphabet) -> dict[str, float]:
    """Bits per symbol of lzma, bz2 and zlib on the symbols as text and packed ``b`` bits each."""
    meter = CompressorMeter(alphabet)
    meter.feed(codes)
    return meter.result()
