"""SARIF 2.1.0 report for code-scanning services."""

from __future__ import annotations

import hashlib
import math
from collections.abc import Sequence
from pathlib import Path

from pitchguard import __version__
from pitchguard.deck import Deck
from pitchguard.judge.checks import CHECKS
from pitchguard.judge.findings import Finding, FindingSet
from pitchguard.judge.per_cell import CellFinding, cell_findings
from pitchguard.outputs.json_report import entry_to_dict, finding_to_dict, write_json
from pitchguard.outputs.locations import artifact_location
from pitchguard.outputs.rows import Rows
from pitchguard.outputs.texts import cell_sentence, describe, reaches_fail_on
from pitchguard.outputs.verdict import CAUTION, exit_code
from pitchguard.run.scan import ScanResult

SARIF_VERSION = "2.1.0"


SARIF_SCHEMA_URI = (
    "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
)
"""The OASIS SARIF 2.1.0 schema (errata 01): the ``id`` of the schema the tests use."""


LEVEL = {"fail": "error", "risk": "warning", "marginal": "note"}
"""SARIF result level of each pitchguard severity."""


FINGERPRINT_KEY = "pitchguardRegion/v2"
"""Key of our entry in ``result.partialFingerprints`` (bump the version if the recipe changes)."""


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
        "flags": "Regions where the normalised image log-slope (NILS) at the printed edges "
        "is below the layer's bands (defaults: fail below 1.0, risk below 1.5, marginal "
        "below 2.0).",
        "why": "NILS measures how sharply the image switches from dark to bright at the "
        "feature edge. With a shallow edge, small changes of dose, focus or resist move "
        "the printed edge a lot: the line width varies and the edges roughen. Below "
        "about 1 the edge is not controllable.",
        "change": "Move the pitch (or the width) to the value in the hint, which names "
        "the nearest pitch at which this cut, respaced, and an ideal grating pass every "
        "limit of the layer.",
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
    "edge-placement": {
        "worst": "risk",
        "flags": "Regions where a printed edge, at best focus and nominal dose, sits "
        "further from the drawn edge than edge_placement_max_pct of the drawn width "
        "(default half of cd_tolerance_pct): the feature prints shifted, or off its size.",
        "why": "A feature printed off its place misses what it must connect to or comes "
        "too close to its neighbour; it typically happens where the neighbourhood is "
        "not symmetric, such as the last line of an array.",
        "change": "Move the drawn edges the other way by the shift in the hint (the bias "
        "OPC would give them), or make the neighbourhood symmetric, for example with a "
        "dummy feature beyond the last line of an array.",
    },
    "sizing-bias": {
        "worst": "fail",
        "flags": 'On layers judged as OPC would size them (sizing = "retarget"): regions '
        "whose mask needs a bias beyond bias_max_nm per edge to print the drawn width at "
        "the anchored dose (risk), or where no bias does before a space closes or the "
        "feature vanishes (fail).",
        "why": "Every correction costs mask and process margin, and some cannot be made: "
        "the feature cannot print on size at the layer's dose whatever its mask.",
        "change": "Move the pitch or width towards the layer's anchor geometry, or agree "
        "the bias with the fab's OPC.",
    },
    "side-lobe-printing": {
        "worst": "fail",
        "flags": "Regions where the aerial image prints in the space beside a feature, "
        "apart from the feature and its neighbour: at nominal dose and best focus (fail), "
        "or at some focus of the layer's range with the dose el_min_pct / 2 % off nominal "
        "(risk).",
        "why": "A spurious feature prints on the wafer: an extra trench or hole between "
        "openings, typically with attenuated phase-shift masks, whose light interferes "
        "constructively between neighbouring openings at certain pitches.",
        "change": "Move the pitch away from the one where the neighbours' side lobes add "
        "up, widen the space, add assist or dummy features agreed with the fab, or lower "
        "the mask's transmission.",
    },
    "line-end-bridged": {
        "worst": "fail",
        "flags": "Line ends whose gap to what they face (another line end, or a line's "
        "side, within lambda/NA) does not print open on a 2-D image of the tip and its "
        "surroundings: at best focus and nominal dose (fail), or at some focus within the "
        "layer's focus range (risk).",
        "why": "The two lines print as one: a short circuit on a wiring layer, a joined "
        "gate on poly. Line ends blur in two directions at once, so a gap closes long "
        "before a space of the same width between two long lines does.",
        "change": "Widen the gap, or shorten one of the lines. Mask correction can move "
        "a line end a little but cannot open a gap the optics cannot resolve.",
    },
    "line-end-pullback": {
        "worst": "risk",
        "flags": "Line ends whose printed tip falls short of the drawn one by more than "
        "line_end_pullback_max_nm, on a 2-D image at best focus and nominal dose.",
        "why": "A line end that prints short can miss the via or contact it should "
        "cover, or leave a gate short of the active it should cross. Mask correction "
        "extends line ends, but only by so much.",
        "change": "Extend the drawn line end (or its enclosure of the via), or check that "
        "the fab's mask correction makes up the pullback for this layer.",
    },
}


