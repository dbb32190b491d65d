"""Shared test set-up.

With ``--import-mode=importlib`` pytest puts no test folder on ``sys.path``;
this folder is added so test modules can ``import strategies``, ``decks`` and
``chips`` (hypothesis strategies, decks and generated layouts shared by the
tests).  The benchmarks in ``benchmarks/`` are scripts that time the code:
they are never collected.
"""

from __future__ import annotations

import sys
from pathlib import Path

_TESTS = str(Path(__file__).resolve().parent)
if _TESTS not in sys.path:
    sys.path.insert(0, _TESTS)

# Relative to this folder, whatever directory pytest is started from.
collect_ignore = ["benchmarks"]
