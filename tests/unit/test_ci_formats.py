"""Tests for the CI formats: SARIF 2.1.0 (pitchguard.outputs.sarif) and JUnit XML
(pitchguard.outputs.junit).

References outside the project:

* SARIF output is validated against the official OASIS SARIF 2.1.0 JSON
  schema (tests/fixtures/sarif-schema-2.1.0.json, see tests/fixtures/README.md)
  with the jsonschema validator of the draft that schema declares, with
  format checks (``uri``, ``uri-reference``) switched on.
* JUnit XML is parsed with the standard library's XML parser and its
  ``tests``/``failures``/``errors``/``skipped`` attributes are recounted from
  the elements, as CI dashboards read them.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import xml.etree.ElementTree as ET
from collections import Counter
from pathlib import Path

import gdstk
import jsonschema
import pytest

from decks import DEMO_DECK, DRY_ARF_DECK, REPO
from decks import SAMPLE_GDS as DEMO_GDS
from pitchguard.deck import SEVERITIES, load_deck
from pitchguard.errors import OutputError
from pitchguard.judge.checks import CHECKS
from pitchguard.judge.per_cell import cell_findings, each_alone
from pitchguard.outputs.junit import to_junit, write_junit
from pitchguard.outputs.sarif import (
    FINGERPRINT_KEY,
    LEVEL,
    entry_fingerprints,
    fingerprint_base,
    rule_name,
    to_sarif,
    write_sarif,
)
from pitchguard.outputs.verdict import CAUTION
from pitchguard.run.scan import scan_layout

SCHEMA_PATH = REPO / "tests" / "fixtures" / "sarif-schema-2.1.0.json"
SCHEMA_SHA256 = "c3b4bb2d6093897483348925aaa73af03b3e3f4bd4ca38cef26dcb4212a2682e"

SMALL_DECK = DRY_ARF_DECK  # cutoff 115.3 nm (decks.py, arithmetic)


# --------------------------------------------------------------------- fixtures


@pytest.fixture(scope="module")
def demo():
    deck = load_deck(DEMO_DECK)
    return scan_layout(DEMO_GDS, deck), deck


@pytest.fixture(scope="module")
def schema() -> dict:
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def validator(schema):
    cls = jsonschema.validators.validator_for(schema)
    # The official schema declares draft-04; validate with exactly that draft.
    assert cls is jsonschema.Draft4Validator
    cls.check_schema(schema)
    checker = jsonschema.FormatChecker()  # every format jsonschema can check
    # No silent skip: the formats the SARIF schema uses must really be checked
    # (needs the format extra of jsonschema, in the test requirements).
    assert {"uri", "uri-reference", "date-time"} <= set(checker.checkers)
    return cls(schema, format_checker=checker)


def _errors(validator, log: dict) -> list[str]:
    # Round-trip through JSON text, as a consumer reads the file.
    doc = json.loads(json.dumps(log, allow_nan=False))
    return [f"{list(e.absolute_path)}: {e.message}" for e in validator.iter_errors(doc)]


def _demo_sarif(demo, fail_on: str = "fail") -> dict:
    result, deck = demo
    return to_sarif(result, deck, DEMO_GDS, fail_on)


# --------------------------------------------------------------------- the schema


def test_schema_fixture_is_the_official_sarif_2_1_0_schema(schema):
    assert hashlib.sha256(SCHEMA_PATH.read_bytes()).hexdigest() == SCHEMA_SHA256
    assert schema["title"] == "Static Analysis Results Format (SARIF) Version 2.1.0 JSON Schema"
    assert schema["id"] == (
        "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
    )
    assert schema["properties"]["version"]["enum"] == ["2.1.0"]
    assert SCHEMA_PATH.stat().st_size > 100_000  # the full schema, not an excerpt
    assert {"result", "run", "reportingDescriptor", "logicalLocation"} <= set(schema["definitions"])


def test_validator_rejects_broken_logs(demo, validator):
    """Negative controls: the validator bites on the kinds of mistakes it must catch."""
    good = _demo_sarif(demo)
    assert _errors(validator, good) == []

    bad_level = json.loads(json.dumps(good))
    bad_level["runs"][0]["results"][0]["level"] = "fatal"
    assert _errors(validator, bad_level)

    region_without_lines = json.loads(json.dumps(good))
    region_without_lines["runs"][0]["results"][0]["locations"][0]["physicalLocation"]["region"] = {}
    assert _errors(validator, region_without_lines)

    bad_uri = json.loads(json.dumps(good))
    bad_uri["runs"][0]["results"][0]["locations"][0]["physicalLocation"]["artifactLocation"][
        "uri"
    ] = "demo chip.gds"  # a space: not a URI reference
    assert _errors(validator, bad_uri)


# --------------------------------------------------------------------- SARIF


def test_demo_chip_sarif_validates_against_the_official_schema(demo, validator):
    result, _ = demo
    assert result.findings, "the demo chip has findings"
    for fail_on in ("fail", "risk", "marginal", "never"):
        assert _errors(validator, _demo_sarif(demo, fail_on)) == []


def test_sarif_top_level_and_driver(demo):
    log = _demo_sarif(demo)
    assert log["version"] == "2.1.0"
    assert log["$schema"].startswith("https://")
    assert len(log["runs"]) == 1
    run = log["runs"][0]
    driver = run["tool"]["driver"]
    from pitchguard import __version__

    assert driver["name"] == "pitchguard"
    assert driver["version"] == __version__
    assert "informationUri" not in driver
    assert run["properties"]["caution"] == CAUTION
    assert "sign-off stays with the fab" in run["properties"]["caution"]


def test_one_rule_per_check_with_help(demo):
    rules = _demo_sarif(demo)["runs"][0]["tool"]["driver"]["rules"]
    assert [r["id"] for r in rules] == list(CHECKS)
    for r in rules:
        assert r["name"] == rule_name(r["id"])
        assert r["name"][0].isupper() and "-" not in r["name"]
        assert r["shortDescription"]["text"] == CHECKS[r["id"]]
        assert len(r["fullDescription"]["text"]) > len(r["shortDescription"]["text"])
        for fmt in ("text", "markdown"):
            help_text = r["help"][fmt]
            for part in ("flags", "matters for printing", "change"):
                assert part in help_text, (r["id"], fmt, part)
            # each section has real content, not only a heading
            assert len(help_text) > 300
        assert r["defaultConfiguration"]["level"] in ("error", "warning", "note")
    assert rule_name("low-k1") == "LowK1"
    assert rule_name("unresolvable-pitch") == "UnresolvablePitch"
    assert rule_name("cd-error") == "CdError"


def test_rule_default_levels_follow_the_worst_severity_a_check_raises(demo):
    rules = {r["id"]: r for r in _demo_sarif(demo)["runs"][0]["tool"]["driver"]["rules"]}
    # README "Checks": these can fail; the others are risk/marginal at worst.
    for check in ("unresolvable-pitch", "feature-not-printed", "features-bridged", "low-nils"):
        assert rules[check]["defaultConfiguration"]["level"] == "error"
    for check in ("low-k1", "low-exposure-latitude", "low-depth-of-focus", "cd-error"):
        assert rules[check]["defaultConfiguration"]["level"] == "warning"


def test_levels_map_from_severity(demo):
    result, deck = demo
    # SARIF 2.1.0 result levels (OASIS SARIF 2.1.0, result.level): error, warning, note.
    assert LEVEL == {"fail": "error", "risk": "warning", "marginal": "note"}
    log = _demo_sarif(demo)
    res = log["runs"][0]["results"]
    assert len(res) == len(result.findings)
    seen = set()
    for r, f in zip(res, result.findings, strict=True):
        assert r["level"] == {"fail": "error", "risk": "warning", "marginal": "note"}[f.severity]
        assert r["properties"]["severity"] == f.severity
        seen.add(f.severity)
    assert seen == set(SEVERITIES), "the demo chip has fail, risk and marginal findings"
    # Every severity, on one finding: the level changes with it alone.
    f0 = result.findings[0]
    for sev, level in (("fail", "error"), ("risk", "warning"), ("marginal", "note")):
        one = dataclasses.replace(result, findings=[dataclasses.replace(f0, severity=sev)])
        assert to_sarif(one, deck, DEMO_GDS, "fail")["runs"][0]["results"][0]["level"] == level


def test_results_point_at_the_layout_without_invented_regions(demo):
    result, _ = demo
    run = _demo_sarif(demo)["runs"][0]
    rule_ids = [r["id"] for r in run["tool"]["driver"]["rules"]]
    for r, f in zip(run["results"], result.findings, strict=True):
        assert r["ruleId"] == f.check
        assert rule_ids[r["ruleIndex"]] == f.check
        (loc,) = r["locations"]
        phys = loc["physicalLocation"]
        assert phys["artifactLocation"]["uri"] == "sample_layouts/demo_chip.gds" or phys[
            "artifactLocation"
        ]["uri"].endswith("/sample_layouts/demo_chip.gds")
        assert "region" not in phys and "contextRegion" not in phys
        kinds = {ll["kind"]: ll for ll in loc["logicalLocations"]}
        assert kinds["module"]["name"] == "WREN3_TOP"
        assert kinds["member"]["name"] == f.layer
        assert kinds["member"]["decoratedName"] == f.source
        props = r["properties"]
        assert props["bbox_um"] == list(f.bbox_um)
        assert props["centre_um"] == list(f.centre_um)
        assert len(props["outline_um"]) == 4
        if math.isfinite(f.pitch_nm):  # line ends and lone features: no pitch or k1, null
            assert props["pitch_nm"] == f.pitch_nm and props["k1"] == f.k1
            size = f"{f.pitch_nm:.1f} nm"
        else:
            assert props["pitch_nm"] is None and props["k1"] is None
            size = f"{f.space_nm:.1f} nm gap" if f.tip else f"{f.width_nm:.1f} x"
        assert "nils" in props
        text = r["message"]["text"]
        for piece in (f.layer, f.check, size, f.hint, f.severity):
            assert piece in text, (piece, text)


def test_no_empty_arrays_outside_results_and_property_bags(demo):
    def walk(node, path):
        if isinstance(node, dict):
            for k, v in node.items():
                if k == "properties":  # property bags are free-form
                    continue
                walk(v, (*path, k))
        elif isinstance(node, list):
            assert node or path[-1] == "results", f"empty array at {path}"
            for i, v in enumerate(node):
                walk(v, (*path, i))

    walk(_demo_sarif(demo), ())


def _location(log) -> tuple[dict, dict | None]:
    run = log["runs"][0]
    loc = run["results"][0]["locations"][0]["physicalLocation"]["artifactLocation"]
    return loc, run.get("originalUriBaseIds")


def test_uri_relative_to_the_repository_with_its_base(demo, validator, tmp_path, monkeypatch):
    """SARIF 2.1.0 §3.4.4 (uriBaseId) and §3.14.14 (originalUriBaseIds, each base
    URI ending in a slash): a code-scanning service resolves the layout against
    its own checkout, so the location is relative to the repository root."""
    result, deck = demo
    # An explicit root.
    log = to_sarif(result, deck, DEMO_GDS, "fail", root=REPO)
    loc, bases = _location(log)
    assert loc == {"uri": "sample_layouts/demo_chip.gds", "uriBaseId": "REPOROOT"}
    assert bases == {"REPOROOT": {"uri": REPO.resolve().as_uri() + "/"}}
    assert _errors(validator, log) == []

    # Found: the nearest folder above the layout holding .git, wherever the command runs.
    design = tmp_path / "design"
    (design / ".git").mkdir(parents=True)
    (design / "chips").mkdir()
    spaced = design / "chips" / "my chip#1.gds"
    spaced.write_bytes(DEMO_GDS.read_bytes())
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    log = to_sarif(result, deck, spaced, "fail")
    loc, bases = _location(log)
    assert loc == {"uri": "chips/my%20chip%231.gds", "uriBaseId": "REPOROOT"}
    assert bases["REPOROOT"]["uri"] == design.resolve().as_uri() + "/"
    assert _errors(validator, log) == []

    # No repository: relative to the current folder when the layout is inside it ...
    plain = tmp_path / "plain"
    plain.mkdir()
    (plain / "top.gds").write_bytes(DEMO_GDS.read_bytes())
    monkeypatch.chdir(plain)
    loc, bases = _location(to_sarif(result, deck, Path("top.gds"), "fail"))
    assert loc == {"uri": "top.gds", "uriBaseId": "REPOROOT"}
    assert bases["REPOROOT"]["uri"] == plain.resolve().as_uri() + "/"

    # ... and a layout outside the base is named by its absolute file URI, no base.
    log = to_sarif(result, deck, spaced, "fail", root=plain)
    loc, bases = _location(log)
    assert loc == {"uri": spaced.resolve().as_uri()} and bases is None
    assert loc["uri"].startswith("file:///")
    assert _errors(validator, log) == []


def test_clean_layout_gives_valid_sarif_with_empty_results(tmp_path, validator):
    deck_path = tmp_path / "deck.toml"
    deck_path.write_text(SMALL_DECK)
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("CLEAN")
    for k in range(6):  # pitch 600 nm: k1 far above every band
        cell.add(gdstk.rectangle((k * 0.6, 0), (k * 0.6 + 0.3, 3), layer=7, datatype=0))
    gds = tmp_path / "clean.gds"
    lib.write_gds(str(gds))
    deck = load_deck(deck_path)
    result = scan_layout(gds, deck)
    assert result.findings == []
    log = to_sarif(result, deck, gds, "fail")
    assert log["runs"][0]["results"] == []
    assert log["runs"][0]["invocations"][0]["exitCode"] == 0
    assert _errors(validator, log) == []
    root = ET.fromstring(to_junit(result, deck, "fail"))
    assert root.get("failures") == "0"
    assert root.get("tests") == str(len(CHECKS))


# --------------------------------------------------------------------- fingerprints


def _array(cell, x0_um, y0_um, pitch_nm, width_nm, count=8, length_um=2.0):
    for k in range(count):
        x = x0_um + k * pitch_nm / 1000.0
        cell.add(
            gdstk.rectangle(
                (x, y0_um), (x + width_nm / 1000.0, y0_um + length_um), layer=7, datatype=0
            )
        )


def _scan_small(tmp_path: Path, name: str, dx_um: float, dy_um: float):
    """Two identical 100 nm arrays, a 110 nm one and a 140 nm one, shifted as a whole."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("TOP")
    _array(cell, 0 + dx_um, 0 + dy_um, 100, 50)
    _array(cell, 0 + dx_um, 5 + dy_um, 100, 50)  # same pitch, elsewhere
    _array(cell, 5 + dx_um, 0 + dy_um, 110, 55)
    _array(cell, 10 + dx_um, 0 + dy_um, 140, 70)
    gds = tmp_path / f"{name}.gds"
    lib.write_gds(str(gds))
    deck_path = tmp_path / "small.toml"
    deck_path.write_text(SMALL_DECK)
    deck = load_deck(deck_path)
    return scan_layout(gds, deck), deck, gds


