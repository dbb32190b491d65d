"""Errors a user can cause, and the exit codes the command line maps them to."""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

EXIT_OK = 0
"""No finding at or above the ``--fail-on`` severity."""
EXIT_FINDINGS = 1
"""At least one finding at or above the ``--fail-on`` severity."""
EXIT_USAGE = 2
"""Bad input: unreadable layout, invalid deck, bad command-line usage."""


class PitchguardError(Exception):
    """An error caused by the user's input; reported as one line, never a traceback."""

    exit_code = EXIT_USAGE

    @property
    def lines(self) -> tuple[str, ...]:
        """What the command line prints, a ``pitchguard: error:`` line each."""
        return (str(self),)


class DeckError(PitchguardError):
    """The rule deck cannot be read or is invalid: one line per problem found."""

    def __init__(self, *lines: str):
        super().__init__("\n".join(lines))
        self._lines = lines

    @property
    def lines(self) -> tuple[str, ...]:
        return self._lines


class LayoutError(PitchguardError):
    """The layout file cannot be read, or does not hold what the deck needs."""


class OutputError(PitchguardError):
    """An output file cannot be written (or would overwrite an input)."""


MIB = 1 << 20

INPUT_LIMITS = {"deck": 4 * MIB, "baseline": 256 * MIB, "settings": MIB}
"""The largest input file read whole, per kind: a deck is a few kB (4 MiB is
hundreds of times more); a baseline entry is under 1 kB, so 256 MiB holds
some 300,000 (and parses to a few GB); project settings are a few lines."""


def _not_regular(mode: int) -> str | None:
    """What a file that is not a regular file is, in words (None: a regular file)."""
    for test, name in (
        (stat.S_ISFIFO, "a named pipe (FIFO)"),
        (stat.S_ISCHR, "a character device"),
        (stat.S_ISBLK, "a block device"),
        (stat.S_ISSOCK, "a socket"),
        (stat.S_ISDIR, "a directory"),
    ):
        if test(mode):
            return name
    return None if stat.S_ISREG(mode) else "not a regular file"


def _kind_of(path: Path) -> str | None:
    try:
        return _not_regular(os.stat(path).st_mode)
    except OSError:
        return None


def open_regular(path: Path, what: str, error: type[PitchguardError]) -> tuple[int, int]:
    """An input file opened for reading (its descriptor and size), or ``error`` with
    one line naming the file and what it was to be (``what``: "layout", "deck").

    Only a regular file is opened: a pipe with no writer would block a reader,
    a device never end.  Opened without blocking, so neither is waited on."""
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise error(f"{path}: {what} file not found") from None
    except IsADirectoryError:
        raise error(f"{path}: is a directory, not a {what} file") from None
    except OSError as exc:
        kind = _kind_of(path) if exc.errno == errno.ENXIO else None  # a socket, say
        if kind is not None:
            raise error(
                f"{path}: is {kind}, not a {what} file (a regular file is needed)"
            ) from None
        raise error(f"{path}: cannot read {what}: {exc.strerror or exc}") from None
    try:
        st = os.fstat(fd)
    except OSError as exc:
        os.close(fd)
        raise error(f"{path}: cannot read {what}: {exc.strerror or exc}") from None
    kind = _not_regular(st.st_mode)
    if kind is not None:
        os.close(fd)
        if stat.S_ISDIR(st.st_mode):
            raise error(f"{path}: is a directory, not a {what} file")
        raise error(f"{path}: is {kind}, not a {what} file (a regular file is needed)")
    return fd, st.st_size


def read_input(path: Path, what: str, error: type[PitchguardError], size: int = -1) -> bytes:
    """The first ``size`` bytes (all: -1) of a regular input file (see
    :func:`open_regular`), at most ``INPUT_LIMITS[what]`` of them."""
    limit = INPUT_LIMITS.get(what)
    fd, st_size = open_regular(path, what, error)
    with os.fdopen(fd, "rb") as fh:
        try:
            if limit is not None and (size < 0 or size > limit):
                if st_size > limit:
                    raise error(_too_big(path, what, limit))
                data = fh.read(limit + 1)  # the file may have grown since
                if len(data) > limit:
                    raise error(_too_big(path, what, limit))
                return data if size < 0 else data[:size]
            return fh.read(size)
        except OSError as exc:
            raise error(f"{path}: cannot read {what}: {exc.strerror or exc}") from None


def nesting_depth(data, limit: int) -> int:
    """How deep parsed TOML or JSON ``data`` nests (lists and tables), counted up to
    ``limit`` + 1 (without recursion: a hostile file may nest 100,000 deep)."""
    deepest, level = 0, [data]
    while level and deepest <= limit:
        deepest += 1
        level = [
            v
            for node in level
            for v in (node.values() if isinstance(node, dict) else node)
            if isinstance(v, dict | list)
        ]
    return deepest


def _too_big(path: Path, what: str, limit: int) -> str:
    return f"{path}: larger than {limit // MIB} MiB, the most a {what} file may be"


def read_input_text(path: Path, what: str, error: type[PitchguardError]) -> str:
    """An input file as UTF-8 text (see :func:`read_input`)."""
    try:
        return read_input(path, what, error).decode("utf-8")
    except UnicodeDecodeError:
        raise error(f"{path}: not a text (UTF-8) file") from None


_pending_stop: type[BaseException] | None = None


def request_stop(exc_type: type[BaseException] | None) -> None:
    """Note that a signal asked the command to stop (or, with None, forget it).

    The signal handler raises at once too, but Python drops an exception
    raised while it runs a callback (one of the import system's, say): the
    note makes :func:`check_stop` raise it again at the next safe point.
    """
    global _pending_stop
    _pending_stop = exc_type


STOP_POLL_S = 0.1
"""Waits on child processes wake this often to honour a noted stop."""


def check_stop() -> None:
    """Raise the stop a signal asked for, if any (see :func:`request_stop`)."""
    if _pending_stop is not None:
        raise _pending_stop()


def stop_requested() -> type[BaseException] | None:
    """The stop a signal asked for and that has not been honoured yet, if any.

    Code outside ours may catch the exception a signal handler raised and
    raise its own instead (pydantic-core, building a model's validator when
    the deck module is imported, turns it into a SchemaError): whatever then
    ends the command, the stop is what it reports."""
    return _pending_stop
