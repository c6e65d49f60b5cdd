"""A data-driven template miner for event-log lines.

Each line goes through these steps:

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
   route a line joins the cluster whose template it matches best, when more
   than ``threshold`` of the template's plain words (no digit, no inner
   punctuation: :func:`_routable`) equal the line's tokens at the same
   positions and the two fix different constants at fewer than two
   positions (:mod:`fractalseq.sources.evidence`); else it starts a cluster.  Masked tokens and other non-words
   are no evidence either way, so ``job 12 started`` and ``job 12 done``
   (one word of two agreeing) stay apart while ``upgrade libfoo1:amd64 <*>``
   and ``upgrade libbar2:amd64 <*>`` join.  A position whose tokens differ
   between members becomes ``<*>``.  A message seen before (same
   text) joins the cluster it joined then.  A route with many clusters
   compares a line with the ``MAX_SCAN`` most recently matched ones only;
   one with more than a few finds the clusters sharing a word with the line
   through an index of (position, word) -> clusters, which picks the cluster
   the comparison in scan order would pick.
4. Free-text tails: the lines sharing pinned tokens and routing head (the
   first ``depth`` tokens, at least one of them a constant word) form a
   *family*.  Once its lines show ``FREE_TAIL_LENGTHS`` different token
   counts and ``FREE_TAIL_WORDS`` different words right after the head, what
   follows the head is free text (a test name, a sentence): the family
   becomes the single template ``head <...>`` (:data:`TAIL`, any number of
   tokens), which takes its earlier clusters and all its later lines.  A
   fixed format with a few optional words (``Connection closed by [invalid
   user] <*> port <*>``) has few different words after its head and keeps
   its templates.  Once a ``LABEL: ...`` family (``PASS: <*>``) has a free
   text tail, the families of sibling labels of the same shape (``FAIL:``,
   ``UNTESTED:``) get one at once (:func:`~fractalseq.sources.evidence.label_shape`).
5. A merge pass (:meth:`TemplateMiner.finish`, :mod:`fractalseq.sources.template_merge`) over templates with the same
   pinned tokens and length: first, templates seen on one line each that are
   equal but at one position, where they hold ``VARIABLE_WORDS`` or more
   different words, fold into one with ``<*>`` there (many different words
   each seen once mark an open set of values, such as user names; words that
   recur, or two alternatives, are kept apart); then templates are folded
   when they differ only at positions where one of them has ``<*>`` and share
   enough constant tokens, repeated until nothing changes (identical
   templates first; each template is tried against at most ``MAX_SCAN`` kept
   ones).

Template ids are given by order of first appearance after the merge pass.
Everything depends on the sequence of lines only (not on how they were cut
into blocks), so the same input gives the same templates and ids.  Memory is
linear in the number of clusters (no table over pairs of templates), and
the work per line is bounded by ``MAX_SCAN`` comparisons.

Matching lines against a template table fixed in advance (a model's) is done
by :class:`TemplateIndex`: a line takes the most specific template (most
constant tokens, then lowest code) whose constant tokens all equal the
line's tokens at the same positions (a template ending in ``<...>`` takes
any number of further tokens).
"""

from __future__ import annotations

import gc
from dataclasses import dataclass, field
from collections import Counter
from itertools import chain, islice
from operator import eq, itemgetter
from typing import Callable, Sequence

from fractalseq.errors import ParameterError
from fractalseq.sources.evidence import conflicting, label_shape
from fractalseq.sources.headers import _EMPTY as _NO_HEADER
from fractalseq.sources.headers import Header, split_header
from fractalseq.sources.masks import WILDCARD
from fractalseq.sources.routes import Route
from fractalseq.sources.structured import Tokenizer, _collapse_angles, _collapse_quotes, _empty_fields
from fractalseq.sources.template_merge import MAX_SCAN, fold_group
from fractalseq.sources.template_index import TAIL, TemplateIndex

__all__ = ["DEFAULT_DEPTH", "DEFAULT_THRESHOLD", "TAIL", "MinedTemplate", "TemplateIndex", "TemplateMiner", "line_signature"]

