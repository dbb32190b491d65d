"""Layout geometry around the drawn findings, read back for a tiled scan's report."""

from __future__ import annotations

from dataclasses import replace

from pitchguard.deck import Deck
from pitchguard.outputs.html import PICTURED_GROUPS
from pitchguard.run.scan import ScanResult
from pitchguard.run.tasks import clips_task


def add_clip_geometry(
    result: ScanResult,
    deck: Deck,
    cell: str | None = None,
    max_groups: int = PICTURED_GROUPS,
    timeout_s: float | None = None,
) -> ScanResult:
    """Read back, in a child process, the layout around the findings a report draws.

    A tiled scan keeps no geometry; the HTML report's pictures need the
    neighbourhood of each drawn finding, which is a small part of the chip.
    """
    from pitchguard.layout.isolated import READ_TIMEOUT_S, run_isolated
    from pitchguard.outputs.html.layout_picture import picture_windows

    lay = result.layout
    if lay is None or lay.layers:
        return result
    windows = picture_windows(result, deck, max_groups)
    layers = [(r.layer, r.datatype) for r in deck.layers]
    clips = (
        run_isolated(
            clips_task,
            (str(lay.path), cell, layers, lay.grid_nm, windows),
            lay.path,
            "reading the geometry around the findings",
            timeout_s or READ_TIMEOUT_S,
        )
        if windows
        else {}
    )
    return replace(result, layout=replace(lay, layers=clips))
