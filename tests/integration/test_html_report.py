"""The HTML report: self-contained, grouped, and rendered by a real headless Chromium.

The browser tests need Debian's ``chromium`` (``apt-get install -y chromium``;
``.ci/run`` installs it).  Without it they fail with a message saying so: a
report nobody has seen in a browser is not tested.
"""

from __future__ import annotations

import base64
import binascii
import html
import io
import json
import math
import re
import shutil
import subprocess
from pathlib import Path

import gdstk
import numpy as np
import pytest
from matplotlib import image as mpimg

from decks import DEMO_DECK, DRY_ARF_DECK
from decks import SAMPLE_GDS as DEMO_GDS
from pitchguard.deck import load_deck
from pitchguard.judge.per_cell import cell_findings
from pitchguard.optics.cut_images import cut_image
from pitchguard.optics.resist import printed_edges
from pitchguard.outputs.html.groups import group_findings
from pitchguard.outputs.html.image_picture import oriented_bounds, search_window
from pitchguard.outputs.html.page import write_html
from pitchguard.outputs.html.pictures import cut_mirrored
from pitchguard.outputs.table import one_line_summary
from pitchguard.outputs.texts import orders_text
from pitchguard.outputs.verdict import CAUTION
from pitchguard.run.scan import scan_layout

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
SIGN_OFF = "sign-off stays with the fab's calibrated models"

# The dry ArF deck of decks.py (smallest imageable pitch 115.3 nm, arithmetic).
MANY_DECK = '[deck]\nname = "many-copies"\n' + DRY_ARF_DECK
MANY_PITCHES = (100.0, 108.0, 140.0)  # two unresolvable, one low-k1 (k1 0.337)
MANY_COPIES = (6, 5)  # columns x rows of each array: 30 identical regions per pitch
MANY_MAX_GROUPS = 2


# --------------------------------------------------------------------------- builds


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    deck = load_deck(DEMO_DECK)
    result = scan_layout(DEMO_GDS, deck, cells=True)
    out = tmp_path_factory.mktemp("html_demo") / "demo_report.html"
    write_html(out, result, deck, [DEMO_GDS, DEMO_DECK], "fail")
    return out, result, deck


