"""Whole scans of layouts built here: verdicts must not depend on how a layout is built.

Reference values: the cutoff pitch lambda / (NA (1 + sigma_max)) and k1 =
(p/2) NA / lambda (scalar imaging theory; see README "Physics model"), with
the dry ArF deck of conftest (193 nm, NA 0.93, conventional sigma 0.8):
cutoff 115.29 nm, k1 = 0.6 at pitch 249.0 nm (arithmetic).
"""

from __future__ import annotations

import math

import gdstk
import pytest

from pitchguard.deck import parse_deck
from pitchguard.judge.checks import IMAGE_CHECKS
from pitchguard.run.scan import scan_layout
from pitchguard.run.tiled import scan_tiled

from .conftest import DRY_ARF_CUTOFF_NM, DRY_ARF_DECK, line_array_cell

DECK = parse_deck(DRY_ARF_DECK)
FAIL_PITCH = 110.0  # below the 115.29 nm cutoff
RELAXED_PITCH = 260.0  # k1 = 0.627 >= 0.6
POLY = (7, 0)


def _place(lib, top, cell, how: str, origin):
    """Place ``cell`` in ``top`` one of several ways the hierarchy allows."""
    x, y = origin
    if how == "plain":
        top.add(gdstk.Reference(cell, (x, y)))
    elif how == "rot90":
        top.add(gdstk.Reference(cell, (x, y), rotation=math.pi / 2))
    elif how == "rot45":
        top.add(gdstk.Reference(cell, (x, y), rotation=math.pi / 4))
    elif how == "rot30":
        top.add(gdstk.Reference(cell, (x, y), rotation=math.radians(30)))
    elif how == "mirror":
        top.add(gdstk.Reference(cell, (x, y), x_reflection=True))
    elif how == "mirror_rot":
        top.add(gdstk.Reference(cell, (x, y), rotation=math.pi / 2, x_reflection=True))
    elif how == "array":
        top.add(gdstk.Reference(cell, (x, y), columns=2, rows=2, spacing=(4, 4)))
    elif how == "rotated_array":
        top.add(
            gdstk.Reference(cell, (x, y), rotation=math.pi / 2, columns=2, rows=1, spacing=(4, 0))
        )
    elif how == "deep":
        mid = lib.new_cell(cell.name + "_MID")
        mid.add(gdstk.Reference(cell, (1, 1), rotation=math.pi))
        top.add(gdstk.Reference(mid, (x, y), rotation=math.pi / 2))
    else:
        raise ValueError(how)


PLACEMENTS = [
    "plain",
    "rot90",
    "rot45",
    "rot30",
    "mirror",
    "mirror_rot",
    "array",
    "rotated_array",
    "deep",
]


def _write(lib, tmp_path, fmt):
    path = tmp_path / f"chip.{fmt}"
    (lib.write_gds if fmt == "gds" else lib.write_oas)(str(path))
    return path


@pytest.mark.parametrize("fmt", ["gds", "oas"])
@pytest.mark.parametrize("how", PLACEMENTS)
def test_below_cutoff_fails_wherever_it_sits(tmp_path, fmt, how):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    cell = line_array_cell(lib, "ARR", POLY, FAIL_PITCH, FAIL_PITCH / 2, 9, 1500, pieces=2)
    _place(lib, top, cell, how, (10, 10))
    res = scan_layout(_write(lib, tmp_path, fmt), DECK)
    assert res.findings, how
    assert {f.severity for f in res.findings} == {"fail"}
    assert all(f.wafer_pitch_nm < DRY_ARF_CUTOFF_NM for f in res.findings)
    # Off-axis rotations snap to the 1 nm grid: pitch within 1.5 nm of drawn.
    assert all(abs(f.pitch_nm - FAIL_PITCH) <= 1.5 for f in res.findings)
    copies = 4 if how == "array" else 2 if how == "rotated_array" else 1
    assert len(res.findings) == copies
    assert all(f.lines == 9 for f in res.findings)


@pytest.mark.parametrize("fmt", ["gds", "oas"])
def test_magnified_reference_scales_the_pitch(tmp_path, fmt):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    # Drawn at 240 nm (relaxed-ish), placed at magnification 0.5: 120 nm... k1 0.289 -> risk;
    # and a 55 nm-pitch cell at magnification 2: 110 nm -> fail.
    relaxed = line_array_cell(lib, "A240", POLY, 240, 120, 9, 2000)
    tight = line_array_cell(lib, "A55", POLY, 55, 25, 9, 800)
    top.add(gdstk.Reference(relaxed, (0, 0), magnification=0.5))
    top.add(gdstk.Reference(tight, (10, 0), magnification=2.0))
    res = scan_layout(_write(lib, tmp_path, fmt), DECK)
    got = {round(f.pitch_nm): {v.check for v in f.violations} for f in res.findings}
    assert set(got) == {110, 120}
    assert "unresolvable-pitch" in got[110]
    # k1 at 120 nm = 0.5 * 120 * 0.93 / 193 = 0.289 < 0.30: a low-k1 risk (arithmetic),
    # and resolvable (above the 115.3 nm cutoff).
    assert "low-k1" in got[120] and "unresolvable-pitch" not in got[120]