def test_fingerprints_survive_a_shift_of_the_whole_layout(tmp_path):
    dx, dy = 3.217, -2.451  # um, on the 1 nm grid
    a, deck, gds_a = _scan_small(tmp_path, "a", 0.0, 0.0)
    b, _, gds_b = _scan_small(tmp_path, "b", dx, dy)
    assert len(a.findings) >= 4 and len(a.findings) == len(b.findings)

    def by_fp(result, gds):
        run = to_sarif(result, deck, gds, "fail")["runs"][0]
        return {r["partialFingerprints"][FINGERPRINT_KEY]: r for r in run["results"]}

    fa, fb = by_fp(a, gds_a), by_fp(b, gds_b)
    assert len(fa) == len(a.findings)  # unique within a run
    assert fa.keys() == fb.keys()
    for fp, ra in fa.items():
        rb = fb[fp]
        assert ra["ruleId"] == rb["ruleId"]
        # the same region, moved by the shift (the shift really happened)
        xa0, ya0, *_ = ra["properties"]["bbox_um"]
        xb0, yb0, *_ = rb["properties"]["bbox_um"]
        assert xb0 - xa0 == pytest.approx(dx, abs=1e-6)
        assert yb0 - ya0 == pytest.approx(dy, abs=1e-6)


def test_fingerprints_differ_for_different_pitches_and_number_equal_ones(tmp_path):
    result, _, _ = _scan_small(tmp_path, "a", 0.0, 0.0)
    fps = entry_fingerprints(each_alone(result.findings))
    base = {}
    for f, fp in zip(result.findings, fps, strict=True):
        base.setdefault((f.check, round(f.pitch_nm)), set()).add(fp)
    unresolvable = {p: v for (c, p), v in base.items() if c == "unresolvable-pitch"}
    # 100 nm (twice) and 110 nm arrays are below the 115.3 nm limit
    assert set(unresolvable) >= {100, 110}
    hundred = sorted(unresolvable[100])
    assert len(hundred) == 2
    assert hundred[0].split(":")[0] == hundred[1].split(":")[0]
    assert {h.split(":")[1] for h in hundred} == {"1", "2"}
    (ten,) = unresolvable[110]
    assert ten.split(":")[0] != hundred[0].split(":")[0]

    f = result.findings[0]
    moved = dataclasses.replace(
        f,
        bbox_nm=tuple(v + 1234.0 for v in f.bbox_nm),
        outline_nm=tuple((x + 1234.0, y + 1234.0) for x, y in f.outline_nm),
    )
    assert fingerprint_base(moved) == fingerprint_base(f)
    for change in (
        {"pitch_nm": f.pitch_nm + 10},
        {"width_nm": f.width_nm + 5},
        {"space_nm": f.space_nm + 5},
        {"orientation_deg": (f.orientation_deg + 90) % 180},
        {"layer": f.layer + "_b"},
        {"check": "low-k1"},
    ):
        assert fingerprint_base(dataclasses.replace(f, **change)) != fingerprint_base(f), change


