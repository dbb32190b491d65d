"""CI report formats: SARIF 2.1.0 (code-scanning services) and JUnit XML (test dashboards).

Both render the same :class:`~pitchguard.classify.Finding` records as the JSON
report; neither recomputes physics.

SARIF
    One run.  ``tool.driver.rules`` has one rule per check id in
    :data:`~pitchguard.classify.CHECKS` (same order), each with a designer's
    help text.  One result per finding; its level follows the severity
    (``fail`` -> ``error``, ``risk`` -> ``warning``, ``marginal`` -> ``note``).
    The physical location is the layout file only: a layout has no lines or
    columns, so no ``region`` is given; the place on the chip is in the
    result's ``properties`` (``bbox_um``, ``centre_um``, ``outline_um``) and in
    the message.  ``partialFingerprints`` hold a hash of what the region *is*
    (layer, check, pitch, width, space, line direction), not where it is, so a
    layout shifted as a whole keeps its fingerprints; identical hashes get an
    occurrence suffix ``:1``, ``:2`` ... in order of position.

JUnit XML
    ``<testsuites>`` with one ``<testsuite>`` per deck layer.  The choice made
    so that *the number of failures equals the number of findings at or above
    fail_on*, whichever way a dashboard counts:

    * every finding at or above ``fail_on`` is its own ``<testcase>``
      (classname ``pitchguard.<layer>.<check>``, name ``<check> at (x, y) um``)
      holding exactly one ``<failure type="<check>">`` (one line: severity,
      location, pitch, message, hint);
    * every layer x check pair with no such finding is one passing
      ``<testcase>`` (classname ``pitchguard.<layer>``, name ``<check>``); the
      pair's findings below ``fail_on``, if any, are listed one a line in its
      ``<system-out>``;
    * a pair that has failing findings gets no passing testcase (a dashboard
      would show it as "passed" next to its failures); its findings below
      ``fail_on`` are listed in the ``<system-out>`` of the layer's testsuite.

    So ``failures`` (on ``<testsuites>`` and summed over ``<testsuite>``) and
    the count of ``<failure>`` elements both equal the number of findings at
    or above ``fail_on``; ``errors`` and ``skipped`` are 0.  Each testsuite
    carries ``<properties>`` naming the deck, the layout, the layer's
    source and exposure, ``fail_on`` and the screening caution.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import urllib.parse
import xml.etree.ElementTree as ET
from collections.abc import Iterator, Sequence
from pathlib import Path
from xml.sax.saxutils import escape

import numpy as np

from pitchguard import __version__
from pitchguard.classify import CHECKS, Finding, FindingSet
from pitchguard.deck import SEVERITIES, Deck
from pitchguard.report import (
    CAUTION,
    PlacedRows,
    Rows,
    atomic_write,
    exit_code,
    fill_templates,
    finding_to_dict,
    hole,
    placed_fields,
    placed_numbers,
    write_json,
)
from pitchguard.scan import ScanResult

SARIF_VERSION = "2.1.0"
SARIF_SCHEMA_URI = (
    "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
)
"""The OASIS SARIF 2.1.0 schema (errata 01): the ``id`` of the schema the tests use."""

LEVEL = {"fail": "error", "risk": "warning", "marginal": "note"}
"""SARIF result level of each pitchguard severity."""

FINGERPRINT_KEY = "pitchguardRegion/v1"
"""Key of our entry in ``result.partialFingerprints`` (bump the version if the recipe changes)."""

# ------------------------------------------------------------------- rule help
#
# Per check: the worst severity it can raise (its SARIF defaultConfiguration
# level) and the help a layout designer reads in a code-scanning alert:
# what it flags, why it matters for printing, what to change.

_RULE_HELP: dict[str, dict[str, str]] = {
    "unresolvable-pitch": {
        "worst": "fail",
        "flags": "Line/space regions whose pitch is smaller than the smallest pitch the "
        "layer's exposure (wavelength, NA, illumination) can image in the direction of "
        "the lines.",
        "why": "Only the undiffracted (0th) order gets through the projection lens: the "
        "image carries no pattern and the lines do not print at all, whatever the dose, "
        "focus or mask correction. The limit depends on direction: a dipole source "
        "images lines across its poles at a much tighter pitch than lines along them.",
        "change": "Widen the pitch to at least the value in the finding's hint, turn the "
        "lines to the direction the illumination serves, or move the layer to an exposure "
        "set-up that resolves this pitch.",
    },
    "feature-not-printed": {
        "worst": "fail",
        "flags": "Regions where the simulated image of the feature (a line on a clear "
        "field, an opening on a dark one) never crosses the print threshold at best "
        "focus and nominal dose.",
        "why": "The feature is missing on the wafer. It happens near the resolution limit "
        "and often at the last line of an array, which images worse than the lines in "
        "the middle.",
        "change": "Widen the feature or the pitch (the hint gives the nearest pitch that "
        "passes at this width). At the edge of an array, a dummy line beyond the last "
        "real one makes it image like the interior lines.",
    },
    "features-bridged": {
        "worst": "fail",
        "flags": "Regions where the printed feature runs into its neighbour: the image "
        "never crosses the threshold inside the space, at best focus and nominal dose.",
        "why": "Neighbouring features merge on the wafer: lines short together, or "
        "openings join into one.",
        "change": "Widen the space (the hint gives the nearest pitch that passes at this "
        "width), or narrow the feature.",
    },
    "low-k1": {
        "worst": "risk",
        "flags": "Regions whose k1 = (pitch / 2) x NA / wavelength is below the layer's "
        "risk band (k1_risk_below, default 0.30) or marginal band (k1_marginal_below, "
        "default 0.40).",
        "why": "k1 says how hard the pitch is for the scanner. Below about 0.3 it needs "
        "strong off-axis illumination and resolution enhancement, 0.3 to 0.4 is "
        "demanding, above about 0.5 is comfortable. The lower k1, the smaller the dose "
        "and focus window the fab has.",
        "change": "Relax the pitch towards the value in the hint (the pitch that reaches "
        "the layer's marginal band), or accept the risk with the fab's agreement.",
    },
    "low-nils": {
        "worst": "fail",
        "flags": "Regions where the normalised image log-slope (NILS) at the drawn edges "
        "is below the layer's bands (defaults: fail below 1.0, risk below 1.5, marginal "
        "below 2.0).",
        "why": "NILS measures how sharply the image switches from dark to bright at the "
        "feature edge. With a shallow edge, small changes of dose, focus or resist move "
        "the printed edge a lot: the line width varies and the edges roughen. Below "
        "about 1 the edge is not controllable.",
        "change": "Move the pitch (or the width) to the value in the hint, which names "
        "the nearest pitch whose ideal grating passes every limit of the layer.",
    },
    "low-exposure-latitude": {
        "worst": "risk",
        "flags": "Regions where the dose range that keeps the printed width within "
        "tolerance (cd_tolerance_pct) is smaller than el_min_pct of the dose.",
        "why": "Every scanner and wafer varies in dose. With little exposure latitude, "
        "normal dose variation prints this pattern out of its width tolerance.",
        "change": "Move the pitch or width to the value in the hint; patterns close to the "
        "layer's anchor (dose-to-size) geometry usually have the most latitude.",
    },
    "low-depth-of-focus": {
        "worst": "risk",
        "flags": "Regions where the focus range that keeps the printed width within "
        "tolerance, with el_min_pct of exposure latitude, is shorter than dof_min_nm.",
        "why": "Wafer topography, flatness and scanner focus errors use up the focus "
        "budget; a pattern with less depth of focus than that prints out of tolerance. "
        "With off-axis illumination tuned for the densest pitch, some larger pitches "
        "lose their depth of focus (forbidden pitches).",
        "change": "Avoid this pitch: the hint gives the nearest pitch that passes; "
        "`pitchguard sweep` shows the layer's forbidden pitch bands for this width.",
    },
    "cd-error": {
        "worst": "risk",
        "flags": "Regions whose printed width at the layer's anchored dose differs from "
        "the drawn width by more than cd_tolerance_pct (iso-dense bias).",
        "why": "One dose prints the whole layer. A pattern that prints too wide or too "
        "narrow at that dose needs a correction of the mask (bias or OPC); large "
        "corrections cost process margin and may not be possible at all.",
        "change": "Move the pitch or width towards the layer's anchor geometry, or make "
        "sure the fab's mask correction covers this pattern.",
    },
}


def rule_name(check: str) -> str:
    """CamelCase name of a check id: ``low-k1`` -> ``LowK1``."""
    return "".join(part[:1].upper() + part[1:] for part in check.split("-"))


def _rule(check: str) -> dict:
    short = CHECKS.get(check, check)
    info = _RULE_HELP.get(check)
    if info is None:  # a check added to CHECKS without help here: still a valid rule
        info = {"worst": "fail", "flags": short, "why": "", "change": "See the finding's hint."}
    full = f"{info['flags']} {info['why']}".strip()
    text = (
        f"What it flags: {info['flags']}\n\n"
        f"Why it matters for printing: {info['why']}\n\n"
        f"What to change: {info['change']}\n\n"
        f"{CAUTION}"
    )
    markdown = (
        f"**What it flags.** {info['flags']}\n\n"
        f"**Why it matters for printing.** {info['why']}\n\n"
        f"**What to change.** {info['change']}\n\n"
        f"_{CAUTION}_"
    )
    return {
        "id": check,
        "name": rule_name(check),
        "shortDescription": {"text": short},
        "fullDescription": {"text": full},
        "help": {"text": text, "markdown": markdown},
        "defaultConfiguration": {"level": LEVEL[info["worst"]]},
        "properties": {"tags": ["lithography", "printability"]},
    }


# ------------------------------------------------------------------- helpers


def _nm(x: float, digits: int = 1) -> str:
    return f"{x:.{digits}f}" if math.isfinite(x) else "-"


def _at_or_above(f: Finding, fail_on: str) -> bool:
    if fail_on == "never":
        return False
    return f.severity_rank <= SEVERITIES.index(fail_on)


def _um(x: float) -> str:
    """Micrometres as drawn, to the 0.1 nm the report keeps, without trailing zeros."""
    text = f"{x:.4f}".rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def _where(f: Finding) -> str:
    return _where_text(f.centre_um)


def _where_text(centre_um) -> str:
    return f"({_um(centre_um[0])}, {_um(centre_um[1])}) um"


def _box_text(bbox_um) -> str:
    x0, y0, x1, y1 = (_um(v) for v in bbox_um)
    return f"{x0}, {y0} to {x1}, {y1}"


def describe(f: Finding, holes: bool = False) -> str:
    """One sentence a designer can act on: layer, place, pitch, what tripped, the fix.
    With ``holes`` the place is left as markers (see report.PlacedRows)."""
    where = hole("where", in_text=True) if holes else _where(f)
    box = hole("box", in_text=True) if holes else _box_text(f.bbox_um)
    return (
        f"{f.severity} on layer {f.layer} ({f.source}): region centred at "
        f"{where} (box {box} um), "
        f"{f.lines} lines ({f.periodicity}) running at {f.orientation_deg:g} deg, "
        f"pitch {_nm(f.pitch_nm)} nm (width {_nm(f.width_nm)} / space {_nm(f.space_nm)} nm), "
        f"k1 {f.k1:.3f}. {f.check}: {f.message}. Fix: {f.hint}."
    )


def _artifact_uri(layout_path: Path) -> str:
    """The layout relative to the current directory when it lies inside it, else a file URI."""
    p = Path(layout_path)
    cwd = Path.cwd()
    for a, b in ((p.absolute(), cwd.absolute()), (p.resolve(), cwd.resolve())):
        try:
            rel = a.relative_to(b)
        except ValueError:
            continue
        # Percent-encode (spaces, '%', '#', and ':' which would read as a scheme).
        return urllib.parse.quote(rel.as_posix(), safe="/")
    return p.resolve().as_uri()


def _fp_value(x: float) -> str:
    if not math.isfinite(x):
        return "inf" if x > 0 else "nan"
    return f"{round(x):d}"


def fingerprint_base(f: Finding) -> str:
    """Hash of what a region is, not where: layer, check, pitch, width, space, direction.

    Lengths are rounded to whole nanometres and the line direction to whole
    degrees (mod 180), so grid snapping of rotated geometry does not change it.
    """
    orient = round(f.orientation_deg) % 180
    key = "|".join(
        (
            "v1",
            f.layer,
            f.check,
            _fp_value(f.pitch_nm),
            _fp_value(f.width_nm),
            _fp_value(f.space_nm),
            str(orient),
        )
    )
    return hashlib.sha256(key.encode("utf-8")).hexdigest()[:32]


def fingerprints(findings: Sequence[Finding], compact: bool = False) -> Sequence[str]:
    """Stable fingerprint per finding: base hash plus ``:n``, the occurrence among equals.

    Equal base hashes are numbered in order of position (lower-left corner,
    x then y, then severity), an order a translation of the whole layout
    keeps.  Worked out on columns: a base depends only on what a finding is,
    so a FindingSet's distinct findings are hashed once.
    """
    fs = FindingSet.of(findings)
    n = len(fs)
    if n == 0:
        return []
    # ``compact``: the same texts, made when read (see _Fingerprints).
    names: dict[str, int] = {}
    d_base = np.array(
        [names.setdefault(fingerprint_base(f), len(names)) for f in fs.distinct], dtype=np.int64
    )
    d_rank = np.array([f.severity_rank for f in fs.distinct], dtype=np.int64)
    base, rank, box = d_base[fs.which], d_rank[fs.which], fs.boxes()
    # By base, then box (x0, y0, x1, y1) and severity; ties keep the findings' order.
    order = np.lexsort((rank, box[:, 3], box[:, 2], box[:, 1], box[:, 0], base))
    sorted_base = base[order]
    first = np.r_[True, sorted_base[1:] != sorted_base[:-1]]
    occurrence = np.arange(n) - np.maximum.accumulate(np.where(first, np.arange(n), 0)) + 1
    text = list(names)
    if compact:
        item_occ = np.empty(n, dtype=np.int64)
        item_occ[order] = occurrence
        return _Fingerprints(text, base, item_occ)
    out = [""] * n
    for i, b, k in zip(order.tolist(), sorted_base.tolist(), occurrence.tolist(), strict=True):
        out[i] = f"{text[b]}:{k}"
    return out


class _Fingerprints(Sequence):
    """:func:`fingerprints` as columns (base hash and occurrence per finding), each
    text made when read: a chip's 10^5-10^6 strings are not all held at once."""

    def __init__(self, text: list[str], base: np.ndarray, occurrence: np.ndarray):
        self.text, self.base, self.occurrence = text, base, occurrence

    def __len__(self) -> int:
        return len(self.base)

    def __getitem__(self, k):
        if isinstance(k, slice):
            return [self[i] for i in range(*k.indices(len(self)))]
        return f"{self.text[self.base[k]]}:{self.occurrence[k]}"


