"""Child processes of a scan: how many, tied to their parent's life, and what ended one."""

from __future__ import annotations

import os
import signal
import threading

JOBS_PER_CORE = 4
"""The most local workers an explicit --jobs gets per usable core.  A tile
worker is CPU-bound (extraction in Python, imaging on one BLAS thread), so
past the cores more workers only take turns while each holds its own layout
index and caches; a few per core still helps where the count of cores
overstates what the process gets (a container's CPU quota) and hides the
reads of each worker's first tile."""

CRASH_SIGNALS = frozenset(
    getattr(signal, name)
    for name in ("SIGSEGV", "SIGBUS", "SIGABRT", "SIGILL", "SIGFPE")
    if hasattr(signal, name)
)
"""Signals a process raises on itself by its own fault: in a reader, a file
that drives the layout library off its rails."""

WATCHDOG_S = 0.5
"""How often a child checks for its parent where the kernel cannot tell it."""

_PR_SET_PDEATHSIG = 1  # linux/prctl.h
_PRCTL: dict = {}


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system has one)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def worker_count(requested: int | None, tasks: int | None = None) -> int:
    """Local workers for ``requested`` (--jobs; None: one per usable core), at
    most :data:`JOBS_PER_CORE` per core and, when known, one per task (a worker
    with no task only costs a fork and its memory)."""
    cores = usable_cores()
    n = cores if requested is None else min(requested, JOBS_PER_CORE * cores)
    if tasks is not None:
        n = min(n, tasks)
    return max(1, n)


def prepare_parent_death() -> None:
    """Look up ``prctl`` in the parent, before it forks: each child then has it
    at hand instead of importing ctypes and loading the C library itself."""
    if "fn" in _PRCTL:
        return
    fn = None
    if hasattr(os, "sched_getaffinity"):  # Linux: the only system with PR_SET_PDEATHSIG
        try:
            import ctypes

            fn = ctypes.CDLL(None, use_errno=True).prctl
            fn.argtypes = (ctypes.c_int, ctypes.c_ulong, ctypes.c_ulong, ctypes.c_ulong)
            fn.restype = ctypes.c_int
        except (ImportError, OSError, AttributeError):
            fn = None
    _PRCTL["fn"] = fn


def die_with_parent(parent: int) -> None:
    """In a child forked from ``parent``, first thing: die when the parent does.

    A worker outliving a killed command (``kill -9``, the out-of-memory killer)
    would hold its memory and block for ever on a pipe no one reads.  On Linux
    the kernel sends SIGKILL when the parent (the thread that forked) ends;
    elsewhere a daemon thread polls.  The parent may have died between the fork
    and the request: then the child is already someone else's and ends now.
    """
    prepare_parent_death()
    fn = _PRCTL["fn"]
    if fn is None or fn(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0) != 0:
        _watch_parent(parent)
    if os.getppid() != parent:
        os.kill(os.getpid(), signal.SIGKILL)


def _watch_parent(parent: int) -> None:
    def watch() -> None:
        while os.getppid() == parent:
            threading.Event().wait(WATCHDOG_S)
        os.kill(os.getpid(), signal.SIGKILL)

    threading.Thread(target=watch, name="pitchguard-parent-watch", daemon=True).start()


def signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


MEMORY_HINT = (
    "the kernel's out-of-memory killer ends processes so when memory runs out: set "
    "--max-memory-mb to the memory that is free (smaller tiles, fewer workers) or use fewer --jobs"
)


def death_message(who: str, exitcode: int | None, during: str, memory_hint: str = MEMORY_HINT):
    """One line on how a child process ended while it was ``during`` something.

    A crash by the process's own fault (:data:`CRASH_SIGNALS`) points at the
    file; SIGKILL comes from outside, most often the out-of-memory killer, and
    gets ``memory_hint``; any other signal was sent from outside.
    """
    if exitcode is None or exitcode >= 0:
        return f"{who} stopped unexpectedly (exit {exitcode}) while {during}"
    sig = -exitcode
    name = signal_name(sig)
    if sig in CRASH_SIGNALS:
        return (
            f"{who} crashed ({name}) while {during}: the file is corrupt or not a valid "
            "GDSII/OASIS file"
        )
    if sig == signal.SIGKILL:
        return (
            f"{who} was killed by signal {sig} ({name}) while {during}, not by a fault "
            f"of the file; {memory_hint}"
        )
    return f"{who} was killed by signal {sig} ({name}), sent from outside, while {during}"
