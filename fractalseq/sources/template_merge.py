"""The merge pass of the template miner (:meth:`fractalseq.sources.miner.TemplateMiner.finish`, step 5 of its module).

Templates with the same pinned tokens and length are folded: first, templates seen on one line each that
are equal but at one position, where they hold ``VARIABLE_WORDS`` or more different words, fold into one
with ``<*>`` there; then templates that differ only at positions where one of them has ``<*>`` and share
enough constant tokens, repeated until nothing changes (each template is tried against at most
``MAX_SCAN`` kept ones).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Sequence

from fractalseq.sources.masks import WILDCARD

if TYPE_CHECKING:
    from fractalseq.sources.miner import MinedTemplate

__all__ = ["MAX_SCAN", "VARIABLE_WORDS", "fold_group"]

#: different words at one position (the rest of the templates equal) that make it a variable in the merge pass
VARIABLE_WORDS = 3
#: clusters a line is compared with in one route (the most recently matched), templates one is tried against in the merge pass
MAX_SCAN = 64


def _foldable(a: list[str], b: list[str], threshold: float) -> bool:
    """Whether two templates fold: they differ only where one has ``<*>`` and share enough constant tokens."""
    shared = const_a = const_b = 0
    for x, y in zip(a, b):
        if x == WILDCARD:
            if y != WILDCARD:
                const_b += 1
            continue
        const_a += 1
        if y == WILDCARD:
            continue
        const_b += 1
        if x != y:
            return False
        shared += 1
    need = max(1, math.ceil(threshold * max(const_a, const_b)))
    return shared >= need or (const_a == 0 and const_b == 0)


def _variable_positions(reps: list[tuple[int, list[str]]], parent: list[int], counts: dict[int, int]) -> list[tuple[int, list[str]]]:
    """Fold templates seen on one line each that are equal but at one position, where they hold
    at least ``VARIABLE_WORDS`` different words.

    Many different words each seen once at one place are the mark of an
    open set of values (a user name, a host name): ``user alice logged in``,
    ``user bob logged in``, ``user carol logged in`` become ``user <*>
    logged in`` (and the ordinary fold then takes ``user root logged in``
    however often root recurs), while words that recur (``status
    installed`` / ``status unpacked``), or only two alternatives
    (``job <*> started`` / ``job <*> done``), keep their templates.
    """
    once = [k for k, (cid, _) in enumerate(reps) if counts[cid] == 1]
    if len(once) < VARIABLE_WORDS:
        return reps
    n = len(reps[0][1])
    alive = dict.fromkeys(once)
    gone: set[int] = set()
    toks = [list(t) for _, t in reps]
    for p in range(n):
        buckets: dict[tuple[str, ...], list[int]] = {}
        for k in alive:
            t = toks[k]
            if t[p] == WILDCARD:
                continue
            buckets.setdefault((*t[:p], *t[p + 1 :]), []).append(k)
        for ks in buckets.values():
            if len(ks) >= VARIABLE_WORDS:
                head = ks[0]
                toks[head][p] = WILDCARD
                for k in ks[1:]:
                    parent[reps[k][0]] = reps[head][0]
                    del alive[k]
                    gone.add(k)
    return [(cid, toks[k]) for k, (cid, _) in enumerate(reps) if k not in gone]


def fold_group(clusters: Sequence[MinedTemplate], members: list[int], parent: list[int], counts: dict[int, int],
               threshold: float) -> None:
    """Fold the templates of one (pinned, length) group; each is tried against at most ``MAX_SCAN`` kept ones.

    Parameters
    ----------
    clusters:
        The miner's clusters (a kept one's ``tokens`` become its folded template).
    members:
        The group's clusters, by number, in order of creation.
    parent:
        Per cluster, the cluster it was folded into (itself when kept); updated.
    counts:
        Lines per kept template of the group; filled here.
    threshold:
        The miner's similarity threshold (share of constant tokens two templates must share).
    """
    reps: list[tuple[int, list[str]]] = []
    exact: dict[tuple[str, ...], int] = {}
    for cid in members:
        key = tuple(clusters[cid].tokens)
        rid = exact.get(key)
        if rid is None:
            exact[key] = cid
            reps.append((cid, list(key)))
            counts[cid] = clusters[cid].count
        else:
            parent[cid] = rid
            counts[rid] += clusters[cid].count
    reps = _variable_positions(reps, parent, counts)
    changed = True
    while changed and len(reps) > 1:
        changed = False
        out: list[tuple[int, list[str]]] = []
        for cid, toks in reps:
            lo = max(0, len(out) - MAX_SCAN)
            for k in range(lo, len(out)):
                rid, rt = out[k]
                if _foldable(rt, toks, threshold):
                    out[k] = (rid, [x if x == y else WILDCARD for x, y in zip(rt, toks)])
                    parent[cid] = rid
                    changed = True
                    break
            else:
                out.append((cid, toks))
        reps = out
    for rid, rt in reps:
        clusters[rid].tokens = rt
