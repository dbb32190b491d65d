"""A local worker's memory budget (from --max-memory-mb), enforced by the kernel.

The memory model of run.plan sizes tiles from shape counts; a layout can still
hold work it does not see.  So each local worker's data segment is capped
(RLIMIT_DATA: heap and private anonymous mappings, which is where numpy and
Python allocate; shared libraries and the file cache are not counted), and an
allocation past it fails as a MemoryError in the worker instead of growing
until the machine's out-of-memory killer stops something.
"""

from __future__ import annotations

import functools

from pitchguard.errors import LayoutError

_BUDGET: dict = {"mb": None}
"""Each local worker's share of --max-memory-mb (MB), or None: set in the parent
before the workers fork, read by each worker as it starts."""


def set_worker_budget(mb: float | None) -> None:
    """The memory share (MB) each local worker forked from now on may add to
    what it inherits; None: no cap."""
    _BUDGET["mb"] = mb


def worker_budget() -> float | None:
    return _BUDGET["mb"]


def _data_now() -> int | None:
    """This process's data segment (bytes), or None where the kernel does not say."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmData:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


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


def out_of_budget(fn):
    """A worker task whose MemoryError becomes one line naming the budget (its first
    argument is the layout's path)."""

    @functools.wraps(fn)
    def task(path, *args, **kwargs):
        try:
            return fn(path, *args, **kwargs)
        except MemoryError:
            mb = _BUDGET["mb"]
            share = (
                f"each worker's share of --max-memory-mb is {mb:,.0f} MB"
                if mb is not None
                else "no --max-memory-mb was given"
            )
            raise LayoutError(
                f"{path}: a tile worker ran out of memory ({share}): use a smaller --tile-um, "
                "a larger --max-memory-mb, fewer --jobs or a --region"
            ) from None

    return task
