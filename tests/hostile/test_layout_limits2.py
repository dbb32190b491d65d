"""Memory a scan cannot have, corrupt placements and degenerate polygons: each ends
in a scan or one clear line, never exit 3, the out-of-memory killer or noise on
stderr.

* A deck whose anchor is imaged as a 2-D cell of tens of thousands of orders
  needs tens of GB whatever the layout: refused at once, naming the anchor.
* Without --max-memory-mb a scan plans within the machine's memory.
* A MemoryError anywhere in a scan is one line, exit 2.
* A placement's rotation, magnification or offsets that are not finite numbers,
  or a magnification not above 0, is a corrupt file.
* Qhull prints nothing for a 1 m sliver.

Reference: the README's error contract and docs/limits.md "Memory and processes";
the hulls of normal input as the plain Qhull path gives them.
"""

from __future__ import annotations

import math
import sys
import textwrap
import time
from pathlib import Path

import gdstk
import numpy as np
import pytest

from decks import DEMO_DECK, POLY_ORDERS_DECK
from pitchguard.cli import main
from pitchguard.errors import LayoutError
from pitchguard.geometry.sites import SITE_CELL_NM
from pitchguard.run.plan import Structure, plan_tiles

sys.path.insert(0, str(Path(__file__).resolve().parent))
from limited import command

# lambda/NA = 1000 / 0.05 = 20 um (arithmetic); an anchor at 999,999 nm is 50
# lambda/NA, inside the deck's bounds: its 2-D square cell passes orders |m, n| up
# to p NA (1 + sigma) / lambda = 100, about pi 100^2 = 31,400 of them.
WIDE_ANCHOR_DECK = textwrap.dedent(
    """
    [exposures.e]
    wavelength_nm = 1000
    na = 0.05
    illumination = { shape = "annular", sigma_inner = 0.95, sigma_outer = 1.0 }
    mask = { kind = "binary" }
    [[layers]]
    name = "m"
    source = "17/0"
    exposure = "e"
    field = "dark"
    focus_steps = 41
    dense_min_lines = 2
    anchor = { pitch_nm = 999999, cd_nm = 400000 }
    """
)


def _one_line(code: int, err: str, *words: str) -> str:
    """Exit 2 with one ``pitchguard: error:`` line holding every one of ``words``."""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2, (code, err)
    assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), err
    for w in words:
        assert w in lines[0], (w, lines[0])
    return lines[0]


def _five_rectangles(path: Path, layer: int = 17) -> Path:
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(5):
        top.add(gdstk.rectangle((0.2 * k, 0), (0.2 * k + 0.1, 0.8), layer=layer))
    lib.write_gds(str(path))
    return path


def test_deck_whose_anchor_needs_tens_of_gb_is_refused_at_once(tmp_path):
    """Its 2-D anchor cell's cross coefficients alone are 31,397^2 x 16 bytes
    (15.8 GB, arithmetic): refused before any tile runs, naming the anchor."""
    deck = tmp_path / "wide.toml"
    deck.write_text(WIDE_ANCHOR_DECK)
    layout = _five_rectangles(tmp_path / "five.gds")
    for extra in ([], ["--untiled"], ["--max-memory-mb", "1500"]):
        t0 = time.monotonic()
        code, err = command("scan", str(layout), "--rules", str(deck), "-q", *extra, timeout=30)
        _one_line(code, err, "wide.toml", "anchor", "50 lambda/NA", "diffraction orders", "MB")
        assert time.monotonic() - t0 < 20, extra


def test_small_layout_is_not_planned_as_denser_than_it_is(tmp_path):
    """Five shapes in 0.72 um^2 read with a 177 um halo: a window holds at most the
    five, not their density times the window's area (which made "a scan needs
    about 29,068 MB" of a scan that stays near 200 MB)."""
    st = Structure(1e-6, 1.0, ("TOP",), (0.0, 0.0, 900.0, 800.0), "gds", shapes=5)
    tile, jobs = plan_tiles(st, 176_568.5, 2, 1500.0, None)
    assert (tile, jobs) == (SITE_CELL_NM, 2)


