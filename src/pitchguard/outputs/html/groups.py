"""Findings grouped for the HTML report: one card per kind of finding."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from pitchguard.judge.findings import Finding, FindingSet

LOCATIONS_LISTED = 1000
"""Entries (findings of a cell) listed per group (the JSON output has them all)."""


OPEN_GROUPS = 8
"""The first groups are expanded when the page opens; the rest are collapsed."""


def group_number(value: float, digits: int = 1) -> str:
    """A rounded number as a hashable, nan-safe text key."""
    if value is None or not math.isfinite(value):
        return str(value)
    return f"{round(float(value), digits) + 0.0:.{digits}f}"


def group_key(f: Finding) -> tuple:
    """Findings with equal keys are drawn once and listed together."""
    return (
        f.layer,
        f.check,
        f.severity,
        group_number(f.pitch_nm),
        group_number(f.width_nm),
        group_number(f.space_nm),
        group_number(f.orientation_deg % 180.0),
        f.context,
        # Arrays: the lattice (the pitches above are |a1| and the feature's width).
        (f.array.lattice, group_number(f.pitch_max_nm), group_number(f.array.feature_nm[1]))
        if f.array is not None
        else None,
    )


@dataclass
class Group:
    key: tuple
    findings: Sequence[Finding] = field(default_factory=list)  # every placement
    entries: list = field(default_factory=list)  # judge.per_cell.CellFinding s

    @property
    def first(self) -> Finding:
        return self.findings[0]


def group_findings(findings: Sequence[Finding]) -> list[Group]:
    """Groups in the order of their first (worst) finding.

    A :class:`FindingSet` is grouped by its distinct findings (a copy's key is
    its distinct finding's) and each group is a FindingSet of its items.
    """
    if isinstance(findings, FindingSet):
        return group_finding_set(findings)
    groups: dict[tuple, Group] = {}
    for f in findings:
        k = group_key(f)
        g = groups.get(k)
        if g is None:
            g = groups[k] = Group(k)
        g.findings.append(f)
    return list(groups.values())


def group_finding_set(findings: FindingSet) -> list[Group]:
    keys: dict[tuple, int] = {}
    of_distinct = np.array(
        [keys.setdefault(group_key(f), len(keys)) for f in findings.distinct], dtype=np.int64
    )
    n = len(findings)
    if n == 0:
        return []
    gid = of_distinct[findings.which]
    first = np.full(len(keys), n, dtype=np.int64)
    np.minimum.at(first, gid, np.arange(n))
    rank = np.empty(len(keys), dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(keys))
    order = np.lexsort((np.arange(n), rank[gid]))
    bounds = np.flatnonzero(np.diff(rank[gid][order])) + 1
    key_of = list(keys)
    return [
        Group(key_of[int(gid[idx[0]])], findings.select(idx)) for idx in np.split(order, bounds)
    ]


def attach_entries(groups: list[Group], entries) -> None:
    """File each report entry (judge.per_cell.CellFinding) with its group."""
    by_key = {g.key: g for g in groups}
    for c in entries:
        by_key[group_key(c.finding)].entries.append(c)
