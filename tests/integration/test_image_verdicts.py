"""Scan verdicts follow the optics: illumination, mask kind, focus range, anchor.

Reference facts (scalar imaging, see README "Physics model"): an x dipole
images lines running along y (pitch along x) far below the conventional
cutoff and cannot image the same pitch turned by 90 degrees (pupil condition,
Goodman, Introduction to Fourier Optics); a wider focus range can only
shrink the common dose window, so a depth-of-focus floor that is met over a
short range may be missed over a long one (definition of the process window,
common practice).
"""

from __future__ import annotations

import json
import math
import textwrap

import gdstk
import pytest

from pitchguard.deck import parse_deck
from pitchguard.run.scan import scan_layout

from .conftest import line_array_cell, run_cli

IMMERSION = textwrap.dedent(
    """
    [exposures.conv]
    wavelength_nm = 193.0
    na = 1.35
    immersion_index = 1.44
    illumination = { shape = "conventional", sigma = 0.85 }
    mask = { kind = "attenuated", transmission = 0.06 }

    [exposures.dipx]
    wavelength_nm = 193.0
    na = 1.35
    immersion_index = 1.44
    illumination = { shape = "dipole", sigma_inner = 0.7, sigma_outer = 0.95, opening_deg = 35.0, axis = "x" }
    mask = { kind = "attenuated", transmission = 0.06 }
    # E along the lines the dipole serves (TE), as immersion scanners polarise
    # dipoles for dense lines (common practice).
    polarization = "y"

    [[layers]]
    name = "m"
    source = "1/0"
    exposure = "EXPOSURE"
    field = "clear"
    """
)


def _scan(tmp_path, deck_text: str, build) -> list:
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    build(lib, top)
    path = tmp_path / "chip.gds"
    lib.write_gds(str(path))
    return scan_layout(path, parse_deck(deck_text)).findings


def _dense(lib, top, turn: bool = False):
    # 80 nm pitch, 40 nm lines, 15 lines: below nothing's cutoff along x for the dipole
    # (73.3 nm), just above the conventional one (193 / (1.35 * 1.85) = 77.3 nm).
    cell = line_array_cell(lib, "D80", (1, 0), 80, 40, 15, 2000)
    top.add(gdstk.Reference(cell, (0, 0), rotation=math.pi / 2 if turn else 0.0))


def _middle(findings):
    """Checks of the finding that covers the array (one region per array)."""
    assert len(findings) == 1, findings
    return {v.check: v.severity for v in findings[0].violations}


def test_dipole_rescues_dense_vertical_lines_that_conventional_cannot(tmp_path):
    conv = _scan(tmp_path, IMMERSION.replace("EXPOSURE", "conv"), _dense)
    dip = _scan(tmp_path, IMMERSION.replace("EXPOSURE", "dipx"), _dense)
    # Conventional: resolvable in principle, but the image has no usable edge
    # (unpolarised light at this NA: the features even bridge).
    c = _middle(conv)
    assert "unresolvable-pitch" not in c
    assert "fail" in (c.get("low-nils"), c.get("features-bridged"))
    assert conv[0].severity == "fail"
    # Dipole on x: the lines image (NILS above the fail band even at the array's
    # last line); only k1 is left as a risk.
    d = _middle(dip)
    assert dip[0].severity == "risk" and d.get("low-k1") == "risk"
    assert "unresolvable-pitch" not in d and d.get("low-nils") != "fail"
    assert dip[0].nils > conv[0].nils


def test_dipole_does_not_rescue_the_horizontal_twin(tmp_path):
    dip = _scan(
        tmp_path,
        IMMERSION.replace("EXPOSURE", "dipx"),
        lambda lib, top: _dense(lib, top, turn=True),
    )
    checks = _middle(dip)
    assert checks.get("unresolvable-pitch") == "fail"
    assert dip[0].orientation_deg == pytest.approx(0.0)