def _many_layout(path: Path) -> None:
    """Arrays of 8 vertical lines at three pitches, each placed 6 x 5 times, 6 um apart."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("MANY_TOP")
    for k, pitch in enumerate(MANY_PITCHES):
        cell = lib.new_cell(f"ARRAY_{int(pitch)}")
        for i in range(8):
            x = i * pitch * 1e-3
            cell.add(gdstk.rectangle((x, 0), (x + pitch / 2 * 1e-3, 1.5), layer=7, datatype=0))
        cols, rows = MANY_COPIES
        top.add(gdstk.Reference(cell, (k * 40.0, 0), columns=cols, rows=rows, spacing=(6, 6)))
    lib.write_gds(str(path))


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    folder = tmp_path_factory.mktemp("html_many")
    gds, deck_path = folder / "many.gds", folder / "many.toml"
    _many_layout(gds)
    deck_path.write_text(MANY_DECK)
    deck = load_deck(deck_path)
    result = scan_layout(gds, deck, cells=True)
    out = folder / "many_report.html"
    write_html(out, result, deck, [gds, deck_path], "fail", max_groups=MANY_MAX_GROUPS)
    return out, result, deck


# --------------------------------------------------------------------------- file checks

_ATTR_URL = re.compile(
    r"""\b(?:src|href|action|poster|data|srcset)\s*=\s*(["']?)([^"'\s>]*)\1""", re.IGNORECASE
)
_CSS_URL = re.compile(r"url\(\s*([\"']?)([^\"')]*)\1\s*\)", re.IGNORECASE)
_IMG = re.compile(r"<img\b[^>]*>", re.IGNORECASE)


def assert_self_contained(text: str) -> None:
    """No resource reference leaves the file: only data: URIs and in-page anchors."""
    assert "http://" not in text and "https://" not in text
    refs = [m.group(2) for m in _ATTR_URL.finditer(text)]
    refs += [m.group(2) for m in _CSS_URL.finditer(text)]
    bad = [r for r in refs if not (r.startswith("data:") or r.startswith("#"))]
    assert not bad, f"external references: {bad[:5]}"
    assert "@import" not in text
    for api in ("fetch(", "XMLHttpRequest", "WebSocket", "EventSource", "sendBeacon", "import("):
        assert api not in text, api


def png_images(text: str) -> list[tuple[np.ndarray, int, int]]:
    """Every <img>: decoded pixels and its declared width and height."""
    out = []
    for tag in _IMG.findall(text):
        src = re.search(r'src="([^"]*)"', tag).group(1)
        assert src.startswith("data:image/png;base64,"), src[:40]
        raw = base64.b64decode(src.split(",", 1)[1], validate=True)
        assert raw.startswith(PNG_MAGIC)
        pixels = mpimg.imread(io.BytesIO(raw), format="png")
        w = int(re.search(r'width="(\d+)"', tag).group(1))
        h = int(re.search(r'height="(\d+)"', tag).group(1))
        out.append((pixels, w, h))
    return out


def test_assert_self_contained_catches_external_references():
    """The file checks can fail."""
    for bad in (
        '<img src="http://example.com/a.png">',
        '<link href="//cdn.example/x.css">',
        "<div style=\"background: url('x.png')\">",
        '<script src="app.js"></script>',
        "<img src=https://example.com/a.png>",
    ):
        with pytest.raises(AssertionError):
            assert_self_contained(bad)
    assert_self_contained('<img src="data:image/png;base64,AAAA"><a href="#g1">x</a>')
    with pytest.raises(binascii.Error):
        png_images('<img src="data:image/png;base64,@@@@" width="1" height="1">')


def test_demo_report_summary_caution_and_groups(demo):
    out, result, deck = demo
    text = out.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    assert_self_contained(text)
    assert CAUTION in text and SIGN_OFF in text
    # The caution and the summary come before the first finding.
    first = text.index('<details class="group')
    assert text.index('id="caution"') < first and text.index('id="summary"') < first
    assert text.index(CAUTION) < first
    assert html.escape(one_line_summary(result, "fail"), quote=False) in text
    assert "demo_chip.gds" in text and deck.name in text
    for layer in ("active", "poly", "metal1"):
        assert f"<strong>{layer}</strong>" in text
    groups = group_findings(result.findings)
    assert 1 < len(groups) < len(result.findings)  # the demo repeats some regions
    sections = re.findall(r'<details class="group (\w+)" id="g(\d+)"', text)
    assert len(sections) == len(groups)
    # Worst first: severities never improve down the page.
    ranks = [("fail", "risk", "marginal").index(s) for s, _ in sections]
    assert ranks == sorted(ranks)
    assert 'id="more-groups"' not in text and 'id="cap-message"' not in text  # all drawn
    # Every finding of a cell is listed once, with its placements: they add up.
    listed = re.findall(
        r"<tr><td class='n'>\d+</td><td>([^<]+?)( <span[^>]*>[^<]*</span>)?</td>"
        r"<td class='n'>[^<]+</td><td class='n'>(\d+)</td>",
        text,
    )
    entries = cell_findings(result)
    assert len(listed) == len(entries) < len(result.findings)
    assert sum(int(n) for _, _, n in listed) == len(result.findings)
    got = sorted((c, "depends on the placement" in note) for c, note, _ in listed)
    assert got == sorted((html.escape(c.cell), c.depends_on_placement) for c in entries)
    assert any(c.depends_on_placement for c in entries)  # the demo has such a finding


def test_demo_report_pictures_are_png_data_uris(demo):
    out, result, _ = demo
    text = out.read_text(encoding="utf-8")
    images = png_images(text)
    groups = group_findings(result.findings)
    assert len(images) == 2 * len(groups)  # a layout clip and an aerial image per group
    for pixels, w, h in images:
        assert pixels.shape[:2] == (h, w)
        assert pixels[..., :3].std() > 0.05  # a picture, not a blank tile
    # Each group shows every limit its worst region trips, and the fix hint.
    sections = text.split('<details class="group ')[1:]
    assert len(sections) == len(groups)
    for g, sec in zip(groups, sections, strict=True):
        for v in g.first.violations:
            assert f">{v.check}</code>" in sec
        assert "What to change:" in sec and html.escape(g.first.hint, quote=False) in sec
        if g.first.tip is None and math.isfinite(g.first.pitch_nm):
            assert html.escape(f"{g.first.pitch_nm:.1f} nm") in sec
        elif g.first.tip is None:  # a feature with no neighbour: no pitch, never "nan"
            assert "isolated" in sec and "nan nm" not in sec
        else:  # a line end: its gap, no pitch
            assert f"{g.first.space_nm:.1f} nm, {g.first.tip.kind}" in sec


@pytest.mark.parametrize(
    ("orders", "text"),
    [
        ((), "-"),  # none
        ((0,), "0"),  # below the cutoff: the 0th order alone
        ((-1, 0, 1), "0, ±1"),
        ((-3, -2, -1, 0, 1, 2, 3), "0, ±1..3"),
        ((-1, 0), "-1, 0"),  # not a symmetric run: each order, signed
        ((0, 1, 2), "0, +1, +2"),
    ],
)
def test_orders_text(orders, text):
    """The terminal table's form (its output is compared byte for byte), shared by the page."""
    assert orders_text(orders) == text


def test_demo_report_orders_read_as_in_the_terminal(demo):
    out, result, _ = demo
    sections = out.read_text(encoding="utf-8").split('<details class="group ')[1:]
    groups = group_findings(result.findings)
    assert {g.first.orders for g in groups} >= {(0,), (-1, 0, 1)}  # both forms on the page
    kinds = set()
    for g, sec in zip(groups, sections, strict=True):
        f = g.first
        if f.array is not None or f.tip is not None:
            # Arrays list their 2-D orders, line ends none.
            kinds.add("array" if f.array is not None else "tip")
            assert ("orders (m, n) through the pupil" in sec) == (f.array is not None)
            continue
        row = (
            f"<td>{orders_text(f.orders)} <span class='note'>(on axis: "
            f"{orders_text(f.orders_on_axis)};"
        )
        assert row in sec
    assert kinds == {"array", "tip"}  # the demo has both


def _asymmetric_layout(path: Path) -> None:
    """A 40 nm line with a 60 nm wide neighbour 60 nm to its left (pitch 100: unresolvable)
    and a block reaching past the interaction range 200 nm to its right.  Its cut is stored as drawn
    (the block's side, reaching -interaction range, sorts first); the last lines of the demo's arrays
    are stored mirrored."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("ASYM_TOP")
    for x0, x1 in ((-0.120, -0.060), (0.0, 0.040), (0.240, 3.240)):
        top.add(gdstk.rectangle((x0, 0), (x1, 1.5), layer=7, datatype=0))
    lib.write_gds(str(path))


@pytest.mark.slow
def test_image_plot_runs_along_the_arrow(demo, tmp_path):
    """+x of the image plot points from the worst edge into its space: the facing neighbour's
    edge lies at half the width plus the space (cuts are stored as the smaller of a profile
    and its mirror image, so the report has to turn some of them round, and only those)."""
    gds, deck_path = tmp_path / "asym.gds", tmp_path / "asym.toml"
    _asymmetric_layout(gds)
    deck_path.write_text(MANY_DECK)
    asym_deck = load_deck(deck_path)
    asym = scan_layout(gds, asym_deck)
    seen = set()
    for result, deck in ((demo[1], demo[2]), (asym, asym_deck)):
        for f in result.findings:
            if not f.cut_bounds_nm or not math.isfinite(f.space_nm):
                continue
            b = np.asarray(f.cut_bounds_nm)
            if np.allclose(b, -b[::-1]):
                continue  # symmetric: either way round is right
            mirrored = cut_mirrored(result, deck, f)
            seen.add(mirrored)
            b = oriented_bounds(f, mirrored)
            neighbour = (f.width_nm / 2 + f.space_nm) * deck.scale_to_wafer
            assert np.min(np.abs(b - neighbour)) <= 1.0, (f.layer, f.check, b, neighbour)
    assert seen == {True, False}  # both cases occur: the check above means something


def test_many_identical_findings_are_grouped_and_capped(many):
    out, result, _ = many
    text = out.read_text(encoding="utf-8")
    assert_self_contained(text)
    assert SIGN_OFF in text
    copies = MANY_COPIES[0] * MANY_COPIES[1]
    groups = group_findings(result.findings)
    assert len(result.findings) >= copies * len(MANY_PITCHES)
    assert len(groups) > MANY_MAX_GROUPS
    assert all(len(g.findings) == copies for g in groups), [len(g.findings) for g in groups]
    sections = re.findall(r'<details class="group \w+" id="g\d+"[^>]*data-count="(\d+)"', text)
    assert sections == [str(copies)] * MANY_MAX_GROUPS
    assert len(png_images(text)) == 2 * MANY_MAX_GROUPS  # pictures drawn once per group
    # Each array cell is placed 6 um apart, beyond the interaction range: one finding
    # of the cell per pitch, placed 30 times.
    assert text.count(f"1 finding of cells, placed {copies} times") == MANY_MAX_GROUPS
    rest = len(groups) - MANY_MAX_GROUPS
    rest_findings = sum(len(g.findings) for g in groups[MANY_MAX_GROUPS:])
    cap = re.search(r'id="cap-message"><strong>(\d+) more groups? \((\d+) findings?\)', text)
    assert cap is not None, "no message about the groups beyond max_groups"
    assert (int(cap.group(1)), int(cap.group(2))) == (rest, rest_findings)
    # The index lists every group, worst first; the drawn ones link to their sections.
    index = text[
        text.index("<details id='index'") : text.index(
            "</details>", text.index("<details id='index'")
        )
    ]
    assert index.count("<tr data-severity=") == len(groups)
    assert f"Index of all {len(groups)} groups" in index
    numbers = re.findall(
        r"<tr data-severity=[^>]*><td class='n'>(?:<a href='#g(\d+)'>)?(\d+)", index
    )
    assert [int(k) for _, k in numbers] == list(range(1, len(groups) + 1))
    assert [int(a) for a, _ in numbers if a] == list(range(1, MANY_MAX_GROUPS + 1))
    for k in range(1, MANY_MAX_GROUPS + 1):
        assert f'id="g{k}"' in text


def test_printed_edges_agree_with_the_findings(demo):
    """The edges marked in the pictures are the ones the verdicts were computed from."""
    _, result, deck = demo
    states = set()
    for f in result.findings:
        if not f.cut_bounds_nm:  # arrays and line ends: 2-D, no cut
            continue
        rule = deck.layer(f.layer)
        x, inten = cut_image(rule, f.cut_bounds_nm, f.cut_angle_deg)
        b = np.asarray(f.cut_bounds_nm)
        feat = next((lo, hi) for lo, hi in zip(b[::2], b[1::2], strict=True) if lo <= 0 <= hi)
        centre = 0.5 * (feat[0] + feat[1])
        left, right, state = printed_edges(
            x, inten, f.threshold, rule.field == "dark", centre, search_window(b, feat)
        )
        checks = {v.check for v in f.violations}
        states.add(state)
        if "feature-not-printed" in checks:
            assert state == "lost"
        elif "features-bridged" in checks:
            assert state == "bridged"
        else:
            assert state == "printed"
            # Sampling on ~1 nm steps against the engine's exact evaluation.
            assert right - left == pytest.approx(f.cd_nm, abs=1.5)
    assert states == {"lost", "bridged", "printed"}


# --------------------------------------------------------------------------- browser

CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
    "--host-resolver-rules=MAP * ~NOTFOUND",
)


def chromium() -> str:
    exe = shutil.which("chromium")
    if exe is None:
        pytest.fail(
            "Debian's chromium is not installed (`apt-get install -y chromium`; .ci/run "
            "installs it): the HTML report must be checked in a real browser"
        )
    return exe


def run_chromium(tmp: Path, url: str, *extra: str) -> tuple[str, list[dict]]:
    """Load ``url`` headless; return the DOM (after scripts) and the page's own requests."""
    profile = tmp / f"profile{len(list(tmp.glob('profile*')))}"
    netlog = profile.with_suffix(".netlog.json")
    cmd = [
        chromium(),
        *CHROMIUM_FLAGS,
        f"--user-data-dir={profile}",
        f"--log-net-log={netlog}",
        *extra,
        url,
    ]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=90)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc.stdout, page_requests(netlog)