def _scan_placed(tmp_path: Path, name: str, origins_um):
    """A cell holding a 100 nm array (below the 115.3 nm limit) placed at ``origins_um``."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    arr = lib.new_cell("ARR")
    _array(arr, 0.0, 0.0, 100, 50)
    top = lib.new_cell("TOP")
    for o in origins_um:
        top.add(gdstk.Reference(arr, o))
    gds = tmp_path / f"{name}.gds"
    lib.write_gds(str(gds))
    deck_path = tmp_path / "small.toml"
    deck_path.write_text(SMALL_DECK)
    deck = load_deck(deck_path)
    return scan_layout(gds, deck, cells=True), deck, gds


def _sarif_run(result, deck, gds) -> dict:
    return to_sarif(result, deck, gds, "fail")["runs"][0]


def test_a_cell_finding_keeps_its_fingerprint_when_placed_elsewhere_or_again(tmp_path):
    """One result per finding of cell ARR, whatever its placements (all far apart)."""
    a = _sarif_run(*_scan_placed(tmp_path, "a", [(0.0, 0.0)]))
    b = _sarif_run(*_scan_placed(tmp_path, "b", [(20.0, 7.0), (-30.0, 40.0), (60.0, -20.0)]))
    fa = [r["partialFingerprints"][FINGERPRINT_KEY] for r in a["results"]]
    fb = [r["partialFingerprints"][FINGERPRINT_KEY] for r in b["results"]]
    assert len(fa) >= 1 and sorted(fa) == sorted(fb)
    assert [r["properties"]["placements"] for r in b["results"]] == [3] * len(fb)
    assert {r["locations"][0]["logicalLocations"][0]["name"] for r in b["results"]} == {"ARR"}
    assert {r["properties"]["cell_path"][-1] for r in b["results"]} == {"ARR"}


@pytest.fixture(scope="module")
def demo_cells():
    deck = load_deck(DEMO_DECK)
    return scan_layout(DEMO_GDS, deck, cells=True), deck


def test_reports_per_cell_finding_validate_and_add_up(demo_cells, validator):
    """The demo scan naming cells (as every scan writing a report does): a SARIF
    result and, at or above fail_on, a JUnit failure per cell finding; the
    placements of the results add up to the scan's findings."""
    result, deck = demo_cells
    entries = cell_findings(result)
    assert len(entries) < len(result.findings)  # the demo places one cell finding twice
    log = to_sarif(result, deck, DEMO_GDS, "fail")
    assert _errors(validator, log) == []
    res = log["runs"][0]["results"]
    assert len(res) == len(entries)
    assert sum(r["properties"]["placements"] for r in res) == len(result.findings)
    for r, c in zip(res, entries, strict=True):
        module, member = r["locations"][0]["logicalLocations"]
        assert (module["kind"], module["name"]) == ("module", c.cell)
        assert module["fullyQualifiedName"] == "/".join(c.path)
        assert member["fullyQualifiedName"] == f"{c.cell}/{c.finding.layer}"
        assert f"In cell {c.cell} " in r["message"]["text"]
    root = ET.fromstring(to_junit(result, deck, "fail"))
    _check_counts(root)
    assert int(root.get("failures")) == sum(1 for c in entries if c.finding.severity == "fail")


