"""A data-driven template miner for event-log lines.

Each line goes through four steps:

1. Its header is separated (:func:`fractalseq.sources.headers.split_header`):
   the time is dropped; host, program and level are kept beside the template
   and never split templates.
2. The message is tokenized and masked in linear time
   (:mod:`fractalseq.sources.structured`, :mod:`fractalseq.sources.masks`):
   variable-looking tokens become ``<*>``; a JSON or logfmt line gives
   *pinned* tokens (its keys, and event-name values) and the *free* tokens
   of its message field.
3. Grouping, in one streaming pass (the general fixed-depth scheme of
   online log parsers): lines are routed by (pinned tokens, number of free
   tokens, the first ``depth`` free tokens, masked ones as ``<*>``); within a
   route a line joins the cluster whose template it matches best, when the
   share of positions where the line's token equals the template's token is
   at least ``threshold``; else it starts a cluster.  A position whose tokens
   differ between members becomes ``<*>``.  A message seen before (same
   text) joins the cluster it joined then.
4. A merge pass (:meth:`TemplateMiner.finish`): templates with the same
   pinned tokens and length are folded when they differ only at positions
   where one of them has ``<*>`` and share enough constant tokens, repeated
   until nothing changes.

Template ids are given by order of first appearance after the merge pass.
Everything depends on the sequence of lines only (not on how they were cut
into blocks), so the same input gives the same templates and ids.  Memory is
linear in the number of clusters (no table over pairs of templates).

Matching lines against a template table fixed in advance (a model's) is done
by :class:`TemplateIndex`: a line takes the most specific template (most
constant tokens, then lowest code) whose constant tokens all equal the
line's tokens at the same positions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

from fractalseq.errors import ParameterError
from fractalseq.sources.headers import Header, split_header
from fractalseq.sources.masks import WILDCARD
from fractalseq.sources.structured import Tokenizer

__all__ = ["DEFAULT_DEPTH", "DEFAULT_THRESHOLD", "MinedTemplate", "TemplateIndex", "TemplateMiner", "line_signature"]

DEFAULT_THRESHOLD = 0.5
DEFAULT_DEPTH = 2
DEFAULT_MAX_CHILDREN = 32
_ROUTE_STRIP = "[]()<>{}:,;.!?\"'"


def _routable(tok: str) -> bool:
    """A leading token used in the routing key: a plain word (letters, ``-``, ``_``, ``'``), punctuation aside."""
    core = tok.strip(_ROUTE_STRIP)
    return bool(core) and core.replace("-", "").replace("_", "").replace("'", "").isalpha()
#: distinct values kept per header field and template (the rest are counted under "")
_FIELD_VALUES = 8
_MSG_CACHE = 1 << 16


@dataclass
class MinedTemplate:
    """One template: its tokens, how many lines it covers, where it first occurs, the header fields seen."""

    tokens: list[str]
    pinned: tuple[str, ...]
    count: int = 0
    first: int = 0  # order of the first line (0-based index among the mined lines)
    fields: dict[str, dict[str, int]] = field(default_factory=dict)

    @property
    def text(self) -> str:
        """The template as text: tokens joined by single spaces."""
        return " ".join(self.pinned + tuple(self.tokens)) if self.pinned else " ".join(self.tokens)

    def absorb_fields(self, hdr: Header | dict[str, dict[str, int]], n: int = 1) -> None:
        items = hdr.items() if isinstance(hdr, dict) else ((k, {v: n}) for k, v in zip(hdr._fields, hdr) if v)
        for name, values in items:
            slot = self.fields.setdefault(name, {})
            for v, c in values.items():
                if v in slot or len(slot) < _FIELD_VALUES:
                    slot[v] = slot.get(v, 0) + c
                else:
                    slot[""] = slot.get("", 0) + c


def _check(threshold: float, depth: int) -> None:
    if not (0.0 < threshold <= 1.0):
        raise ParameterError(f"The similarity threshold must lie in (0, 1]; got {threshold}.")
    if depth < 0:
        raise ParameterError(f"The routing depth must be 0 or more; got {depth}.")


def line_signature(line: str, tokenizer: Tokenizer | None = None) -> tuple[Header, tuple[str, ...], list[str]]:
    """Header, pinned tokens and masked free tokens of one line (steps 1 and 2 of the module)."""
    hdr, msg = split_header(line)
    pinned, free = (tokenizer or Tokenizer())(msg)
    return hdr, pinned, free


class TemplateMiner:
    """Streaming template miner (see the module documentation).

    Parameters
    ----------
    threshold:
        Least share of equal tokens for a line to join a cluster (0 < t <= 1).
    depth:
        Number of leading free tokens in the routing key.  A leading token
        that is not a plain word (it holds a digit, ``:``, ``.``, ``/``...)
        routes as ``<*>``.
    max_children:
        Distinct words kept at one routing level under the same prefix; later
        new words at that level route as ``<*>`` (a leading field that takes
        many values, such as a user name, is a variable).
    """

    def __init__(
        self, threshold: float = DEFAULT_THRESHOLD, depth: int = DEFAULT_DEPTH, max_children: int = DEFAULT_MAX_CHILDREN
    ) -> None:
        _check(threshold, depth)
        self.threshold = threshold
        self.depth = depth
        self.max_children = max_children
        self._children: dict[tuple, set[str]] = {}
        self.tokenize = Tokenizer()
        self.clusters: list[MinedTemplate] = []
        self._routes: dict[tuple, list[int]] = {}
        self._seen: dict[tuple, int] = {}
        self._lines = 0
        self._final: list[int] | None = None
        self._templates: list[MinedTemplate] | None = None

    # ------------------------------------------------------------ streaming
    def add(self, line: str) -> int:
        """Group one line; returns its cluster number (map it with :meth:`finish`)."""
        hdr, msg = split_header(line)
        pinned, free = self.tokenize(msg)
        key = (pinned, msg) if pinned else msg
        cid = self._seen.get(key)
        if cid is None:
            cid = self._place(pinned, free)
            if len(self._seen) >= _MSG_CACHE:
                self._seen.clear()
            self._seen[key] = cid
        c = self.clusters[cid]
        c.count += 1
        if hdr[0] or hdr[1] or hdr[2]:
            c.absorb_fields(hdr)
        self._lines += 1
        return cid

    def add_many(self, lines: Sequence[str]) -> list[int]:
        """:meth:`add` of every line, in order."""
        add = self.add
        return [add(ln) for ln in lines]

    def _place(self, pinned: tuple[str, ...], free: list[str]) -> int:
        n = len(free)
        route: tuple = (pinned, n)
        for tok in free[: self.depth]:
            r = tok if _routable(tok) else WILDCARD
            if r != WILDCARD:
                kids = self._children.get(route)
                if kids is None:
                    kids = self._children[route] = set()
                if r not in kids:
                    if len(kids) >= self.max_children:
                        r = WILDCARD
                    else:
                        kids.add(r)
            route = route + (r,)
        members = self._routes.get(route)
        clusters = self.clusters
        if members is None:
            members = self._routes[route] = []
        best = -1
        best_sim = -1
        best_wild = -1
        for cid in members:
            tpl = clusters[cid].tokens
            same = 0
            wild = 0
            for a, b in zip(tpl, free):
                if a == b:
                    same += 1
                elif a == WILDCARD:
                    wild += 1
            if same > best_sim or (same == best_sim and wild > best_wild):
                best, best_sim, best_wild = cid, same, wild
        if best >= 0 and (n == 0 or best_sim >= self.threshold * n):
            tpl = clusters[best].tokens
            for i, (a, b) in enumerate(zip(tpl, free)):
                if a != b and a != WILDCARD:
                    tpl[i] = WILDCARD
            return best
        clusters.append(MinedTemplate(list(free), pinned, 0, self._lines))
        members.append(len(clusters) - 1)
        return len(clusters) - 1

    # ----------------------------------------------------------- merge pass
    def _foldable(self, a: list[str], b: list[str]) -> bool:
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
        need = max(1, math.ceil(self.threshold * max(const_a, const_b)))
        return shared >= need or (const_a == 0 and const_b == 0)

    def finish(self) -> list[MinedTemplate]:
        """Run the merge pass; the final templates by order of first appearance.

        After this, :meth:`final_id` maps a cluster number to its template id.
        """
        groups: dict[tuple, list[int]] = {}
        for cid, c in enumerate(self.clusters):
            groups.setdefault((c.pinned, len(c.tokens)), []).append(cid)
        parent = list(range(len(self.clusters)))
        for members in groups.values():
            reps: list[tuple[int, list[str]]] = []
            for cid in members:
                reps.append((cid, list(self.clusters[cid].tokens)))
            changed = True
            while changed and len(reps) > 1:
                changed = False
                out: list[tuple[int, list[str]]] = []
                for cid, toks in reps:
                    for k, (rid, rt) in enumerate(out):
                        if self._foldable(rt, toks):
                            out[k] = (rid, [x if x == y else WILDCARD for x, y in zip(rt, toks)])
                            parent[cid] = rid
                            changed = True
                            break
                    else:
                        out.append((cid, toks))
                reps = out
            for rid, rt in reps:
                self.clusters[rid].tokens = rt
        root = parent[:]
        for i in range(len(root)):
            r = root[i]
            while root[r] != r:
                r = root[r]
            root[i] = r
        final: dict[int, int] = {}
        templates: list[MinedTemplate] = []
        order = sorted(range(len(self.clusters)), key=lambda i: self.clusters[i].first)
        for cid in order:
            r = root[cid]
            if r not in final:
                rc = self.clusters[r]
                final[r] = len(templates)
                templates.append(MinedTemplate(list(rc.tokens), rc.pinned, 0, self.clusters[cid].first))
            t = templates[final[r]]
            c = self.clusters[cid]
            t.count += c.count
            t.absorb_fields(c.fields)
        self._final = [final[root[i]] for i in range(len(self.clusters))]
        self._templates = templates
        return templates

    def final_id(self, cid: int) -> int:
        """Template id of a cluster number returned by :meth:`add` (after :meth:`finish`)."""
        if self._final is None:
            raise RuntimeError("call finish() first")
        return self._final[cid]

    @property
    def final_ids(self) -> list[int]:
        """Template id of every cluster number (after :meth:`finish`)."""
        if self._final is None:
            raise RuntimeError("call finish() first")
        return self._final


def mine(lines: Sequence[str], threshold: float = DEFAULT_THRESHOLD, depth: int = DEFAULT_DEPTH) -> tuple[list[str], list[int]]:
    """Templates of a list of lines and the template id of every line.

    Returns
    -------
    (list[str], list[int])
        The template texts by order of first appearance, and per line the
        index of its template.
    """
    m = TemplateMiner(threshold, depth)
    cids = m.add_many(lines)
    tpls = m.finish()
    f = m.final_ids
    return [t.text for t in tpls], [f[c] for c in cids]


class TemplateIndex:
    """Lines matched against a template table given in advance (most specific matching template wins).

    Parameters
    ----------
    templates:
        Template texts (tokens joined by single spaces, ``<*>`` for a wildcard).
    """

    def __init__(self, templates: Sequence[str]) -> None:
        self.templates = list(templates)
        self._by_len: dict[int, list[tuple[int, int, list[str]]]] = {}
        for i, t in enumerate(self.templates):
            toks = t.split(" ")
            const = sum(1 for x in toks if x != WILDCARD)
            self._by_len.setdefault(len(toks), []).append((-const, i, toks))
        for v in self._by_len.values():
            v.sort(key=lambda e: (e[0], e[1]))
        self._cand: dict[tuple[int, str], list[tuple[int, int, list[str]]]] = {}
        self._memo: dict[tuple[str, ...], int] = {}
        self.tokenize = Tokenizer()

    def _candidates(self, n: int, first: str) -> list[tuple[int, int, list[str]]]:
        key = (n, first)
        c = self._cand.get(key)
        if c is None:
            c = [e for e in self._by_len.get(n, ()) if e[2][0] == first or e[2][0] == WILDCARD]
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
        _, pinned, free = line_signature(line, self.tokenize)
        return self.match_tokens(list(pinned) + free)
