"""Errors a user can cause, and the exit codes the command line maps them to."""

from __future__ import annotations

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


class DeckError(PitchguardError):
    """The rule deck cannot be read or is invalid."""


class LayoutError(PitchguardError):
    """The layout file cannot be read, or does not hold what the deck needs."""


class OutputError(PitchguardError):
    """An output file cannot be written (or would overwrite an input)."""


def read_input(path: Path, what: str, error: type[PitchguardError], size: int = -1) -> bytes:
    """The first ``size`` bytes (all: -1) of an input file, or ``error`` with one
    line naming the file and what it was to be (``what``: "layout", "deck")."""
    try:
        with Path(path).open("rb") as fh:
            return fh.read(size)
    except FileNotFoundError:
        raise error(f"{path}: {what} file not found") from None
    except IsADirectoryError:
        raise error(f"{path}: is a directory, not a {what} file") from None
    except OSError as exc:
        raise error(f"{path}: cannot read {what}: {exc.strerror or exc}") from None


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
