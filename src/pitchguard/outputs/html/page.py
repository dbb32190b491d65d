"""The HTML report page: header, summary, filters, one card per group, footer."""

from __future__ import annotations

from functools import cache
from importlib import resources
from pathlib import Path

from pitchguard import __version__
from pitchguard.deck import Deck
from pitchguard.judge.per_cell import cell_findings
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.html import PICTURED_GROUPS
from pitchguard.outputs.html.card import group_card_html
from pitchguard.outputs.html.groups import attach_entries, group_findings
from pitchguard.outputs.html.overview import (
    cap_html,
    filters_html,
    index_html,
    summary_html,
)
from pitchguard.outputs.html.pictures import FindingPictures
from pitchguard.outputs.html.style import SEVERITY_COLOUR
from pitchguard.outputs.html.text import esc, name_html
from pitchguard.outputs.texts import shown
from pitchguard.outputs.verdict import CAUTION
from pitchguard.run.scan import ScanResult


@cache
def asset_text(name: str) -> str:
    """A file of ``assets/`` (package data: the report's CSS and script)."""
    path = resources.files("pitchguard.outputs.html") / "assets" / name
    return path.read_text(encoding="utf-8")


def severity_colours_css() -> str:
    """The severity colours as CSS custom properties (one source with the pictures')."""
    return ":root { " + " ".join(f"--{s}: {c};" for s, c in SEVERITY_COLOUR.items()) + " }"


def _groups_text(n: int) -> str:
    return f"{n} group" if n == 1 else f"{n} groups"


CAVEATS = (
    "The pictures and numbers below image a 1-D cut through each line region, the periodic "
    "cell of each array and a 2-D clip around each line end, with each exposure's light as "
    "the deck states it, and print them with a constant threshold (on the image blurred by "
    "the layer's resist_blur_nm, if set): film-stack reflections, mask 3-D, resist chemistry "
    "beyond that blur and aberrations are not modelled, and the mask is judged as drawn "
    'unless the layer asks for a 1-D sizing (sizing = "retarget").'
)


def render_html(
    result: ScanResult, deck: Deck, fail_on: str, max_groups: int = PICTURED_GROUPS
) -> str:
    """The whole page as text."""
    groups = group_findings(result.findings)
    attach_entries(groups, cell_findings(result))
    renderer = FindingPictures(result, deck)
    drawn = groups[: max(0, max_groups)]
    lay = result.layout
    title = (
        f"pitchguard report: {shown(Path(lay.path).name)}"
        if lay is not None
        else "pitchguard report"
    )
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        # No network: forbid every fetch except inline styles/scripts and data: images.
        "<meta http-equiv='Content-Security-Policy' content=\"default-src 'none'; "
        "img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">",
        f"<title>{esc(title)}</title><style>{severity_colours_css()}</style>",
        f"<style>{asset_text('report.css')}</style></head><body><main>",
        f"<h1>{esc(title)}</h1>",
        f"<p class='sub'>Line/space pitch screening with deck <strong>{name_html(deck.name)}"
        f"</strong> · pitchguard {esc(__version__)}</p>",
        f'<p class="caution" id="caution"><strong>Screening aid.</strong> {esc(CAUTION)} '
        f"{esc(CAVEATS)}</p>",
        summary_html(result, deck, fail_on, groups),
        '<section id="findings"><h2>Findings, worst first</h2>',
    ]
    if not groups:
        parts.append(
            '<p id="no-findings">No finding: every judged pitch passes the deck\'s limits.</p>'
        )
    else:
        shown_find = sum(len(g.findings) for g in drawn)
        parts.append(
            f"<p class='note'>{len(result.findings)} findings in {len(groups)} groups; "
            f"{len(drawn)} groups ({shown_find} findings) are drawn below. Identical findings "
            "(same layer, check, severity, pitch, width, space, line direction and worst line) "
            "share one set of pictures; a group's list names each cell that holds such a "
            "finding, where in the cell, and how many times it is placed.</p>"
        )
        parts.append(filters_html(result, groups))
        parts.append(index_html(groups, len(drawn)))
        parts.append(cap_html(groups, len(drawn)))
        parts.extend(group_card_html(k, g, renderer) for k, g in enumerate(drawn))
    parts.append("</section>")
    parts.append(
        f"<footer><p>{esc(CAUTION)}</p><p>pitchguard {esc(__version__)} · "
        "coordinates in µm as drawn, lengths in nm (image plots: wafer nm).</p></footer>"
    )
    parts.append(f"</main><script>{asset_text('report.js')}</script></body></html>\n")
    return "".join(parts)


def write_html(
    path: Path,
    result: ScanResult,
    deck: Deck,
    inputs: list[Path],
    fail_on: str,
    max_groups: int = PICTURED_GROUPS,
) -> None:
    """Write the self-contained HTML report (via a temporary file and a rename)."""
    text = render_html(result, deck, fail_on, max_groups)

    def w(tmp: Path) -> None:
        tmp.write_text(text, encoding="utf-8", errors="backslashreplace")

    atomic_write(Path(path), w, inputs)  # gives the file the umask's mode