# ------------------------------------------------------------------- SARIF

SERVICE_RESULTS_MAX = 25_000
"""Results per run a code-scanning service accepts: GitHub's documented hard
limit ("Results per run: 25,000", GitHub Docs, SARIF results exceed limits).
A file with more is still valid SARIF; the command says so when it writes one."""


def to_sarif(
    result: ScanResult, deck: Deck, layout_path: Path, fail_on: str, lazy: bool = False
) -> dict:
    """A SARIF 2.1.0 log of a scan: one run, one rule per check, one result per finding.

    With ``lazy`` the results are :class:`~pitchguard.report.Rows`, made as
    they are written (for :func:`write_sarif`).
    """
    # A check missing from CHECKS (not expected) still gets a rule, after the known ones.
    fs = FindingSet.of(result.findings)
    present = {f.check for f, n in zip(fs.distinct, fs.counts().tolist(), strict=True) if n}
    checks = list(CHECKS) + sorted(present - set(CHECKS))
    rules = [_rule(c) for c in checks]
    uri = _artifact_uri(layout_path)
    cells = list(result.layout.cells) if result.layout else []
    fps = fingerprints(result.findings, compact=lazy)
    rule_index = {c: k for k, c in enumerate(checks)}

    def result_of(k: int, f: Finding | None = None, holes: bool = False) -> dict:
        if f is None:
            f = result.findings[k]
        fp = hole("fp") if holes else fps[k]
        # Logical locations.  A cell is a named, self-contained unit of design that
        # other cells instantiate, the layout's counterpart of a code module: kind
        # "module".  A layer is a part of every cell (the shapes drawn on it), as a
        # member is part of a type: kind "member", with the cell as parent when the
        # scan had one top cell, and the layout's "layer/datatype" as its
        # machine-readable (decorated) name.
        logical = [{"name": c, "kind": "module"} for c in cells]
        layer_loc = {
            "name": f.layer,
            "fullyQualifiedName": f"{cells[0]}/{f.layer}" if len(cells) == 1 else f.layer,
            "decoratedName": f.source,
            "kind": "member",
        }
        logical.append(layer_loc)
        props = finding_to_dict(f, holes)
        props["fail_on"] = fail_on
        props["at_or_above_fail_on"] = _at_or_above(f, fail_on)
        return {
            "ruleId": f.check,
            "ruleIndex": rule_index[f.check],
            "level": LEVEL[f.severity],
            "message": {"text": describe(f, holes)},
            "locations": [
                {
                    "physicalLocation": {"artifactLocation": {"uri": uri}},
                    "logicalLocations": logical,
                }
            ],
            "partialFingerprints": {FINGERPRINT_KEY: fp},
            "properties": props,
        }

    rows: Rows
    if isinstance(result.findings, FindingSet):
        fs_ = result.findings

        def fill(k: int, f: Finding, dx: float, dy: float) -> dict[str, str]:
            numbers = placed_numbers(f, dx, dy)
            out = placed_fields(f, dx, dy, numbers)
            out["where"] = _where_text(numbers[1])
            out["box"] = _box_text(numbers[0])
            out["fp"] = json.dumps(fps[k])
            return out

        rows = PlacedRows(
            fs_, result_of, lambda d: result_of(-1, fs_.distinct[d], holes=True), fill
        )
    else:
        rows = Rows(range(len(result.findings)), result_of)
    results = rows if lazy else list(rows)
    run_props = {
        "caution": CAUTION,
        "deck": {
            "name": deck.name,
            "path": str(deck.path) if deck.path else None,
            "drawn_scale": deck.drawn_scale,
            "reduction": deck.reduction,
        },
        "layout": {
            "path": str(layout_path),
            "format": result.layout.format if result.layout else None,
            "cells": cells,
        },
        "fail_on": fail_on,
    }
    invocation: dict = {
        "executionSuccessful": True,
        "exitCode": exit_code(result.findings, fail_on),
    }
    if result.warnings:
        invocation["toolExecutionNotifications"] = [
            {"level": "warning", "message": {"text": f"layout library: {w}"}}
            for w in result.warnings
        ]
    run = {
        "tool": {
            "driver": {
                "name": "pitchguard",
                "version": __version__,
                "semanticVersion": __version__,
                "rules": rules,
            }
        },
        "invocations": [invocation],
        "results": results,  # present even when empty: "scanned, nothing found"
        "properties": run_props,
    }
    return {"$schema": SARIF_SCHEMA_URI, "version": SARIF_VERSION, "runs": [run]}


