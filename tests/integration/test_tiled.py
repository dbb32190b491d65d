"""Tiled scans give the findings of a whole-layout scan, at any tile size and worker count,
on local processes and on a dask.distributed cluster (loopback)."""

from __future__ import annotations

import gdstk
import pytest

from pitchguard.deck import load_deck, parse_deck
from pitchguard.run.scan import scan_layout
from pitchguard.run.tiled import scan_tiled

from .conftest import DEMO_DECK, DRY_ARF_DECK, SAMPLE_GDS, SAMPLE_OAS, line_array_cell


def _r(v: float, digits: int) -> float:
    """Rounded; NaN (a line end has no pitch or k1) as -1, so keys sort and compare."""
    return round(v, digits) if v == v else -1.0


def _key(f):
    return (
        f.layer,
        f.check,
        f.severity,
        _r(f.pitch_nm, 2),
        _r(f.pitch_max_nm, 2),
        f.lines,
        f.sites,
        tuple(round(v, 3) for v in f.bbox_um),
        _r(f.nils, 3),
        _r(f.k1, 4),
        round(f.run_nm, 1),
        f.hint,
    )


def _counts(result, features: bool, approx: bool = False) -> list[dict]:
    out = []
    for st in result.layers:
        c = {**vars(st.extract), "layer_shapes": st.shapes}
        if approx:  # lengths summed in another order over tiles: equal to rounding
            c["edge_nm"] = pytest.approx(c["edge_nm"], rel=1e-9)
            c["judged_nm"] = pytest.approx(c["judged_nm"], rel=1e-9)
        if not features:
            del c["features"]
        out.append(c)
    return out


def _same(a, b, features: bool = True):
    """Same findings, and the same counts per layer: each tile counts what it owns.
    ``features=False``: a large concave feature cut by a tile's window may be
    counted once per part (a documented limit of tiled counts)."""
    assert len(a.findings) > 0, "no findings to compare"
    assert sorted(map(_key, a.findings)) == sorted(map(_key, b.findings))
    assert _counts(a, features) == _counts(b, features, approx=True)


@pytest.mark.parametrize("layout", [SAMPLE_GDS, SAMPLE_OAS], ids=["gds", "oas"])
@pytest.mark.parametrize(("tile_um", "jobs"), [(10, 1), (10, 2), (20, 2), (100, 2)])
def test_demo_chip_same_findings_tiled(layout, tile_um, jobs):
    deck = load_deck(DEMO_DECK)
    _same(scan_layout(layout, deck), scan_tiled(layout, deck, tile_um=tile_um, jobs=jobs))


