"""Command line: a thin layer over the scan, the outputs and the deck.

Exit codes (documented in the README):

* 0 - no finding at or above ``--fail-on``
* 1 - findings at or above ``--fail-on``
* 2 - bad input or usage (unreadable layout, invalid deck, bad option)
* 3 - internal error (a bug; ``--debug`` shows the traceback)
"""

from pitchguard.cli.app import main

__all__ = ["main"]