def _default_inputs(layout_path: Path, deck: Deck) -> list[Path]:
    return [Path(layout_path)] + ([Path(deck.path)] if deck.path else [])


def write_sarif(
    out: Path,
    result: ScanResult,
    deck: Deck,
    layout_path: Path,
    fail_on: str,
    inputs: list[Path] | None = None,
) -> None:
    """Write :func:`to_sarif` to ``out`` atomically (never over an input file)."""
    log = to_sarif(result, deck, layout_path, fail_on, lazy=True)
    write_json(
        out,
        log,
        inputs if inputs is not None else _default_inputs(layout_path, deck),
        ensure_ascii=False,
    )


# ------------------------------------------------------------------- JUnit

_XML_BAD = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _x(text: str) -> str:
    """Drop characters XML 1.0 cannot hold (a deck may name a layer with anything)."""
    return _XML_BAD.sub("", str(text))


_WHERE = "\ue000where\ue000"
"""Marks the place in a text made once per distinct finding (a private-use
character: XML holds it as it is, and no layer or message uses it)."""


def _placed_texts(fs: FindingSet, make) -> Iterator[str]:
    """``make(f, where)`` for each item of ``fs``: made once per distinct finding with
    the place marked, then the place of each item put in (the same text as
    ``make`` of the moved finding and its ``_where``, at a fraction of the cost)."""

    def split(d: int) -> list[str]:
        texts = make(fs.distinct[d], _WHERE).split(_WHERE)
        return [p for t in texts for p in (t, "where")][:-1]

    return fill_templates(
        fs, split, lambda k, f, dx, dy: {"where": _where_text(placed_numbers(f, dx, dy)[1])}
    )


