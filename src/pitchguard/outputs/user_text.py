"""User text (names and paths from a user's files) as reports and messages show it.

Light on imports: the command line's error path uses it.
"""

from __future__ import annotations

import re

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u200e\u200f\u2028-\u202e\u2066-\u2069\ud800-\udfff]")


def printable(text: object) -> str:
    """Text from a user's files (deck and cell names, paths, baseline entries) as a
    terminal may show it, on one line: control characters (escape sequences, line
    and paragraph breaks, tabs, bidi overrides) written as ``\\xNN`` / ``\\uNNNN``,
    so they cannot move the cursor, recolour or add rows (and
    a name's undecodable bytes, kept as lone surrogates, cannot stop a UTF-8 writer)."""

    def code(m: re.Match) -> str:
        n = ord(m.group())
        return f"\\x{n:02x}" if n < 0x100 else f"\\u{n:04x}"

    return _CONTROL.sub(code, str(text))


SHOWN_CHARS = 80
"""How much of a user's name (cell, layer, exposure, deck) a report shows; the data
formats (JSON, SARIF properties) keep it whole."""

SHOWN_PATH_CHARS = 200
"""How much of a path a report shows (its start and its end)."""


def clipped(text: object, limit: int = SHOWN_CHARS, middle: bool = False) -> str:
    """``text`` cut to ``limit`` characters with an ellipsis: at the end, or in the
    ``middle`` (a path keeps its file name)."""
    text = str(text)
    if len(text) <= limit:
        return text
    if middle:
        head = (limit - 1) // 2
        return text[:head] + "…" + text[len(text) - (limit - 1 - head) :]
    return text[: limit - 1] + "…"


def shown(text: object, limit: int = SHOWN_CHARS) -> str:
    """A user's name as a report shows it: :func:`clipped`, then :func:`printable`."""
    return printable(clipped(text, limit))


def shown_path(path: object) -> str:
    """A path as a message or report shows it (cut in the middle when very long)."""
    return printable(clipped(path, SHOWN_PATH_CHARS, middle=True))


def markup_safe(text: object, limit: int | None = SHOWN_CHARS) -> str:
    """:func:`shown` with rich's markup escaped too (``[/]`` shows as itself); the
    whole text with ``limit`` None."""
    from rich.markup import escape

    return escape(printable(text) if limit is None else shown(text, limit))


def markup_safe_path(path: object) -> str:
    """:func:`shown_path` with rich's markup escaped too."""
    from rich.markup import escape

    return escape(shown_path(path))


def figure_text(text: object) -> str:
    """A user's name in a picture (matplotlib): :func:`shown` (a long title takes
    matplotlib seconds per thousand characters) with ``$`` escaped (a pair would
    start matplotlib's mathematical text, which may not parse)."""
    return shown(text).replace("$", r"\$")
