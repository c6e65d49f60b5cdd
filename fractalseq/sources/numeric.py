"""Numeric columns turned into symbols.

Input
-----
A table (comma, tab, semicolon or whitespace separated) or one number per
line.  The delimiter is the first of tab, ``;``, ``,`` found in the first data
line, else runs of whitespace.  The first non-blank, non-comment line is a
header when one of its fields is neither a number nor a missing mark.  Lines
starting with ``#`` are skipped, and so are blank lines before the first
data line.  The default column is the first whose sampled values are mostly
(at least half) numbers and that is neither a time column nor a calendar
part, when another such column exists: a time column is one named ``time``,
``date``, ``datetime``, ``timestamp``, ``year``, ``t`` or ``index`` (any case),
or one whose sampled values are whole numbers increasing strictly (years,
``YYYYMMDD`` dates, sample numbers); a calendar part is one named ``quarter``,
``month``, ``week``, ``day``, ``weekday``, ``doy``, ``hour``, ``minute`` or ``second``.  It is skipped, not used; its name is reported as
``time_column``.

Time column and gaps
--------------------
Whichever column is read, the first *other* column that looks like a time
(a time-like name, whole numbers increasing strictly, or values that parse as
ISO dates) is the time column.  ``YYYYMMDD`` whole numbers are read as dates
(days), ISO dates and times as seconds, other numbers as they are.  When the
sampled time steps are regular (nine in ten within half to one and a half
times their median), a step longer than 1.5 times the median is a *gap*: it
ends the segment like a missing value (reported as ``time_gaps``, not as
missing values).  Irregular times are not used.  Later blank lines, missing marks (empty field,
``NA``, ``NaN``, ``null``, ``None``, ``N/A``, ``?``, ``-``, case-insensitive),
infinite values and rows too short to hold the column are *missing*: they end
the segment.  Any other non-number is an :class:`InputError` naming the line.
Quoted fields may not span lines.

Several columns
---------------
``--column a,b`` (names or 0-based indices separated by commas) or ``--column all``
asks for one source per column (:func:`several_columns` lists them; the jobs
read each one as its own source).  ``all`` is every column whose sampled values
are mostly numbers, except time columns and calendar parts (named ``quarter``,
``month``, ``week``, ``day``, ``weekday``, ``doy``, ``hour``, ``minute``, ``second``).  A header name that contains a comma
(or is ``all``) is read as that one column.

Symbolization
-------------
``quantile`` (default, ``bins`` symbols)
    Edges are ``np.quantile(v, [1/bins, ..., (bins-1)/bins])`` of all finite
    values of the column (default linear interpolation).  This needs a first
    pass that holds the column's finite values in memory (8 bytes each).
``thresholds``
    Given strictly increasing edges.
For both, the symbol of ``x`` is the number of edges ``<= x``
(``np.searchsorted(edges, x, side="right")``), so bin ``b`` holds
``edges[b-1] <= x < edges[b]``; symbols are ``0``-``9`` then ``a``-``z``
(``b00``... beyond 36 bins).

``ordinal`` (order ``m``)
    Bandt & Pompe (2002), Phys. Rev. Lett. 88:174102: the symbol of the
    window ``x[t], ..., x[t+m-1]`` is the permutation ``pi`` that sorts it
    (``x[t+pi[0]] <= x[t+pi[1]] <= ...``); equal values are ordered by their
    order of appearance (a stable sort: the earlier value counts as smaller).
    The alphabet is all ``m!`` permutations in lexicographic order, written as
    digit strings (``"012"`` is the identity, code 0).  A NaN-free run of
    length ``L`` gives ``L - m + 1`` symbols in one segment.
``delay`` (embedding delay ``tau``, default 1)
    The window is ``x[t], x[t+tau], ..., x[t+(m-1)tau]``; a window holding a
    missing value is skipped, and a segment starts at every window whose
    predecessor (the window one sample earlier) was skipped.
``ties`` (``time``, default, or ``dither``)
    ``time``: equal values are ordered by time (the rule above).  ``dither``:
    by an independent uniform key per value (missing values and time gaps
    included), drawn in file order from ``numpy.random.default_rng(seed)``
    (:mod:`fractalseq.sources.ordinal_stream`),
    as if an infinitesimal random dither were added.  With delay and ties the
    codes equal those of :func:`fractalseq.entropy._ordinal.ordinal_patterns`
    on the column's values (NaN for missing values and gaps) with the same seed.
"""