def test_interior_of_dipole_array_images_well(tmp_path):
    """The middle line of the dipole array: NILS above every band (the marginal one,
    2.0 by default); the conventional source's, below the fail band (1.0)."""
    from pitchguard.judge.gratings import grating

    rule = parse_deck(IMMERSION.replace("EXPOSURE", "dipx")).layer("m")
    conv = parse_deck(IMMERSION.replace("EXPOSURE", "conv")).layer("m")
    assert grating(rule, 80, 40, 90.0).metrics.nils > rule.nils_marginal_below
    assert grating(conv, 80, 40, 90.0).metrics.nils < conv.nils_fail_below


def test_mask_kind_changes_the_image(tmp_path):
    """Attenuated phase shift steepens the edge of a dense dark-field pitch (common practice)."""
    from pitchguard.judge.gratings import grating

    text = IMMERSION.replace("EXPOSURE", "conv").replace('field = "clear"', 'field = "dark"')
    att = parse_deck(text).layer("m")
    binary = parse_deck(
        text.replace('{ kind = "attenuated", transmission = 0.06 }', '{ kind = "binary" }')
    ).layer("m")
    a, b = grating(att, 110, 45, 90.0), grating(binary, 110, 45, 90.0)
    # Steeper and of more contrast, by more than the 2 % / 0.01 a change of
    # source sampling could explain (SOURCE_STEP_CLAIM in test_image.py: 3e-3).
    assert a.metrics.nils > 1.02 * b.metrics.nils
    assert a.metrics.contrast > b.metrics.contrast + 0.01


# Dry ArF, annular 0.6-0.9, one clear-field layer "p" on 1/0 (limits: the defaults).
ARF_ANNULAR_P = textwrap.dedent(
    """
    [exposures.arf]
    wavelength_nm = 193.0
    na = 0.93
    illumination = { shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }

    [[layers]]
    name = "p"
    source = "1/0"
    exposure = "arf"
    field = "clear"
    """
)


def test_focus_range_decides_depth_of_focus_verdict(tmp_path):
    # A relaxed dry ArF array: fine over a short focus range, short of a DOF floor
    # asked over a long one.
    base = ARF_ANNULAR_P + textwrap.dedent(
        """
        k1_risk_below = 0.1
        k1_marginal_below = 0.2
        nils_fail_below = 0.0
        nils_risk_below = 0.0
        nils_marginal_below = 0.0
        edge_placement_max_pct = 99.0
        """
    )

    def build(lib, top):
        top.add(gdstk.Reference(line_array_cell(lib, "A", (1, 0), 180, 90, 15, 2000), (0, 0)))

    short = base + "focus_half_range_nm = 60.0\ndof_min_nm = 100.0\n"
    long_ = base + "focus_half_range_nm = 600.0\ndof_min_nm = 1000.0\n"
    assert _scan(tmp_path, short, build) == []
    found = _scan(tmp_path, long_, build)
    assert found and all("low-depth-of-focus" in {v.check for v in f.violations} for f in found)
    assert all(f.dof_nm < 1000.0 for f in found)


def test_anchor_enables_cd_error(tmp_path):
    """Iso-dense bias: with the dose anchored on a dense pitch, a looser pitch prints off size."""
    from pitchguard.judge.gratings import grating

    free = parse_deck(ARF_ANNULAR_P).layer("p")
    anchored = parse_deck(ARF_ANNULAR_P + "anchor = { pitch_nm = 180.0, cd_nm = 90.0 }\n").layer(
        "p"
    )
    assert math.isnan(grating(free, 400, 90, 90.0).metrics.cd_error_pct)
    assert grating(anchored, 180, 90, 90.0).metrics.cd_error_pct == pytest.approx(0.0, abs=0.5)
    assert abs(grating(anchored, 400, 90, 90.0).metrics.cd_error_pct) > 1.0


# ----------------------------------------------------------------------------- probe / sweep


