"""Findings per cell: each distinct finding of a cell once, with its placements.

A scan finds every placement of a problem; a designer fixes the cell.  Two
findings are the same cell finding when they belong to the same cell
(run.cells: the deepest placed cell that holds the finding's window alone),
sit at the same place in that cell's own frame, and have the same layer,
check and severity.  (The worst site and its numbers may differ between
placements where sites tie, e.g. a flat image of an unresolvable pitch: a
designer still has one region to fix.)  Each :class:`CellFinding` keeps its
findings' indexes in report order; its first, the worst, is the one shown.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from pitchguard.judge.findings import Finding, FindingSet

BOX_DECIMALS = 3
"""Boxes in a cell's frame are compared to 0.001 nm (a layout's finest grid)."""


class CellFinding(NamedTuple):
    """One distinct finding of a cell and where it is placed."""

    finding: Finding  # the first placement's, in the top frame (report order)
    cell: str
    path: tuple[str, ...]  # of the first placement, from the top cell
    cell_bbox_nm: tuple[float, float, float, float]
    items: np.ndarray  # indexes into the scan's findings, report order
    m: np.ndarray  # (n, 4): each placement's matrix, p_top = m @ p_cell + t
    t: np.ndarray  # (n, 2) nm
    # Held by its cell only because of what surrounds the placement: the region
    # alone lies in one child placement (run.cells' ``context``).
    depends_on_placement: bool = False

    @property
    def placements(self) -> int:
        return len(self.items)


def boxes_in_cells(boxes: np.ndarray, m: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Each box (n, 4, top frame) in its cell's frame (``m`` (n, 4), ``t`` (n, 2)):
    the box of its corners taken back."""
    a, b, c, d = m[:, 0], m[:, 1], m[:, 2], m[:, 3]
    det = a * d - b * c
    inv = np.stack([d, -b, -c, a], axis=1) / det[:, None]
    x = np.stack([boxes[:, 0], boxes[:, 2], boxes[:, 2], boxes[:, 0]], axis=1) - t[:, :1]
    y = np.stack([boxes[:, 1], boxes[:, 1], boxes[:, 3], boxes[:, 3]], axis=1) - t[:, 1:]
    u = inv[:, :1] * x + inv[:, 1:2] * y
    v = inv[:, 2:3] * x + inv[:, 3:4] * y
    return np.stack([u.min(axis=1), v.min(axis=1), u.max(axis=1), v.max(axis=1)], axis=1)


def _says(f: Finding) -> tuple:
    """What a finding is, wherever and however it is placed."""
    return (f.layer, f.check, f.severity)


def group_by_cell(findings, cells) -> list[CellFinding]:
    """The cell findings of ``findings`` (a list or FindingSet, report order) with
    their cells (``run.cells.CellMap``, the same order), in report order of
    their first placements."""
    fs = FindingSet.of(findings)
    n = len(fs)
    if n == 0:
        return []
    says: dict[tuple, int] = {}
    kind_of = np.array([says.setdefault(_says(f), len(says)) for f in fs.distinct], np.int64)
    kind = kind_of[fs.which]
    local = np.round(boxes_in_cells(fs.boxes(), cells.m, cells.t), BOX_DECIMALS) + 0.0
    key = np.column_stack([cells.cell.astype(np.float64), kind.astype(np.float64), local])
    # Equal keys (a lexicographic sort, stable: report order within a key) ...
    order = np.lexsort(key.T[::-1])
    s = key[order]
    new = np.ones(n, dtype=bool)
    new[1:] = (s[1:] != s[:-1]).any(axis=1)
    starts = np.flatnonzero(new)
    # ... numbered in report order of their first items.
    rank = np.empty(len(starts), np.int64)
    rank[np.argsort(order[starts], kind="stable")] = np.arange(len(starts))
    group = np.empty(n, np.int64)
    group[order] = rank[np.cumsum(new) - 1]
    order = np.argsort(group, kind="stable")
    bounds = np.flatnonzero(np.diff(group[order])) + 1
    out = []
    context = getattr(cells, "context", None)
    for items in np.split(order, bounds):
        k = int(items[0])
        out.append(
            CellFinding(
                finding=fs[k],
                cell=cells.names[int(cells.cell[k])],
                path=cells.paths[int(cells.path[k])],
                cell_bbox_nm=tuple(float(v) for v in local[k]),
                items=items,
                m=cells.m[items],
                t=cells.t[items],
                depends_on_placement=bool(context[k]) if context is not None else False,
            )
        )
    return out


def orientations(m: np.ndarray) -> np.ndarray:
    """``(rotation_deg, magnification, mirrored)`` per placement matrix (n, 4), as
    GDSII and OASIS write a reference: mirrored in x first, then turned and
    scaled (:func:`layout.holders.placement_of` one at a time)."""
    a, b, c, d = m[:, 0], m[:, 1], m[:, 2], m[:, 3]
    det = a * d - b * c
    rot = np.round(np.degrees(np.arctan2(c, a)) % 360.0, 6) % 360.0 + 0.0
    return np.column_stack([rot, np.round(np.sqrt(np.abs(det)), 9), (det < 0).astype(float)])


def each_alone(findings) -> list[CellFinding]:
    """Every finding its own entry, with no cell named (a scan not asked for cells)."""
    fs = FindingSet.of(findings)
    eye = np.array([[1.0, 0.0, 0.0, 1.0]])
    return [
        CellFinding(f, "", (), f.bbox_nm, np.array([k]), eye, np.zeros((1, 2)))
        for k, f in enumerate(fs)
    ]


def cell_findings(result) -> list[CellFinding]:
    """The entries a report lists for a scan result: per cell when it names cells."""
    if result.cells is None:
        return each_alone(result.findings)
    return group_by_cell(result.findings, result.cells)