DEFAULT_THRESHOLD = 0.5
DEFAULT_DEPTH = 2
DEFAULT_MAX_CHILDREN = 32
#: a family of lines (same pinned tokens and routing head, with a constant word) has a free-text tail once its
#: clusters have this many different lengths and this many different words right after the head
FREE_TAIL_LENGTHS = 4
FREE_TAIL_WORDS = 12
_ROUTE_STRIP = "[]()<>{}:,;.!?\"'"


def _routable(tok: str) -> bool:
    """A leading token used in the routing key: a plain word (letters, ``-``, ``_``, ``'``), punctuation aside."""
    core = tok.strip(_ROUTE_STRIP)
    if core.isalpha():
        return True
    return bool(core) and core.replace("-", "").replace("_", "").replace("'", "").isalpha()
#: distinct values kept per header field and template (the rest are counted under "")
_FIELD_VALUES = 8
_MSG_CACHE = 1 << 16
#: routes with more clusters than this find a line's cluster through their word index instead of a scan
_INDEXED = 16


@dataclass
class MinedTemplate:
    """One template: its tokens, how many lines it covers, where it first occurs, the header fields seen."""

    tokens: list[str]
    pinned: tuple[str, ...]
    count: int = 0
    first: int = 0  # order of the first line (0-based index among the mined lines)
    fields: dict[str, dict[str, int]] = field(default_factory=dict)
    #: how many of the tokens are plain words (the evidence a line is compared on)
    words: int = 0

    @property
    def text(self) -> str:
        """The template as text: tokens joined by single spaces."""
        return " ".join(self.pinned + tuple(self.tokens)) if self.pinned else " ".join(self.tokens)

    def absorb_header(self, hdr: Header) -> None:
        """:meth:`absorb_fields` of one line's header (its non-empty fields, once each)."""
        fields = self.fields
        for name, v in zip(Header._fields, hdr):
            if v:
                slot = fields.get(name)
                if slot is None:
                    slot = fields[name] = {}
                c = slot.get(v)
                if c is not None:
                    slot[v] = c + 1
                elif len(slot) < _FIELD_VALUES:
                    slot[v] = 1
                else:
                    slot[""] = slot.get("", 0) + 1

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


def _wild(tpl: list[str], free: list[str]) -> int:
    """Positions where the template has ``<*>`` and the line another token."""
    return sum(1 for a, b in zip(tpl, free) if a == WILDCARD and b != WILDCARD)


def _constants(tokens: list[str], words: list[bool]) -> tuple[list[str | None], int, list[str | None], Callable | None, tuple]:
    """The template with ``None`` for each wildcard, how many constants it holds, it with ``None`` for each non-word,
    and a picker of the tokens at the constants' positions with the constants it must give.

    A line changes the template when it differs from one of its constants;
    it agrees with the template on as many words as the third list has tokens equal to the line's.  The picker
    (``None`` when there is no constant) gives a tuple of at least two tokens (a single position is picked twice).
    """
    fixed = [None if t == WILDCARD else t for t in tokens]
    at = [i for i, t in enumerate(fixed) if t is not None]
    if len(at) == 1:
        at = at * 2
    pick = itemgetter(*at) if at else None
    return (fixed, len(fixed) - fixed.count(None), [t if w else None for t, w in zip(tokens, words)], pick,
            tuple(tokens[i] for i in at))


class _RouteTokens(dict):
    """Word of a plain-text line before masking -> its routing token (the masked word if a plain word, else ``<*>``)."""

    __slots__ = ("mask",)

    def __init__(self, mask: Callable[[str], str]) -> None:
        super().__init__()
        #: the masked token of a word (the tokenizer's cache: the word is masked once for both)
        self.mask = mask

    def __missing__(self, word: str) -> str:
        # a masked token either equals the word or holds ``<*>`` (never a plain word): a word that is no plain word
        # routes as ``<*>`` unmasked, and a plain word routes as itself unless masking changes it
        tok = word if _routable(word) and self.mask(word) == word else WILDCARD
        if len(self) >= _MSG_CACHE:
            self.clear()
        self[word] = tok
        return tok