def finding_line(f: Finding, where: str | None = None) -> str:
    """One line per finding: severity, location, pitch, message, hint."""
    return (
        f"{f.severity} | {f.layer} ({f.source}) at {where or _where(f)} | "
        f"pitch {_nm(f.pitch_nm)} nm "
        f"(width {_nm(f.width_nm)} / space {_nm(f.space_nm)} nm, k1 {f.k1:.3f}, {f.lines} lines) "
        f"| {f.message} | fix: {f.hint}"
    )


def _junit_suites(result: ScanResult, deck: Deck, fail_on: str) -> list[tuple]:
    """Per layer: ``(attributes, properties, testcases, system-out lines)``.

    ``testcases()`` makes the suite's ``<testcase>`` elements one at a time, so
    a writer can stream a report of 10^5-10^6 findings.
    """
    # Planned on columns (a FindingSet's, or a list's as one): a chip's findings
    # are made one at a time as their test cases are written.
    fs = FindingSet.of(result.findings)
    present = [f for f, n in zip(fs.distinct, fs.counts().tolist(), strict=True) if n]
    layers = [(st.name, st.source, st.seconds) for st in result.layers]
    known = {name for name, _, _ in layers}
    for f in present:
        if f.layer not in known:
            layers.append((f.layer, f.source, 0.0))
            known.add(f.layer)
    checks = list(CHECKS) + sorted({f.check for f in present} - set(CHECKS))
    exposures = {r.name: r.exposure_name for r in deck.layers}
    layout_path = str(result.layout.path) if result.layout else ""
    rank = {s: k for k, s in enumerate(SEVERITIES)}
    d_rank = np.array([rank[f.severity] for f in fs.distinct], dtype=np.int64)
    pair_id: dict = {}
    d_pair = np.array(
        [pair_id.setdefault((f.layer, f.check), len(pair_id)) for f in fs.distinct], dtype=np.int64
    )
    item_pair, item_rank, box = d_pair[fs.which], d_rank[fs.which], fs.boxes()
    # Per (layer, check): worst first, then by place (as sorted() on (rank, bbox)).
    order = np.lexsort((box[:, 3], box[:, 2], box[:, 1], box[:, 0], item_rank, item_pair))
    cut = np.flatnonzero(np.diff(item_pair[order])) + 1
    by_key = {}
    for idx in np.split(order, cut) if len(order) else []:
        d = fs.distinct[int(fs.which[idx[0]])]
        by_key[(d.layer, d.check)] = idx
    limit = -1 if fail_on == "never" else SEVERITIES.index(fail_on)

    suites = []
    for name, source, seconds in layers:
        props = [
            ("deck", deck.name),
            ("deck_path", str(deck.path) if deck.path else ""),
            ("layout", layout_path),
            ("layer", name),
            ("source", source),
            ("exposure", exposures.get(name, "")),
            ("fail_on", fail_on),
            ("caution", CAUTION),
        ]
        plan = []
        tests = failures = 0
        suite_out: list[FindingSet] = []  # findings below fail_on of failing pairs
        for check in checks:
            found = by_key.get((name, check), np.zeros(0, dtype=np.int64))
            at_or_above = item_rank[found] <= limit
            failing, below = fs.select(found[at_or_above]), fs.select(found[~at_or_above])
            plan.append((check, failing, below))
            if len(failing):
                tests += len(failing)
                failures += len(failing)
                if len(below):
                    suite_out.append(below)
            else:
                tests += 1

        def failing_case(f: Finding, where: str, name=name) -> ET.Element:
            case = ET.Element(
                "testcase",
                classname=_x(f"pitchguard.{name}.{f.check}"),
                name=_x(f"{f.check} at {where}"),
                time="0",
            )
            fail = ET.SubElement(case, "failure", message=_x(f.message), type=f.check)
            fail.text = _x(finding_line(f, where))
            return case

        def testcases(plan=plan, name=name, texts=False, failing_case=failing_case):
            """The suite's test cases; with ``texts`` as indented XML text (level 2)."""
            for check, failing, below in plan:
                if len(failing):
                    if texts:
                        yield from _placed_texts(
                            failing, lambda f, w: _piece(failing_case(f, w), 2)
                        )
                    else:
                        yield from (failing_case(f, _where(f)) for f in failing)
                else:
                    case = ET.Element(
                        "testcase", classname=_x(f"pitchguard.{name}"), name=check, time="0"
                    )
                    if len(below):
                        out = ET.SubElement(case, "system-out")
                        out.text = _x("\n".join(_placed_texts(below, finding_line)))
                    yield _piece(case, 2) if texts else case

        attrs = {
            "name": _x(f"pitchguard.{name}"),
            "tests": str(tests),
            "failures": str(failures),
            "errors": "0",
            "skipped": "0",
            "time": f"{seconds:.3f}",
        }
        suites.append((attrs, props, testcases, suite_out))
    return suites


