"""Per-window and per-record code lengths gathered from the surprisals of each chunk."""

from __future__ import annotations

import numpy as np

from fractalseq.predict._results import RecordScore


class Tally:
    """Per-window and per-segment code lengths from chunk surprisals (memory: one float per window and segment)."""

    def __init__(self, window: int, keep: bool) -> None:
        self.window = int(window)
        self.keep = keep
        self.pos = 0
        self.windows: list[float] = []
        self._partial = 0.0
        self._parts: list[np.ndarray] = []
        self.seg_starts: list[int] = []
        self.seg_bits: list[float] = []

    def add(self, sur: np.ndarray, starts: np.ndarray) -> None:
        s = sur.astype(np.float64)
        n = s.size
        if n == 0:
            return
        if self.keep:
            self._parts.append(sur.copy())
        i = 0
        if self.pos % self.window:
            need = self.window - self.pos % self.window
            take = min(need, n)
            self._partial += float(s[:take].sum())
            i = take
            if take == need:
                self.windows.append(self._partial)
                self._partial = 0.0
        whole = (n - i) // self.window
        if whole:
            self.windows.extend(s[i : i + whole * self.window].reshape(whole, self.window).sum(axis=1).tolist())
            i += whole * self.window
        if i < n:
            self._partial += float(s[i:].sum())
        st = np.asarray(starts, dtype=np.int64)
        st = st[(st >= 0) & (st < n)]
        cuts = np.unique(np.concatenate([np.zeros(1, np.int64), st]))
        sums = np.add.reduceat(s, cuts)
        for c, v in zip(cuts.tolist(), sums.tolist()):
            if c == 0 and (st.size == 0 or st[0] != 0) and self.seg_bits:
                self.seg_bits[-1] += v
            else:
                self.seg_starts.append(self.pos + c)
                self.seg_bits.append(v)
        self.pos += n

    def finish(self, records) -> tuple[np.ndarray, np.ndarray | None, list[RecordScore]]:
        wins = list(self.windows)
        if self.pos % self.window:
            wins.append(self._partial)
        sur = np.concatenate(self._parts) if self.keep and self._parts else None
        rows = record_scores(np.asarray(self.seg_starts, dtype=np.int64), np.asarray(self.seg_bits, dtype=np.float64), records)
        return np.asarray(wins, dtype=np.float64), sur, rows


def record_scores(starts: np.ndarray, bits: np.ndarray, records) -> list[RecordScore]:
    """Code length of each record from the code lengths of the segments (``bits``) starting at ``starts``."""
    rows = []
    for r in records:
        lo, ln = int(r.start), int(r.length)
        sel = (starts >= lo) & (starts < lo + ln)
        total = float(bits[sel].sum())
        rows.append(RecordScore(r.name, lo, ln, total, total / ln if ln else None))
    return rows
