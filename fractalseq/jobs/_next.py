"""What ``fractalseq next`` asks a model: the context parsed for its alphabet, the predicted next symbols.

For a log model (template alphabet) the context is a list of events, oldest first,
written as template ids or template texts:

* ids: ``#3 #7 #12`` (``#`` and the template's number in the model's list, which
  ``next`` prints beside every prediction; ``learn --json`` lists the texts in this
  order under ``alphabet.symbols``);
* texts: template texts separated by ``||`` (spaces around it are ignored), e.g.
  ``status unpacked <*> <*> || status installed <*> <*>``; a raw log line is accepted
  too and matched to its template;
* both may be mixed: ``#3 || status installed <*> <*>``.

Escapes inside a text: ``\\|`` is a literal ``|``, ``\\#`` a literal ``#`` at the
start of a text (so a text is not taken for an id), ``\\\\`` a backslash.
Other alphabets keep their form: characters in order (DNA...), or symbols separated
by spaces. Reports on event logs are no security guarantee.
"""

from __future__ import annotations

import re
from typing import Any

from fractalseq.errors import InputError
from fractalseq.results import caution_for, is_log_alphabet

#: Separator of template texts in a log context.
SEPARATOR = "||"
_ID = re.compile(r"#(\d+)")
_IDS_ONLY = re.compile(r"\s*(#\d+\s*)+")

__all__ = ["SEPARATOR", "next_after", "split_context", "template_context"]


def split_context(text: str) -> list[str]:
    """Items of a log context: split at unescaped ``||``, escapes kept for :func:`_unescape` (whitespace trimmed).

    A context made only of ``#id`` tokens separated by spaces gives one item per id.
    """
    if not text.strip():
        return []
    if _IDS_ONLY.fullmatch(text):
        return text.split()
    items, cur, i = [], [], 0
    while i < len(text):
        ch = text[i]
        if ch == "\\" and i + 1 < len(text):
            cur.append(text[i : i + 2])
            i += 2
            continue
        if text.startswith(SEPARATOR, i):
            items.append("".join(cur).strip())
            cur = []
            i += len(SEPARATOR)
            continue
        cur.append(ch)
        i += 1
    items.append("".join(cur).strip())
    if any(not it for it in items):
        raise InputError(
            f"The context {text[:80]!r} has an empty event between '{SEPARATOR}' separators; "
            f"separate template texts or #ids by a single '{SEPARATOR}'."
        )
    return items


def _unescape(item: str) -> str:
    return re.sub(r"\\(.)", r"\1", item)


def template_context(text: str, templates: tuple[str, ...]) -> list[int]:
    """Template codes of a log context (see the module documentation), oldest first.

    Raises :class:`InputError` naming the first item that is no id of the list and
    matches no template.
    """
    from fractalseq.sources.miner import TemplateIndex

    codes: list[int] = []
    exact = {t: i for i, t in enumerate(templates)}
    index = None
    for item in split_context(text):
        m = _ID.fullmatch(item)
        if m:
            k = int(m.group(1))
            if k >= len(templates):
                raise InputError(
                    f"The context names template #{k}, but the model lists {len(templates)} templates (#0 to #{len(templates) - 1})."
                )
            codes.append(k)
            continue
        t = _unescape(item)
        if t in exact:
            codes.append(exact[t])
            continue
        if index is None:
            index = TemplateIndex(templates)
        k = index.match(t)
        if k < 0:
            raise InputError(
                f"The context event {t[:80]!r} is no template of the model and matches none; give a template text, "
                "a log line of a kind the model saw, or an id like #0 (run next with an empty context '' to see ids)."
            )
        codes.append(int(k))
    return codes


def next_after(model: Any, context: str, top: int = 5, model_name: str = "") -> dict:
    """The ``next --json`` document: the context as read, the ``top`` next symbols, the caution.

    For a log model every row carries the template ``id`` (its number in the model's
    list) and the context is also given as ids (``context_ids``).
    """
    a = model.alphabet_
    logs = is_log_alphabet(a)
    if logs:
        codes = template_context(context, tuple(a.symbols))
        rows = model.next_symbols(codes, top=top)
        ids = {s: i for i, s in enumerate(a.symbols)}
        for r in rows:
            r["id"] = ids[r["symbol"]]
        shown = " ".join(f"#{c}" for c in codes)
        extra: dict = {"context_ids": codes, "context_templates": [a.symbols[c] for c in codes]}
    else:
        if a.single_characters:
            bad = [ch for ch in context if not ch.isspace() and (ch.upper() if a.case_insensitive else ch) not in a.symbols]
            if bad:
                raise InputError(
                    f"The context holds {bad[0]!r}, which is not in the model's {a.name} alphabet ({a.describe_symbols(8)}); "
                    "use only those symbols."
                )
            shown = "".join(ch for ch in context if not ch.isspace())
        else:
            shown = context
        rows = model.next_symbols(shown, top=top)
        extra = {}
    depth = rows[0]["deepest_cell_depth"] if rows else None
    return {"model": model_name, "context": shown, **extra, "deepest_cell_depth": depth, "next": rows, "note": caution_for([a])}