def test_junit_has_a_case_per_cell_finding_not_per_placement(tmp_path):
    result, deck, _ = _scan_placed(tmp_path, "c", [(20.0, 7.0), (-30.0, 40.0), (60.0, -20.0)])
    fails = [f for f in result.findings if f.severity == "fail"]
    assert len(fails) >= 3 and len(fails) % 3 == 0  # every finding thrice, once per placement
    root = ET.fromstring(to_junit(result, deck, "fail"))
    failing = [c for c in root.iter("testcase") if c.find("failure") is not None]
    assert len(failing) == len(fails) // 3 == int(root.get("failures"))
    for c in failing:
        assert " in ARR at (" in c.get("name")
        assert "In cell ARR (placed TOP > ARR)" in c.find("failure").text
        assert "3 placements" in c.find("failure").text


# --------------------------------------------------------------------- JUnit


def _junit(demo, fail_on: str = "fail") -> ET.Element:
    result, deck = demo
    text = to_junit(result, deck, fail_on)
    assert text.startswith('<?xml version="1.0" encoding="UTF-8"?>')
    return ET.fromstring(text.encode("utf-8"))


def _check_counts(root: ET.Element) -> None:
    assert root.tag == "testsuites"
    tot = Counter()
    for suite in root.findall("testsuite"):
        cases = suite.findall("testcase")
        n_fail = sum(1 for c in cases if c.find("failure") is not None)
        assert int(suite.get("tests")) == len(cases)
        assert int(suite.get("failures")) == n_fail
        assert suite.get("errors") == "0" and suite.get("skipped") == "0"
        assert float(suite.get("time")) >= 0
        for c in cases:
            assert len(c.findall("failure")) <= 1
        tot["tests"] += len(cases)
        tot["failures"] += n_fail
    assert int(root.get("tests")) == tot["tests"]
    assert int(root.get("failures")) == tot["failures"]
    assert root.get("errors") == "0" and root.get("skipped") == "0"