def test_without_a_cap_the_plan_holds_to_the_machines_memory(monkeypatch):
    """A machine of 1,000 MB cannot hold a million shapes in one 10 um window: refused
    at once, naming the window and what sets its halo (not run into the OOM killer)."""
    import pitchguard.run.budget as budget

    monkeypatch.setattr(budget, "physical_mb", lambda: 1000.0)
    monkeypatch.setattr(budget, "process_room_mb", lambda: None)
    st = Structure(1e-6, 1.0, ("TOP",), (0.0, 0.0, 9000.0, 9000.0), "oas", shapes=1_000_000)
    with pytest.raises(LayoutError) as info:
        plan_tiles(st, 2737.0, 2, None, None, path="dense.oas", halo_why="set by the range")
    text = str(info.value)
    for word in ("dense.oas", "needs about", "750 MB", "window of 15.47 um", "set by the range"):
        assert word in text, (word, text)
    # A machine that holds it plans as before: 2 workers, 10 um tiles.
    monkeypatch.setattr(budget, "physical_mb", lambda: 64_000.0)
    assert plan_tiles(st, 2737.0, 2, None, None) == (SITE_CELL_NM, 2)


def _piled(tmp_path: Path) -> Path:
    """40,000 rectangles piled into 2 um (a 200 x 200 array at 10 nm), and one
    rectangle 500 um away: the plan's mean density sees little of the pile."""
    lib = gdstk.Library()
    leaf = lib.new_cell("LEAF")
    leaf.add(gdstk.rectangle((0, 0), (0.002, 0.002), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(leaf, (0, 0), columns=200, rows=200, spacing=(0.01, 0.01)))
    top.add(gdstk.rectangle((500, 500), (500.05, 501), layer=7))
    path = tmp_path / "piled.oas"
    lib.write_oas(str(path))
    return path


def test_smallest_tile_over_budget_is_not_told_to_use_smaller_tiles(tmp_path, capsys):
    deck = tmp_path / "deck.toml"
    deck.write_text(POLY_ORDERS_DECK)
    path = _piled(tmp_path)
    args = ["--max-memory-mb", "700", "--jobs", "1", "--no-config"]
    code = main(["scan", str(path), "--rules", str(deck), "-q", "--tile-um", "1", *args])
    line = _one_line(code, capsys.readouterr().err, "40,000 shapes", "already the smallest")
    assert "smaller --tile-um" not in line and "--max-memory-mb" in line


def test_memory_error_in_an_untiled_scan_is_one_line(tmp_path, capsys, monkeypatch):
    """Where an untiled scan of a million tiny shapes ran out (the R-tree's result
    arrays, under a 3 GB address space): exit 2 and what to do, not exit 3."""
    import pitchguard.run.scan as scan

    def no_memory(*args, **kwargs):
        raise MemoryError("cannot allocate memory for array")

    monkeypatch.setattr(scan, "scan_polygons", no_memory)
    deck = tmp_path / "deck.toml"
    deck.write_text(POLY_ORDERS_DECK)
    layout = _five_rectangles(tmp_path / "f.gds", layer=7)
    code = main(["scan", str(layout), "--rules", str(deck), "-q", "--untiled", "--no-config"])
    _one_line(code, capsys.readouterr().err, "out of memory", "untiled", "--max-memory-mb")


def test_memory_error_in_a_tiled_scans_main_process_is_one_line(tmp_path, capsys, monkeypatch):
    import pitchguard.run.tiled as tiled

    def no_memory(*args, **kwargs):
        raise MemoryError

    monkeypatch.setattr(tiled.TileAssembly, "finish", no_memory)
    deck = tmp_path / "deck.toml"
    deck.write_text(POLY_ORDERS_DECK)
    layout = _five_rectangles(tmp_path / "f.gds", layer=7)
    code = main(["scan", str(layout), "--rules", str(deck), "-q", "--no-config"])
    _one_line(code, capsys.readouterr().err, "out of memory", "main process", "--region")


@pytest.mark.slow
def test_untiled_million_shapes_under_a_3_gb_cap_end_in_one_line(tmp_path):
    """The real thing: a million rectangles flattened untiled in a 3 GB address
    space (the cell is an array: a small file)."""
    lib = gdstk.Library()
    leaf = lib.new_cell("LEAF")
    leaf.add(gdstk.rectangle((0, 0), (0.002, 0.002), layer=17))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(leaf, (0, 0), columns=1000, rows=1000, spacing=(0.01, 0.01)))
    for layer in (1, 7, 18):
        top.add(gdstk.rectangle((0, 0), (0.04, 1), layer=layer))
    path = tmp_path / "million.oas"
    lib.write_oas(str(path))
    code, err = command(
        "scan", str(path), "--rules", str(DEMO_DECK), "-q", "--untiled", timeout=300
    )
    if code != 2:  # a machine that holds it scans it
        assert code in (0, 1), err
        return
    _one_line(code, err)
    assert "out of memory" in err or "memory budget" in err, err


