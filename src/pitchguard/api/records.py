"""The records the Python API hands out: plain, typed, frozen values.

Each record is read from the row the JSON report writes for the same thing,
so a finding seen through the API and in ``--json`` never disagree.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class CheckRecord:
    """One limit a finding breaks."""

    check: str
    severity: str
    value: float | None
    limit: float | None
    message: str


@dataclass(frozen=True)
class FindingRecord:
    """One distinct finding of a cell, with every placement of it.

    The numbers are those of the first placement, the worst (report order);
    ``bbox_um`` and ``centre_um`` are in the top cell's frame, ``cell_bbox_um``
    in the cell's own.  ``row`` is the whole JSON row (``--json-inline-texts``
    form) for anything not lifted into a field.
    """

    layer: str
    check: str
    severity: str
    cell: str | None
    cell_path: tuple[str, ...]
    placements: int
    bbox_um: tuple[float, ...]
    centre_um: tuple[float, ...]
    cell_bbox_um: tuple[float, ...]
    pitch_nm: float | None
    width_nm: float | None
    space_nm: float | None
    k1: float | None
    nils: float | None
    exposure_latitude_pct: float | None
    depth_of_focus_nm: float | None
    message: str
    hint: str
    checks: tuple[CheckRecord, ...]
    depends_on_placement: bool
    index: int = field(repr=False)  # position in the report's entries
    row: dict[str, Any] = field(repr=False, compare=False)

    @classmethod
    def from_row(cls, row: dict[str, Any], index: int) -> FindingRecord:
        return cls(
            layer=row["layer"],
            check=row["check"],
            severity=row["severity"],
            cell=row.get("cell"),
            cell_path=tuple(row.get("cell_path") or ()),
            placements=int(row.get("placements", 1)),
            bbox_um=tuple(row["bbox_um"]),
            centre_um=tuple(row["centre_um"]),
            cell_bbox_um=tuple(row.get("cell_bbox_um") or row["bbox_um"]),
            pitch_nm=row["pitch_nm"],
            width_nm=row["width_nm"],
            space_nm=row["space_nm"],
            k1=row["k1"],
            nils=row["nils"],
            exposure_latitude_pct=row["exposure_latitude_pct"],
            depth_of_focus_nm=row["depth_of_focus_nm"],
            message=row["message"],
            hint=row["hint"],
            checks=tuple(CheckRecord(**c) for c in row["checks"]),
            depends_on_placement=bool(row.get("depends_on_placement", False)),
            index=index,
            row=row,
        )


@dataclass(frozen=True)
class LayerCoverage:
    """What a scan judged of one deck layer: every edge not judged is counted."""

    layer: str
    source: str
    shapes: int
    edge_um: float
    judged_um: float
    judged_pct: float | None  # None: the layer has no edges
    by_severity: dict[str, int]
