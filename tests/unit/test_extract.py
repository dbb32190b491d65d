"""Unit and property tests for feature building and site finding
(pitchguard.geometry.features and pitchguard.geometry.sites), and for the
layout reader that feeds them (pitchguard.layout.reader).

Expected values come from the geometry as drawn: a line of width w next to a
line at space s gives width w, space s and pitch w + s on the facing sides
(definition of line/space pitch; common practice).  Rotations, mirrors and
translations are rigid motions, so they must not change any of them; the only
change allowed is the rounding of vertices to the 1 nm database grid (see
``TOL_DIAGONAL_NM``).
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import gdstk
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings

from pitchguard.geometry.features import build_features
from pitchguard.geometry.sites import Sites, find_sites
from pitchguard.layout.polygons import PolygonSet
from pitchguard.layout.reader import read_layout
from strategies import (
    DIAGONAL_DEG,
    GRID_NM,
    INTERACTION_RANGE_NM,
    MANHATTAN_DEG,
    MIN_RUN_NM,
    LineArray,
    Placement,
    line_arrays,
    placements,
    polygons,
    rectangle,
)

EXACT_NM = 1e-9  # Manhattan geometry on an integer grid: float round-off only
FILE_NM = 1e-6  # read from a file in um user units: um -> nm conversion round-off
# A vertex rounded to a 1 nm grid moves by at most 0.5 nm in x and in y, i.e. by
# at most 0.5 (|cos t| + |sin t|) = 0.5 sqrt(2) = 0.71 nm across an edge at 45 deg.
# A width, space or pitch is the distance between two such edges: off by at most
# sqrt(2) = 1.41 nm.  (Edge tilt from rounding is < 0.2 deg over >= 400 nm: its
# cosine error is ~1e-5, negligible.)
TOL_DIAGONAL_NM = math.sqrt(2.0) + 0.01
TOL_DIAGONAL_DEG = 0.25  # tilt of a snapped edge: atan(sqrt(2) / 400 nm) = 0.2 deg
RUN_SLACK_NM = 4.0  # a diagonal edge may lose a few grid steps of run at its corners

HYPOTHESIS = settings(
    max_examples=50,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)


def extract(
    polys, min_run_nm=MIN_RUN_NM, interaction_range_nm=INTERACTION_RANGE_NM, grid_nm=GRID_NM
):
    """build_features + find_sites on a list of ``(n, 2)`` nm arrays."""
    edges = build_features(PolygonSet.from_arrays(polys), grid_nm=grid_nm)
    sites, stats = find_sites(edges, min_run_nm, interaction_range_nm, grid_nm, cell_nm=None)
    return edges, sites, stats


def debug_layout(polys, sites: Sites) -> Path:
    """Write the drawn shapes (1/0) and the found sites (2/0) to a GDSII file to look at."""
    lib = gdstk.Library(unit=1e-9, precision=1e-9)
    cell = lib.new_cell("DEBUG")
    for p in polys:
        cell.add(gdstk.Polygon(p, layer=1))
    for quad in sites.corners():
        cell.add(gdstk.Polygon(quad, layer=2))
    path = Path(tempfile.mkdtemp(prefix="pitchguard-debug-")) / "sites.gds"
    lib.write_gds(str(path))
    return path


def check(condition: bool, what: str, polys, sites: Sites) -> None:
    """Assert ``condition``; on failure point to a debug layout of the case."""
    if not condition:
        raise AssertionError(f"{what} (debug layout: {debug_layout(polys, sites)})")


def rows(sites: Sites) -> list[tuple[float, float, float]]:
    """``(width, space, run)`` per site, sorted, for comparing against a table."""
    return sorted(
        (float(w), float(s), float(r))
        for w, s, r in zip(sites.width, sites.space, sites.run, strict=True)
    )


def line_array(count: int, width: float, space: float, length: float) -> list[np.ndarray]:
    pitch = width + space
    return [rectangle(i * pitch, 0, i * pitch + width, length) for i in range(count)]


# --------------------------------------------------------------------------- features


def test_abutting_rectangles_are_one_line():
    # One 50 x 1000 line drawn as two 50 x 500 halves.
    edges, sites, stats = extract([rectangle(0, 0, 50, 500), rectangle(0, 500, 50, 1000)])
    assert edges.n_features == 1
    assert len(edges) == 4  # the seam is gone and each long side is one edge
    assert sorted(edges.length) == [50.0, 50.0, 1000.0, 1000.0]
    assert stats.short_edges == 2  # the two line ends
    assert rows(sites) == [(50.0, math.inf, 1000.0)] * 2


def test_overlapping_rectangles_are_one_line():
    drawn = [rectangle(0, 0, 50, 600), rectangle(0, 400, 50, 1000), rectangle(120, 0, 170, 1000)]
    edges, sites, _ = extract(drawn)
    assert edges.n_features == 2
    assert len(edges) == 8
    assert rows(sites) == [(50.0, 70.0, 1000.0)] * 2 + [(50.0, math.inf, 1000.0)] * 2


def test_a_line_drawn_in_pieces_inside_an_array_is_not_cut_at_the_seams():
    drawn = line_array(3, 50, 70, 1000)
    drawn[1:2] = [
        rectangle(120, 0, 170, 300),
        rectangle(120, 300, 170, 700),
        rectangle(120, 700, 170, 1000),
    ]
    _, sites, stats = extract(drawn)
    assert stats.sites == 6  # one site per long side: no seam splits a side
    assert rows(sites) == [(50.0, 70.0, 1000.0)] * 4 + [(50.0, math.inf, 1000.0)] * 2


def test_clockwise_and_closed_rings_are_oriented_with_material_on_the_left():
    cw = rectangle(0, 0, 50, 1000)[::-1]  # clockwise
    closed = np.vstack([rectangle(120, 0, 170, 1000), [[120, 0]]])  # first vertex repeated
    edges, sites, _ = extract([cw, closed])
    assert len(edges) == 8  # the repeated vertex adds no zero-length edge
    # Outward normal of every site points away from its own line (into the space).
    mid = sites.midpoints()
    out = mid + sites.normal * 1.0
    inside_own = (out[:, 0] > 0) & (out[:, 0] < 50) | (out[:, 0] > 120) & (out[:, 0] < 170)
    assert not inside_own.any()
    assert rows(sites) == [(50.0, 70.0, 1000.0)] * 2 + [(50.0, math.inf, 1000.0)] * 2


# A 400 x 1000 frame with a 200 x 800 hole (walls 100 wide), drawn three ways.
FRAME_WITH_HOLE = {
    # One ring, hole joined to the outside by a diagonal cut line (out and back).
    "keyhole-diagonal-cut": [
        np.array(
            [
                [0, 0],
                [400, 0],
                [400, 1000],
                [0, 1000],
                [0, 0],
                [100, 100],
                [100, 900],
                [300, 900],
                [300, 100],
                [100, 100],
            ],
            float,
        ),
    ],
    # One ring, hole joined by a horizontal cut line: splits the outer and hole sides.
    "keyhole-straight-cut": [
        np.array(
            [
                [0, 0],
                [400, 0],
                [400, 1000],
                [0, 1000],
                [0, 500],
                [100, 500],
                [100, 900],
                [300, 900],
                [300, 100],
                [100, 100],
                [100, 500],
                [0, 500],
            ],
            float,
        ),
    ],
    # Four overlapping bars: the hole appears only when they are merged.
    "four-bars": [
        rectangle(0, 0, 100, 1000),
        rectangle(300, 0, 400, 1000),
        rectangle(0, 0, 400, 100),
        rectangle(0, 900, 400, 1000),
    ],
}


@pytest.mark.parametrize("drawing", list(FRAME_WITH_HOLE), ids=str)
def test_feature_with_a_hole(drawing):
    # Interaction range 1200 nm: longer than any distance in the frame, so every side sees across.
    edges, sites, stats = extract(
        FRAME_WITH_HOLE[drawing], min_run_nm=50.0, interaction_range_nm=1200.0
    )
    assert edges.n_features == 1
    assert len(edges) == 8  # 4 outer + 4 hole sides, cut lines dropped, sides rejoined
    assert sorted(edges.length) == [200.0, 200.0, 400.0, 400.0, 800.0, 800.0, 1000.0, 1000.0]
    expected = sorted(
        # Hole sides: the wall is the width, the hole the space.
        [(100.0, 200.0, 800.0)] * 2  # left/right hole sides: across the hole 200
        + [(100.0, 800.0, 200.0)] * 2  # top/bottom hole sides: across the hole 800
        # Outer sides, cut where the hole starts and ends behind them.
        + [(1000.0, math.inf, 100.0)] * 4  # bottom/top, beside the hole: through the wall
        + [(100.0, math.inf, 200.0)] * 2  # bottom/top, behind the hole
        + [(400.0, math.inf, 100.0)] * 4  # left/right, beside the hole
        + [(100.0, math.inf, 800.0)] * 2  # left/right, behind the hole
    )
    assert rows(sites) == expected
    assert stats.pieces_2d == 0


# --------------------------------------------------------------------------- sites


@pytest.mark.parametrize("count", [1, 2, 3, 5, 8])
def test_array_of_n_lines_gives_2n_minus_2_pitches_and_2_isolated_edges(count):
    width, space, length = 50.0, 70.0, 1000.0  # min_run 250 > width: line ends are 2-D
    edges, sites, stats = extract(line_array(count, width, space, length))
    finite = np.isfinite(sites.pitch)
    assert edges.n_features == count
    assert stats.short_edges == 2 * count
    assert stats.sites == len(sites) == 2 * count
    assert finite.sum() == 2 * count - 2
    assert stats.isolated_sites == (~finite).sum() == 2
    assert np.all(sites.pitch[finite] == width + space)
    assert np.all(sites.width == width)
    assert np.all(sites.run == length)
    assert np.all(sites.orientation_deg == 90.0)  # lines along y


def test_staggered_neighbour_cuts_the_side_into_pieces():
    # Neighbour 70 nm away shifted up by half a line: it faces only the top half.
    _, sites, stats = extract([rectangle(0, 0, 50, 1000), rectangle(120, 500, 170, 1500)])
    right = sites.take(np.flatnonzero(np.all(sites.origin == [50.0, 0.0], axis=1)))
    assert sorted(zip(right.u0, right.u1, right.space, strict=True)) == [
        (0.0, 500.0, math.inf),  # nothing across
        (500.0, 1000.0, 70.0),  # the neighbour across
    ]
    assert np.all(right.width == 50.0)
    assert stats.pieces_2d == 0


def test_side_faced_by_two_neighbours_gets_one_piece_per_neighbour():
    drawn = [
        rectangle(0, 0, 50, 1000),
        rectangle(120, -500, 170, 400),  # space 70, faces y 0..400
        rectangle(140, 600, 200, 1500),  # space 90, faces y 600..1000
    ]
    _, sites, stats = extract(drawn, min_run_nm=100.0)  # the 200 nm gap piece is long enough
    right = sites.take(np.flatnonzero(np.all(sites.origin == [50.0, 0.0], axis=1)))
    assert sorted(zip(right.u0, right.u1, right.space, right.pitch, strict=True)) == [
        (0.0, 400.0, 70.0, 120.0),
        (400.0, 600.0, math.inf, math.inf),  # the gap between the neighbours
        (600.0, 1000.0, 90.0, 140.0),
    ]
    assert stats.pieces_2d == 0
    # With min_run 250 nm the 200 nm gap piece is too short to judge: it is 2-D.
    _, sites, stats = extract(drawn, min_run_nm=250.0)
    right = sites.take(np.flatnonzero(np.all(sites.origin == [50.0, 0.0], axis=1)))
    assert sorted(right.space) == [70.0, 90.0]
    assert stats.pieces_2d == 1


def test_short_edges_are_counted_as_2d_not_judged():
    # A line with a 10 nm jog half way up: the jog sides and line ends are short.
    jogged = np.array(
        [[0, 0], [50, 0], [50, 500], [60, 500], [60, 1000], [10, 1000], [10, 500], [0, 500]],
        float,
    )
    edges, sites, stats = extract([jogged], min_run_nm=100.0)
    assert len(edges) == 8
    assert stats.short_edges == 4  # two ends (50) and two jog sides (10)
    assert stats.sites == 4  # the four 500 nm sides
    assert np.all(sites.run == 500.0)
    assert np.all(sites.width == 50.0)


def test_piece_facing_a_short_neighbour_is_2d():
    # A 40 x 40 square 50 nm from a line: the 40 nm piece it faces is below min_run.
    _, sites, stats = extract(
        [rectangle(0, 0, 50, 1000), rectangle(100, 480, 140, 520)], min_run_nm=100.0
    )
    assert stats.short_edges == 6  # 2 line ends + 4 square sides
    assert stats.pieces_2d == 1
    right = sites.take(np.flatnonzero(np.all(sites.origin == [50.0, 0.0], axis=1)))
    assert sorted(zip(right.u0, right.u1, right.space, strict=True)) == [
        (0.0, 480.0, math.inf),
        (520.0, 1000.0, math.inf),
    ]


def test_non_parallel_neighbour_gives_2d_pieces_not_sites():
    # A line tilted by atan(250/1000) = 14 deg next to a vertical line.
    tilted = np.array([[100, 0], [150, 0], [400, 1000], [350, 1000]], float)
    _, sites, stats = extract([rectangle(0, 0, 50, 1000), tilted], min_run_nm=100.0)
    assert stats.pieces_2d > 0
    # No site pairs the two lines: every finite space would have to be between them.
    assert np.all(np.isinf(sites.space))
    # The tilted line's width across its sides: 50 cos(14.04 deg) = 50 * 1000 / |(250, 1000)|.
    tilted_sites = sites.take(np.flatnonzero(sites.feature == sites.feature.max()))
    assert tilted_sites.width == pytest.approx(
        50.0 * 1000.0 / math.hypot(250.0, 1000.0), abs=EXACT_NM
    )


@pytest.mark.parametrize("angle_deg", [45.0, 135.0, 30.0])
@pytest.mark.parametrize("grid_nm", [1.0, 0.25, 0.001])
def test_rotated_lines_keep_their_pitch_up_to_the_grid(angle_deg, grid_nm):
    # Float (unsnapped) vertices: merging snaps them to grid_nm, which moves an edge
    # by at most 0.5 grid (|cos| + |sin|) <= grid / sqrt(2); a distance between two
    # edges by at most sqrt(2) grid.  Rotation itself preserves distances.
    t = math.radians(angle_deg)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    drawn = [p @ rot.T for p in line_array(4, 50.0, 70.0, 1000.0)]
    _, sites, stats = extract(drawn, grid_nm=grid_nm)
    tol = math.sqrt(2.0) * grid_nm
    finite = np.isfinite(sites.pitch)
    assert stats.sites == 8
    assert finite.sum() == 6
    assert sites.pitch[finite] == pytest.approx(120.0, abs=tol)
    assert sites.space[finite] == pytest.approx(70.0, abs=tol)
    assert sites.width == pytest.approx(50.0, abs=tol)
    assert sites.orientation_deg == pytest.approx((90.0 + angle_deg) % 180.0, abs=TOL_DIAGONAL_DEG)


def test_45_degree_lines_snapped_to_the_grid():
    t = math.radians(45.0)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    drawn = [np.round(p @ rot.T) for p in line_array(3, 50.0, 70.0, 1000.0)]
    _, sites, stats = extract(drawn)
    finite = np.isfinite(sites.pitch)
    assert stats.sites == 6
    assert finite.sum() == 4
    assert sites.pitch[finite] == pytest.approx(120.0, abs=TOL_DIAGONAL_NM)
    assert sites.space[finite] == pytest.approx(70.0, abs=TOL_DIAGONAL_NM)
    assert sites.width == pytest.approx(50.0, abs=TOL_DIAGONAL_NM)
    assert sites.orientation_deg == pytest.approx(135.0, abs=TOL_DIAGONAL_DEG)


def test_empty_layer_has_no_sites():
    edges, sites, stats = extract([])
    assert len(edges) == 0
    assert len(sites) == 0
    assert stats.sites == 0


# --------------------------------------------------------------------------- properties


def check_array_sites(array: LineArray, placement: Placement) -> None:
    """The sites of a placed array report the width, space and pitch it was built with."""
    drawn = polygons(array, placement)
    edges, sites, stats = extract(drawn)
    n_arrays, n_lines = placement.arrays(array.count)
    lines = n_arrays * n_lines
    tol = EXACT_NM if placement.manhattan else TOL_DIAGONAL_NM
    tol_deg = EXACT_NM if placement.manhattan else TOL_DIAGONAL_DEG

    def near(values, target, tolerance):
        return bool(np.all(np.abs(np.asarray(values) - target) <= tolerance))

    finite = np.isfinite(sites.space)
    check(edges.n_features == lines, "one feature per line", drawn, sites)
    check(stats.short_edges == 2 * lines, "line ends are 2-D", drawn, sites)
    check(stats.pieces_2d == 0, "no 2-D pieces on straight lines", drawn, sites)
    check(len(sites) == 2 * lines, "one site per long side", drawn, sites)
    check(int(finite.sum()) == n_arrays * (2 * n_lines - 2), "inner sides", drawn, sites)
    check(stats.isolated_sites == 2 * n_arrays, "two isolated sides per array", drawn, sites)
    check(near(sites.width, array.width, tol), f"width {array.width}", drawn, sites)
    check(near(sites.space[finite], array.space, tol), f"space {array.space}", drawn, sites)
    check(near(sites.pitch[finite], array.pitch, tol), f"pitch {array.pitch}", drawn, sites)
    check(
        near(sites.run, array.length, 0.0 if placement.manhattan else RUN_SLACK_NM),
        f"run {array.length}",
        drawn,
        sites,
    )
    ang = sites.orientation_deg
    dang = np.abs(ang - placement.line_orientation_deg)
    dang = np.minimum(dang, 180.0 - dang)
    check(bool(np.all(dang <= tol_deg)), "orientation", drawn, sites)


@HYPOTHESIS
@given(array=line_arrays(), placement=placements(angles=MANHATTAN_DEG))
def test_manhattan_arrays_give_back_their_pitch_exactly(array, placement):
    check_array_sites(array, placement)


@HYPOTHESIS
@given(array=line_arrays(), placement=placements(angles=DIAGONAL_DEG))
def test_45_degree_arrays_give_back_their_pitch_within_the_grid(array, placement):
    check_array_sites(array, placement)


def _distance_to_segments(points: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``(n_points, n_segments)`` distances from points to segments a-b."""
    ab = b - a
    ap = points[:, None, :] - a[None, :, :]
    t = np.clip(np.einsum("psk,sk->ps", ap, ab) / np.einsum("sk,sk->s", ab, ab), 0.0, 1.0)
    nearest = a[None, :, :] + t[..., None] * ab[None, :, :]
    return np.hypot(*(points[:, None, :] - nearest).transpose(2, 0, 1))


