"""Reads that run in a child process, so a crash or hang of the layout library is a clean error."""

from __future__ import annotations

import time
from collections.abc import Iterable
from pathlib import Path

from pitchguard.errors import STOP_POLL_S, LayoutError, check_stop
from pitchguard.layout.formats import sniff_format
from pitchguard.layout.reader import DEFAULT_MAX_SHAPES, Layout, read_layout
from pitchguard.processes import death_message, die_with_parent, prepare_parent_death

READ_TIMEOUT_S = 3600.0
"""A reader child that runs longer than this is stopped (a hung parse)."""

READER_MEMORY_HINT = (
    "the kernel's out-of-memory killer ends processes so when memory runs out: free memory, "
    "or scan tiled (without --untiled), which never flattens the whole layout"
)


NOT_TEXT = "Unable to convert value to string"
"""What the layout library raises for a name whose bytes are not UTF-8."""


def reader_failure(exc: Exception) -> str:
    """Why the layout library failed, in words a user can act on."""
    if isinstance(exc, TypeError) and NOT_TEXT in str(exc):
        return (
            "a cell, label or property name is not UTF-8 text (GDSII names are ASCII; "
            "the layout library reads no other bytes)"
        )
    return f"{type(exc).__name__}: {exc}"


def _child(conn, fn, args, path, parent: int) -> None:  # runs in the child process
    import faulthandler

    die_with_parent(parent)
    faulthandler.disable()  # a crash here is expected and reported by the parent
    try:
        conn.send(("ok", fn(*args)))
    except LayoutError as exc:
        conn.send(("error", str(exc)))
    except MemoryError:
        conn.send(("error", f"{path}: out of memory while reading the layout"))
    except Exception as exc:  # any reader failure is a bad-input error here
        conn.send(("error", f"{path}: cannot read layout: {reader_failure(exc)}"))
    finally:
        conn.close()


def run_isolated(fn, args: tuple, path: Path, what: str, timeout_s: float = READ_TIMEOUT_S):
    """``fn(*args)`` in a forked child process; its result, or a :class:`LayoutError`.

    For work that parses ``path`` with the layout library, which can die by a
    signal on corrupt files or hang: a crash, an exception, or running over
    ``timeout_s`` becomes one clear error naming the file and ``what`` was
    being done.  The result must pickle.
    """
    import multiprocessing as mp
    import os

    ctx = mp.get_context("fork")
    recv, send = ctx.Pipe(duplex=False)
    prepare_parent_death()
    child = ctx.Process(target=_child, args=(send, fn, args, path, os.getpid()))
    child.start()
    send.close()
    try:
        deadline = time.monotonic() + timeout_s
        while not recv.poll(min(STOP_POLL_S, max(0.0, deadline - time.monotonic()))):
            check_stop()  # a stop noted where it could not be raised
            if time.monotonic() >= deadline:
                raise LayoutError(f"{path}: {what} took over {timeout_s:.0f} s; stopped")
        try:
            status, payload = recv.recv()
        except EOFError:
            child.join()
            why = death_message("the layout reader", child.exitcode, what, READER_MEMORY_HINT)
            raise LayoutError(f"{path}: {why}") from None
    finally:
        if child.is_alive():
            child.kill()
        child.join()
        recv.close()
    if status != "ok":
        raise LayoutError(payload)
    return payload


def _read_with_warnings(path, layers, cell, max_shapes):
    warnings: list[str] = []
    layout = read_layout(path, layers, cell=cell, max_shapes=max_shapes, warnings=warnings)
    return layout, warnings


def read_layout_isolated(
    path: str | Path,
    layers: Iterable[tuple[int, int]],
    cell: str | None = None,
    max_shapes: int = DEFAULT_MAX_SHAPES,
    warnings: list[str] | None = None,
    timeout_s: float = READ_TIMEOUT_S,
) -> Layout:
    """:func:`read_layout` in a child process, so a crash of the layout library
    (it can die with a segmentation fault on corrupt files) becomes a
    :class:`LayoutError` instead of killing the command.

    The child parses the file and ships back packed numpy arrays; its memory
    (the library's objects) is released when it exits.
    """
    p = Path(path)
    sniff_format(p)  # quick, clear errors for missing/non-layout files, in this process
    layout, child_warnings = run_isolated(
        _read_with_warnings,
        (p, list(layers), cell, max_shapes),
        p,
        "parsing and flattening the file",
        timeout_s,
    )
    if warnings is not None:
        warnings.extend(child_warnings)
    return layout