def _arrays_across_borders(tmp_path):
    """Arrays placed across tile borders (every 10 um), in an array of references."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    a = line_array_cell(lib, "A110", (7, 0), 110, 55, 40, 25_000, pieces=3)  # 25 um lines
    b = line_array_cell(lib, "B130", (7, 0), 130, 60, 30, 6_000)
    top.add(gdstk.Reference(a, (7.5, 3.0)))
    top.add(
        gdstk.Reference(
            b, (0.0, 9.0), rotation=1.5707963267948966, columns=3, rows=2, spacing=(12.0, 7.0)
        )
    )
    path = tmp_path / "borders.oas"
    lib.write_oas(str(path))
    return path


@pytest.mark.parametrize(("tile_um", "jobs"), [(10, 2), (30, 1)])
def test_regions_cut_by_tile_borders_are_merged(tmp_path, tile_um, jobs):
    path = _arrays_across_borders(tmp_path)
    deck = parse_deck(DRY_ARF_DECK)
    whole = scan_layout(path, deck)
    tiled = scan_tiled(path, deck, tile_um=tile_um, jobs=jobs)
    _same(whole, tiled)
    # The 40-line array crosses three tile columns and its lines three tile rows.
    assert any(f.lines == 40 for f in tiled.findings)


@pytest.mark.slow
def test_dask_cluster_on_loopback_gives_the_same_findings(tmp_path):
    import distributed  # in the test extra

    deck = load_deck(DEMO_DECK)
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    ) as cluster:
        tiled = scan_tiled(SAMPLE_GDS, deck, tile_um=10, scheduler=cluster.scheduler_address)
    _same(scan_layout(SAMPLE_GDS, deck), tiled)


def test_cli_scans_tiled_by_default_like_untiled(tmp_path, capsys):
    from .conftest import run_cli

    code, out, _ = run_cli(capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, "-q")
    code0, out0, _ = run_cli(capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, "-q", "--untiled")
    code2, out2, _ = run_cli(
        capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, "-q", "--jobs", "2", "--tile-um", "10"
    )
    assert code == code0 == code2 == 1
    # The same summary, shape count included (tiles count the shapes they own), but
    # for the time taken.
    assert out.rsplit(", ", 1)[0] == out0.rsplit(", ", 1)[0] == out2.rsplit(", ", 1)[0]
    assert " shapes" in out.rsplit(", ", 1)[0]
    code, _, err = run_cli(capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, "--untiled", "--jobs", "2")
    assert code == 2 and "--untiled cannot be combined" in err


@pytest.mark.parametrize("region", [(0.0, 0.0, 25.0, 25.0), (3.3, 7.7, 41.9, 18.1)])
def test_region_scans_match_untiled(region):
    deck = load_deck(DEMO_DECK)
    whole = scan_layout(SAMPLE_GDS, deck, region_um=region)
    tiled = scan_tiled(SAMPLE_GDS, deck, tile_um=10, jobs=2, region_um=region)
    assert whole.findings
    _same(whole, tiled)


@pytest.mark.slow
def test_repeated_tiles_are_scanned_once_and_give_the_same_findings(tmp_path):
    """A 160 x 160 um array of 10 um line-array cells: most 10 um tiles hold the same
    polygons up to a shift, so only a few distinct tiles are scanned; the findings
    (shifted copies merged across borders) equal those of the whole-layout scan and
    of a tiled scan without reuse."""
    lib = gdstk.Library()
    cell = line_array_cell(lib, "L100", (7, 0), 100, 50, 100, 9_800)  # 100 lines, 10 um
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(cell, (0, 0), columns=16, rows=16, spacing=(10.0, 10.0)))
    path = tmp_path / "repeat.oas"
    lib.write_oas(str(path))
    deck = parse_deck(DRY_ARF_DECK)
    whole = scan_layout(path, deck)
    reused = scan_tiled(path, deck, tile_um=10, jobs=2)
    plain = scan_tiled(path, deck, tile_um=10, jobs=2, reuse=False)
    assert whole.findings  # the 100 nm pitch is flagged on this dry ArF deck
    _same(whole, reused)
    _same(whole, plain)
    assert reused.tiling["tiles"] == 16 * 16  # one tile per cell (the extent ends at 159.95 um)
    assert reused.tiling["distinct"] <= 16  # corner, edge and interior kinds
    assert plain.tiling["distinct"] == plain.tiling["tiles"]


def _random_chip(path, seed: int, overlap: bool) -> None:
    """Arrays of line cells (random pitch, width, length, count), placed by references
    with rotations (0/90/180/45/135 deg), mirroring and array lattices; with
    ``overlap`` they land anywhere on each other (shapes merge before extraction)."""
    import math
    import random

    rng = random.Random(seed)
    lib = gdstk.Library()
    cells = []
    for c in range(4):
        cell = lib.new_cell(f"C{c}")
        pitch = rng.choice([0.1, 0.12, 0.14, 0.16, 0.2, 0.25, 0.3])
        w = pitch * rng.uniform(0.35, 0.65)
        length = rng.uniform(0.5, 4)
        for k in range(rng.randint(2, 20)):
            cell.add(gdstk.rectangle((k * pitch, 0), (k * pitch + w, length), layer=7))
        cells.append(cell)
    top = lib.new_cell("TOP")
    turns = [0, math.pi / 2, math.pi, math.pi / 4, 3 * math.pi / 4]
    for r in range(rng.randint(3, 7)):
        if overlap:
            origin = (round(rng.uniform(0, 60), 3), round(rng.uniform(0, 60), 3))
            spacing = (round(rng.uniform(1, 6), 3), round(rng.uniform(4, 8), 3))
            n = 6
        else:
            origin = (r * 45 + round(rng.uniform(0, 5), 3), round(rng.uniform(0, 5), 3))
            spacing = (round(rng.uniform(6, 9), 3), round(rng.uniform(6, 9), 3))
            n = 4
        top.add(
            gdstk.Reference(
                rng.choice(cells),
                origin,
                rotation=rng.choice(turns),
                columns=rng.randint(1, n),
                rows=rng.randint(1, n),
                spacing=spacing,
                x_reflection=rng.random() < 0.2,
            )
        )
    lib.write_gds(str(path))


@pytest.mark.parametrize(
    ("seed", "overlap"), [(2, False), (5, False), (7, False), (0, True), (2, True), (4, True)]
)
@pytest.mark.slow
def test_random_layouts_give_the_same_findings_tiled(tmp_path, seed, overlap):
    """Layouts this suite did not design: tile borders fall anywhere on 45 deg arrays,
    mirrored arrays, arrays of half-unit lattice steps and overlapping shapes
    (whose merged outlines make ties between equally near neighbours)."""
    path = tmp_path / f"r{seed}.gds"
    _random_chip(path, seed, overlap)
    deck = parse_deck(DRY_ARF_DECK)
    whole = scan_layout(path, deck)
    assert len(whole.findings) > 5
    for tile_um in (10, 30):
        # Overlapping arrays merge into large concave features, which a tile's
        # window may cut into parts counted apiece: the documented limit (_same).
        _same(whole, scan_tiled(path, deck, tile_um=tile_um, jobs=2), features=not overlap)


def test_a_tile_size_that_defeats_reuse_gets_a_note(tmp_path, monkeypatch, capsys):
    """Tiles that repeat are scanned once, so a tile size that meets the layout's
    arrays at many phases costs far more work than the scan's own choice.  Asked
    for one (45 um, rounded up to 50 um, on the benchmark chip), the scan says so
    up front, once, on stderr, and not with -q; its own choice gets no note."""
    from chips import build_bench_chip
    from decks import BENCH_DECK
    from pitchguard.cli.app import main
    from pitchguard.errors import LayoutError
    from pitchguard.run import plan, tasks, tiled

    chip = tmp_path / "chip.oas"
    build_bench_chip(chip, 1e5)
    deck_path = tmp_path / "deck.toml"
    deck_path.write_text(BENCH_DECK)
    deck = parse_deck(BENCH_DECK)
    st = tasks.structure_task(str(chip), None, [(1, 0)], 10**9)
    halo = plan.tile_halo_nm(deck)
    auto_nm, _ = plan.plan_tiles(st, halo, 2, None, None)
    assert plan.tile_advice(st, halo, auto_nm, 2, None) is None
    text = plan.tile_advice(st, halo, 50_000.0, 2, None, tile_um=45.0)
    assert text is not None and f"{auto_nm / 1000:g} um tiles" in text
    assert "--tile-um 45, rounded up" in text

    def stop(*args, **kwargs):  # the note comes before any tile runs: stop there
        raise LayoutError("stopped by the test")

    monkeypatch.setattr(tiled, "TileScheduler", stop)
    args = ["scan", str(chip), "--rules", str(deck_path), "--tile-um", "45"]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert err.count("pitchguard: note: tiles of 50 um") == 1, err
    assert main(args + ["-q"]) == 2
    assert "note" not in capsys.readouterr().err
    assert main(["scan", str(chip), "--rules", str(deck_path)]) == 2  # the scan's own size
    assert "note" not in capsys.readouterr().err


@pytest.mark.parametrize("fail_on", ["fail", "risk"])
def test_reports_of_repeated_findings_equal_those_of_the_same_findings_listed(tmp_path, fail_on):
    """Reports of a tiled scan's findings are written from text made once per
    distinct finding, with only the place filled in per copy (a chip repeats
    most of its findings).  They must be byte for byte the reports of the same
    findings as a plain list (each finding made and written whole)."""
    import dataclasses

    from pitchguard.judge.findings import FindingSet
    from pitchguard.outputs.json_report import to_json, write_json
    from pitchguard.outputs.junit import to_junit, write_junit
    from pitchguard.outputs.sarif import write_sarif

    lib = gdstk.Library()
    a = line_array_cell(lib, "A100", (7, 0), 100, 50, 30, 2_400)  # fail on this dry ArF deck
    b = line_array_cell(lib, "B170", (7, 0), 170, 85, 12, 1_800)  # risk
    c = line_array_cell(lib, "C200", (7, 0), 200, 100, 12, 1_800)  # marginal
    top = lib.new_cell("TOP")
    # One array of each per 10 um tile, at the same place in each: tiles repeat.
    top.add(gdstk.Reference(a, (1.0, 1.0), columns=6, rows=5, spacing=(10.0, 10.0)))
    top.add(gdstk.Reference(b, (5.0, 6.0), columns=6, rows=5, spacing=(10.0, 10.0)))
    top.add(gdstk.Reference(c, (1.0, 6.0), columns=6, rows=5, spacing=(10.0, 10.0)))
    path = tmp_path / "repeat.oas"
    lib.write_oas(str(path))
    deck = parse_deck(DRY_ARF_DECK)
    tiled = scan_tiled(path, deck, tile_um=10, jobs=2)
    fs = tiled.findings
    assert isinstance(fs, FindingSet) and len(fs.distinct) < len(fs) and fs.offset.any()
    assert {f.severity for f in fs.distinct} == {"fail", "risk", "marginal"}
    listed = dataclasses.replace(tiled, findings=list(fs))
    for name, result in (("set", tiled), ("list", listed)):
        write_json(tmp_path / f"{name}.json", to_json(result, deck, fail_on, lazy=True), [])
        write_sarif(tmp_path / f"{name}.sarif", result, deck, path, fail_on, [])
        write_junit(tmp_path / f"{name}.xml", result, deck, fail_on, [])
    for ext in ("json", "sarif", "xml"):
        a_text = (tmp_path / f"set.{ext}").read_text(encoding="utf-8")
        b_text = (tmp_path / f"list.{ext}").read_text(encoding="utf-8")
        assert a_text == b_text, ext
    junit = (tmp_path / "set.xml").read_text(encoding="utf-8")
    assert junit == to_junit(tiled, deck, fail_on)  # streamed = built as one tree
    assert junit.count("<failure") == sum(
        f.severity_rank <= (0 if fail_on == "fail" else 1) for f in fs
    )
    assert "marginal | " in junit  # findings below fail_on, listed in system-out
