"""Arrays of compact features in a tiled scan: the tiles' lattice sites put together,
arrays found over the whole layout and judged in the main process."""

from __future__ import annotations

import numpy as np

from pitchguard.deck import Deck
from pitchguard.geometry.lattice import LatticeSites, find_arrays
from pitchguard.judge.arrays import ArrayVerdicts, judge_arrays
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


def tiled_arrays(deck: Deck, assembly) -> list[ArrayVerdicts]:
    """Per deck layer: the verdicts on the arrays of the whole tiled layout."""
    out = []
    for k, rule in enumerate(deck.layers):
        sites = joined_sites(assembly, k)
        if sites is None:
            out.append(ArrayVerdicts([]))
            continue
        out.append(judge_arrays(find_arrays(sites), rule, deck.scale_to_wafer))
    return out


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