def _root_attrs(result: ScanResult, suites: list[tuple]) -> dict:
    return {
        "name": "pitchguard",
        "tests": str(sum(int(s[0]["tests"]) for s in suites)),
        "failures": str(sum(int(s[0]["failures"]) for s in suites)),
        "errors": "0",
        "skipped": "0",
        "time": f"{result.seconds:.3f}",
    }


def _properties(props: list) -> ET.Element:
    el = ET.Element("properties")
    for k, v in props:
        ET.SubElement(el, "property", name=k, value=_x(v))
    return el


def _suite_lines(suite_out: list[FindingSet]) -> Iterator[str]:
    for below in suite_out:
        yield from _placed_texts(below, finding_line)


def _suite_out(suite_out: list[FindingSet]) -> ET.Element:
    el = ET.Element("system-out")
    el.text = _x("\n".join(_suite_lines(suite_out)))
    return el


def to_junit_tree(result: ScanResult, deck: Deck, fail_on: str) -> ET.Element:
    """The ``<testsuites>`` element (see the module docstring for the layout)."""
    suites = _junit_suites(result, deck, fail_on)
    root = ET.Element("testsuites", _root_attrs(result, suites))
    for attrs, props, testcases, suite_out in suites:
        suite = ET.SubElement(root, "testsuite", attrs)
        suite.append(_properties(props))
        suite.extend(testcases())
        if suite_out:
            suite.append(_suite_out(suite_out))
    return root