def page_requests(netlog: Path) -> list[dict]:
    """URL requests the page started (the browser's own background requests, with initiator
    "not an origin", are blocked by the resolver rule and left out)."""
    text = netlog.read_text(encoding="utf-8")
    try:
        log = json.loads(text)
    except json.JSONDecodeError:  # a log cut short: close the event list
        log = json.loads(text.rstrip().rstrip(",") + "]}")
    kinds = {v: k for k, v in log["constants"]["logEventTypes"].items()}
    out = []
    for ev in log["events"]:
        params = ev.get("params") or {}
        started = kinds.get(ev["type"]) == "URL_REQUEST_START_JOB" and "url" in params
        if started and params.get("initiator") != "not an origin":
            out.append(params)
    return out


@pytest.mark.slow
def test_netlog_check_sees_a_page_fetch(tmp_path):
    """Control: a page that fetches is caught, so an empty list below means no fetch."""
    page = tmp_path / "fetching.html"
    page.write_text(
        '<!DOCTYPE html><html><body><img src="http://example.invalid/a.png"></body></html>'
    )
    _, requests = run_chromium(tmp_path, page.as_uri(), "--dump-dom")
    assert any("example.invalid" in r["url"] for r in requests), requests


@pytest.mark.slow
def test_demo_report_in_chromium(demo, tmp_path):
    out, result, _ = demo
    groups = group_findings(result.findings)
    dom, requests = run_chromium(tmp_path, out.as_uri(), "--dump-dom")
    assert requests == [], f"the report fetched: {[r['url'] for r in requests]}"
    assert 'data-filters="ready"' in dom, "the filter script did not run"
    assert 'id="summary"' in dom and "Summary" in dom
    assert SIGN_OFF in dom
    assert len(re.findall(r'<details class="group ', dom)) == len(groups)
    assert f"{len(groups)} groups ({len(result.findings)} findings) shown" in dom
    assert len(re.findall(r"<img\b", dom)) == 2 * len(groups)
    assert_self_contained(dom)
    schemes = re.findall(r"\b([a-z][a-z0-9+.-]*)://", dom)
    schemes += re.findall(r"\b(https?|ftp|wss?|file|blob|javascript|data):", dom, re.I)
    assert set(schemes) <= {"data"}, set(schemes)
    # The filter, preset from the address: only risk findings remain visible.
    dom_risk, requests = run_chromium(tmp_path, out.as_uri() + "#severity=risk", "--dump-dom")
    assert requests == []
    risk = sum(1 for g in groups if g.first.severity == "risk")
    assert 0 < risk < len(groups)
    assert f"{risk} groups (" in dom_risk
    tags = re.findall(r'<details class="group \w+"[^>]*>', dom_risk)
    shown = [t for t in tags if not re.search(r"\shidden[\s=>]", t)]
    assert len(tags) == len(groups) and len(shown) == risk
    hidden = re.findall(r'<details class="group (\w+)"[^>]*\shidden[\s=>]', dom_risk)
    assert len(hidden) == len(groups) - risk and "risk" not in hidden