def test_probe_json_has_one_period_centred_on_the_feature(capsys):
    from .conftest import DEMO_DECK

    code, out, _ = run_cli(
        capsys,
        "probe",
        "--rules",
        DEMO_DECK,
        "--layer",
        "poly",
        "--pitch",
        "250",
        "--cd",
        "125",
        "--json",
    )
    assert code == 0
    obj = json.loads(out)
    for key in ("k1", "contrast", "nils", "image", "orders", "checks"):
        assert key in obj
    x, inten = obj["image"]["x_nm"], obj["image"]["intensity"]
    assert len(x) == len(inten) > 32
    assert x[0] == pytest.approx(-125.0) and x[-1] < 125.0
    # k1 = 0.5 * 250 * 0.93 / 193 (arithmetic).
    assert obj["k1"] == pytest.approx(0.5 * 250 * 0.93 / 193, rel=1e-9)
    # A clear-field line is dark at its centre: the minimum of the period is at x = 0.
    centre = min(range(len(x)), key=lambda k: abs(x[k]))
    assert inten[centre] == pytest.approx(min(inten), abs=1e-9)


def test_probe_reports_the_contrast_of_the_image_it_shows(capsys):
    """With --focus the image is taken out of focus; its contrast in the JSON
    must be that image's own (Imax - Imin) / (Imax + Imin) over the period
    (the definition), not the best-focus value, which differs."""
    from .conftest import DEMO_DECK

    args = ["probe", "--rules", DEMO_DECK, "--layer", "poly", "--pitch", "160", "--cd", "80"]
    shown = {}
    for focus in ("0", "80"):
        code, out, _ = run_cli(capsys, *args, "--focus", focus, "--json")
        assert code == 0
        obj = json.loads(out)
        inten = obj["image"]["intensity"]
        want = (max(inten) - min(inten)) / (max(inten) + min(inten))
        assert obj["contrast"] == pytest.approx(want, abs=2e-3)
        shown[focus] = obj["contrast"]
    assert shown["80"] < shown["0"] - 0.02  # defocus lowers it: the two are told apart


def test_probe_text_and_plot(tmp_path, capsys):
    from .conftest import DEMO_DECK

    plot = tmp_path / "img.png"
    code, out, _ = run_cli(
        capsys,
        "probe",
        "-r",
        DEMO_DECK,
        "--layer",
        "metal1",
        "--pitch",
        "80",
        "--cd",
        "40",
        "--plot",
        plot,
    )
    assert code == 0
    assert "k1 0.280" in out and "NILS at the printed edges" in out
    assert "*" in out and "+" in out  # pupil picture with a +1st order inside
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_sweep_table_bands_plot_and_json(tmp_path, capsys):
    from .conftest import DEMO_DECK

    plot, js = tmp_path / "sweep.svg", tmp_path / "sweep.json"
    code, out, _ = run_cli(
        capsys,
        "sweep",
        "-r",
        DEMO_DECK,
        "--layer",
        "poly",
        "--cd",
        "75",
        "--pitches",
        "100:300:10",
        "--plot",
        plot,
        "--json",
        js,
    )
    assert code == 0
    data = json.loads(js.read_text())
    assert [p["pitch_nm"] for p in data["pitches"]] == list(range(100, 301, 10))
    # Below the 115.3 nm cutoff (193 / (0.93 * 1.8), arithmetic): fail.
    assert all(p["severity"] == "fail" for p in data["pitches"] if p["pitch_nm"] < 115)
    assert data["bands"][0]["severity"] == "fail" and data["bands"][0]["from_nm"] == 100
    assert "<svg" in plot.read_text()[:500]
    assert "pitch 100.0" in out


def test_sweep_without_cd_or_anchor_is_a_usage_error(capsys):
    from .conftest import DEMO_DECK

    code, _, err = run_cli(capsys, "sweep", "-r", DEMO_DECK, "--layer", "poly")
    assert code == 2 and "--cd" in err


def test_probe_unknown_layer(capsys):
    from .conftest import DEMO_DECK

    code, _, err = run_cli(
        capsys, "probe", "-r", DEMO_DECK, "--layer", "nope", "--pitch", "100", "--cd", "50"
    )
    assert code == 2 and "no layer named 'nope'" in err
