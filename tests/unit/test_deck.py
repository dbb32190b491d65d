"""Unit tests for the rule deck (pitchguard.deck).

A valid deck loads and every limit it leaves out is resolved to its default;
every broken deck raises DeckError with a one-line message of the form
``<file>: <dotted.key>: <what is wrong>``.  The key paths are asserted exactly:
they are what a user searches the deck for.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from decks import DRY_ARF_DECK
from pitchguard.deck import (
    LIMIT_DEFAULTS,
    Deck,
    load_deck,
    parse_deck,
    parse_layer_spec,
)
from pitchguard.errors import EXIT_USAGE, DeckError

REL = 1e-12  # float round-off only: every default below is one multiplication

# ArF immersion, water (n ~ 1.44), NA 1.35 and dry ArF NA 0.93: common practice.
VALID_DECK = """\
[deck]
name = "unit-test deck"
description = "two exposures, three layers"

[exposures.arf_imm]
wavelength_nm = 193.0
na = 1.35
immersion_index = 1.44
illumination = { shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }

[exposures.arf_dry]
wavelength_nm = 193.0
na = 0.93
mask = { kind = "attenuated", transmission = 0.06 }

[exposures.arf_dry.illumination]
shape = "dipole"
sigma_inner = 0.5
sigma_outer = 0.8
opening_deg = 40.0
axis = "x"

[layer_defaults]
pitch_tolerance_nm = 2.0

[[layers]]
name = "M1"
source = "7/0"
exposure = "arf_imm"
field = "clear"

[[layers]]
name = "V1"
source = "8/0"
exposure = "arf_dry"
field = "dark"
min_run_nm = 40.0
interaction_range_nm = 500.0
k1_risk_below = 0.28