@pytest.mark.slow
def test_demo_report_screenshot_is_not_blank(demo, tmp_path):
    out, _, _ = demo
    shot = tmp_path / "demo.png"
    _, requests = run_chromium(
        tmp_path, out.as_uri(), f"--screenshot={shot}", "--window-size=1280,2000"
    )
    assert requests == []
    assert shot.is_file() and shot.read_bytes().startswith(PNG_MAGIC)
    pixels = mpimg.imread(str(shot))[..., :3]
    assert pixels.shape[:2] == (2000, 1280)
    # A blank page is one colour and compresses to a few kB.
    assert shot.stat().st_size > 50_000
    ink = (pixels.mean(axis=2) < 0.85).mean()
    assert ink > 0.03, f"only {ink:.1%} of the screenshot is not near-white"
    # The first group is a fail: its red badge and border are on screen.
    red = (pixels[..., 0] > 0.6) & (pixels[..., 1] < 0.3) & (pixels[..., 2] < 0.3)
    assert red.sum() > 500


@pytest.mark.slow
def test_many_report_in_chromium(many, tmp_path):
    out, result, _ = many
    dom, requests = run_chromium(tmp_path, out.as_uri(), "--dump-dom")
    assert requests == []
    assert 'data-filters="ready"' in dom
    assert len(re.findall(r'<details class="group ', dom)) == MANY_MAX_GROUPS
    assert len(re.findall(r"<img\b", dom)) == 2 * MANY_MAX_GROUPS
    assert 'id="cap-message"' in dom