def rule_name(check: str) -> str:
    """CamelCase name of a check id: ``low-k1`` -> ``LowK1``."""
    return "".join(part[:1].upper() + part[1:] for part in check.split("-"))


def check_page(check: str) -> str:
    """The documentation page of a check, relative to the project's sources (a
    path, not a URI: SARIF's helpUri must be absolute, and the pages are read
    where the sources are)."""
    return f"rules/checks/{check}.md"


def sarif_rule(check: str) -> dict:
    """The SARIF reportingDescriptor of a check."""
    short = CHECKS.get(check, check)
    info = _RULE_HELP.get(check)
    if info is None:  # a check added to CHECKS without help here: still a valid rule
        info = {"worst": "fail", "flags": short, "why": "", "change": "See the finding's hint."}
    full = f"{info['flags']} {info['why']}".strip()
    page = check_page(check)
    text = (
        f"What it flags: {info['flags']}\n\n"
        f"Why it matters for printing: {info['why']}\n\n"
        f"What to change: {info['change']}\n\n"
        f"More: {page} in the pitchguard sources.\n\n"
        f"{CAUTION}"
    )
    markdown = (
        f"**What it flags.** {info['flags']}\n\n"
        f"**Why it matters for printing.** {info['why']}\n\n"
        f"**What to change.** {info['change']}\n\n"
        f"More: `{page}` in the pitchguard sources.\n\n"
        f"_{CAUTION}_"
    )
    return {
        "id": check,
        "name": rule_name(check),
        "shortDescription": {"text": short},
        "fullDescription": {"text": full},
        "help": {"text": text, "markdown": markdown},
        "defaultConfiguration": {"level": LEVEL[info["worst"]]},
        "properties": {"tags": ["lithography", "printability"], "documentation": page},
    }


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


SERVICE_RESULTS_MAX = 25_000
"""Results per run a code-scanning service accepts: GitHub's documented hard
limit ("Results per run: 25,000", GitHub Docs, SARIF results exceed limits).
A file with more is still valid SARIF; the command says so when it writes one."""


PLACED_LISTED = 1000
"""Placement origins a SARIF result lists (the JSON report lists them all)."""


def entry_fingerprints(entries: Sequence[CellFinding]) -> list[str]:
    """Stable fingerprint per report entry: what it is and its cell, hashed, plus
    ``:n``, its occurrence among equals numbered by place in the cell's own frame
    (an order that moving or adding placements of the cell keeps)."""
    bases = []
    for c in entries:
        base = fingerprint_base(c.finding)
        if c.cell:
            base = hashlib.sha256(f"{base}|{c.cell}".encode()).hexdigest()[:32]
        bases.append(base)
    rank = [(bases[k], *c.cell_bbox_nm, c.finding.severity_rank, k) for k, c in enumerate(entries)]
    out = [""] * len(entries)
    seen: dict[str, int] = {}
    for key in sorted(rank):
        n = seen[key[0]] = seen.get(key[0], 0) + 1
        out[key[-1]] = f"{key[0]}:{n}"
    return out