@pytest.mark.parametrize(
    ("fail_on", "counted"),
    [
        ("fail", {"fail"}),
        ("risk", {"fail", "risk"}),
        ("marginal", {"fail", "risk", "marginal"}),
        ("never", set()),
    ],
)
def test_junit_failures_equal_findings_at_or_above_fail_on(demo, fail_on, counted):
    result, _ = demo
    root = _junit(demo, fail_on)
    _check_counts(root)
    expected = sum(1 for f in result.findings if f.severity in counted)
    assert len(list(root.iter("failure"))) == expected
    assert int(root.get("failures")) == expected
    if fail_on in ("fail", "risk"):
        assert expected > 0  # the demo chip has both


def test_junit_structure(demo):
    result, deck = demo
    root = _junit(demo)
    suites = root.findall("testsuite")
    assert [s.get("name") for s in suites] == [f"pitchguard.{st.name}" for st in result.layers]
    fail_findings = [f for f in result.findings if f.severity == "fail"]
    below = [f for f in result.findings if f.severity != "fail"]
    all_out = ""
    for suite, st in zip(suites, result.layers, strict=True):
        props = {p.get("name"): p.get("value") for p in suite.find("properties")}
        assert props["deck"] == deck.name
        assert props["layout"].endswith("demo_chip.gds")
        assert props["layer"] == st.name and props["source"] == st.source
        assert props["fail_on"] == "fail"
        cases = suite.findall("testcase")
        covered = set()
        for c in cases:
            failure = c.find("failure")
            if failure is None:
                assert c.get("classname") == f"pitchguard.{st.name}"
                covered.add(c.get("name"))
            else:
                check = failure.get("type")
                assert c.get("classname") == f"pitchguard.{st.name}.{check}"
                assert c.get("name").startswith(f"{check} at (")
                assert c.get("name").endswith(") um")
                assert failure.get("message")
                line = failure.text
                assert line.startswith("fail | ") and "fix: " in line
                assert any(w in line for w in ("pitch ", "gap ", "lattice ", "on its own"))
                covered.add(check)
        assert covered == set(CHECKS)  # every check of every layer is visible
        all_out += "\n".join(o.text or "" for o in suite.iter("system-out")) + "\n"
    # each failing finding is one failure; each finding below fail_on one system-out line
    assert len(list(root.iter("failure"))) == len(fail_findings)
    out_lines = [ln for ln in all_out.splitlines() if ln.strip()]
    assert len(out_lines) == len(below)
    assert Counter(ln.split(" | ")[0] for ln in out_lines) == Counter(f.severity for f in below)