@HYPOTHESIS
@given(array=line_arrays(min_count=2), placement=placements())
def test_the_space_of_a_site_ends_on_a_facing_side_of_another_line(array, placement):
    # Going ``space`` nm along the outward normal from the middle of a site must
    # land on a side of another line that faces back (normal reversed); going
    # ``width`` nm inward must land on a side of the same line.
    drawn = polygons(array, placement)
    _, sites, _ = extract(drawn)
    tol = EXACT_NM if placement.manhattan else TOL_DIAGONAL_NM
    mid, nrm = sites.midpoints(), sites.normal
    seg_a = sites.origin + sites.direction * sites.u0[:, None]
    seg_b = sites.origin + sites.direction * sites.u1[:, None]
    facing = np.einsum("ik,jk->ij", nrm, nrm) < -0.99  # antiparallel pairs
    same = sites.feature[:, None] == sites.feature[None, :]
    finite = np.isfinite(sites.space)
    across = _distance_to_segments(
        mid + nrm * np.where(finite, sites.space, 0)[:, None], seg_a, seg_b
    )
    hit = np.any((across <= tol) & facing & ~same, axis=1)
    check(bool(np.all(hit[finite])), "space ends on a neighbour", drawn, sites)
    inward = _distance_to_segments(mid - nrm * sites.width[:, None], seg_a, seg_b)
    hit = np.any((inward <= tol) & facing & same, axis=1)
    check(bool(np.all(hit)), "width ends on the far side of the same line", drawn, sites)
    # Every inner space is seen from both of its sides: finite spaces pair up.
    spaces = np.sort(sites.space[finite])
    check(len(spaces) % 2 == 0, "spaces come in pairs", drawn, sites)
    check(bool(np.all(np.abs(spaces[0::2] - spaces[1::2]) <= 2 * tol)), "pairs match", drawn, sites)


