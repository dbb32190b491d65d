"""Arrays of compact features in a tiled scan: the tiles' lattice sites put together,
arrays found over the whole layout and judged in the main process."""

from __future__ import annotations

import numpy as np

from pitchguard.deck import Deck
from pitchguard.geometry.lattice import LatticeSites, find_arrays
from pitchguard.judge.arrays import ArrayVerdicts, edge_findings, judge_arrays, member_arrays
from pitchguard.judge.findings import FindingSet


def joined_sites(assembly, k: int) -> LatticeSites | None:
    """Layer ``k``'s lattice sites over every tile: each distinct tile's, moved onto
    each tile of its group (None when no tile has any)."""
    boxes = np.asarray(assembly.tiles, dtype=np.float64).reshape(-1, 4)
    parts = []
    for members, stats in zip(assembly.members, assembly.stats, strict=True):
        own = stats[k].lattice
        if own is None or len(own) == 0:
            continue
        base = boxes[members[0], :2]
        for m in members:
            dx, dy = (boxes[m, :2] - base).tolist()
            parts.append(own.shifted(dx, dy))
    return LatticeSites.joined(parts) if parts else None


def tiled_arrays(deck: Deck, assembly) -> list[tuple]:
    """Per deck layer: the arrays of the whole tiled layout (None when none) and the
    verdicts on them."""
    out = []
    for k, rule in enumerate(deck.layers):
        sites = joined_sites(assembly, k)
        if sites is None:
            out.append((None, ArrayVerdicts([])))
            continue
        arrays = find_arrays(sites)
        out.append((arrays, judge_arrays(arrays, rule, deck.scale_to_wafer)))
    return out


def settled(findings: FindingSet, deck: Deck, found: list[tuple]) -> FindingSet:
    """``findings`` with the clip findings (context ``group``) on array members settled by
    :func:`judge.arrays.edge_findings` (``found``: :func:`tiled_arrays`)."""
    group = np.array([f.context == "group" for f in findings.distinct], dtype=bool)
    if not group.any():
        return findings
    items = np.flatnonzero(group[findings.which])
    origin = np.array([f.cut_origin_nm for f in findings.distinct], dtype=np.float64)
    centres = origin[findings.which[items]] + findings.offset[items]
    layer = np.array([f.layer for f in findings.distinct], dtype=object)[findings.which[items]]
    drop = np.zeros(len(findings.which), dtype=bool)
    more = []
    for rule, (arrays, v) in zip(deck.layers, found, strict=True):
        mine = np.flatnonzero(layer == rule.name)
        if arrays is None or not len(mine):
            continue
        ids = member_arrays(centres[mine], arrays)
        on = mine[ids >= 0]
        drop[items[on]] = True
        more += edge_findings([findings[int(k)] for k in items[on]], ids[ids >= 0], v)
    if not drop.any():
        return findings
    return with_findings(findings.select(np.flatnonzero(~drop)), more)


def with_findings(findings: FindingSet, more: list) -> FindingSet:
    """``findings`` and ``more`` (each its own distinct finding, in place)."""
    if not more:
        return findings
    n = len(findings.distinct)
    return FindingSet(
        findings.distinct + list(more),
        np.concatenate([findings.which, np.arange(n, n + len(more))]),
        np.concatenate([findings.offset, np.zeros((len(more), 2))]),
    )
