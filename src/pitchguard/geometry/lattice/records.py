"""Lattice extraction: the records passed between its stages."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import NamedTuple

import numpy as np

from pitchguard.geometry.lattice.common import (
    INTERIOR,
    KEY_STEPS,
    LATTICE_NAMES,
    REASON_NAMES,
    convex_hull,
    cross_2d,
)

# ---------------------------------------------------------------------------
# Records


@dataclass(frozen=True)
class FeatureColumns:
    """Compact features as columns (one row per feature, nm)."""

    centroid: np.ndarray  # (n, 2) area centroid
    size: np.ndarray  # (n, 2) w, h: extents along the frame and across it
    angle_deg: np.ndarray  # (n,) frame direction in (-22.5, 67.5]
    area: np.ndarray  # (n,)
    bbox: np.ndarray  # (n, 4) x0, y0, x1, y1
    centre: np.ndarray  # (n, 2) centre of the frame rectangle

    def __len__(self) -> int:
        return len(self.area)

    def take(self, idx: np.ndarray) -> FeatureColumns:
        return FeatureColumns(*(getattr(self, f.name)[idx] for f in fields(FeatureColumns)))

    @classmethod
    def empty(cls) -> FeatureColumns:
        z2 = np.zeros((0, 2))
        return cls(z2, z2, np.zeros(0), np.zeros(0), np.zeros((0, 4)), z2)

    @classmethod
    def joined(cls, parts: list[FeatureColumns]) -> FeatureColumns:
        if not parts:
            return cls.empty()
        return cls(*(np.concatenate([getattr(p, f.name) for p in parts]) for f in fields(cls)))

    def corners(self, idx: np.ndarray) -> np.ndarray:
        """The frame rectangles of features ``idx`` as (k, 4, 2) corners."""
        t = np.radians(self.angle_deg[idx])
        eu = np.stack([np.cos(t), np.sin(t)], axis=1)
        ev = np.stack([-np.sin(t), np.cos(t)], axis=1)
        hw = 0.5 * self.size[idx, :1] * eu
        hh = 0.5 * self.size[idx, 1:] * ev
        c = self.centre[idx]
        return np.stack([c - hw - hh, c + hw - hh, c + hw + hh, c - hw + hh], axis=1)


@dataclass(frozen=True)
class CompactFeatures:
    """Compact features of one layer and what became of every polygon.

    ``polygon_feature[k]``: the compact feature polygon ``k`` is part of, or -1;
    ``polygon_reason[k]``: ``COMPACT`` or why not (``LARGE``: its feature, or a
    shape it touches, is too large; ``NOT_MANHATTAN``; ``HOLE``; ``DEGENERATE``).
    """

    features: FeatureColumns
    polygon_feature: np.ndarray
    polygon_reason: np.ndarray

    def __len__(self) -> int:
        return len(self.features)

    def reason_counts(self) -> dict[str, int]:
        """Polygons per reason, by name."""
        counts = np.bincount(self.polygon_reason, minlength=len(REASON_NAMES))
        return {name: int(c) for name, c in zip(REASON_NAMES, counts, strict=True)}


@dataclass(frozen=True)
class LatticeSites:
    """Compact features with their local lattices and links (one tile's own, or joined).

    Per feature: ``a1``, ``a2`` the canonical reduced basis of its local
    lattice (NaN where missing), ``lattice`` its class (``NONE``: no feature of
    its shape within range), ``core`` whether neighbours of the same lattice
    confirm it (see :func:`lattice_sites`).  Links join core features of one
    lattice one step apart: from a feature (row index ``link_from``) to a
    feature named by its centroid key (``link_to``, see :func:`centroid_keys`),
    which may belong to another tile.  ``near_from``, ``near_to``: every
    same-shape neighbour (by key) of each feature that is not core, in either
    one's reach; :func:`find_arrays` places such features on a neighbouring
    array's lattice.
    """

    features: FeatureColumns
    a1: np.ndarray
    a2: np.ndarray
    lattice: np.ndarray
    core: np.ndarray
    link_from: np.ndarray
    link_to: np.ndarray
    near_from: np.ndarray
    near_to: np.ndarray
    grid_nm: float
    tol_nm: float
    range_nm: float

    def __len__(self) -> int:
        return len(self.features)

    def shifted(self, dx: float, dy: float) -> LatticeSites:
        """The same sites moved by ``(dx, dy)`` nm, a whole number of key steps
        (``grid_nm / KEY_STEPS``; tiles of one content group are): coordinates
        and the keys that name linked features move together."""
        step = self.grid_nm / KEY_STEPS
        qx, qy = round(dx / step), round(dy / step)
        if abs(qx * step - dx) > 1e-6 * step or abs(qy * step - dy) > 1e-6 * step:
            raise ValueError(f"shift ({dx}, {dy}) nm is not a whole number of key steps")
        if dx == 0.0 and dy == 0.0:
            return self
        f = self.features
        d2 = np.array([dx, dy])
        moved = FeatureColumns(
            f.centroid + d2, f.size, f.angle_deg, f.area, f.bbox + np.tile(d2, 2), f.centre + d2
        )
        dkey = (qx << 32) + qy
        return LatticeSites(
            moved,
            self.a1,
            self.a2,
            self.lattice,
            self.core,
            self.link_from,
            self.link_to + dkey,
            self.near_from,
            self.near_to + dkey,
            self.grid_nm,
            self.tol_nm,
            self.range_nm,
        )

    @classmethod
    def joined(cls, parts: list[LatticeSites]) -> LatticeSites:
        """The sites of tiles (disjoint regions), one after the other."""
        if not parts:
            raise ValueError("no parts to join")
        offsets = np.cumsum([0] + [len(p) for p in parts[:-1]])
        return cls(
            FeatureColumns.joined([p.features for p in parts]),
            np.concatenate([p.a1 for p in parts]),
            np.concatenate([p.a2 for p in parts]),
            np.concatenate([p.lattice for p in parts]),
            np.concatenate([p.core for p in parts]),
            np.concatenate([p.link_from + o for p, o in zip(parts, offsets, strict=True)]),
            np.concatenate([p.link_to for p in parts]),
            np.concatenate([p.near_from + o for p, o in zip(parts, offsets, strict=True)]),
            np.concatenate([p.near_to for p in parts]),
            parts[0].grid_nm,
            parts[0].tol_nm,
            parts[0].range_nm,
        )


class LatticeArray(NamedTuple):
    """One array of compact features (nm as drawn; see the module notes for conventions)."""

    index: int
    lattice: str  # square, rectangular, centred, hexagonal, oblique, row
    a1_nm: tuple[float, float]
    a2_nm: tuple[float, float]  # NaN for a row
    pitch_nm: tuple[float, float]  # |a1|, |a2|
    angle_deg: float  # between a1 and a2 (NaN for a row)
    feature_nm: tuple[float, float]  # mean w, h in the feature frame
    feature_angle_deg: float
    count: int
    columns: int  # lattice sites spanned along a1
    rows: int  # along a2 (1 for a row)
    origin_nm: tuple[float, float]  # the site u = v = 0
    bbox_nm: tuple[float, float, float, float]
    interior: int
    edge: int  # last column, last row or notch
    corner: int
    max_residual_nm: float  # largest distance of a member's centroid from its site


@dataclass(frozen=True)
class LatticeArrays:
    """Arrays found among lattice sites, as columns.

    Per site (the rows of ``sites``): ``array`` (-1 for isolated features),
    ``uv`` lattice coordinates, ``role`` (``INTERIOR``, ``END_A1``: a neighbour
    missing along a1, i.e. first or last column; ``END_A2``: first or last
    row; ``CORNER``: both; ``NOTCH``: only a diagonal neighbour missing), and
    ``neighbours``: bit k set when a member sits at ``NEIGHBOUR_STEPS[k]``.
    Only neighbour sites within the interaction range decide the role.  Roles
    follow the basis: on a hexagonal or centred array drawn in a rectangular
    outline, the members of its zigzag sides miss neighbours along a1 and a2
    and count as corners.  Per array: the fields of :class:`LatticeArray`;
    ``records()`` yields them.
    """

    sites: LatticeSites
    array: np.ndarray
    uv: np.ndarray
    role: np.ndarray
    neighbours: np.ndarray
    lattice: np.ndarray
    a1: np.ndarray
    a2: np.ndarray
    origin: np.ndarray
    count: np.ndarray
    extent: np.ndarray  # (k, 2) columns, rows
    bbox: np.ndarray
    feature: np.ndarray  # (k, 2) w, h
    feature_angle_deg: np.ndarray
    role_counts: np.ndarray  # (k, 3) interior, edge, corner
    residual: np.ndarray

    def __len__(self) -> int:
        return len(self.count)

    @property
    def isolated(self) -> int:
        """Compact features in no array."""
        return int(np.sum(self.array < 0))

    def members(self, k: int) -> np.ndarray:
        """Site rows of array ``k``, in increasing order."""
        return np.flatnonzero(self.array == k)

    def record(self, k: int) -> LatticeArray:
        a1, a2 = self.a1[k], self.a2[k]
        p1, p2 = float(np.hypot(*a1)), float(np.hypot(*a2))
        angle = math.degrees(math.atan2(abs(cross_2d(a1, a2)), float(a1 @ a2)))
        rc = self.role_counts[k]
        return LatticeArray(
            index=k,
            lattice=LATTICE_NAMES[self.lattice[k]],
            a1_nm=(float(a1[0]), float(a1[1])),
            a2_nm=(float(a2[0]), float(a2[1])),
            pitch_nm=(p1, p2),
            angle_deg=angle,
            feature_nm=(float(self.feature[k, 0]), float(self.feature[k, 1])),
            feature_angle_deg=float(self.feature_angle_deg[k]),
            count=int(self.count[k]),
            columns=int(self.extent[k, 0]),
            rows=int(self.extent[k, 1]),
            origin_nm=(float(self.origin[k, 0]), float(self.origin[k, 1])),
            bbox_nm=tuple(float(x) for x in self.bbox[k]),
            interior=int(rc[0]),
            edge=int(rc[1]),
            corner=int(rc[2]),
            max_residual_nm=float(self.residual[k]),
        )

    def records(self):
        for k in range(len(self)):
            yield self.record(k)

    def hull(self, k: int) -> np.ndarray:
        """Convex hull (counter-clockwise, nm) of the frame rectangles of array ``k``."""
        m = self.members(k)
        m = m[self.role[m] != INTERIOR]  # the hull's corners lie on the array's edge
        return convex_hull(self.sites.features.corners(m).reshape(-1, 2))
