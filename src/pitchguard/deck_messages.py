"""One-line messages for deck errors: the file, the dotted key path
(``layers[1].source``) and what is wrong, from pydantic's validation errors."""

from __future__ import annotations

import json
import re

from pydantic import ValidationError


class KeyedError(ValueError):
    """A cross-field error that knows the key it belongs to.

    ``key`` is relative to the model that raises it (the location pydantic
    reports is put in front of it).
    """

    def __init__(self, key: str, message: str):
        super().__init__(message)
        self.key = key


RENAMED_KEYS = {"ambit_nm": "interaction_range_nm"}
"""Deck keys that were renamed: an old deck gets an error naming the new key."""


_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _format_loc(loc: tuple) -> str:
    """``('layers', 1, 'source')`` -> ``layers[1].source``; odd keys are quoted."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            text = str(part)
            if not _BARE_KEY.match(text):
                text = json.dumps(text, ensure_ascii=True)
            out += ("." if out else "") + text
    return out


MAX_ERROR_LINES = 20
"""Most deck errors reported one per line; the rest are counted on one more."""


def deck_error(where: str, problems: list[tuple[str, str]]):
    """A DeckError of ``(key, what is wrong)`` problems: a line each (``file: key:
    what``), the first MAX_ERROR_LINES of them, then how many more there are."""
    from pitchguard.errors import DeckError

    lines = [f"{where}: {key}: {what}" for key, what in problems[:MAX_ERROR_LINES]]
    if len(problems) > MAX_ERROR_LINES:
        more = len(problems) - MAX_ERROR_LINES
        lines.append(f"{where}: and {more} more error{'s' if more != 1 else ''}")
    return DeckError(*lines)


def validation_messages(err: ValidationError, data: dict) -> list[tuple[str, str]]:
    """Every error of a deck's validation as ``(dotted key, what is wrong)``."""
    return [_one(e, data) for e in err.errors()]


SHOWN_INPUT_CHARS = 80
"""How much of a value a message quotes."""


def _quoted(v) -> str:
    text = repr(v)
    return text if len(text) <= SHOWN_INPUT_CHARS else text[: SHOWN_INPUT_CHARS - 1] + "…"


def _one(first: dict, data: dict) -> tuple[str, str]:
    loc = tuple(first["loc"])
    ctx = first.get("ctx") or {}
    inner = ctx.get("error")
    keyed = inner if isinstance(inner, KeyedError) else None
    # Drop discriminator tags pydantic inserts into the location (e.g. 'conventional').
    clean = []
    node = data
    for part in loc:
        in_dict = isinstance(node, dict) and part in node
        in_list = isinstance(node, list) and isinstance(part, int) and part < len(node)
        if in_dict or in_list:
            clean.append(part)
            node = node[part]
        elif first["type"] in ("extra_forbidden", "missing") and part == loc[-1]:
            clean.append(part)
    if keyed is not None:
        where = _format_loc(tuple(clean))
        key = (
            f"{where}.{keyed.key}"
            if where and not keyed.key.startswith("[")
            else (where + keyed.key if where else keyed.key)
        )
        return key, str(keyed)
    key = _format_loc(tuple(clean)) or "(top level)"
    msg = first["msg"]
    kind = first["type"]
    if kind == "extra_forbidden":
        renamed = RENAMED_KEYS.get(str(loc[-1]))
        msg = f"unknown key: it is now called {renamed}" if renamed else "unknown key"
    elif kind == "missing":
        msg = "required key is missing"
    elif kind == "union_tag_invalid":
        expected = ctx.get("expected_tags", "")
        msg = f"unknown value {ctx.get('tag')!r} (expected one of {expected})"
    elif kind == "union_tag_not_found":
        msg = f"missing {ctx.get('discriminator', 'tag')} key"
    elif msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    elif kind.endswith("_type") and "input" in first:
        msg = f"{msg}, got {type(first['input']).__name__} {_quoted(first['input'])}"
    elif isinstance(first.get("input"), int | float | str) and not isinstance(
        first.get("input"), bool
    ):
        msg = f"{msg}, got {_quoted(first['input'])}"
    return key, msg


def resist_index_message(index: float, na: float) -> str:
    """Why a resist index at or below the NA is refused."""
    return (
        f"{index:g} must be above the exposure's NA ({na:g}): light at the pupil's "
        "edge would not enter the resist"
    )
