"""A local worker's memory budget (from --max-memory-mb, else from the machine),
enforced by the kernel.

The memory model of run.plan sizes tiles from shape counts; a layout can still
hold work it does not see.  So each local worker's data segment is capped
(RLIMIT_DATA: heap and private anonymous mappings, which is where numpy and
Python allocate; shared libraries and the file cache are not counted), and an
allocation past it fails as a MemoryError in the worker instead of growing
until the machine's out-of-memory killer stops something.
"""

from __future__ import annotations

import contextlib
import functools
import os

from pitchguard.errors import LayoutError

MACHINE_SHARE = 0.75
"""Without --max-memory-mb a scan's processes together plan within this share of
the machine's physical memory (the rest is the system's and other programs')."""


_BUDGET: dict = {"mb": None, "given": False, "why": ""}
"""Each local worker's memory share (MB) or None, whether --max-memory-mb gave it,
and what drives a tile's memory (for messages): set in the parent before the
workers fork, read by each worker as it starts."""


def set_worker_budget(mb: float | None, given: bool = True, why: str = "") -> None:
    """The memory share (MB) each local worker forked from now on may add to
    what it inherits (None: no cap); ``given``: the share comes from
    --max-memory-mb (else from the machine); ``why``: what drives a tile's
    memory, for the message of a worker that runs out."""
    _BUDGET.update(mb=mb, given=given, why=why)


def worker_budget() -> float | None:
    return _BUDGET["mb"]


def _status_bytes(key: str) -> int | None:
    """A size (bytes) from /proc/self/status (``VmData``, ``VmSize``), or None where
    the kernel does not say."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def _data_now() -> int | None:
    """This process's data segment (bytes), or None where the kernel does not say."""
    return _status_bytes("VmData")


def physical_mb() -> float | None:
    """The machine's physical memory (MB), or None where the platform does not say."""
    try:
        pages, size = os.sysconf("SC_PHYS_PAGES"), os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None
    return pages * size / 2**20 if pages > 0 and size > 0 else None


def process_room_mb() -> float | None:
    """What this process (and a worker forked from it) may still add (MB) under its
    own limits: the address-space (``ulimit -v``) and data (``ulimit -d``) caps less
    what it holds now; None: neither is set."""
    try:
        import resource
    except ImportError:
        return None
    room = None
    for limit, key in ((resource.RLIMIT_AS, "VmSize"), (resource.RLIMIT_DATA, "VmData")):
        soft, _ = resource.getrlimit(limit)
        if soft == resource.RLIM_INFINITY:
            continue
        left = (soft - (_status_bytes(key) or 0)) / 2**20
        room = left if room is None else min(room, left)
    return None if room is None else max(room, 0.0)


def machine_budget() -> tuple[float | None, float | None, str]:
    """What a scan given no --max-memory-mb may use: ``(MB for all its processes
    together, MB one process may add, the words for them)``, None where unknown.
    All together: MACHINE_SHARE of the physical memory; one process: its room
    under its address-space and data limits."""
    phys, room = physical_mb(), process_room_mb()
    total = None if phys is None else MACHINE_SHARE * phys
    words = []
    if total is not None:
        words.append(f"{total:,.0f} MB, {MACHINE_SHARE:.0%} of this machine's memory,")
    if room is not None:
        words.append(f"{room:,.0f} MB a process under its ulimit")
    return total, room, " and ".join(words).rstrip(",") or "this machine's memory"


def apply_worker_budget() -> None:
    """Cap this (forked) process's data segment at what it inherited plus its
    share of the budget, if there is one and the platform allows it."""
    mb = _BUDGET["mb"]
    if mb is None:
        return
    try:
        import resource
    except ImportError:  # not a POSIX system: the memory model alone
        return
    now = _data_now()
    if now is None:
        return
    limit = now + int(mb * 2**20)
    soft, hard = resource.getrlimit(resource.RLIMIT_DATA)
    if hard != resource.RLIM_INFINITY:
        limit = min(limit, hard)
    if soft != resource.RLIM_INFINITY and soft <= limit:
        return  # a tighter cap is already set
    try:
        resource.setrlimit(resource.RLIMIT_DATA, (limit, hard))
    except (ValueError, OSError):
        return


def share_words() -> str:
    """Each worker's memory share, in words for a message."""
    mb = _BUDGET["mb"]
    if mb is None:
        return "no --max-memory-mb was given"
    if _BUDGET["given"]:
        return f"each worker's share of --max-memory-mb is {mb:,.0f} MB"
    return (
        f"each worker's share of this machine's memory is {mb:,.0f} MB; "
        "no --max-memory-mb was given"
    )


def tile_advice_words(densest: str = "") -> str:
    """What may help a tile over its worker's budget, from what drives a tile's memory
    (``densest``: the layout's densest cell, in words, named where smaller tiles
    cannot help)."""
    why = _BUDGET["why"]
    if not why:
        return ": use a smaller --tile-um or a larger --max-memory-mb"
    cell = f"; {densest}" if densest else ""
    return f"; {why}{cell}: use a larger --max-memory-mb, fewer --jobs or a --region"


def out_of_budget(fn):
    """A worker task whose MemoryError becomes one line naming the budget and what
    drives a tile's memory (its first argument is the layout's path)."""

    @functools.wraps(fn)
    def task(path, *args, **kwargs):
        try:
            return fn(path, *args, **kwargs)
        except MemoryError:
            why = _BUDGET["why"]
            advice = (
                "a larger --max-memory-mb, fewer --jobs or a --region"
                if why
                else "a smaller --tile-um, a larger --max-memory-mb, fewer --jobs or a --region"
            )
            raise LayoutError(
                f"{path}: a tile worker ran out of memory ({share_words()})"
                f"{'; ' + why if why else ''}: use {advice}"
            ) from None

    return task


@contextlib.contextmanager
def memory_guard(path, what: str, advice: str):
    """Turn a MemoryError inside into one line (LayoutError, exit 2): ``path``, that
    memory ran out ``what`` (while ...), and ``advice``."""
    try:
        yield
    except MemoryError:
        raise LayoutError(f"{path}: out of memory {what}: {advice}") from None