# --------------------------------------------------------------------------- layout files


def _reference_library() -> gdstk.Library:
    """A hierarchy exercising every kind of placement the reader must flatten.

    * ``LINES``: 5 lines 40 nm wide at a 100 nm pitch, 1 um long (layer 1/0),
      plus one shape on 2/0 and one on 1/5 that must not be loaded.
    * ``TOP``: ``LINES`` placed x-reflected, rotated 90 deg and magnified 2x,
      twice (a 2 x 1 repetition 20 um apart); and a 100 nm x 1 um polygon on 1/0
      with a 3 x 1 OASIS-style repetition at a 300 nm pitch.
    """
    lib = gdstk.Library(unit=1e-6, precision=1e-9)  # um user unit, 1 nm database grid
    lines = lib.new_cell("LINES")
    for i in range(5):
        lines.add(gdstk.rectangle((i * 0.1, 0.0), (i * 0.1 + 0.04, 1.0), layer=1, datatype=0))
    lines.add(gdstk.rectangle((0.0, -1.0), (1.0, -0.5), layer=2, datatype=0))
    lines.add(gdstk.rectangle((0.0, 2.0), (1.0, 2.5), layer=1, datatype=5))
    top = lib.new_cell("TOP")
    ref = gdstk.Reference(
        lines, origin=(10.0, 10.0), rotation=math.pi / 2, magnification=2.0, x_reflection=True
    )
    ref.repetition = gdstk.Repetition(columns=2, rows=1, spacing=(20.0, 0.0))
    top.add(ref)
    bar = gdstk.rectangle((0.0, 50.0), (0.1, 51.0), layer=1, datatype=0)
    bar.repetition = gdstk.Repetition(columns=3, rows=1, spacing=(0.3, 0.0))
    top.add(bar)
    return lib


