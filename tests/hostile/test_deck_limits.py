"""Hostile decks: every number bounded by what the physics and the machine allow.

A deck value outside its bound, a deeply nested deck, a deck that is not a
regular file or is too large: each ends in exit 2 with one line per problem,
``pitchguard: error: <file>: <key>: <what and why>``, never a crash (exit 3),
a hang or unbounded memory.  The bounds themselves are in
``pitchguard.deck_bounds`` and docs/deck.md.
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import gdstk
import pytest

from hostile.limited import command
from pitchguard.cli import main
from pitchguard.deck import parse_deck
from pitchguard.errors import DeckError

# ArF dry, NA 0.93: lambda/NA = 207.5 nm, cutoff pitch lambda/(NA (1 + 0.8)) = 115.3 nm,
# quarter-wave focus lambda (1 + sqrt(1 - NA^2)) / (4 NA^2) = 75.9 nm (formulas in deck_bounds).
LAM_NA = 193.0 / 0.93
CUTOFF = 193.0 / (0.93 * 1.8)
QUARTER_WAVE = 193.0 * (1 + (1 - 0.93**2) ** 0.5) / (4 * 0.93**2)

BASE = """
[deck]
name = "limits"
{deck}
[exposures.arf]
wavelength_nm = 193.0
na = 0.93
{exposure}
illumination = {illumination}
mask = {mask}

[layer_defaults]
{defaults}

