"""Running the command in a child with bounded memory and time: a regression
that reads an endless input or waits on a pipe fails its test instead of
taking the machine down or hanging the suite."""

from __future__ import annotations

import os
import resource
import subprocess
import sys

import pytest

MEMORY_BYTES = 3 << 30


def _limited() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_BYTES, MEMORY_BYTES))


def command(*argv: str, timeout: float = 60) -> tuple[int, str]:
    """``pitchguard ARGV`` in a child: its exit code and stderr."""
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    try:
        r = subprocess.run(
            [sys.executable, "-m", "pitchguard", *argv],
            capture_output=True,
            text=True,
            timeout=timeout,
            preexec_fn=_limited,
            env=env,
        )
    except subprocess.TimeoutExpired:
        pytest.fail(f"pitchguard {' '.join(argv)} did not end within {timeout} s")
    return r.returncode, r.stderr