@pytest.mark.parametrize("fmt", ["gds", "oas"])
def test_layout_file_is_flattened_with_references_and_repetitions(tmp_path, fmt):
    path = tmp_path / f"reference.{fmt}"
    lib = _reference_library()
    (lib.write_gds if fmt == "gds" else lib.write_oas)(str(path))

    layout = read_layout(path, [(1, 0)])
    assert layout.format == fmt
    assert layout.grid_nm == pytest.approx(1.0)
    assert layout.cells == ("TOP",)
    assert set(layout.layers) == {(1, 0)}  # 2/0 and 1/5 are not loaded
    ps = layout.layers[(1, 0)]
    assert len(ps) == layout.shape_count == 5 * 2 + 3  # 2 placed copies of 5 lines + 3 bars

    # GDSII placement order (common practice, the STRANS record): reflect about x,
    # magnify, rotate, translate.  (x, y) -> (-y, x) after reflection -> (2 y, 2 x) + origin:
    # the vertical lines become horizontal, 80 nm wide at a 200 nm pitch.
    boxes = ps.bounding_boxes()
    first_copy = boxes[(boxes[:, 0] > 9_000) & (boxes[:, 0] < 11_000)]
    expected = [[10_000, 10_000 + 200 * i, 12_000, 10_080 + 200 * i] for i in range(5)]
    assert first_copy[np.lexsort(first_copy.T[::-1])] == pytest.approx(
        np.array(expected), abs=FILE_NM
    )

    edges = build_features(ps, grid_nm=layout.grid_nm)
    sites, stats = find_sites(edges, MIN_RUN_NM, INTERACTION_RANGE_NM, layout.grid_nm, cell_nm=None)
    assert edges.n_features == 13
    finite = np.isfinite(sites.pitch)
    placed = finite & (np.abs(sites.orientation_deg - 0.0) < 1e-6)  # the placed, rotated lines
    bars = finite & (np.abs(sites.orientation_deg - 90.0) < 1e-6)  # the repeated polygon
    assert sites.pitch[placed] == pytest.approx(200.0, abs=FILE_NM)  # 2 x 100 nm pitch
    assert sites.width[placed] == pytest.approx(80.0, abs=FILE_NM)  # 2 x 40 nm width
    assert placed.sum() == 2 * (2 * 5 - 2)
    assert sites.pitch[bars] == pytest.approx(300.0, abs=FILE_NM)
    assert sites.width[bars] == pytest.approx(100.0, abs=FILE_NM)
    assert bars.sum() == 2 * 3 - 2
    assert stats.isolated_sites == 2 * 2 + 2


