"""Layout file formats: which one a file is, and the reader's warnings captured."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from pitchguard.errors import LayoutError, open_regular, read_input

GDS_MAGIC = b"\x00\x06\x00\x02"


OASIS_MAGIC = b"%SEMI-OASIS\r\n"


def require_regular_file(path: Path) -> None:
    """Refuse (LayoutError) a layout path that is not a regular file.

    The layout library reads a file more than once and by name; a named pipe
    or a device would block it (a reader that never comes back) or feed it an
    endless stream.  Opened without blocking, so a pipe with no writer is
    refused at once rather than waited on.
    """
    fd, _ = open_regular(path, "layout", LayoutError)
    os.close(fd)


def sniff_format(path: Path) -> str:
    """Return "gds" or "oas" from the file's first bytes (a regular file's only)."""
    require_regular_file(path)
    head = read_input(path, "layout", LayoutError, len(OASIS_MAGIC))
    if head.startswith(OASIS_MAGIC):
        return "oas"
    if head.startswith(GDS_MAGIC):
        return "gds"
    if not head:
        raise LayoutError(f"{path}: file is empty")
    raise LayoutError(f"{path}: not a GDSII or OASIS file (unrecognised header)")


@contextlib.contextmanager
def captured_stderr() -> Iterator[list[str]]:
    """Capture what C code writes straight to file descriptor 2.

    gdstk prints ``[GDSTK] ...`` warnings there, sometimes with bytes that are
    not UTF-8; they are collected as text lines instead.
    """
    lines: list[str] = []
    try:
        fd = os.dup(2)
    except OSError:  # no stderr at all
        yield lines
        return
    with tempfile.TemporaryFile() as tmp:
        os.dup2(tmp.fileno(), 2)
        try:
            yield lines
        finally:
            os.dup2(fd, 2)
            os.close(fd)
            tmp.seek(0)
            text = tmp.read().decode("utf-8", errors="replace")
            lines.extend(line for line in text.splitlines() if line.strip())
