"""Errors a user can cause, and the exit codes the command line maps them to."""

from __future__ import annotations

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
