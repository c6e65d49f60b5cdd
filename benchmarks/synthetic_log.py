"""An invented event log with many templates, for the large-alphabet benchmarks (nothing here is real data).

Scenario (invented for this project): a fleet of "orchard" services writes one line per event.  Each
event type (template) is a fixed sentence of invented words with a few variable fields (numbers, hex ids,
addresses); event types come in *workflows* (a fixed chain of 3 to 8 event types, e.g. a request that is
parsed, routed and answered), and workflows run one after another, their popularity following a Zipf law
(a few common, many rare), with interleaving of two workflows now and then and an occasional stray event.
So the next event is predictable from the previous ones, as in a real service log, and the template
alphabet is large (``--templates`` distinct sentences, about 20,000 by default).

The words are syllable strings made up here (``korvel``, ``tamsid`` ...), so no template collides with a
real program's message.  Same arguments (and seed) give the same bytes.

Run: python benchmarks/synthetic_log.py OUT.log [--lines 100000] [--templates 20000] [--seed 7]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

SYLLABLES = ("kor vel tam sid bru nax fen dol qui ras mop lek zan tir gub hos wen pal cir dut ymo jar "
             "sek bol fip nor vash ulk trem gaz").split()


def _words(rng: np.random.Generator, n: int) -> list[str]:
    """``n`` distinct invented words of two or three syllables (letters only: never masked as variables)."""
    out: list[str] = []
    seen: set[str] = set()
    while len(out) < n:
        k = int(rng.integers(2, 4))
        w = "".join(SYLLABLES[int(i)] for i in rng.integers(0, len(SYLLABLES), k))
        if w not in seen:
            seen.add(w)
            out.append(w)
    return out


def _variable(rng: np.random.Generator, kind: int) -> str:
    if kind == 0:
        return str(int(rng.integers(0, 100000)))
    if kind == 1:
        return "0x%08x" % int(rng.integers(0, 1 << 32))
    if kind == 2:
        return "10.%d.%d.%d" % tuple(int(v) for v in rng.integers(0, 256, 3))
    return "%dms" % int(rng.integers(1, 5000))


def make_templates(rng: np.random.Generator, n: int) -> list[list[object]]:
    """``n`` templates: lists of constant words (str) and variable slots (int kind), all with distinct heads."""
    vocab = _words(rng, 3000)
    services = _words(rng, 400)
    out: list[list[object]] = []
    heads: set[tuple[str, str]] = set()
    while len(out) < n:
        svc = services[int(rng.integers(0, len(services)))]
        verb = vocab[int(rng.integers(0, len(vocab)))]
        if (svc, verb) in heads:
            continue
        heads.add((svc, verb))
        body: list[object] = [svc, verb]
        for _ in range(int(rng.integers(3, 9))):
            body.append(vocab[int(rng.integers(0, len(vocab)))] if rng.random() < 0.7 else int(rng.integers(0, 4)))
        out.append(body)
    return out


def generate(lines: int = 100_000, templates: int = 20_000, seed: int = 7) -> list[str]:
    """The log's lines (see the module docstring)."""
    rng = np.random.default_rng(seed)
    tpl = make_templates(rng, templates)
    order = rng.permutation(templates)
    flows: list[np.ndarray] = []
    pos = 0
    while pos < templates:  # every template belongs to one workflow
        k = int(rng.integers(3, 9))
        flows.append(order[pos : pos + k])
        pos += k
    weights = 1.0 / np.arange(1, len(flows) + 1) ** 0.8
    weights /= weights.sum()
    out: list[str] = []
    sec = 0
    pending: list[int] = []
    while len(out) < lines:
        if not pending:
            pending = list(flows[int(rng.choice(len(flows), p=weights))])
            if rng.random() < 0.1:  # another workflow interleaved
                other = list(flows[int(rng.choice(len(flows), p=weights))])
                merged = []
                while pending or other:
                    src = pending if (pending and (not other or rng.random() < 0.5)) else other
                    merged.append(src.pop(0))
                pending = merged
        t = pending.pop(0) if rng.random() > 0.02 else int(rng.integers(0, templates))
        sec += int(rng.integers(0, 3))
        words = [w if isinstance(w, str) else _variable(rng, w) for w in tpl[t]]
        hh, mm, ss = (sec // 3600) % 24, (sec // 60) % 60, sec % 60
        out.append(f"2031-05-{1 + sec // 86400:02d} {hh:02d}:{mm:02d}:{ss:02d} INFO " + " ".join(words))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--lines", type=int, default=100_000)
    ap.add_argument("--templates", type=int, default=20_000)
    ap.add_argument("--seed", type=int, default=7)
    a = ap.parse_args()
    text = "\n".join(generate(a.lines, a.templates, a.seed)) + "\n"
    a.out.write_text(text, encoding="ascii")


if __name__ == "__main__":
    main()
