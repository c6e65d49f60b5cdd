"""Lines matched against a template table given in advance (a model's): the most specific matching template wins.

A line takes the template with the most constant tokens (then the lowest
index) whose constant tokens all equal the line's tokens at the same
positions; a template ending in ``<...>`` takes any number of further tokens.
The line's tokens are those of the template miner
(:func:`fractalseq.sources.miner.line_signature`).
"""

from __future__ import annotations

from typing import Sequence

from fractalseq.sources.headers import split_header
from fractalseq.sources.masks import WILDCARD
from fractalseq.sources.structured import Tokenizer

__all__ = ["TAIL", "TemplateIndex"]

#: a template ending in this token takes any number of further tokens (a free-text tail)
TAIL = "<...>"
_MSG_CACHE = 1 << 16


class TemplateIndex:
    """Lines matched against a template table given in advance (most specific matching template wins).

    A template ending in ``<...>`` (:data:`TAIL`) matches a line that has its
    other tokens and any number of tokens after them.

    Parameters
    ----------
    templates:
        Template texts (tokens joined by single spaces, ``<*>`` for a wildcard).
    """

    def __init__(self, templates: Sequence[str]) -> None:
        self.templates = list(templates)
        self._by_len: dict[int, list[tuple[int, int, list[str]]]] = {}
        self._tails: list[tuple[int, int, list[str]]] = []
        for i, t in enumerate(self.templates):
            toks = t.split(" ")
            const = sum(1 for x in toks if x != WILDCARD and x != TAIL)
            if toks[-1] == TAIL:
                self._tails.append((-const, i, toks[:-1]))
            else:
                self._by_len.setdefault(len(toks), []).append((-const, i, toks))
        for v in self._by_len.values():
            v.sort(key=lambda e: (e[0], e[1]))
        self._tails.sort(key=lambda e: (e[0], e[1]))
        self._cand: dict[tuple[int, str], list[tuple[int, int, list[str]]]] = {}
        self._memo: dict[tuple[str, ...], int] = {}
        self.tokenize = Tokenizer()

    def _candidates(self, n: int, first: str) -> list[tuple[int, int, list[str]]]:
        key = (n, first)
        c = self._cand.get(key)
        if c is None:
            c = [e for e in self._by_len.get(n, ()) if e[2][0] == first or e[2][0] == WILDCARD]
            if self._tails:
                c += [e for e in self._tails if len(e[2]) <= n and (not e[2] or e[2][0] == first or e[2][0] == WILDCARD)]
                c.sort(key=lambda e: (e[0], e[1]))
            if len(self._cand) < _MSG_CACHE:
                self._cand[key] = c
        return c

    def match_tokens(self, toks: Sequence[str]) -> int:
        """Index of the most specific template matching the tokens, or -1."""
        key = tuple(toks)
        hit = self._memo.get(key)
        if hit is not None:
            return hit
        res = -1
        if toks:
            for _, i, tt in self._candidates(len(toks), toks[0]):
                for a, b in zip(tt, toks):
                    if a != b and a != WILDCARD:
                        break
                else:
                    res = i
                    break
        if len(self._memo) >= _MSG_CACHE:
            self._memo.clear()
        self._memo[key] = res
        return res

    def match(self, line: str) -> int:
        """Index of the template a raw line matches, or -1."""
        _, msg = split_header(line)
        pinned, free = self.tokenize(msg)
        return self.match_tokens(list(pinned) + free)