@pytest.mark.slow
def test_index_sorts_in_chromium(many, tmp_path):
    """A link to the report with ``#sort=-pitch`` opens its index sorted by pitch,
    widest first (the same code a click on the column head runs)."""
    out, result, _ = many
    dom, requests = run_chromium(tmp_path, out.as_uri() + "#sort=-pitch", "--dump-dom")
    assert requests == [] and 'data-sorting="ready"' in dom
    index = dom[dom.index('id="index"') :]
    index = index[: index.index("</table>")]
    rows = index.split("<tr data-severity=")[1:]
    pitches = [float(re.findall(r"<td[^>]*>(.*?)</td>", r)[4]) for r in rows]
    groups = group_findings(result.findings)
    assert len(pitches) == len(groups)
    assert pitches == sorted((g.first.pitch_nm for g in groups), reverse=True)
    assert 'aria-sort="descending"' in index


@pytest.mark.slow
def test_index_sorts_numbers_first_and_dashes_last_in_chromium(demo, tmp_path):
    """Line ends have no pitch ("–"): sorted by pitch either way, they come last."""
    out, _, _ = demo
    for key, widest_first in (("-pitch", True), ("pitch", False)):
        dom, _ = run_chromium(tmp_path, out.as_uri() + "#sort=" + key, "--dump-dom")
        index = dom[dom.index('id="index"') :]
        index = index[: index.index("</table>")]
        cells = [
            re.findall(r"<td[^>]*>(.*?)</td>", r)[4] for r in index.split("<tr data-severity=")[1:]
        ]
        numbers = [float(c) for c in cells if c != "–"]
        assert "–" in cells and cells[len(numbers) :] == ["–"] * (len(cells) - len(numbers))
        assert numbers == sorted(numbers, reverse=widest_first)