def to_junit(result: ScanResult, deck: Deck, fail_on: str) -> str:
    """JUnit XML text (UTF-8 declaration included) of a scan."""
    root = to_junit_tree(result, deck, fail_on)
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def _start_tag(tag: str, attrs: dict) -> str:
    empty = ET.tostring(ET.Element(tag, attrs), encoding="unicode")  # "<tag ... />"
    return empty[: -len(" />")] + ">"


def _piece(el: ET.Element, level: int) -> str:
    ET.indent(el, level=level)
    el.tail = None
    return "  " * level + ET.tostring(el, encoding="unicode") + "\n"


def write_junit(
    out: Path,
    result: ScanResult,
    deck: Deck,
    fail_on: str,
    inputs: list[Path] | None = None,
) -> None:
    """Write :func:`to_junit`'s text to ``out`` atomically (never over an input file).

    Streamed one ``<testcase>`` at a time: the same text, without the whole
    tree in memory.
    """
    if inputs is None:
        inputs = ([result.layout.path] if result.layout else []) + (
            [Path(deck.path)] if deck.path else []
        )
    suites = _junit_suites(result, deck, fail_on)

    def w(tmp: Path) -> None:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write('<?xml version="1.0" encoding="UTF-8"?>\n')
            if not suites:
                fh.write(
                    ET.tostring(
                        ET.Element("testsuites", _root_attrs(result, suites)), encoding="unicode"
                    )
                    + "\n"
                )
                return
            fh.write(_start_tag("testsuites", _root_attrs(result, suites)) + "\n")
            for attrs, props, testcases, suite_out in suites:
                fh.write("  " + _start_tag("testsuite", attrs) + "\n")
                fh.write(_piece(_properties(props), 2))
                for text in testcases(texts=True):
                    fh.write(text)
                if suite_out:  # a line at a time, as _piece(_suite_out(suite_out), 2) writes it
                    fh.write("    <system-out>")
                    for k, line in enumerate(_suite_lines(suite_out)):
                        fh.write(("\n" if k else "") + escape(_x(line)))
                    fh.write("</system-out>\n")
                fh.write("  </testsuite>\n")
            fh.write("</testsuites>\n")

    atomic_write(out, w, inputs)
