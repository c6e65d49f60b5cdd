"""The template miner's route index picks the cluster its plain scan picks.

Reference: the miner's own scan (``_best_scan``, every cluster of a route compared in scan order),
forced by raising the route size at which the index takes over.  The log is invented here: seeded
random sentences of made-up words with numbers, many first words (so routes route as ``<*>`` and fill
with more than ``MAX_SCAN`` clusters), near-duplicate templates (ties) and lines without any word.
"""

from __future__ import annotations

import random

import pytest

from fractalseq.sources import miner as miner_mod
from fractalseq.sources.miner import MAX_SCAN, TemplateMiner


def _invented_log(seed: int, n_lines: int = 6000) -> list[str]:
    rng = random.Random(seed)
    syll = "ka lo mi ne su ta vo ri pe du".split()
    vocab = ["".join(rng.choice(syll) for _ in range(rng.randint(2, 3))) for _ in range(120)]
    templates = []
    for _ in range(1500):
        body = [rng.choice(vocab) for _ in range(rng.randint(4, 5))]
        body = [w if rng.random() < 0.75 else "#" for w in body]
        templates.append(body)
    templates += [["#", "#", "#"], ["#", "#", "#", "#"]]  # no plain word at all
    lines = []
    for _ in range(n_lines):
        t = rng.choice(templates)
        words = [str(rng.randint(0, 999)) if w == "#" else w for w in t]
        if rng.random() < 0.1:  # one word changed: near-duplicates and ties
            k = rng.randrange(len(words))
            words[k] = rng.choice(vocab)
        lines.append(" ".join(words))
    return lines


def _run(lines: list[str]) -> tuple[list[int], list[str]]:
    m = TemplateMiner()
    cids = m.add_many(lines)
    routes = max(len(r.members) for r in m._routes.values())
    tpls = m.finish()
    return [m.final_id(c) for c in cids] + [routes], [t.text for t in tpls]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_index_and_scan_choose_the_same_clusters(seed, monkeypatch):
    lines = _invented_log(seed)
    ids_index, texts_index = _run(lines)
    assert ids_index[-1] > MAX_SCAN  # some route is crowded: the window of recent clusters matters
    monkeypatch.setattr(miner_mod, "_INDEXED", 10**9)  # every route scanned
    ids_scan, texts_scan = _run(lines)
    assert ids_index == ids_scan
    assert texts_index == texts_scan


def _collapse_then_crowd(seed: int) -> list[str]:
    """A family folded into a free-text tail first, then a crowded route (invented lines)."""
    rng = random.Random(seed)
    words = [f"w{i}x" for i in range(400)]
    lines = ["run test " + " ".join(rng.choice(words) for _ in range(rng.randint(1, 6))) for _ in range(40)]
    lines += ["alpha beta " + " ".join(rng.choice(words) for _ in range(4)) for _ in range(120)]
    return lines


@pytest.mark.parametrize("seed", [1, 2])
def test_a_free_text_tail_before_a_crowded_route_keeps_index_and_scan_equal(seed, monkeypatch):
    """A tail template takes a cluster number too; the recency stamps must stay one per cluster (a tail
    made before a crowded route once shifted them, and the index then failed or chose other clusters)."""
    lines = _collapse_then_crowd(seed)
    ids_index, texts_index = _run(lines)
    assert any(t.endswith("<...>") for t in texts_index)  # the tail was made
    assert ids_index[-1] > MAX_SCAN
    monkeypatch.setattr(miner_mod, "_INDEXED", 10**9)
    assert _run(lines) == (ids_index, texts_index)