from __future__ import annotations

import csv
import itertools
import math
from dataclasses import dataclass, field
from typing import Iterator, Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.sources import kernels as K
from fractalseq.sources import ordinal_stream as OS
from fractalseq.sources.rawio import Origin, line_blocks
from fractalseq.stream import Chunk, Positions, ReadReport, Record

MISSING = frozenset({"", "na", "nan", "null", "none", "n/a", "?", "-"})
#: Header names of columns that hold the time of a row rather than a measurement.
TIME_NAMES = frozenset({"time", "date", "datetime", "timestamp", "year", "t", "index"})
#: Header names of calendar parts (a quarter, a month ...): left out of ``--column all`` with the time columns.
CALENDAR_NAMES = frozenset({"quarter", "month", "week", "day", "weekday", "doy", "hour", "minute", "second"})
MAX_ORDER = 8
#: Largest embedding delay of ordinal patterns (samples).
MAX_DELAY = 100_000
#: How equal values are ordered inside an ordinal pattern.
TIE_RULES = ("time", "dither")
_DIGITS = "0123456789abcdefghijklmnopqrstuvwxyz"


# ------------------------------------------------------------------ parsing
def _is_number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


def _is_missing(text: str) -> bool:
    return text.strip().lower() in MISSING


def _delimiter(line: str) -> str | None:
    for d in ("\t", ";", ","):
        if d in line:
            return d
    return None


def split_rows(lines: Sequence[str], delimiter: str | None) -> list[list[str]]:
    """Fields of each line (``None`` delimiter = runs of whitespace)."""
    if delimiter is None:
        return [ln.split() for ln in lines]
    return [[f.strip() for f in row] for row in csv.reader(lines, delimiter=delimiter)]


@dataclass
class Layout:
    """How a numeric file is laid out."""

    delimiter: str | None
    header: list[str] | None
    column: int = 0
    column_name: str = ""
    time_column: str = ""
    time_index: int = -1
    time_step: float = 0.0
    time_unit: str = ""


def _data_lines(lines: Sequence[str]) -> list[str]:
    return [ln for ln in lines if ln.strip() and not ln.lstrip().startswith("#")]


def detect_layout(lines: Sequence[str]) -> Layout:
    """Delimiter and header from the first data lines (see the module rules)."""
    data = _data_lines(lines)
    if not data:
        return Layout(None, None)
    delim = _delimiter(data[0])
    first = split_rows(data[:1], delim)[0]
    header = None
    if any(not _is_number(f) and not _is_missing(f) for f in first):
        header = first
    return Layout(delim, header)


def _numeric_columns(rows: list[list[str]], width: int, share: float = 1.0) -> list[int]:
    """Columns whose present (non-missing) values are numbers, at least ``share`` of them."""
    cols = []
    for c in range(width):
        vals = [r[c] for r in rows if len(r) > c]
        present = [v for v in vals if not _is_missing(v)]
        if present and sum(_is_number(v) for v in present) >= share * len(present):
            cols.append(c)
    return cols


def looks_numeric(lines: Sequence[str]) -> bool:
    """True when the sampled lines form a table with at least one all-numeric column (used by auto)."""
    data = _data_lines(lines)
    if not data:
        return False
    lay = detect_layout(data)
    rows = split_rows(data[1:] if lay.header else data, lay.delimiter)
    if not rows:
        return False
    widths = {len(r) for r in rows}
    if lay.delimiter is None:
        if len(widths) != 1:
            return False
        fields = [f for r in rows for f in r]
        if sum(_is_number(f) for f in fields) * 2 < len(fields):
            return False
    return bool(_numeric_columns(rows, max(widths)))


def _time_like(name: str, rows: list[list[str]], c: int) -> bool:
    """Whether column ``c`` holds the time of each row (see the module rules)."""
    if name.strip().lower() in TIME_NAMES:
        return True
    vals = [r[c] for r in rows if len(r) > c and not _is_missing(r[c])]
    if len(vals) < 3 or not all(_is_number(v) for v in vals):
        return False
    x = [float(v) for v in vals]
    return all(v == int(v) for v in x) and all(b > a for a, b in zip(x, x[1:]))


