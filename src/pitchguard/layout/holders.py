"""The cell a finding belongs to: the deepest placed cell that holds its window alone.

A finding's window is its region grown by the layer's interaction range:
everything that can change its image.  Walking down from the top cell, a
placement of a child cell *holds* the window when every polygon of the
finding's layer that meets the window is that placement's: none of the
parent's own, none of another placement's.  (Empty space around a cell is
the same in every placement with nothing else near: a finding on a cell's
outer line belongs to the cell, unless a neighbour comes within range.)

The walk stops at the first level where no placement holds the window; the
finding then belongs to the cell reached: the top cell when the region spans
cells, or when shapes of other cells are within range.  What the finding
depends on is all in that cell.  Within a cell the walk depends only on the
window relative to the cell's frame, so it is memoised on that: the
placements of a cell repeat the same relative windows over and over.

A finding whose own region (without the range) one placement of a child of
its cell would hold, but whose window none holds, depends on its context:
the shapes within range around that placement keep it in the parent, so it
is the parent (or the placing of the child) that a fix changes.

:class:`Holders` walks one window at a time (the plain version);
``layout.holders_batch`` walks many at once, a level at a time.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from pitchguard.layout.hierarchy import Affine, HierarchyQuery, boxes_meet

MEMO_ENTRIES = 200_000
"""Memoised walks kept (cleared when full)."""

KEY_SCALE = 1e6
"""Windows whose coordinates round to the same multiple of 1/KEY_SCALE nm share a
memoised walk (placements repeat a window up to float noise)."""


def window_key(w) -> tuple[int, ...]:
    """The memo key of a window: its coordinates in 1/KEY_SCALE nm, rounded half to
    even (what ``np.rint`` gives, so a batch groups windows alike)."""
    return tuple(round(v * KEY_SCALE) for v in w)


class Holder(NamedTuple):
    """Where a window belongs: ``cell``, the names from the top cell down to it,
    the cell's placement in the top frame (``p_top = m @ p_cell + t``, nm), and
    whether the finding depends on its context (see the module's notes)."""

    cell: str
    path: tuple[str, ...]
    m: tuple[float, float, float, float]
    t: tuple[float, float]
    context: bool  # the region alone is held by one placement of a child of ``cell``


class Holders:
    """Find :class:`Holder` s in one opened layout's hierarchy."""

    def __init__(self, q: HierarchyQuery):
        self.q = q
        self._memo: dict = {}

    def of(self, window, ld, region=None) -> Holder:
        """The holder of ``window`` (nm, top frame) for polygons of layer ``ld``;
        ``region`` (the finding's box, inside the window) decides ``context``."""
        q = self.q
        w = tuple(float(v) for v in window)
        r = None if region is None else tuple(float(v) for v in region)
        tops = [n for n in q.tops if q.cells[n].bbox is not None]
        top = next((n for n in tops if boxes_meet(q.cells[n].bbox, w)), q.tops[0])
        cell, path, m, t, ctx = self._walk(top, np.eye(2), w, r, ld)
        return Holder(cell, (top, *path), tuple(m.ravel().tolist()), tuple(t.tolist()), ctx)

    def _walk(self, name: str, m: np.ndarray, w, r, ld):
        """``(cell, path below name, m, t, context)``: the walk from cell ``name``
        placed by ``m`` at the origin, ``w`` and ``r`` in that frame."""
        key = (name, m.tobytes(), window_key(w), None if r is None else window_key(r), ld)
        hit = self._memo.get(key)
        if hit is not None:
            return hit
        held = self.held(name, m, w, ld)
        if held is None:
            ctx = r is not None and self.held(name, m, r, ld) is not None
            out = (name, (), m, np.zeros(2), ctx)
        else:
            child, cm, ct = held
            sub = self._walk(child, cm, _moved(w, ct), None if r is None else _moved(r, ct), ld)
            cell, path, fm, ft, ctx = sub
            out = (cell, (child, *path), fm, ft + ct, ctx)
        if len(self._memo) >= MEMO_ENTRIES:
            self._memo.clear()
        self._memo[key] = out
        return out

    def held(self, name: str, m: np.ndarray, w, ld):
        """``(child, m, t)`` of the one placement of a child of cell ``name`` (placed
        by ``m`` at the origin) that holds ``w`` (in that frame), or None."""
        q = self.q
        here = Affine(m, np.zeros(2))
        meeting = [
            (child, placed.m, placed.t + off)
            for child, _, placed, offs in q.children_in(q.cells[name], here, w)
            for off in offs
        ]
        if len(meeting) > 1:  # boxes overlap the window: count those with shapes in it
            meeting = [c for c in meeting if q.meets(c[0], Affine(c[1], c[2]), w, ld)]
        if len(meeting) == 1 and not q.meets(name, here, w, ld, own_only=True):
            return meeting[0]
        return None


def _moved(w, t):
    """The box ``w`` in a frame whose origin is at ``t``."""
    return (w[0] - t[0], w[1] - t[1], w[2] - t[0], w[3] - t[1])


def in_cell_frame(box, m, t) -> tuple[float, float, float, float]:
    """The box (top frame, nm) in the frame of a cell placed by ``m``, ``t``
    (``p_top = m @ p_cell + t``): the box of its corners taken back."""
    x0, y0, x1, y1 = box
    inv = np.linalg.inv(np.asarray(m, dtype=np.float64).reshape(2, 2))
    c = (np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]]) - np.asarray(t)) @ inv.T
    lo, hi = c.min(axis=0), c.max(axis=0)
    return (float(lo[0]), float(lo[1]), float(hi[0]), float(hi[1]))


def placement_of(m, t, scale_um: float = 1e-3) -> tuple[float, float, float, float, bool]:
    """``(x, y, rotation_deg, magnification, mirrored)`` of a placement matrix and
    origin as GDSII and OASIS write it (mirror in x first, then turn and scale);
    the origin in um."""
    a, b, c, d = (float(v) for v in m)
    det = a * d - b * c
    mirrored = det < 0
    mag = abs(det) ** 0.5
    rot = float(np.degrees(np.arctan2(c, a))) % 360.0
    return (
        round(float(t[0]) * scale_um, 6) + 0.0,
        round(float(t[1]) * scale_um, 6) + 0.0,
        round(rot, 6) % 360.0 + 0.0,
        round(mag, 9),
        mirrored,
    )