@pytest.mark.parametrize("fmt", ["gds", "oas"])
def test_layers_not_asked_for_are_not_loaded(tmp_path, fmt):
    path = tmp_path / f"reference.{fmt}"
    lib = _reference_library()
    (lib.write_gds if fmt == "gds" else lib.write_oas)(str(path))
    only_2 = read_layout(path, [(2, 0)])
    assert set(only_2.layers) == {(2, 0)}
    assert only_2.shape_count == 2  # one shape in LINES, placed twice
    only_1_5 = read_layout(path, [(1, 5)])
    assert set(only_1_5.layers) == {(1, 5)}
    assert only_1_5.shape_count == 2  # the datatype is part of the layer: 1/5 is not 1/0
    absent = read_layout(path, [(99, 0)])
    assert absent.shape_count == 0


def test_pieces_are_cut_at_the_global_cell_grid():
    """A long line crossing the grid lines x = k * cell is cut there, nowhere else;
    the pieces keep the line's width and space and cover it exactly."""
    cell = 1000.0
    drawn = line_array(2, 50.0, 70.0, 3500.0)  # lines along y from y = 0 to 3500
    edges = build_features(PolygonSet.from_arrays(drawn), 1.0)
    sites, stats = find_sites(edges, 100.0, 600.0, 1.0, cell_nm=cell)
    whole, _ = find_sites(edges, 100.0, 600.0, 1.0, cell_nm=None)
    assert len(whole) == 4 and len(sites) == 4 * 4  # y = 1000, 2000, 3000 cut each edge
    p0 = sites.origin + sites.direction * sites.u0[:, None]
    p1 = sites.origin + sites.direction * sites.u1[:, None]
    lo = np.minimum(p0[:, 1], p1[:, 1])
    hi = np.maximum(p0[:, 1], p1[:, 1])
    assert np.all(np.floor(lo / cell + 1e-9) == np.floor((hi - 1e-6) / cell))  # one cell each
    assert sites.run.sum() == pytest.approx(whole.run.sum())
    assert set(np.round(sites.pitch[np.isfinite(sites.pitch)], 6)) == {120.0}