def time_numbers(fields: Sequence[str]) -> np.ndarray:
    """Times as numbers: ``YYYYMMDD`` whole numbers as days, ISO dates/times as seconds, numbers as they are; NaN if unreadable."""
    return _time_numbers(fields)[0]


def _time_numbers(fields: Sequence[str]) -> tuple[np.ndarray, str]:
    """:func:`time_numbers` and the unit (``days``, ``seconds`` or ``""`` for numbers as given); vectorised."""
    texts = np.char.strip(np.asarray(list(fields), dtype=str))
    out = np.full(texts.size, np.nan)
    present = texts != ""
    if not present.any():
        return out, ""
    try:
        x = texts[present].astype(np.float64)
    except ValueError:
        x = None
    if x is not None:
        whole = bool(np.all(x == np.floor(x)))
        if whole and bool(np.all((x >= 10000101) & (x <= 99991231))):
            y, m, d = (x // 10000).astype(np.int64), (x // 100 % 100).astype(np.int64), (x % 100).astype(np.int64)
            if bool(np.all((m >= 1) & (m <= 12) & (d >= 1) & (d <= 31))):
                months = (y - 1970) * 12 + (m - 1)
                days = months.astype("datetime64[M]").astype("datetime64[D]") + (d - 1)
                out[present] = days.astype(np.int64).astype(np.float64)
                return out, "days"
        out[present] = x
        return out, ""
    iso = np.char.replace(texts[present], " ", "T")
    try:
        out[present] = iso.astype("datetime64[s]").astype(np.int64).astype(np.float64)
    except ValueError:
        vals = np.full(iso.size, np.nan)
        for i, f in enumerate(iso):  # mixed readable and unreadable times: one by one (rare)
            try:
                vals[i] = float(np.datetime64(str(f), "s").astype(np.int64))
            except ValueError:
                pass
        out[present] = vals
    return out, "seconds"


def _find_time_column(layout: Layout, rows: list[list[str]], width: int) -> None:
    """Set the layout's time column (the first column other than the one read that looks like a time) and its step."""
    heads = layout.header or []
    for c in range(width):
        if c == layout.column:
            continue
        vals = [r[c] for r in rows if len(r) > c and not _is_missing(r[c])]
        name = heads[c] if c < len(heads) else ""
        t, unit = _time_numbers(vals)
        parsed = bool(vals) and bool(np.all(np.isfinite(t)))
        if not parsed:
            continue
        strictly = t.size >= 3 and bool(np.all(np.diff(t) > 0))
        numeric_int = all(_is_number(v) and float(v) == int(float(v)) for v in vals)
        if name.strip().lower() in TIME_NAMES or (strictly and (numeric_int or not all(_is_number(v) for v in vals))):
            layout.time_index = c
            layout.time_unit = unit
            if not layout.time_column:
                layout.time_column = name or str(c)
            steps = np.diff(t)
            steps = steps[steps > 0]
            if steps.size >= 2:
                med = float(np.median(steps))
                if np.mean((steps >= 0.5 * med) & (steps <= 1.5 * med)) >= 0.9:
                    layout.time_step = med
            return


def several_columns(layout: Layout, sample: Sequence[str], column: str | int | None, name: str) -> list[str] | None:
    """The columns a multi-column choice names (``"a,b"``, ``"0,2"`` or ``"all"``), else ``None``.

    Returns header names (0-based indices as text when there is no header), in file order
    for ``all`` and in the order given otherwise, duplicates removed.  ``None`` when
    ``column`` names one column (a header name is taken whole, commas and all).
    """
    if not isinstance(column, str):
        return None
    text = column.strip()
    if layout.header and (text in layout.header or text.lower() in [h.lower() for h in layout.header]):
        return None
    data = _data_lines(sample)
    rows = split_rows(data[1:] if layout.header else data, layout.delimiter)
    width = max([len(r) for r in rows] + [len(layout.header or [])] + [1])
    heads = layout.header or []

    def label(c: int) -> str:
        return heads[c] if c < len(heads) and heads[c] else str(c)

    if text.lower() == "all":
        found = _numeric_columns(rows, width, share=0.5)
        measured = [c for c in found if not _time_like(heads[c] if c < len(heads) else "", rows, c)
                    and not (c < len(heads) and heads[c].strip().lower() in CALENDAR_NAMES)]
        cols = measured or found
        if not cols:
            raise InputError(f"{name} has no column of numbers; check the file or name the columns to read.")
        return [label(c) for c in cols]
    if "," not in text:
        return None
    out: list[str] = []
    for part in (p.strip() for p in text.split(",")):
        if not part:
            raise ParameterError(f"The column list {column!r} has an empty entry; separate names or indices by single commas.",
                                 parameter="column")
        one = choose_column(Layout(layout.delimiter, layout.header), sample, part, name)
        if label(one.column) not in out:
            out.append(label(one.column))
    return out


def choose_column(layout: Layout, sample: Sequence[str], column: str | int | None, name: str) -> Layout:
    """Fill ``layout.column`` from a name, an index, or the first numeric column."""
    data = _data_lines(sample)
    rows = split_rows(data[1:] if layout.header else data, layout.delimiter)
    width = max([len(r) for r in rows] + [len(layout.header or [])] + [1])
    if isinstance(column, str) and not column.lstrip("-").isdigit():
        if not layout.header:
            raise ParameterError(f"{name} has no header line, so column {column!r} cannot be found; give a 0-based index.", parameter="column")
        names = layout.header
        if column in names:
            idx = names.index(column)
        else:
            lowered = [n.lower() for n in names]
            if column.lower() not in lowered:
                several = "," in column or column.strip().lower() == "all"
                raise ParameterError(
                    f"{name} has no column {column!r}; its columns are {', '.join(repr(n) for n in names[:12])}"
                    + (f" and {len(names) - 12} more" if len(names) > 12 else "")
                    + ("; several columns (a,b or all) are read as separate sources by profile, survey and drift, "
                       "other commands read one." if several else "."),
                    parameter="column",
                )
            idx = lowered.index(column.lower())
    elif column is not None:
        idx = int(column)
        if idx < 0 or idx >= width:
            raise ParameterError(f"Column index {idx} is outside 0..{width - 1} for {name}; give a valid 0-based index.", parameter="column")
    else:
        found = _numeric_columns(rows, width, share=0.5)
        if not found:
            raise InputError(f"{name} has no column of numbers; check the file or name the column to read.")
        heads = layout.header or []
        timed = [c for c in found if _time_like(heads[c] if c < len(heads) else "", rows, c)]
        calendar = [c for c in found if c < len(heads) and heads[c].strip().lower() in CALENDAR_NAMES]
        rest = [c for c in found if c not in timed and c not in calendar]
        idx = rest[0] if rest else found[0]
        if rest and timed and timed[0] < idx:
            layout.time_column = heads[timed[0]] if timed[0] < len(heads) else str(timed[0])
    layout.column = idx
    layout.column_name = layout.header[idx] if layout.header and idx < len(layout.header) else str(idx)
    _find_time_column(layout, rows, width)
    return layout


def parse_values(
    lines: list[str], first_line: int, layout: Layout, name: str, started: bool, clock: dict | None = None,
    where: list | None = None,
) -> tuple[np.ndarray, bool]:
    """Values of the chosen column in ``lines`` (NaN for missing).

    Comment lines are skipped; so are blank lines and the header before the
    first data line (``started`` says whether it was seen in an earlier
    block).  Later blank lines are missing values.  With a regular time
    column (``layout.time_step > 0``) and a ``clock`` (``{"last": None,
    "gaps": 0}``, carried across blocks), a NaN is inserted before each row
    that follows a gap, and ``clock["gaps"]`` counts them.  Returns the values
    and the updated ``started``.  With a list ``where``, appends ``(line numbers, times)``
    aligned with the values: the 1-based file line of each value (-1 for an inserted gap)
    and the time-column text of its row (``None`` without a time column).
    """
    keep: list[tuple[int, str]] = []
    for i, ln in enumerate(lines):
        if ln.lstrip().startswith("#"):
            continue
        if not started:
            if not ln.strip():
                continue
            started = True
            if layout.header is not None:
                continue
        keep.append((i, ln))
    if not keep:
        return np.zeros(0, dtype=np.float64), started
    rows = split_rows([ln for _, ln in keep], layout.delimiter)
    numbers = first_line + np.fromiter((i for i, _ in keep), dtype=np.int64, count=len(keep)) if where is not None else None
    times = None
    if where is not None and layout.time_index >= 0:
        times = np.array([r[layout.time_index].strip() if len(r) > layout.time_index else "" for r in rows], dtype=object)
    col = layout.column
    fields = np.array([r[col] if len(r) > col else "" for r in rows], dtype=str)
    low = np.char.lower(np.char.strip(fields))
    missing = np.isin(low, list(MISSING))
    out = np.full(len(fields), np.nan)
    good = ~missing
    try:
        out[good] = fields[good].astype(np.float64)
    except ValueError:
        for k in np.flatnonzero(good):
            if not _is_number(fields[k]):
                raise InputError(
                    f"{name} line {first_line + keep[int(k)][0]} has {str(fields[k])[:30]!r} in column "
                    f"{layout.column_name!r}, which is not a number; fix it or mark it missing (empty or NA)."
                ) from None
        raise  # pragma: no cover - astype failed yet every field parses
    out[~np.isfinite(out)] = np.nan
    if clock is not None and layout.time_step > 0 and layout.time_index >= 0:
        tc = layout.time_index
        t = time_numbers([r[tc] if len(r) > tc else "" for r in rows])
        prev = np.concatenate([[np.nan if clock["last"] is None else clock["last"]], t[:-1]])
        # carry the last readable time forward over rows whose time is missing
        pos = np.where(np.isfinite(prev), np.arange(prev.size), 0)
        filled = prev[np.maximum.accumulate(pos)]
        gap = np.flatnonzero((t - filled) > 1.5 * layout.time_step)
        good = t[np.isfinite(t)]
        if good.size:
            clock["last"] = float(good[-1])
        if gap.size:
            clock["gaps"] += int(gap.size)
            out = np.insert(out, gap, np.nan)
            if numbers is not None:
                numbers = np.insert(numbers, gap, -1)
                times = None if times is None else np.insert(times, gap, "")
    if where is not None:
        where.append((numbers, times))
    return out, started


def value_blocks(
    origin: Origin, layout: Layout, block_size: int, clock: dict | None = None, where: list | None = None
) -> Iterator[np.ndarray]:
    """The column's values block by block (NaN = missing, or a gap in the time column when ``clock`` is given).

    ``where`` collects each block's line numbers and times (see :func:`parse_values`)."""
    started = False
    for first_line, block in line_blocks(origin, block_size):
        text = block.decode("utf-8", errors="replace")
        lines = text.split("\n")
        if lines and lines[-1] == "":
            lines.pop()
        vals, started = parse_values([ln.rstrip("\r") for ln in lines], first_line, layout, origin.name, started, clock, where)
        yield vals


# ------------------------------------------------------------ symbolizing
def bin_symbols(k: int) -> tuple[str, ...]:
    """Names of ``k`` bins: digits, then letters, then ``b00``... beyond 36."""
    if k <= len(_DIGITS):
        return tuple(_DIGITS[:k])
    width = len(str(k - 1))
    return tuple(f"b{i:0{width}d}" for i in range(k))


def ordinal_alphabet(m: int) -> Alphabet:
    """All ``m!`` permutations of ``0..m-1`` in lexicographic order, as digit strings."""
    syms = tuple("".join(str(d) for d in p) for p in itertools.permutations(range(m)))
    return Alphabet(f"ordinal{m}", syms)


def ordinal_symbol(window: Sequence[float]) -> str:
    """The ordinal-pattern symbol of one window (stable ranking), e.g. ``"021"``."""
    order = sorted(range(len(window)), key=lambda i: window[i])
    return "".join(str(i) for i in order)


@dataclass
class Plan:
    """How values become symbols."""

    method: str  # quantile | thresholds | ordinal
    alphabet: Alphabet
    edges: np.ndarray = field(default_factory=lambda: np.zeros(0))
    order: int = 0
    delay: int = 1
    ties: str = "time"
    seed: int = 0


def check_parameters(
    bins: int, thresholds: list[float] | None, ordinal: int, delay: int = 1, ties: str = "time"
) -> None:
    """Raise :class:`ParameterError` for impossible symbolization parameters."""
    if isinstance(delay, bool) or not isinstance(delay, (int, np.integer)) or not 1 <= int(delay) <= MAX_DELAY:
        raise ParameterError(f"The embedding delay must be a whole number of samples from 1 to {MAX_DELAY}; got {delay!r}.",
                             parameter="delay")
    if ties not in TIE_RULES:
        raise ParameterError(f"Ties are ordered by 'time' or by a seeded 'dither'; got {ties!r}.", parameter="ties")
    if not ordinal and (int(delay) != 1 or ties != "time"):
        which = "delay" if int(delay) != 1 else "ties"
        raise ParameterError(f"The {'embedding delay' if which == 'delay' else 'tie rule'} applies to ordinal patterns only; "
                             "give an ordinal order as well.", parameter=which)
    if ordinal:
        if thresholds:
            raise ParameterError("Give either thresholds or an ordinal order, not both.", parameter="ordinal")
        if not 2 <= ordinal <= MAX_ORDER:
            raise ParameterError(f"The ordinal-pattern order must be between 2 and {MAX_ORDER}; got {ordinal}.", parameter="ordinal")
        return
    if thresholds is not None:
        t = np.asarray(thresholds, dtype=np.float64)
        if t.size == 0 or not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
            raise ParameterError("Thresholds must be finite and strictly increasing, e.g. 0.2,0.5,0.8.", parameter="thresholds")
        return
    if not 2 <= int(bins) <= 4096:
        raise ParameterError(f"The number of bins must be between 2 and 4096; got {bins}.", parameter="bins")


def plan(
    origin: Origin, layout: Layout, bins: int, thresholds: list[float] | None, ordinal: int, block_size: int,
    delay: int = 1, ties: str = "time", seed: int = 0,
) -> tuple[Plan, dict]:
    """Decide the symbolization (first pass over the column for quantile edges)."""
    if ordinal:
        return Plan("ordinal", ordinal_alphabet(ordinal), order=ordinal, delay=int(delay), ties=ties, seed=int(seed)), {}
    if thresholds is not None:
        edges = np.asarray(thresholds, dtype=np.float64)
        return Plan("thresholds", Alphabet(f"threshold{len(edges) + 1}", bin_symbols(len(edges) + 1)), edges), {}
    parts = [v[np.isfinite(v)] for v in value_blocks(origin, layout, block_size)]
    values = np.concatenate(parts) if parts else np.zeros(0)
    if values.size == 0:
        raise InputError(f"{origin.name} has no numbers in column {layout.column_name!r}; check the file or the column.")
    edges = np.quantile(values, np.arange(1, bins) / bins)
    info = {"values_in_first_pass": int(values.size)}
    return Plan("quantile", Alphabet(f"quantile{bins}", bin_symbols(bins)), edges), info


def symbol_chunks(origin: Origin, layout: Layout, p: Plan, block_size: int, report: ReadReport) -> Iterator[Chunk]:
    """Second pass: symbols of the column, NaN ending the segment."""
    dtype = p.alphabet.code_dtype
    total = segments = missing = values = 0
    clock: dict = {"last": None, "gaps": 0}
    where: list = []
    valid_parts: list[np.ndarray] = []
    if p.method == "ordinal":
        m = p.order
        fact = np.array([math.factorial(i) for i in range(m + 1)], dtype=np.int64)
        carry = np.zeros(0)
        in_seg = 0
        general = p.delay != 1 or p.ties != "time"
        key = OS.Keys(p.ties, p.seed)
        for v in value_blocks(origin, layout, block_size, clock, where):
            if v.size == 0:
                continue
            valid_parts.append(np.isfinite(v))
            values += v.size
            x = np.concatenate([carry, v]) if carry.size else v
            codes = np.empty(x.size, dtype=dtype)
            starts = np.empty(x.size + 1, dtype=np.int64)
            if general:
                nc, ns, in_seg, nan, carry = OS.general_ordinal(x, v.size, carry.size, key, m, p.delay, in_seg, codes, starts, fact)
            else:
                nc, ns, in_seg, nan = K.ordinal_codes(x, m, carry.size, in_seg, codes, starts, fact)
                tail = x[-(m - 1):] if m > 1 else x[:0]
                cut = np.flatnonzero(np.isnan(tail))
                carry = tail[cut[-1] + 1:] if cut.size else tail.copy()
            missing += nan
            if nc:
                yield Chunk(codes[:nc], starts[:ns].copy())
            total += nc
            segments += ns
    else:
        prev_valid = False
        for v in value_blocks(origin, layout, block_size, clock, where):
            if v.size == 0:
                continue
            values += v.size
            valid = np.isfinite(v)
            valid_parts.append(valid)
            missing += int((~valid).sum())
            codes = np.searchsorted(p.edges, v[valid], side="right").astype(dtype)
            before = np.concatenate([[prev_valid], valid[:-1]])
            new_seg = valid & ~before
            pos = np.cumsum(valid) - 1
            starts = pos[new_seg].astype(np.int64)
            prev_valid = bool(valid[-1])
            if codes.size:
                yield Chunk(codes, starts)
            total += codes.size
            segments += starts.size
    gaps = int(clock["gaps"])
    values -= gaps
    missing -= gaps
    report.symbols = int(total)
    report.segments = int(segments)
    report.drop("missing value", int(missing))
    if gaps:
        report.notes.append(
            f"{gaps} gap(s) in the time column {layout.time_column!r} (steps over 1.5 times the usual {layout.time_step:g}"
            f"{' ' + layout.time_unit if layout.time_unit else ''}) end a segment"
        )
    report.records = [Record(origin.name, 0, int(total))]
    report.positions = _row_positions(
        where, valid_parts, p.order if p.method == "ordinal" else 1, p.delay if p.method == "ordinal" else 1, layout, int(total)
    )
    info = {
        "column": layout.column_name,
        "column_index": layout.column,
        "method": p.method,
        "time_column": layout.time_column or None,
        "time_step": layout.time_step or None,
        "time_unit": layout.time_unit or None,
        "time_gaps": gaps,
        "values": int(values),
        "missing": int(missing),
    }
    if p.method == "ordinal":
        info["order"] = p.order
        info["delay"] = p.delay
        info["ties"] = p.ties
        if p.ties == "dither":
            info["tie_rule"] = f"dither: equal values ordered by a uniform key per value, seed {p.seed}"
            info["seed"] = p.seed
        else:
            info["tie_rule"] = "stable: equal values ordered by appearance"
    else:
        info["edges"] = [float(e) for e in p.edges]
        if np.any(np.diff(p.edges) == 0):
            report.notes.append("some quantile edges coincide (many equal values), so some bins stay empty")
    report.extra["numeric"] = info
    if total == 0:
        if p.method == "ordinal" and values:
            raise InputError(
                f"{origin.name} has no run of {p.order} consecutive numbers in column {layout.column_name!r}; "
                "use a smaller ordinal order or fill the gaps." if p.delay == 1 else
                f"{origin.name} has no complete window of {p.order} numbers {p.delay} samples apart in column "
                f"{layout.column_name!r}; use a smaller ordinal order or delay, or fill the gaps."
            )
        raise InputError(f"{origin.name} has no numbers in column {layout.column_name!r}; check the file or the column.")


def _row_positions(
    where: list, valid_parts: list[np.ndarray], order: int, delay: int, layout: Layout, total: int
) -> Positions | None:
    """The file line (and time text) of each symbol: the row of its value, or of the last value of its pattern."""
    parts = [w for w in where if w[0] is not None]
    if not parts or not valid_parts:
        return None
    numbers = np.concatenate([w[0] for w in parts])
    valid = np.concatenate(valid_parts)
    if numbers.size != valid.size:
        return None  # pragma: no cover - blocks with values always carry their lines
    # a pattern ends at a value whose order - 1 predecessors, delay apart, are present
    keep = OS.pattern_ends(valid, order, delay) if order > 1 else valid
    if int(keep.sum()) != total:
        return None  # pragma: no cover - the kernels and this rule agree
    times = None
    if layout.time_index >= 0 and all(w[1] is not None for w in parts):
        times = tuple(str(t) for t in np.concatenate([w[1] for w in parts])[keep])
    return Positions("row", numbers[keep], layout.time_column or None, times)
