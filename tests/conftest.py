"""Shared test set-up.

With ``--import-mode=importlib`` pytest puts no test folder on ``sys.path``;
this folder is added so test modules can ``import strategies`` (the hypothesis
strategies shared by the unit tests).
"""

from __future__ import annotations

import sys
from pathlib import Path

_TESTS = str(Path(__file__).resolve().parent)
if _TESTS not in sys.path:
    sys.path.insert(0, _TESTS)
