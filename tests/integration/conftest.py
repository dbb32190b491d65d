"""Shared helpers for whole-scan tests."""

from __future__ import annotations

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
