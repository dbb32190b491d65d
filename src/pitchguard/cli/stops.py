"""SIGTERM/SIGINT handling: a stop is noted, raised where safe, and decides the exit code."""

from __future__ import annotations

import gc
import os
import signal

from pitchguard.errors import (
    request_stop,
)


class Terminated(BaseException):
    """SIGTERM, raised in the main thread so that cleanup (temporary files) runs."""


_in_fork_hook = False
"""True while the parent's after-fork hook unblocks the stop signals: a stop
that was pending is only noted then (an exception raised in a fork hook is
printed with its traceback and dropped); the waits that follow a fork honour
it within a tenth of a second (see errors.check_stop)."""


def _raise_now(frame) -> bool:
    """Whether a stop may be raised where ``frame`` was interrupted.  Not in a
    callback where Python prints the exception with its traceback and drops
    it: the parent's after-fork hook, or the import system's module-lock
    callback (a Ctrl-C there at start-up printed "Exception ignored in:
    <function _get_module_lock.<locals>.cb>").  The stop is noted either way
    and honoured at the next check (see errors.check_stop)."""
    if _in_fork_hook:
        return False
    while frame is not None:
        code = frame.f_code
        if code.co_name == "cb" and code.co_filename == "<frozen importlib._bootstrap>":
            return False
        frame = frame.f_back
    return True


def on_sigterm(signum, frame):
    request_stop(Terminated)
    if _raise_now(frame):
        raise Terminated()


def on_sigint(signum, frame):
    request_stop(KeyboardInterrupt)
    if _raise_now(frame):
        raise KeyboardInterrupt


STOP_SIGNALS = (signal.SIGTERM, signal.SIGINT)


def before_fork() -> None:
    """Block the stop signals in the forking thread: the child inherits the mask,
    so it cannot run the command's handlers before it has reset them."""
    if signal.getsignal(signal.SIGTERM) is on_sigterm:
        signal.pthread_sigmask(signal.SIG_BLOCK, STOP_SIGNALS)


def after_fork_in_parent() -> None:
    global _in_fork_hook
    if signal.getsignal(signal.SIGTERM) is on_sigterm:
        _in_fork_hook = True
        try:
            signal.pthread_sigmask(signal.SIG_UNBLOCK, STOP_SIGNALS)
        finally:
            _in_fork_hook = False


def after_fork_in_child() -> None:
    """A process forked from the command (a reader child, a tile worker) leaves
    stopping to the command: SIGTERM kills it quietly, SIGINT (a Ctrl-C reaches
    the whole process group) is ignored.  Run with the handlers of the command,
    it would raise in the middle of whatever it was doing and print a traceback
    (a SIGTERM in a tile worker still running its initializer, say)."""
    if signal.getsignal(signal.SIGTERM) is on_sigterm:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.pthread_sigmask(signal.SIG_UNBLOCK, STOP_SIGNALS)  # pending: handled as above


_FORK_HOOKS = {"installed": False}


def install_fork_hooks() -> None:
    """Register the fork hooks above, once per process (from the command's entry point)."""
    if not _FORK_HOOKS["installed"]:
        os.register_at_fork(
            before=before_fork,
            after_in_parent=after_fork_in_parent,
            after_in_child=after_fork_in_child,
        )
        _FORK_HOOKS["installed"] = True


GC_PAUSED = {"by_us": False}


def resume_gc() -> None:
    """Collect garbage again, if :func:`main` paused it for start-up."""
    if GC_PAUSED["by_us"]:
        GC_PAUSED["by_us"] = False
        gc.enable()