# --------------------------------------------------------------------------- batched queries


def _boxes_in_rows(rng: np.random.Generator, n_rows: int):
    """Query boxes as arrays make them: rows of equal boxes side by side (edge sweeps),
    collinear segments (cuts), some stacked the other way, and scattered boxes, with
    repeats and zero-size ones."""
    lo, hi = [], []
    for _ in range(n_rows):
        x, y = rng.uniform(-5000, 5000, 2)
        w, h = rng.choice([0.0, 40.0, 286.0]), rng.choice([0.0, 300.0, 1600.0])
        step = rng.choice([0.0, 22.5, 45.0, 70.0, 400.0, 3000.0])
        count = int(rng.integers(1, 30))
        for k in range(count):
            p = (x + k * step, y) if rng.random() < 0.7 else (x, y + k * step)
            box = (w, h) if rng.random() < 0.8 else (h, w)
            lo.append(p)
            hi.append((p[0] + box[0], p[1] + box[1]))
    return np.array(lo), np.array(hi)


@pytest.mark.parametrize("seed", range(6))
def test_batched_queries_find_exactly_the_pairs_of_single_queries(seed):
    """Reference: one R-tree query per box (the rtree package's own bulk query)."""
    from pitchguard.geometry.spatial import build_rtree, query_pairs, query_pairs_batched

    rng = np.random.default_rng(seed)
    item_lo, item_hi = _boxes_in_rows(rng, 60)
    q_lo, q_hi = _boxes_in_rows(rng, 60)
    q_lo, q_hi = np.concatenate([q_lo, item_lo]), np.concatenate([q_hi, item_hi])
    tree = build_rtree(item_lo, item_hi)
    want = set(zip(*(v.tolist() for v in query_pairs(tree, q_lo, q_hi)), strict=True))
    got_q, got_j = query_pairs_batched(tree, item_lo, item_hi, q_lo, q_hi)
    got = list(zip(got_q.tolist(), got_j.tolist(), strict=True))
    assert len(got) == len(set(got))  # no pair twice
    assert set(got) == want
    assert len(want) > len(q_lo)  # the boxes do meet one another