[[layers]]
name = "M2"
source = "9/0"
exposure = "arf_imm"
field = "clear"
"""


def write_deck(tmp_path: Path, text: str, name: str = "deck.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def deck_error(tmp_path: Path, text: str) -> tuple[Path, str]:
    """Load ``text`` from a file; return the file and the DeckError message."""
    path = write_deck(tmp_path, text)
    with pytest.raises(DeckError) as info:
        load_deck(path)
    return path, str(info.value)


def replace_once(text: str, old: str, new: str) -> str:
    assert text.count(old) == 1, f"test set-up: {old!r} must occur exactly once"
    return text.replace(old, new)


# --------------------------------------------------------------------------- valid deck


def test_valid_deck_loads(tmp_path):
    deck = load_deck(write_deck(tmp_path, VALID_DECK))
    assert isinstance(deck, Deck)
    assert deck.name == "unit-test deck"
    assert [r.name for r in deck.layers] == ["M1", "V1", "M2"]
    assert [(r.layer, r.datatype) for r in deck.layers] == [(7, 0), (8, 0), (9, 0)]
    assert [r.field for r in deck.layers] == ["clear", "dark", "clear"]
    assert [r.exposure_name for r in deck.layers] == ["arf_imm", "arf_dry", "arf_imm"]
    assert deck.layer("V1").exposure.mask.kind == "attenuated"
    assert deck.layer("M1").exposure.mask.kind == "binary"  # the default mask
    assert deck.layer("M1").exposure.immersion_index == 1.44
    assert deck.layer("V1").exposure.immersion_index == 1.0  # the default: dry
    assert deck.drawn_scale == "wafer"
    assert deck.scale_to_wafer == 1.0
    assert deck.path == tmp_path / "deck.toml"


def test_unnamed_deck_takes_the_file_stem(tmp_path):
    text = VALID_DECK.replace('name = "unit-test deck"\n', "")
    deck = load_deck(write_deck(tmp_path, text, name="metal_rules.toml"))
    assert deck.name == "metal_rules"


def test_k1_bands_default_to_030_and_040(tmp_path):
    # Common practice: k1 below ~0.3 needs strong resolution enhancement, 0.3-0.4 is demanding.
    deck = load_deck(write_deck(tmp_path, VALID_DECK))
    m1 = deck.layer("M1")
    assert m1.k1_risk_below == 0.30
    assert m1.k1_marginal_below == 0.40


@pytest.mark.parametrize(
    ("layer", "wavelength_nm", "na"),
    [
        ("M1", 193.0, 1.35),  # immersion: lambda/NA = 142.96 nm
        ("M2", 193.0, 1.35),  # same exposure, own layer: same defaults
    ],
)
def test_run_and_interaction_range_default_to_multiples_of_lambda_over_na(
    tmp_path, layer, wavelength_nm, na
):
    # The documented defaults (README, deck reference): 0.5 and 3 lambda/NA.
    rule = load_deck(write_deck(tmp_path, VALID_DECK)).layer(layer)
    lam_na = wavelength_nm / na  # arithmetic
    assert rule.min_run_nm == pytest.approx(0.5 * lam_na, rel=REL)
    assert rule.interaction_range_nm == pytest.approx(3.0 * lam_na, rel=REL)


def test_layer_values_override_layer_defaults_which_override_builtins(tmp_path):
    deck = load_deck(write_deck(tmp_path, VALID_DECK))
    m1, v1 = deck.layer("M1"), deck.layer("V1")
    # Set on the layer.
    assert v1.min_run_nm == 40.0
    assert v1.interaction_range_nm == 500.0
    assert v1.k1_risk_below == 0.28
    # Set in [layer_defaults]: reaches every layer.
    assert m1.pitch_tolerance_nm == 2.0
    assert v1.pitch_tolerance_nm == 2.0
    # Built in.
    assert m1.dense_min_lines == LIMIT_DEFAULTS["dense_min_lines"] == 5
    assert v1.k1_marginal_below == 0.40


def test_markers_default_to_700_1_2_3(tmp_path):
    deck = load_deck(write_deck(tmp_path, VALID_DECK))
    assert deck.markers == {"fail": (700, 1), "risk": (700, 2), "marginal": (700, 3)}


def test_markers_can_be_set(tmp_path):
    text = VALID_DECK + '\n[markers]\nfail = "900/10"\nrisk = "900/20"\nmarginal = "900/30"\n'
    deck = load_deck(write_deck(tmp_path, text))
    assert deck.markers == {"fail": (900, 10), "risk": (900, 20), "marginal": (900, 30)}


def test_mask_scale_deck_divides_by_the_reduction(tmp_path):
    text = replace_once(
        VALID_DECK, 'name = "unit-test deck"\n', 'drawn_scale = "mask"\nreduction = 4.0\n'
    )
    deck = load_deck(write_deck(tmp_path, text))
    assert deck.scale_to_wafer == 0.25  # 4x reduction scanner: common practice


def test_layer_lookup_by_unknown_name_names_the_file(tmp_path):
    path = write_deck(tmp_path, VALID_DECK)
    deck = load_deck(path)
    with pytest.raises(DeckError) as info:
        deck.layer("M9")
    assert str(info.value).startswith(f"{path}: no layer named 'M9'")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("7/0", (7, 0)),
        (" 12 / 3 ", (12, 3)),  # blanks around the numbers are allowed
        ("65535/65535", (65535, 65535)),  # GDSII layer/datatype are 2-byte integers
    ],
)
def test_layer_spec_parses(text, expected):
    assert parse_layer_spec(text) == expected


@pytest.mark.parametrize("text", ["7", "7:0", "7/0/1", "-1/0", "a/b", "65536/0", ""])
def test_layer_spec_rejects(text):
    with pytest.raises(ValueError):
        parse_layer_spec(text)


# --------------------------------------------------------------------------- broken decks

# Each row: a broken deck, the exact dotted key its message must name, and a
# fragment of the explanation.  ``None`` as key: the error is not tied to a key.
BAD_DECKS = [
    pytest.param("colour = 1\n" + VALID_DECK, "colour", "unknown key", id="unknown-top-level-key"),
    pytest.param(
        replace_once(VALID_DECK, "k1_risk_below = 0.28", "k1_risk_belw = 0.28"),
        "layers[1].k1_risk_belw",
        "unknown key",
        id="unknown-layer-key",
    ),
    pytest.param(
        replace_once(VALID_DECK, "na = 0.93", "na = 0.93\nnumerical_aperture = 0.93"),
        "exposures.arf_dry.numerical_aperture",
        "unknown key",
        id="unknown-exposure-key",
    ),
    pytest.param(
        replace_once(VALID_DECK, "sigma_outer = 0.9 }", "sigma_outer = 0.9, sigma = 0.5 }"),
        "exposures.arf_imm.illumination.sigma",
        "unknown key",
        id="unknown-illumination-key",
    ),
    pytest.param(
        replace_once(VALID_DECK, "pitch_tolerance_nm = 2.0", "pitch_tol = 2.0"),
        "layer_defaults.pitch_tol",
        "unknown key",
        id="unknown-layer-defaults-key",
    ),
    pytest.param(
        replace_once(VALID_DECK, "na = 0.93", 'na = "0.93"'),
        "exposures.arf_dry.na",
        "valid number",
        id="wrong-type-string-for-float",
    ),
    pytest.param(
        replace_once(VALID_DECK, "na = 0.93", "na = true"),
        "exposures.arf_dry.na",
        "valid number",
        id="wrong-type-bool-for-float",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'source = "8/0"', "source = 8"),
        "layers[1].source",
        "valid string",
        id="wrong-type-int-for-string",
    ),
    pytest.param(
        VALID_DECK + "dense_min_lines = 5.5\n",  # lands in the last [[layers]] table
        "layers[2].dense_min_lines",
        "valid integer",
        id="wrong-type-float-for-int",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'exposure = "arf_dry"', 'exposure = "krf"'),
        "layers[1].exposure",
        "unknown exposure 'krf'",
        id="layer-names-undefined-exposure",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'exposure = "arf_dry"\n', ""),
        "layers[1].exposure",
        "required key is missing",
        id="layer-without-exposure",
    ),
    pytest.param(
        VALID_DECK.split("[exposures.arf_imm]")[0]
        + "[layer_defaults]"
        + VALID_DECK.split("[layer_defaults]")[1],
        "exposures",
        "required key is missing",
        id="deck-without-exposures",
    ),
    pytest.param(
        replace_once(VALID_DECK, "immersion_index = 1.44\n", ""),
        "exposures.arf_imm.na",  # NA 1.35 needs immersion: dry index defaults to 1
        "1.35 must be below immersion_index (1.0)",
        id="na-above-dry-index",
    ),
    pytest.param(
        replace_once(VALID_DECK, "immersion_index = 1.44", "immersion_index = 1.35"),
        "exposures.arf_imm.na",
        "1.35 must be below immersion_index (1.35)",
        id="na-equal-to-index",
    ),
    pytest.param(
        replace_once(VALID_DECK, "sigma_outer = 0.9 }", "sigma_outer = 1.2 }"),
        "exposures.arf_imm.illumination.sigma_outer",
        "at most 1",
        id="sigma-outer-above-1",
    ),
    pytest.param(
        replace_once(VALID_DECK, "sigma_inner = 0.6", "sigma_inner = -0.1"),
        "exposures.arf_imm.illumination.sigma_inner",
        "at least 0",
        id="sigma-inner-negative",
    ),
    pytest.param(
        replace_once(
            VALID_DECK,
            '{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }',
            '{ shape = "conventional", sigma = 1.5 }',
        ),
        "exposures.arf_imm.illumination.sigma",
        "at most 1",
        id="conventional-sigma-above-1",
    ),
    pytest.param(
        replace_once(VALID_DECK, "sigma_inner = 0.6", "sigma_inner = 0.9"),
        "exposures.arf_imm.illumination.sigma_inner",
        "0.9 must be below sigma_outer (0.9)",
        id="annular-inner-equal-outer",
    ),
    pytest.param(
        replace_once(VALID_DECK, "sigma_inner = 0.5", "sigma_inner = 0.85"),
        "exposures.arf_dry.illumination.sigma_inner",
        "0.85 must be below sigma_outer (0.8)",
        id="dipole-inner-above-outer",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'source = "8/0"', 'source = "8:0"'),
        "layers[1].source",
        'expected "LAYER/DATATYPE"',
        id="source-not-layer-slash-datatype",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'source = "8/0"', 'source = "70000/0"'),
        "layers[1].source",
        "0..65535",
        id="source-layer-out-of-gdsii-range",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'name = "M2"', 'name = "M1"'),
        "layers[2].name",
        "duplicate layer name 'M1'",
        id="duplicate-layer-name",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'source = "9/0"', 'source = "7/0"'),
        "layers[2].source",
        "'7/0' is already used by layer 'M1'",
        id="duplicate-source",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'source = "9/0"', 'source = " 7 / 0 "'),
        "layers[2].source",
        "already used by layer 'M1'",
        id="duplicate-source-spelled-differently",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'shape = "annular"', 'shape = "hexapole"'),
        "exposures.arf_imm.illumination",
        "unknown value 'hexapole'",
        id="unknown-illumination-shape",
    ),
    pytest.param(
        replace_once(VALID_DECK, '{ shape = "annular", ', "{ "),
        "exposures.arf_imm.illumination",
        "missing 'shape' key",
        id="illumination-without-shape",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'axis = "x"', 'axis = "z"'),
        "exposures.arf_dry.illumination.axis",
        "'x' or 'y'",
        id="dipole-axis-not-x-or-y",
    ),
    pytest.param(
        replace_once(VALID_DECK, 'field = "dark"', 'field = "grey"'),
        "layers[1].field",
        "'clear' or 'dark'",
        id="field-not-clear-or-dark",
    ),
    pytest.param(
        replace_once(VALID_DECK, "transmission = 0.06", "transmission = 1.5"),
        "exposures.arf_dry.mask.transmission",
        "below 1",
        id="mask-transmission-above-1",
    ),
    pytest.param(
        VALID_DECK + '\n[markers]\nfail = "700/1"\nrisk = "700/1"\n',
        "markers",
        "each severity needs its own layer/datatype",
        id="markers-share-a-layer",
    ),
    pytest.param(
        replace_once(VALID_DECK, "k1_risk_below = 0.28", "k1_risk_below = 0.45"),
        "layers[1].k1_risk_below",
        "0.45 must not exceed k1_marginal_below (0.4)",
        id="k1-bands-in-wrong-order",
    ),
]


@pytest.mark.parametrize(("text", "key", "fragment"), BAD_DECKS)
def test_bad_deck_message_names_file_and_key(tmp_path, text, key, fragment):
    path, message = deck_error(tmp_path, text)
    assert "\n" not in message
    assert message.startswith(f"{path}: {key}: "), message
    assert fragment in message


def test_bad_toml_names_file_and_line(tmp_path):
    text = VALID_DECK + "\n[[layers\n"
    bad_line = text.count("\n")  # the unclosed table header is the last line
    path, message = deck_error(tmp_path, text)
    assert "\n" not in message
    assert message.startswith(f"{path}: not valid TOML: ")
    assert f"line {bad_line}," in message


def test_missing_deck_file_names_the_file(tmp_path):
    path = tmp_path / "nowhere.toml"
    with pytest.raises(DeckError) as info:
        load_deck(path)
    assert str(info.value) == f"{path}: deck file not found"


def test_deck_errors_exit_with_the_usage_code():
    assert DeckError("x").exit_code == EXIT_USAGE == 2


def test_parse_deck_without_a_file_says_deck():
    with pytest.raises(DeckError) as info:
        parse_deck("colour = 1\n" + VALID_DECK)
    assert str(info.value) == "<deck>: colour: unknown key"


# --------------------------------------------------------------- odd keys, non-finite values


def test_message_stays_one_line_for_a_key_with_a_newline(tmp_path):
    _, message = deck_error(tmp_path, '"bad\\nkey" = 1\n' + VALID_DECK)
    assert "\n" not in message


@pytest.mark.parametrize("value", ["nan", "inf"])
def test_non_finite_rotation_is_refused(tmp_path, value):
    text = replace_once(
        VALID_DECK,
        '{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }',
        '{ shape = "quadrupole", sigma_inner = 0.6, sigma_outer = 0.9, opening_deg = 30.0, '
        f"rotation_deg = {value} }}",
    )
    path, message = deck_error(tmp_path, text)
    assert message.startswith(f"{path}: exposures.arf_imm.illumination.rotation_deg: ")


def test_infinite_min_run_is_refused(tmp_path):
    text = replace_once(VALID_DECK, "min_run_nm = 40.0", "min_run_nm = inf")
    path, message = deck_error(tmp_path, text)
    assert message.startswith(f"{path}: layers[1].min_run_nm: ")


def test_nan_limits_are_refused(tmp_path):
    # NaN fails every comparison, so the gt=0 bound already refuses it.
    text = replace_once(VALID_DECK, "interaction_range_nm = 500.0", "interaction_range_nm = nan")
    path, message = deck_error(tmp_path, text)
    assert message.startswith(f"{path}: layers[1].interaction_range_nm: ")


def test_a_renamed_key_names_its_new_name(tmp_path):
    """An old deck's key gets one line naming the key that replaced it."""
    old = DRY_ARF_DECK.replace('field = "clear"', 'field = "clear"\nambit_nm = 400.0')
    with pytest.raises(DeckError) as info:
        parse_deck(old)
    assert str(info.value).endswith(
        "layers[0].ambit_nm: unknown key: it is now called interaction_range_nm"
    )
    new = parse_deck(old.replace("ambit_nm", "interaction_range_nm"))
    assert new.layers[0].interaction_range_nm == 400.0


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda p: p.mkdir(), "is a directory, not a deck file"),
        (lambda p: p.write_bytes(b"\xff\xfe\x00bad"), "not a text (UTF-8) file"),
    ],
)
def test_unreadable_deck_files_name_the_file(tmp_path, make, message):
    path = tmp_path / "deck.toml"
    make(path)
    with pytest.raises(DeckError) as info:
        load_deck(path)
    assert str(info.value) == f"{path}: {message}"