class _Family:
    """Lines sharing pinned tokens and routing head: their clusters, lengths and first words after the head."""

    __slots__ = ("members", "lengths", "words", "tail", "head")

    def __init__(self, head: list[str]) -> None:
        #: the routing head with the family's first line's tokens (``<*>`` where it routes as a wildcard)
        self.head = head
        self.members: list[int] = []
        self.lengths: set[int] = set()
        self.words: set[str] = set()
        #: -2: no free-text tail possible (no constant word in the head); -1: not yet; else the tail's cluster
        self.tail = -2


class TemplateMiner:
    """Streaming template miner (see the module documentation).

    Parameters
    ----------
    threshold:
        A line joins a cluster when more than this share of the template's
        plain words equal the line's tokens, or all of them do (0 < t <= 1).
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
        self._routes: dict[tuple, Route] = {}
        #: per cluster, when it was made or last moved to the end of its route (the route's order)
        self._stamp: list[int] = []
        self._clock = 0
        self._families: dict[tuple, _Family] = {}
        #: label shapes (:func:`_label_shape`) of families that got a free-text tail
        self._free_labels: set[tuple] = set()
        self._absorbed: dict[int, int] = {}
        #: (pinned tokens, number of free tokens, routing tokens of the first ``depth``) -> [family, route or None,
        #: family key] (see :meth:`_place`); a routing token is the token when it is a plain word, else ``<*>``
        self._slots: dict[tuple, list] = {}
        #: word of a plain-text line before masking -> its routing token (masks are fixed rules)
        self._route_tok = _RouteTokens(self.tokenize.mask.one)
        #: (number of words, first ``depth`` words before masking) of a plain-text line -> its slot
        self._raw_slots: dict[tuple, list] = {}
        #: per cluster, its template with ``None`` for a wildcard (a line changes it when a constant differs)
        self._fixed: list[tuple[list[str | None], int, list[str | None], Callable | None, tuple]] = []
        self._route_word: dict[str, bool] = {}
        self._seen: dict[tuple, int] = {}
        self._lines = 0
        self._final: list[int] | None = None
        self._templates: list[MinedTemplate] | None = None

    # ------------------------------------------------------------ streaming
    def add(self, line: str) -> int:
        """Group one line; returns its cluster number (map it with :meth:`finish`)."""
        return self.add_many((line,))[0]

    def add_many(self, lines: Sequence[str]) -> list[int]:
        """Group every line, in order; returns their cluster numbers (one loop over the block).

        A message seen before (same text, in the bounded ``_seen`` memory)
        joins the cluster it joined then, without being tokenized again.
        """
        seen = self._seen
        clusters = self.clusters
        tokenize = self.tokenize.uncached  # ``_seen`` remembers messages
        mask = self.tokenize.mask.one
        collapse_quotes, collapse_angles, empty_fields = _collapse_quotes, _collapse_angles, _empty_fields
        slots, raw_slots = self._slots, self._raw_slots
        route_tok = self._route_tok.__getitem__
        depth = self.depth
        place = self._place
        fixed_of = self._fixed
        split = split_header
        out: list[int] = []
        append = out.append
        n0 = self._lines
        collecting = gc.isenabled()  # the loop makes many short-lived lists: no cyclic collection meanwhile
        if collecting:
            gc.disable()
        try:
            for k, line in enumerate(lines):
                hdr, msg = split(line)
                cid = seen.get(msg)
                if cid is None:
                    self._lines = n0 + k
                    # :meth:`Tokenizer.plain_words`, inlined (most lines of a log take this path)
                    msg_s = msg.strip()
                    if msg_s and msg_s[-1] != "}" and "=" not in msg_s:  # plain text: no JSON object, no logfmt pair
                        if '"' in msg_s:
                            msg_s = collapse_quotes(msg_s)
                        if "<" in msg_s:
                            msg_s = collapse_angles(msg_s)
                        if "  " in msg_s:
                            msg_s = empty_fields(msg_s)
                        words = msg_s.split()
                    else:
                        words = None
                    if not words:
                        pinned, free = tokenize(msg)
                        cid = place(pinned, free)
                    else:
                        # plain text: its routing slot is known from its first words before masking (masks are
                        # fixed rules), and a line of a family whose tail is free text needs no masking at all
                        rkey = (len(words), *words[:depth])
                        slot = raw_slots.get(rkey)
                        if slot is None:
                            key = ((), rkey[0], *map(route_tok, words[:depth]))
                            slot = slots.get(key)
                            if slot is None:
                                cid = place((), list(map(mask, words)))
                                slot = slots[key]
                            if len(raw_slots) >= _MSG_CACHE:
                                raw_slots.clear()
                            raw_slots[rkey] = slot
                        if cid is None:
                            fam = slot[0]
                            if fam.tail >= 0:
                                cid = fam.tail
                            else:
                                rt = slot[1]
                                if rt is not None and len(rt.members) == 1 and (
                                    fam.tail == -2
                                    or ((len(words) <= len(fam.head) or len(fam.words) >= FREE_TAIL_WORDS
                                         or mask(words[len(fam.head)]) in fam.words)
                                        and (len(words) in fam.lengths or len(fam.lengths) >= FREE_TAIL_LENGTHS))):
                                    # the common case of :meth:`_place`: a family whose tail tracking learns nothing
                                    # from the line, and a route of one template with all of whose constants it agrees;
                                    # only the words at the constants' positions are masked (a word under a wildcard,
                                    # such as a package name seen once, needs no masking for this)
                                    best, = rt.members
                                    pick, consts = fixed_of[best][3:]
                                    if pick is None or tuple(map(mask, pick(words))) == consts:
                                        cid = best
                                if cid is None:
                                    cid = place((), list(map(mask, words)), slot)
                    if len(seen) >= _MSG_CACHE:
                        seen.clear()
                    seen[msg] = cid
                c = clusters[cid]
                c.count += 1
                if hdr is not _NO_HEADER and (hdr[0] or hdr[1] or hdr[2]):
                    c.absorb_header(hdr)
                append(cid)
        finally:
            if collecting:
                gc.enable()
        self._lines = n0 + len(lines)
        return out

    def _words(self, toks: Sequence[str]) -> list[bool]:
        """Which tokens are plain words (:func:`_routable`), remembered per token."""
        memo = self._route_word
        out = list(map(memo.get, toks))
        if None in out:
            for i, ok in enumerate(out):
                if ok is None:
                    tok = toks[i]
                    ok = out[i] = _routable(tok)
                    if len(memo) >= _MSG_CACHE:
                        memo.clear()
                    memo[tok] = ok
        return out

    def _head(self, pinned: tuple[str, ...], n: int, route: tuple[str, ...]) -> tuple[str, ...]:
        """Routing head of a line: its routing tokens (``route``, ``<*>`` for a token that is no plain word), a word
        refused at a level that already keeps ``max_children`` words as ``<*>``.

        Once a word is kept at a level, or refused because the level is full,
        it routes the same way for good; so the head of a key never changes.
        """
        out: list[str] = []
        prefix: tuple = (pinned, n)
        for tok in route:
            if tok != WILDCARD:
                key_kids = prefix + tuple(out)
                kids = self._children.get(key_kids)
                if kids is None:
                    kids = self._children[key_kids] = set()
                if tok not in kids:
                    if len(kids) >= self.max_children:
                        tok = WILDCARD
                    else:
                        kids.add(tok)
            out.append(tok)
        return tuple(out)

    def _place(self, pinned: tuple[str, ...], free: list[str], slot: list | None = None) -> int:
        """The cluster a line joins, or a new one (``slot``: the line's routing slot when known, see ``_slots``)."""
        n = len(free)
        if slot is None:
            route = tuple(t if w else WILDCARD for t, w in zip(free, self._words(free[: self.depth])))
            key = (pinned, n, *route)
            slot = self._slots.get(key)  # routing head, family and route of a key: fixed once made
        if slot is None:
            head = self._head(pinned, n, route)
            fkey = (pinned, head)
            fam = self._families.get(fkey)
            sibling_tail = False
            if fam is None:
                fam = self._families[fkey] = _Family([a if a == WILDCARD else b for a, b in zip(head, free)])
                if any(t != WILDCARD for t in head):
                    fam.tail = -1  # a constant word in the head: the family may get a free-text tail
                    shape = label_shape(pinned, head)
                    sibling_tail = shape is not None and shape in self._free_labels
            slot = [fam, self._routes.get((fkey, n)), fkey]
            if len(self._slots) >= _MSG_CACHE:
                self._slots.clear()
            self._slots[key] = slot
            if sibling_tail:
                return self._collapse(fam, pinned)  # a sibling label of this shape has a free-text tail
        else:
            fam = slot[0]
        if fam.tail >= 0:
            return fam.tail
        if fam.tail == -1:
            k = len(fam.head)
            grew = False
            if n > k and free[k] not in fam.words and len(fam.words) < FREE_TAIL_WORDS:
                fam.words.add(free[k])
                grew = True
            if n not in fam.lengths and len(fam.lengths) < FREE_TAIL_LENGTHS:
                fam.lengths.add(n)
                grew = True
            if grew and len(fam.lengths) >= FREE_TAIL_LENGTHS and len(fam.words) >= FREE_TAIL_WORDS:
                return self._collapse(fam, pinned)
        rt = slot[1]
        if rt is None:  # a slot forgotten and made again may be older than its route
            rt = self._routes.get((slot[2], n))
            if rt is None:
                rt = self._routes[(slot[2], n)] = Route()
            slot[1] = rt
        members = rt.members
        if len(members) == 1:
            best, = members
            fixed, const, *_ = self._fixed[best]
            if sum(map(eq, fixed, free)) == const:
                return best  # the line has every constant of the only template of its route: it joins it unchanged
        clusters = self.clusters
        crowded = len(members) > MAX_SCAN
        # only the plain words of the templates (no digit, no inner punctuation) are evidence of agreement
        if len(members) > _INDEXED:
            best = self._best_indexed(rt, free, crowded)
        else:
            best = self._best_scan(members, free, crowded)
        if best >= 0:
            fixed, const, *_ = self._fixed[best]
            # positions where the line differs from a constant of the template become wildcards
            if sum(map(eq, fixed, free)) != const:
                c = clusters[best]
                old = c.tokens
                new = c.tokens = [a if a == b else WILDCARD for a, b in zip(old, free)]
                words = self._words(new)
                self._fixed[best] = _constants(new, words)
                c.words = sum(words)
                rt.forget(best, old, new, c.words)
            if crowded:  # most recently matched clusters are scanned first
                del members[best]
                members[best] = None
                self._stamp[best] = self._clock = self._clock + 1
            return best
        cid = len(clusters)
        words = self._words(free)
        clusters.append(MinedTemplate(list(free), pinned, 0, self._lines, words=sum(words)))
        self._fixed.append(_constants(free, words))
        members[cid] = None
        self._stamp.append(self._clock + 1)
        self._clock += 1
        rt.learn(cid, free, words)
        fam.members.append(cid)
        return cid

    def _best_scan(self, members: dict[int, None], free: list[str], crowded: bool) -> int:
        """The cluster a line joins (-1: none), by comparing it with every scanned cluster of its route."""
        clusters = self.clusters
        best = -1
        best_sim = -1
        best_wild = -1
        fixed = self._fixed
        limit = self.threshold
        for cid in (islice(reversed(members), MAX_SCAN) if crowded else members):
            c = clusters[cid]
            tpl = c.tokens
            same = sum(map(eq, fixed[cid][2], free))  # the template's words equal to the line's tokens
            const = c.words
            if const and same <= limit * const and same < const:  # all words agreeing always qualifies
                continue
            if conflicting(tpl, free):
                continue
            if same > best_sim:
                best, best_sim, best_wild = cid, same, -1
            elif same == best_sim:  # tie: the template with more wildcards where the line differs wins
                if best_wild < 0:
                    best_wild = _wild(clusters[best].tokens, free)
                wild = _wild(tpl, free)
                if wild > best_wild:
                    best, best_wild = cid, wild
        return best

    def _best_indexed(self, rt: Route, free: list[str], crowded: bool) -> int:
        """:meth:`_best_scan` found through the route's index of template words (same choice, no scan).

        A cluster agrees with the line on ``same`` words, counted from the
        index; one with no agreeing word qualifies only when its template has
        no word at all (``rt.bare``).  Among the qualifying clusters of the
        scanned ones (the ``MAX_SCAN`` most recent when crowded), the scan
        keeps the first in scan order with the most agreeing words, then the
        most wildcards where the line differs: the same is picked here.
        """
        idx = rt.index
        same_of = Counter(chain.from_iterable(filter(None, [idx.get(k) for k in enumerate(free)])))  # only words are indexed
        for cid in rt.bare:
            same_of[cid] = 0
        if not same_of:
            return -1
        stamp = self._stamp
        if crowded:
            lo = stamp[next(islice(reversed(rt.members), MAX_SCAN - 1, None))]
        else:
            lo = -1
        clusters = self.clusters
        limit = self.threshold
        best_sim = -1
        tied: list[int] = []
        for cid, same in same_of.items():
            if stamp[cid] < lo:
                continue
            const = clusters[cid].words
            if const and same <= limit * const and same < const:
                continue
            if conflicting(clusters[cid].tokens, free):
                continue
            if same > best_sim:
                best_sim = same
                tied = [cid]
            elif same == best_sim:
                tied.append(cid)
        if not tied:
            return -1
        if len(tied) == 1:
            return tied[0]
        # scan order: most recent first when crowded, else the route's order (oldest first)
        tied.sort(key=stamp.__getitem__, reverse=crowded)
        best, best_wild = tied[0], _wild(clusters[tied[0]].tokens, free)
        for cid in tied[1:]:
            wild = _wild(clusters[cid].tokens, free)
            if wild > best_wild:
                best, best_wild = cid, wild
        return best

    def _collapse(self, fam: _Family, pinned: tuple[str, ...]) -> int:
        """The family's tail is free text: one template, the head then ``<...>``, takes all its lines."""
        first = self.clusters[fam.members[0]].first if fam.members else self._lines
        self.clusters.append(MinedTemplate(list(fam.head) + [TAIL], pinned, 0, first))
        self._fixed.append(([], 0, [], None, ()))
        self._stamp.append(0)  # one stamp per cluster (a tail joins no route: it is never scanned)
        tail = fam.tail = len(self.clusters) - 1
        for cid in fam.members:
            self._absorbed[cid] = tail
        fam.members = []
        shape = label_shape(pinned, fam.head)
        if shape is not None and shape not in self._free_labels:
            self._free_labels.add(shape)
            for (pin, head), sib in list(self._families.items()):  # in order of first appearance: deterministic
                if sib.tail == -1 and pin == pinned and label_shape(pin, head) == shape:
                    self._collapse(sib, pin)
        return tail

    # ----------------------------------------------------------- merge pass
    def finish(self) -> list[MinedTemplate]:
        """Run the merge pass; the final templates by order of first appearance.

        After this, :meth:`final_id` maps a cluster number to its template id.
        """
        parent = list(range(len(self.clusters)))
        counts: dict[int, int] = {}
        for cid, tail in self._absorbed.items():
            parent[cid] = tail
        groups: dict[tuple, list[int]] = {}
        for cid, c in enumerate(self.clusters):
            if cid in self._absorbed or (c.tokens and c.tokens[-1] == TAIL):
                continue
            groups.setdefault((c.pinned, len(c.tokens)), []).append(cid)
        for members in groups.values():
            fold_group(self.clusters, members, parent, counts, self.threshold)
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
