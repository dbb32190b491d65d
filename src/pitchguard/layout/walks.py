"""Walks of a cell hierarchy that never recurse in Python: a reference chain may be
thousands of cells deep (GDSII sets no limit), deeper than the interpreter's
recursion limit."""

from __future__ import annotations

import contextlib
import sys

MAX_DEPTH = 4096
"""Deepest reference chain read (cells from a top cell down to a leaf).  GDSII
and OASIS set no limit; designs nest a few tens of levels, so a chain this deep
is generated or corrupt.  Refusing it bounds the walks that still recurse (the
holders of findings, the layout library's own flattening) and the holders'
paths, whose memory grows with the square of the depth (measured: a finding
under 4096 cells, 180 MB and 3 s; under 10,000, 730 MB and 11 s)."""

FRAMES_PER_LEVEL = 4
"""Interpreter frames a recursive walk may stack per level of the hierarchy."""


@contextlib.contextmanager
def deep_enough(depth: int = MAX_DEPTH):
    """Let recursive Python walks go ``depth`` levels deep (the interpreter's own
    limit, 1000 frames, is hit near 250 to 500 levels); the old limit is put
    back after."""
    old = sys.getrecursionlimit()
    sys.setrecursionlimit(max(old, old + FRAMES_PER_LEVEL * depth))
    try:
        yield
    finally:
        sys.setrecursionlimit(old)


def run_nested(steps):
    """Run a generator that stands for a recursive function: each generator it
    yields is a nested call, run to its end before the caller resumes with the
    nested call's return value.  Returns the outer generator's return value.
    The calls wait on a list, not on the interpreter's stack."""
    stack = [steps]
    value = None
    while True:
        try:
            inner = stack[-1].send(value)
        except StopIteration as done:
            stack.pop()
            if not stack:
                return done.value
            value = done.value
        else:
            stack.append(inner)
            value = None


def children_first(tops, child_of) -> list:
    """Every cell under ``tops``, each after all of its children, in the order a
    depth-first walk (references in the file's order) finishes them.
    ``child_of(reference)`` gives the cell a reference places, or None to skip it;
    cycles must have been refused already."""
    order: list = []
    seen: set[str] = set()
    for top in tops:
        if top.name in seen:
            continue
        seen.add(top.name)
        stack = [(top, iter(top.references))]
        while stack:
            cell, refs = stack[-1]
            for ref in refs:
                child = child_of(ref)
                if child is not None and child.name not in seen:
                    seen.add(child.name)
                    stack.append((child, iter(child.references)))
                    break
            else:
                stack.pop()
                order.append(cell)
    return order
