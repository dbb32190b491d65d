"""Shared helpers for whole-scan tests."""

from __future__ import annotations

import math
from pathlib import Path

import gdstk
import pytest

from decks import (  # noqa: F401 - re-exported to the integration tests
    DEMO_DECK,
    DRY_ARF_CUTOFF_NM,
    DRY_ARF_DECK,
    REPO,
    SAMPLE_GDS,
    SAMPLE_OAS,
)
from pitchguard.cli.app import main


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    """Run the command line in-process; return (exit code, stdout, stderr)."""
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def line_array_cell(
    lib: gdstk.Library,
    name: str,
    layer: tuple[int, int],
    pitch_nm: float,
    width_nm: float,
    count: int,
    length_nm: float,
    pieces: int = 1,
) -> gdstk.Cell:
    """Vertical lines (along y) in a 1 um / 1 nm library."""
    cell = lib.new_cell(name)
    for k in range(count):
        x = k * pitch_nm * 1e-3
        for p in range(pieces):
            y0 = length_nm * 1e-3 * p / pieces
            y1 = length_nm * 1e-3 * (p + 1) / pieces
            cell.add(
                gdstk.rectangle(
                    (x, y0), (x + width_nm * 1e-3, y1), layer=layer[0], datatype=layer[1]
                )
            )
    return cell


@pytest.fixture
def dry_deck(tmp_path: Path) -> Path:
    p = tmp_path / "dry.toml"
    p.write_text(DRY_ARF_DECK)
    return p


def each_placement(data: dict) -> list[dict]:
    """The JSON report's entries (one per distinct finding of a cell) expanded to one
    per placement: the entry with ``bbox_um`` its ``cell_bbox_um`` carried into
    the top frame by that placement (GDSII's reference transform: mirror in x,
    turn, scale, move).  Entries with no cell stand for themselves."""
    out = []
    for e in data["findings"]:
        if not e["placed"]:
            out.append(e)
            continue
        x0, y0, x1, y1 = e["cell_bbox_um"]
        for g in e["placed"]:
            th, mag = math.radians(g["rotation_deg"]), g["magnification"]
            s = -1.0 if g["mirrored"] else 1.0
            c, n = math.cos(th), math.sin(th)
            pts = [
                (mag * (c * x - n * s * y), mag * (n * x + c * s * y))
                for x, y in ((x0, y0), (x1, y0), (x1, y1), (x0, y1))
            ]
            o = g["origins_um"]
            for k in range(0, len(o), 2):
                xs = [p[0] + o[k] for p in pts]
                ys = [p[1] + o[k + 1] for p in pts]
                box = [round(v, 6) + 0.0 for v in (min(xs), min(ys), max(xs), max(ys))]
                out.append({**e, "bbox_um": box})
    return out