# --------------------------------------------------------------------- writers


def test_writers_write_atomically_and_refuse_inputs(demo, tmp_path, validator):
    result, deck = demo
    sarif_out = tmp_path / "findings.sarif"
    junit_out = tmp_path / "findings.xml"
    write_sarif(sarif_out, result, deck, DEMO_GDS, "fail")
    write_junit(junit_out, result, deck, "fail")
    assert _errors(validator, json.loads(sarif_out.read_text(encoding="utf-8"))) == []
    root = ET.parse(junit_out).getroot()
    _check_counts(root)
    assert int(root.get("failures")) == sum(1 for f in result.findings if f.severity == "fail")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["findings.sarif", "findings.xml"]

    before = DEMO_DECK.read_bytes()
    with pytest.raises(OutputError):
        write_sarif(DEMO_DECK, result, deck, DEMO_GDS, "fail")
    with pytest.raises(OutputError):
        write_junit(DEMO_GDS, result, deck, "fail")
    assert DEMO_DECK.read_bytes() == before


def test_a_sarif_too_big_for_code_scanning_services_gets_a_note(tmp_path, monkeypatch, capsys):
    """GitHub's code scanning rejects a run of more than 25,000 results (GitHub Docs,
    "SARIF results exceed limits": hard limit, results per run).  A full chip can
    have far more; the file is still written (valid SARIF), and the command says
    so on stderr, with --quiet too (CI runs quiet).  The limit is lowered here to
    one below the demo chip's findings."""
    import pitchguard.outputs.sarif as sarif
    from pitchguard.cli.app import main

    assert sarif.SERVICE_RESULTS_MAX == 25_000
    out = tmp_path / "demo.sarif"
    args = ["scan", str(DEMO_GDS), "--rules", str(DEMO_DECK), "--sarif", str(out), "-q"]
    assert main(args) == 1
    assert "code-scanning services" not in capsys.readouterr().err
    n = len(json.loads(out.read_text(encoding="utf-8"))["runs"][0]["results"])
    assert n > 10
    monkeypatch.setattr(sarif, "SERVICE_RESULTS_MAX", n - 1)
    assert main(args) == 1
    err = capsys.readouterr().err
    assert err.count(f"holds {n} results; code-scanning services take at most {n - 1}") == 1, err
    assert len(json.loads(out.read_text(encoding="utf-8"))["runs"][0]["results"]) == n