NOT_FINITE = {
    "rotation inf": {"rotation": math.inf},
    "rotation nan": {"rotation": math.nan},
    "magnification nan": {"magnification": math.nan},
    "magnification inf": {"magnification": math.inf},
    "magnification 0": {"magnification": 0.0},
    "magnification -2": {"magnification": -2.0},
}


@pytest.mark.parametrize(
    ("fmt", "case"),
    # GDSII keeps no number that is not finite: gdstk writes such a rotation as 0
    # (a placement that is fine), such a magnification as 0 (refused as such).
    [(f, c) for f in ("oas", "gds") for c in NOT_FINITE if f == "oas" or "rotation" not in c],
)
def test_placement_that_is_not_finite_is_a_corrupt_file(tmp_path, capsys, fmt, case):
    kw = NOT_FINITE[case]
    lib = gdstk.Library()
    leaf = lib.new_cell("LEAF")
    for j in range(4):
        leaf.add(gdstk.rectangle((j * 0.08, 0), (j * 0.08 + 0.04, 1), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(leaf, (5, 5), **kw))
    path = tmp_path / f"placed.{fmt}"
    (lib.write_oas if fmt == "oas" else lib.write_gds)(str(path))
    back = (gdstk.read_oas if fmt == "oas" else gdstk.read_gds)(str(path))
    ref = next(c for c in back.cells if c.name == "TOP").references[0]
    key = next(iter(kw))
    value = getattr(ref, key)
    expected = 0.0 if fmt == "gds" and not math.isfinite(kw[key]) else kw[key]
    assert f"{value:g}" == f"{expected:g}"  # the file holds the value the case names
    deck = tmp_path / "deck.toml"
    deck.write_text(POLY_ORDERS_DECK)
    for extra in ([], ["--untiled"]):
        code = main(["scan", str(path), "--rules", str(deck), "-q", "--no-config", *extra])
        err = capsys.readouterr().err
        _one_line(code, err, "'LEAF'", "'TOP'", "corrupt", f"a {key} of {value:g}:")


def _sliver_points() -> np.ndarray:
    """The corners of a 1 m long, 1 nm wide sliver's sites (nm): 10 um pieces."""
    x = np.arange(0, 1e9 + 1, 1e4)
    return np.concatenate([np.stack([x, np.zeros_like(x)], 1), np.stack([x, np.ones_like(x)], 1)])


def test_hull_is_quiet_on_a_sliver_and_unchanged_on_normal_input(capfd):
    from pitchguard.judge.regions import convex_hull

    hull = convex_hull(_sliver_points())
    assert sorted(map(tuple, hull.tolist())) == [(0, 0), (0, 1), (1e9, 0), (1e9, 1)]
    assert capfd.readouterr().err == ""
    # Sets wide enough for Qhull: the same vertices as its hull (in no set order).
    rng = np.random.default_rng(3)
    for k in range(200):
        pts = rng.integers(0, 10 ** rng.integers(2, 7), size=(rng.integers(3, 400), 2))
        pts = pts.astype(np.float64) * [1.0, 10.0 ** -rng.integers(0, 3)]
        got = sorted(map(tuple, convex_hull(pts).tolist()))
        cell = gdstk.Cell("hull")
        cell.add(gdstk.Polygon(np.unique(pts, axis=0)))
        want = sorted(map(tuple, np.asarray(cell.convex_hull()).tolist()))
        assert got == want, k
    capfd.readouterr()


def test_degenerate_polygons_scan_without_noise_on_stderr(tmp_path):
    """A zero-area polygon, a bow-tie, a point, a 1 m sliver and a self-overlapping
    spiral of 8,000 vertices: a scan, and nothing on stderr (the sliver's sites
    made Qhull print a precision warning)."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for layer in (1, 7, 18):
        top.add(gdstk.rectangle((0, 0), (0.04, 1), layer=layer))
    top.add(gdstk.Polygon([(0, 0), (1, 0), (2, 0)], layer=17))
    top.add(gdstk.Polygon([(0, 0), (1, 1), (1, 0), (0, 1)], layer=17))
    top.add(gdstk.Polygon([(0, 0), (0, 0), (0, 0)], layer=17))
    top.add(gdstk.Polygon([(0, 0), (1e6, 0), (1e6, 1e-3), (0, 1e-3)], layer=17))
    t = np.linspace(0, 200 * np.pi, 8000)
    top.add(gdstk.Polygon(np.c_[5 + np.cos(t), 5 + np.sin(t)], layer=17))
    path = tmp_path / "degenerate.oas"
    lib.write_oas(str(path))
    for extra in ([], ["--untiled"]):
        code, err = command("scan", str(path), "--rules", str(DEMO_DECK), "-q", *extra)
        assert code in (0, 1), err
        assert err == "", err