[[layers]]
name = "poly"
source = "7/0"
exposure = "arf"
field = "clear"
{layer}
"""
CONVENTIONAL = '{ shape = "conventional", sigma = 0.8 }'


def deck_text(**parts: str) -> str:
    values = {
        "deck": "",
        "exposure": "",
        "illumination": CONVENTIONAL,
        "mask": '{ kind = "binary" }',
        "defaults": "",
        "layer": "",
    }
    values.update(parts)
    return BASE.format(**values)


def _one_error_line(code: int, err: str, path: Path, key: str) -> str:
    """The error contract for a deck with one problem: exit 2, one line naming file and key."""
    assert code == 2, (code, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith(f"pitchguard: error: {path}: {key}: "), err
    return lines[0]


def _error_lines(code: int, err: str, path: Path, keys: list[str]) -> list[str]:
    """Exit 2 with one line per problem, each naming the file and its key."""
    assert code == 2, (code, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == len(keys), err
    for line, key in zip(lines, keys, strict=True):
        assert line.startswith(f"pitchguard: error: {path}: {key}: "), err
    return lines


# (what, deck parts, key reported, a word of the reason).  Values from the
# reproductions that crashed a command, and one beyond each other bound.
BAD = [
    ("na-tiny", {"exposure": ""}, "exposures.arf.na", "lenses"),
    ("wavelength-huge", {}, "exposures.arf.wavelength_nm", "soft X-rays"),
    (
        "immersion-index",
        {"exposure": "immersion_index = 3.0"},
        "exposures.arf.immersion_index",
        "fluid",
    ),
    ("resist-index", {"exposure": "resist_index = 3.0"}, "exposures.arf.resist_index", "resists"),
    (
        "disc-tiny",
        {"illumination": '{ shape = "conventional", sigma = 1e-300 }'},
        "exposures.arf.illumination.sigma",
        "source sampling",
    ),
    (
        "ring-hair",
        {"illumination": '{ shape = "annular", sigma_inner = 0.9999999999, sigma_outer = 1.0 }'},
        "exposures.arf.illumination.sigma_inner",
        "source sampling",
    ),
    (
        "pole-hair",
        {
            "illumination": '{ shape = "dipole", sigma_inner = 0.6, sigma_outer = 0.9, '
            'opening_deg = 1e-300, axis = "x" }'
        },
        "exposures.arf.illumination.opening_deg",
        "source sampling",
    ),
    (
        "quadrupole-pole-hair",
        {
            "illumination": '{ shape = "quadrupole", sigma_inner = 0.6, sigma_outer = 0.9, '
            "opening_deg = 1e-300 }"
        },
        "exposures.arf.illumination.opening_deg",
        "source sampling",
    ),
    (
        "rotation-huge",
        {
            "illumination": '{ shape = "quadrupole", sigma_inner = 0.6, sigma_outer = 0.9, '
            "opening_deg = 30.0, rotation_deg = 1e308 }"
        },
        "exposures.arf.illumination.rotation_deg",
        "turn",
    ),
    (
        "transmission-one",
        {"mask": '{ kind = "attenuated", transmission = 1.0 }'},
        "exposures.arf.mask.transmission",
        "dark areas clear",
    ),
    ("reduction-huge", {"deck": "reduction = 1e300"}, "deck.reduction", "reduce"),
    (
        "range-huge",
        {"layer": "interaction_range_nm = 1e300"},
        "layers[0].interaction_range_nm",
        "centimetre",
    ),
    (
        "range-1e7",
        {"layer": "interaction_range_nm = 1e7"},
        "layers[0].interaction_range_nm",
        "10 lambda/NA",
    ),
    (
        "range-short",
        {"layer": "interaction_range_nm = 10.0"},
        "layers[0].interaction_range_nm",
        "lambda/(2 NA)",
    ),
    (
        "range-in-defaults",
        {"defaults": "interaction_range_nm = 1e7"},
        "layer_defaults.interaction_range_nm",
        "10 lambda/NA",
    ),
    ("min-run-tiny", {"layer": "min_run_nm = 1e-300"}, "layers[0].min_run_nm", "picometre"),
    ("min-run-long", {"layer": "min_run_nm = 1e5"}, "layers[0].min_run_nm", "endless line"),
    ("compact-huge", {"layer": "compact_max_nm = 1e5"}, "layers[0].compact_max_nm", "2-D clips"),
    (
        "pullback-huge",
        {"layer": "line_end_pullback_max_nm = 1e4"},
        "layers[0].line_end_pullback_max_nm",
        "clip reaches",
    ),
    (
        "pitch-tolerance",
        {"layer": "pitch_tolerance_nm = 1e4"},
        "layers[0].pitch_tolerance_nm",
        "share a region",
    ),
    (
        "dense-lines",
        {"layer": "dense_min_lines = 1000000000000"},
        "layers[0].dense_min_lines",
        "dense",
    ),
    (
        "anchor-huge",
        {"layer": "anchor = { pitch_nm = 1e300, cd_nm = 1e299 }"},
        "layers[0].anchor.pitch_nm",
        "centimetre",
    ),
    (
        "anchor-beyond-probes",
        {"layer": "anchor = { pitch_nm = 1e5, cd_nm = 100.0 }"},
        "layers[0].anchor.pitch_nm",
        "probed",
    ),
    (
        "anchor-below-cutoff",
        {"layer": "anchor = { pitch_nm = 100.0, cd_nm = 50.0 }"},
        "layers[0].anchor.pitch_nm",
        "cutoff pitch",
    ),
    (
        "focus-range",
        {"layer": "focus_half_range_nm = 1e5"},
        "layers[0].focus_half_range_nm",
        "quarter-wave",
    ),
    (
        "dof-without-images",
        {"layer": "image_checks = false\ndof_min_nm = 1e300"},
        "layers[0].dof_min_nm",
        "centimetre",
    ),
    ("blur", {"layer": "resist_blur_nm = 1000.0"}, "layers[0].resist_blur_nm", "wash out"),
    ("bias", {"layer": "bias_max_nm = 500.0"}, "layers[0].bias_max_nm", "another feature"),
    ("focus-steps", {"layer": "focus_steps = 43"}, "layers[0].focus_steps", "focus samples"),
    ("nils", {"layer": "nils_risk_below = 50.0"}, "layers[0].nils_risk_below", "NILS"),
    ("k1", {"layer": "k1_risk_below = 5.0"}, "layers[0].k1_risk_below", "k1 ="),
    ("el", {"layer": "el_min_pct = 150.0"}, "layers[0].el_min_pct", "dose"),
    (
        "cd-tolerance",
        {"layer": "cd_tolerance_pct = 0.0"},
        "layers[0].cd_tolerance_pct",
        "of the CD",
    ),
]


def _bad_text(name: str, parts: dict) -> str:
    text = deck_text(**parts)
    if name == "na-tiny":
        text = text.replace("na = 0.93", "na = 1e-300")
    if name == "wavelength-huge":
        text = text.replace("wavelength_nm = 193.0", "wavelength_nm = 1e300")
    return text


@pytest.mark.parametrize(("name", "parts", "key", "why"), BAD, ids=[b[0] for b in BAD])
def test_a_deck_value_out_of_bounds_is_one_line_naming_key_and_reason(
    tmp_path, capsys, name, parts, key, why
):
    path = tmp_path / "deck.toml"
    path.write_text(_bad_text(name, parts))
    code = main(["rules", "check", str(path)])
    err = capsys.readouterr().err
    if name == "anchor-huge":  # both of the anchor's lengths are out of bounds
        lines = _error_lines(code, err, path, [key, "layers[0].anchor.cd_nm"])
        assert all(why in line for line in lines), lines
        return
    line = _one_error_line(code, err, path, key)
    assert why in line, line


# (key, value at its bound: accepted, value just beyond: refused), lengths from
# the exposure above; a bound relative to lambda/NA is checked at 1e-6 inside.
EDGES = [
    ("na", {"na": 0.05}, {"na": 0.0499}),
    (
        "sigma",
        {"illumination": '{ shape = "conventional", sigma = 0.05 }'},
        {"illumination": '{ shape = "conventional", sigma = 0.0499 }'},
    ),
    (
        "ring",
        {"illumination": '{ shape = "annular", sigma_inner = 0.8, sigma_outer = 0.85 }'},
        {"illumination": '{ shape = "annular", sigma_inner = 0.801, sigma_outer = 0.85 }'},
    ),
    (
        "rotation",
        {
            "illumination": '{ shape = "quadrupole", sigma_inner = 0.6, sigma_outer = 0.9, '
            "opening_deg = 30.0, rotation_deg = -360.0 }"
        },
        {
            "illumination": '{ shape = "quadrupole", sigma_inner = 0.6, sigma_outer = 0.9, '
            "opening_deg = 30.0, rotation_deg = -360.001 }"
        },
    ),
    (
        "interaction_range_nm",
        {"layer": f"interaction_range_nm = {10 * LAM_NA * (1 - 1e-6)}"},
        {"layer": f"interaction_range_nm = {10 * LAM_NA * (1 + 1e-6)}"},
    ),
    (
        "compact_max_nm",
        {"layer": f"compact_max_nm = {4 * LAM_NA * (1 - 1e-6)}"},
        {"layer": f"compact_max_nm = {4 * LAM_NA * (1 + 1e-6)}"},
    ),
    (
        "anchor",
        {"layer": f"anchor = {{ pitch_nm = {CUTOFF * (1 + 1e-6)}, cd_nm = 50.0 }}"},
        {"layer": f"anchor = {{ pitch_nm = {CUTOFF * (1 - 1e-6)}, cd_nm = 50.0 }}"},
    ),
    (
        "focus_half_range_nm",
        {"layer": f"focus_half_range_nm = {25 * QUARTER_WAVE * (1 - 1e-6)}\ndof_min_nm = 50.0"},
        {"layer": f"focus_half_range_nm = {25 * QUARTER_WAVE * (1 + 1e-6)}\ndof_min_nm = 50.0"},
    ),
]


def _edge_text(parts: dict) -> str:
    parts = dict(parts)
    na = parts.pop("na", None)
    text = deck_text(**parts)
    return text if na is None else text.replace("na = 0.93", f"na = {na}")


@pytest.mark.parametrize(("key", "inside", "beyond"), EDGES, ids=[e[0] for e in EDGES])
def test_each_bound_takes_its_edge_and_refuses_beyond_it(key, inside, beyond):
    parse_deck(_edge_text(inside))
    with pytest.raises(DeckError) as info:
        parse_deck(_edge_text(beyond))
    (line,) = info.value.lines
    assert key.split("_")[0] in line and ("must be" in line or "resolves" in line), line


def _chip(path: Path) -> Path:
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(9):  # 55 nm lines at a 110 nm pitch, below the 115.3 nm cutoff
        top.add(gdstk.rectangle((k * 0.11, 0), (k * 0.11 + 0.055, 1.5), layer=7, datatype=0))
    lib.write_gds(str(path))
    return path


@pytest.mark.parametrize(
    ("name", "command"),
    [("na-tiny", "probe"), ("rotation-huge", "probe"), ("ring-hair", "scan"), ("na-tiny", "scan")],
)
def test_probe_and_scan_refuse_the_values_that_crashed_them(tmp_path, capsys, name, command):
    (_, parts, key, _) = next(b for b in BAD if b[0] == name)
    path = tmp_path / "deck.toml"
    path.write_text(_bad_text(name, parts))
    if command == "probe":
        argv = ["probe", "--rules", str(path), "--layer", "poly", "--pitch", "200", "--cd", "100"]
    else:
        argv = ["scan", str(_chip(tmp_path / "c.gds")), "--rules", str(path), "-q", "--untiled"]
    code = main(argv)
    _one_error_line(code, capsys.readouterr().err, path, key)


def test_a_deeply_nested_deck_is_refused(tmp_path, capsys):
    path = tmp_path / "deck.toml"
    path.write_text(deck_text() + "\n[deck2]\nx = " + "[" * 100_000 + "]" * 100_000 + "\n")
    code = main(["rules", "check", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1, err
    assert err.startswith(f"pitchguard: error: {path}: not a deck: ") and "nest" in err, err


def test_nesting_the_parser_follows_is_refused_too(tmp_path, capsys):
    path = tmp_path / "deck.toml"
    path.write_text(deck_text(layer="anchor = " + "[" * 50 + "]" * 50))
    code = main(["rules", "check", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "deeper than 8 levels" in err, err


def test_every_deck_error_is_reported_on_its_own_line(tmp_path, capsys):
    text = deck_text(
        illumination='{ shape = "conventional", sigma = 1e-300 }',
        layer="interaction_range_nm = 1e300\nfocus_steps = 4",
    ).replace("na = 0.93", "na = 1e-300")
    path = tmp_path / "deck.toml"
    path.write_text(text)
    code = main(["rules", "check", str(path)])
    lines = capsys.readouterr().err.splitlines()
    assert code == 2
    keys = [ln.split(": ")[3] for ln in lines]
    assert sorted(keys) == sorted(
        [
            "exposures.arf.na",
            "exposures.arf.illumination.sigma",
            "layers[0].interaction_range_nm",
            "layers[0].focus_steps",
        ]
    ), lines
    assert all(ln.startswith(f"pitchguard: error: {path}: ") for ln in lines), lines


def test_many_deck_errors_are_capped_with_a_count(tmp_path, capsys):
    layers = "".join(
        f'\n[[layers]]\nname = "l{k}"\nsource = "{k + 10}/0"\nexposure = "arf"\n'
        'field = "clear"\nmin_run_nm = 1e300\n'
        for k in range(25)
    )
    path = tmp_path / "deck.toml"
    path.write_text(deck_text() + layers)
    code = main(["rules", "check", str(path)])
    lines = capsys.readouterr().err.splitlines()
    assert code == 2 and len(lines) == 21, lines
    assert all(ln.startswith(f"pitchguard: error: {path}: ") for ln in lines)
    assert lines[0].startswith(f"pitchguard: error: {path}: layers[1].min_run_nm: ")
    assert lines[-1] == f"pitchguard: error: {path}: and 5 more errors"


def test_resolved_problems_of_several_layers_are_all_reported(tmp_path):
    text = deck_text(layer="compact_max_nm = 5000.0") + textwrap.dedent(
        """
        [[layers]]
        name = "m1"
        source = "8/0"
        exposure = "arf"
        field = "dark"
        sizing = "retarget"
        """
    )
    with pytest.raises(DeckError) as info:
        parse_deck(text)
    lines = info.value.lines
    assert len(lines) == 2, lines
    assert lines[0].startswith("<deck>: layers[0].compact_max_nm: ")
    assert lines[1].startswith("<deck>: layers[1].sizing: ")


# --------------------------------------------------------------- files that are not decks


def test_a_fifo_as_the_deck_is_refused_not_waited_on(tmp_path):
    fifo = tmp_path / "deck.toml"
    os.mkfifo(fifo)
    code, err = command("rules", "check", str(fifo))
    assert code == 2 and err.count("\n") == 1, err
    assert err.startswith(f"pitchguard: error: {fifo}: is a named pipe (FIFO), not a deck file")


def test_a_device_as_the_deck_is_refused_not_read(tmp_path):
    code, err = command("rules", "check", "/dev/zero")
    assert code == 2 and err.count("\n") == 1, err
    assert err.startswith("pitchguard: error: /dev/zero: is a character device, not a deck file")


def test_a_deck_larger_than_the_limit_is_refused(tmp_path, capsys):
    path = tmp_path / "deck.toml"
    path.write_text(deck_text() + ("#" * 99 + "\n") * 42_000)  # 4.2 MB of comments
    code = main(["rules", "check", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1, err
    assert err == f"pitchguard: error: {path}: larger than 4 MiB, the most a deck file may be\n"
