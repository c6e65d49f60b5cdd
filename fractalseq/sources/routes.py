"""Clusters of one route of the template miner, with an index of their template words.

The miner (:mod:`fractalseq.sources.miner`) compares a line with the clusters
of its route on the plain words they share at the same positions.  The index
here maps (position, word) to the clusters whose template holds that word
there, so the clusters agreeing with a line on at least one word, and on how
many, are found without comparing the line with every cluster.  Templates
only ever lose words (a position becomes ``<*>``), so the index only loses
entries after a cluster is made.
"""

from __future__ import annotations

__all__ = ["Route"]


class Route:
    """Clusters of one route (by when they were made or last matched) and an index of their template words."""

    __slots__ = ("members", "index", "bare")

    def __init__(self) -> None:
        self.members: dict[int, None] = {}
        #: (position, word) -> clusters whose template has that plain word there
        self.index: dict[tuple[int, str], set[int]] = {}
        #: clusters whose template holds no plain word
        self.bare: set[int] = set()

    def learn(self, cid: int, toks: list[str], words: list[bool]) -> None:
        """Index a new cluster's template.

        Parameters
        ----------
        cid:
            The cluster's number.
        toks:
            Its template's tokens.
        words:
            Per token, whether it is a plain word (only those are indexed).
        """
        index = self.index
        any_word = False
        for i, (t, w) in enumerate(zip(toks, words)):
            if w:
                any_word = True
                s = index.get((i, t))
                if s is None:
                    index[(i, t)] = {cid}
                else:
                    s.add(cid)
        if not any_word:
            self.bare.add(cid)

    def forget(self, cid: int, old: list[str], new: list[str], n_words: int) -> None:
        """Drop the words a cluster's template lost (they became wildcards).

        Parameters
        ----------
        cid:
            The cluster's number.
        old, new:
            Its template's tokens before and after the change.
        n_words:
            Plain words left in the new template (none: the cluster joins ``bare``).
        """
        index = self.index
        for i, (a, b) in enumerate(zip(old, new)):
            if a != b:
                s = index.get((i, a))
                if s is not None:
                    s.discard(cid)
        if not n_words:
            self.bare.add(cid)