def _capped(row: dict) -> dict:
    """An entry's placements with at most :data:`PLACED_LISTED` origins listed."""
    left = PLACED_LISTED
    placed = []
    for g in row["placed"]:
        n = min(left, len(g["origins_um"]) // 2)
        placed.append({**g, "origins_um": g["origins_um"][: 2 * n]})
        left -= n
    row["placed"] = [g for g in placed if g["origins_um"]]
    row["placed_listed"] = sum(len(g["origins_um"]) // 2 for g in row["placed"])
    return row


def to_sarif(
    result: ScanResult,
    deck: Deck,
    layout_path: Path,
    fail_on: str,
    lazy: bool = False,
    root: str | Path | None = None,
) -> dict:
    """A SARIF 2.1.0 log of a scan: one run, one rule per check, one result per report
    entry (a distinct finding of a cell, with its placements).

    With ``lazy`` the results are :class:`~pitchguard.outputs.rows.Rows`, made as
    they are written (for :func:`write_sarif`).  The layout's location is
    relative to ``root`` (see :func:`~pitchguard.outputs.locations.artifact_location`).
    """
    # A check missing from CHECKS (not expected) still gets a rule, after the known ones.
    fs = FindingSet.of(result.findings)
    present = {f.check for f, n in zip(fs.distinct, fs.counts().tolist(), strict=True) if n}
    checks = list(CHECKS) + sorted(present - set(CHECKS))
    rules = [sarif_rule(c) for c in checks]
    location, bases = artifact_location(Path(layout_path), root)
    cells = list(result.layout.cells) if result.layout else []
    entries = cell_findings(result)
    fps = entry_fingerprints(entries)
    rule_index = {c: k for k, c in enumerate(checks)}

    def result_of(k: int) -> dict:
        c = entries[k]
        f = c.finding
        # Logical locations.  A cell is a named, self-contained unit of design that
        # other cells instantiate, the layout's counterpart of a code module: kind
        # "module".  A layer is a part of every cell (the shapes drawn on it), as a
        # member is part of a type: kind "member", with the cell as parent, and the
        # layout's "layer/datatype" as its machine-readable (decorated) name.
        if c.cell:
            logical = [{"name": c.cell, "fullyQualifiedName": "/".join(c.path), "kind": "module"}]
            owner = c.cell
        else:
            logical = [{"name": n, "kind": "module"} for n in cells]
            owner = cells[0] if len(cells) == 1 else ""
        logical.append(
            {
                "name": f.layer,
                "fullyQualifiedName": f"{owner}/{f.layer}" if owner else f.layer,
                "decoratedName": f.source,
                "kind": "member",
            }
        )
        props = _capped(entry_to_dict(c)) if c.cell else finding_to_dict(f)
        props["fail_on"] = fail_on
        props["at_or_above_fail_on"] = reaches_fail_on(f, fail_on)
        return {
            "ruleId": f.check,
            "ruleIndex": rule_index[f.check],
            "level": LEVEL[f.severity],
            "message": {"text": describe(f) + cell_sentence(c)},
            "locations": [
                {
                    "physicalLocation": {"artifactLocation": dict(location)},
                    "logicalLocations": logical,
                }
            ],
            "partialFingerprints": {FINGERPRINT_KEY: fps[k]},
            "properties": props,
        }

    rows = Rows(range(len(entries)), result_of)
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
        **({"originalUriBaseIds": bases} if bases else {}),
        "invocations": [invocation],
        "results": results,  # present even when empty: "scanned, nothing found"
        "properties": run_props,
    }
    return {"$schema": SARIF_SCHEMA_URI, "version": SARIF_VERSION, "runs": [run]}


def default_inputs(layout_path: Path, deck: Deck) -> list[Path]:
    return [Path(layout_path)] + ([Path(deck.path)] if deck.path else [])


def write_sarif(
    out: Path,
    result: ScanResult,
    deck: Deck,
    layout_path: Path,
    fail_on: str,
    inputs: list[Path] | None = None,
    root: str | Path | None = None,
) -> int:
    """Write :func:`to_sarif` to ``out`` atomically (never over an input file);
    the number of results written."""
    log = to_sarif(result, deck, layout_path, fail_on, lazy=True, root=root)
    write_json(
        out,
        log,
        inputs if inputs is not None else default_inputs(layout_path, deck),
        ensure_ascii=False,
    )
    return len(log["runs"][0]["results"])