@pytest.mark.slow
def test_tiled_scan_report_draws_the_same_layout_clips(demo, tmp_path):
    """A tiled scan keeps no geometry; the report reads the findings' neighbourhoods
    back from the file and must draw what the untiled report draws."""
    import base64
    import io

    from pitchguard.outputs.html.clips import add_clip_geometry
    from pitchguard.outputs.html.pictures import FindingPictures
    from pitchguard.run.tiled import scan_tiled

    _, whole, deck = demo
    tiled = add_clip_geometry(scan_tiled(DEMO_GDS, deck, tile_um=10, jobs=2), deck)
    assert tiled.layout.layers  # read back, non-empty
    key = lambda f: (f.layer, f.check, f.bbox_nm)  # noqa: E731
    firsts_w = sorted((g.first for g in group_findings(whole.findings)), key=key)
    firsts_t = sorted((g.first for g in group_findings(tiled.findings)), key=key)
    assert len(firsts_w) == len(firsts_t) > 0
    rw, rt = FindingPictures(whole, deck), FindingPictures(tiled, deck)
    for fw, ft in zip(firsts_w, firsts_t, strict=True):
        pw, _, _ = rw.layout_picture(fw)
        pt, caption, _ = rt.layout_picture(ft)
        assert pt is not None, caption
        a = mpimg.imread(io.BytesIO(base64.b64decode(pw)), format="png")
        b = mpimg.imread(io.BytesIO(base64.b64decode(pt)), format="png")
        assert a.shape == b.shape
        assert np.abs(a - b).mean() < 1e-3