def test_oasis_polygon_repetition_is_expanded(tmp_path):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    line = gdstk.rectangle((0, 0), (0.055, 1.5), layer=7)
    line.repetition = gdstk.Repetition(columns=9, rows=1, spacing=(0.11, 0))
    top.add(line)
    res = scan_layout(_write(lib, tmp_path, "oas"), DECK)
    assert [(f.severity, f.lines) for f in res.findings] == [("fail", 9)]


def test_paths_are_polygons(tmp_path):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(9):
        x = k * 0.11
        top.add(gdstk.FlexPath([(x, 0), (x, 1.5)], 0.055, layer=7))
    res = scan_layout(_write(lib, tmp_path, "gds"), DECK)
    assert [(f.severity, f.lines) for f in res.findings] == [("fail", 9)]


@pytest.mark.parametrize("fmt", ["gds", "oas"])
def test_relaxed_and_isolated_wide_lines_are_not_flagged(tmp_path, fmt):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    relaxed = line_array_cell(lib, "REL", POLY, RELAXED_PITCH, 130, 12, 3000)
    _place(lib, top, relaxed, "rot45", (0, 0))
    _place(lib, top, relaxed, "plain", (10, 0))
    top.add(gdstk.rectangle((20, 0), (20.5, 5), layer=7))  # isolated wide line
    top.add(gdstk.rectangle((30, 0), (40, 10), layer=7))  # pad
    res = scan_layout(_write(lib, tmp_path, fmt), DECK)
    assert res.layers[0].shapes == 2 * 12 + 2  # every shape was read
    assert not [f for f in res.findings if f.severity in ("fail", "risk")]


def test_isolated_narrow_line_is_judged_on_its_image_only(tmp_path):
    """A lone 60 nm line has no pitch (k1 says nothing) but images poorly at NA 0.93.

    60 nm is 0.29 lambda/NA at 193 nm / NA 0.93 (arithmetic); an isolated line
    that narrow has a shallow image edge (common practice: features well below
    0.5 lambda/NA need resolution enhancement).
    """
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    top.add(gdstk.rectangle((0, 0), (0.06, 5), layer=7))
    res = scan_layout(_write(lib, tmp_path, "gds"), DECK)
    assert res.findings
    for f in res.findings:
        assert f.pitch_nm == math.inf
        checks = {v.check for v in f.violations}
        assert checks and checks <= set(IMAGE_CHECKS)
        assert f.nils < DECK.layer("poly").nils_risk_below


def test_layers_not_in_the_deck_are_ignored(tmp_path):
    """Shapes on 8/0 and 7/1 beside the deck's 7/0: a deck layer marked
    optional scans nothing and passes; not marked, the scan is refused with
    both layer maps named (a wrong layer map must not pass a CI gate)."""
    from pitchguard.errors import LayoutError

    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for layer in ((8, 0), (7, 1)):  # not 7/0
        cell = line_array_cell(lib, f"X{layer[0]}_{layer[1]}", layer, 60, 30, 9, 1000)
        top.add(gdstk.Reference(cell, (0, 0)))
    path = _write(lib, tmp_path, "gds")
    optional = parse_deck(DRY_ARF_DECK.replace("[[layers]]", "[[layers]]\noptional = true"))
    res = scan_layout(path, optional)
    assert res.findings == []
    assert res.layers[0].shapes == 0
    with pytest.raises(LayoutError, match=r"poly \(7/0\); the file has 7/1, 8/0"):
        scan_layout(path, DECK)
    with pytest.raises(LayoutError, match=r"poly \(7/0\); the file has 7/1, 8/0"):
        scan_tiled(path, DECK, jobs=1)


def test_region_scans_only_its_window(tmp_path):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    cell = line_array_cell(lib, "ARR", POLY, FAIL_PITCH, 55, 9, 1500)
    top.add(gdstk.Reference(cell, (0, 0)))
    top.add(gdstk.Reference(cell, (20, 0)))
    path = _write(lib, tmp_path, "gds")
    assert len(scan_layout(path, DECK).findings) == 2
    part = scan_layout(path, DECK, region_um=(15, -1, 30, 5)).findings
    assert len(part) == 1 and part[0].bbox_um[0] >= 19.9
