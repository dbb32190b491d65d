"""The cell of every finding: the holders (layout.holders) of the findings' windows,
found in the process that has the layout open.

A finding's window is its box grown by its layer's interaction range (drawn
nm): what can change its image.  The result, :class:`CellMap`, holds per
finding (in the scan result's order) its cell, its placement path, the
cell's placement in the top frame and whether it depends on its context.
:func:`holders_of` walks the windows together (``layout.holders_batch``);
:func:`holders_of_plain` one at a time, as its plain twin.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from pitchguard.deck import Deck
from pitchguard.judge.findings import FindingSet

CHUNK = 50_000
"""Findings per holders task (the tasks of a tiled scan run on its workers)."""


class CellMap(NamedTuple):
    """Per finding: ``cell`` and ``path`` (indexes into ``names`` and ``paths``), the
    cell's placement ``p_top = m @ p_cell + t`` (``m`` (n, 4), ``t`` (n, 2), nm)
    and ``context`` (n,): whether the finding's region alone would be held by
    one placement of a child of its cell, but its window is not (shapes
    around that placement keep it in the cell: a fix there depends on the
    placement).  ``context`` is None in a map made without regions."""

    names: tuple[str, ...]
    paths: tuple[tuple[str, ...], ...]
    cell: np.ndarray
    path: np.ndarray
    m: np.ndarray
    t: np.ndarray
    context: np.ndarray | None = None

    def take(self, idx) -> CellMap:
        """The entries of the findings ``idx`` (an index list or array)."""
        idx = np.asarray(idx, dtype=np.int64)
        ctx = None if self.context is None else self.context[idx]
        return CellMap(
            self.names, self.paths, self.cell[idx], self.path[idx], self.m[idx], self.t[idx], ctx
        )

    @classmethod
    def joined(cls, parts: list[CellMap]) -> CellMap:
        """The maps of consecutive runs of findings as one (``context`` kept when
        every part has it)."""
        names: dict[str, int] = {}
        paths: dict[tuple, int] = {}
        cells, ps = [], []
        known = all(p.context is not None for p in parts)
        for p in parts:
            cmap = np.array([names.setdefault(n, len(names)) for n in p.names], dtype=np.int32)
            pmap = np.array([paths.setdefault(q, len(paths)) for q in p.paths], dtype=np.int32)
            cells.append(cmap[p.cell] if len(p.cell) else p.cell)
            ps.append(pmap[p.path] if len(p.path) else p.path)
        return cls(
            tuple(names),
            tuple(paths),
            np.concatenate(cells) if cells else np.zeros(0, np.int32),
            np.concatenate(ps) if ps else np.zeros(0, np.int32),
            np.concatenate([p.m for p in parts]) if parts else np.zeros((0, 4)),
            np.concatenate([p.t for p in parts]) if parts else np.zeros((0, 2)),
            np.concatenate([np.zeros(0, bool), *(p.context for p in parts)]) if known else None,
        )


def finding_windows(findings, deck: Deck) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(windows (n, 4) nm, regions (n, 4) nm, layer number (n,) into the deck's
    layers)`` per finding: its box grown by its layer's range, and its box."""
    fs = FindingSet.of(findings)
    order = {r.name: k for k, r in enumerate(deck.layers)}
    reach = np.array([r.interaction_range_nm / deck.scale_to_wafer for r in deck.layers])
    d_layer = np.array([order[f.layer] for f in fs.distinct], dtype=np.int64)
    lay = d_layer[fs.which] if len(fs.which) else np.zeros(0, np.int64)
    boxes = fs.boxes()
    grow = reach[lay][:, None] * np.array([-1.0, -1.0, 1.0, 1.0])
    return boxes + grow, boxes, lay


def holders_of(q, windows: np.ndarray, regions: np.ndarray, lds: list) -> CellMap:
    """The holder of each window, its finding's region ``regions[k]`` deciding its
    context (``lds[k]``: its layer as ``(layer, datatype)``); all at once."""
    from pitchguard.layout.holders_batch import BatchHolders

    h = BatchHolders(q)
    path, m, t, ctx = h.of(windows, regions, lds)
    names: dict[str, int] = {}
    cell_of = np.array([names.setdefault(p[-1], len(names)) for p in h.paths], dtype=np.int32)
    cell = cell_of[path] if len(path) else np.zeros(0, np.int32)
    return CellMap(tuple(names), tuple(h.paths), cell, path.astype(np.int32), m, t, ctx)


def holders_of_plain(q, windows: np.ndarray, regions: np.ndarray, lds: list) -> CellMap:
    """:func:`holders_of`, one window at a time (``layout.holders.Holders``)."""
    from pitchguard.layout.holders import Holders

    h = Holders(q)
    names: dict[str, int] = {}
    paths: dict[tuple, int] = {}
    n = len(windows)
    cell = np.zeros(n, np.int32)
    path = np.zeros(n, np.int32)
    m = np.zeros((n, 4))
    t = np.zeros((n, 2))
    ctx = np.zeros(n, dtype=bool)
    rows = zip(windows.tolist(), regions.tolist(), lds, strict=True)
    for k, (w, r, ld) in enumerate(rows):
        got = h.of(w, ld, r)
        cell[k] = names.setdefault(got.cell, len(names))
        path[k] = paths.setdefault(got.path, len(paths))
        m[k] = got.m
        t[k] = got.t
        ctx[k] = got.context
    return CellMap(tuple(names), tuple(paths), cell, path, m, t, ctx)
