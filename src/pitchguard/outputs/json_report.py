"""The JSON report, streamed."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from pitchguard import __version__
from pitchguard.deck import SEVERITIES, Deck
from pitchguard.judge.findings import Finding, box_um
from pitchguard.judge.per_cell import CellFinding, cell_findings, orientations
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.rows import Rows, placed_numbers
from pitchguard.outputs.verdict import CAUTION, coverage_notes, exit_code, severity_counts
from pitchguard.run.scan import ScanResult


def json_number(x) -> float | None:
    """A plain float, or None for inf and nan (JSON has neither)."""
    x = float(x)
    return x if x - x == 0.0 else None  # inf - inf and nan - nan are nan


def entry_counts(entries: list[CellFinding]) -> dict[str, int]:
    """Distinct findings (report entries) per severity."""
    out = dict.fromkeys(SEVERITIES, 0)
    for c in entries:
        out[c.finding.severity] += 1
    return out


def json_numbers(xs) -> list:
    return [json_number(x) for x in xs]


def _light(exposure) -> dict:
    """The light a layer is imaged with: its polarisation and the medium's index."""
    return {
        "polarization": exposure.polarization,
        "image_index": exposure.image_index,
    }


def clean_json(obj):
    """JSON-safe copy: non-finite floats become null, numpy scalars plain numbers."""
    if isinstance(obj, dict):
        return {k: clean_json(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [clean_json(v) for v in obj]
    if isinstance(obj, float | np.floating):
        return json_number(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


class TextTable(list):
    """The report's long texts (messages, hints), each once: rows refer to them by
    their index in this list, the JSON's top-level ``texts``."""

    def __init__(self):
        super().__init__()
        self._index: dict[str, int] = {}

    def ref(self, text: str) -> int:
        k = self._index.get(text)
        if k is None:
            k = self._index[text] = len(self)
            self.append(text)
        return k


def _inline(text: str) -> str:
    return text


def finding_to_dict(f: Finding, texts: TextTable | None = None) -> dict:
    """A finding as plain JSON values (built field by field: a scan without cells
    reports 10^5-10^6 of these, so no generic cleaning pass).  With ``texts`` the
    message, the hint and each check's message are indexes into that table."""
    text = _inline if texts is None else texts.ref
    b, c, points, o = placed_numbers(f, 0.0, 0.0)
    bbox, centre, outline, origin = (
        json_numbers(b),
        json_numbers(c),
        [json_numbers(p) for p in points],
        json_numbers(o),
    )
    return {
        "layer": f.layer,
        "source": f.source,
        "exposure": f.exposure,
        "check": f.check,
        "severity": f.severity,
        "pitch_nm": json_number(f.pitch_nm),
        "pitch_max_nm": json_number(f.pitch_max_nm),
        "width_nm": json_number(f.width_nm),
        "space_nm": json_number(f.space_nm),
        "wafer_pitch_nm": json_number(f.wafer_pitch_nm),
        "k1": json_number(f.k1),
        "orientation_deg": json_number(f.orientation_deg),
        "bbox_um": bbox,
        "centre_um": centre,
        "outline_um": outline,
        "orders": [int(o) for o in f.orders],
        "orders_on_axis": [int(o) for o in f.orders_on_axis],
        "two_beam_fraction": json_number(f.two_beam_fraction),
        "cutoff_pitch_nm": json_number(f.cutoff_pitch_nm),
        "lines": int(f.lines),
        "periodicity": f.periodicity,
        "sites": int(f.sites),
        "run_nm": json_number(f.run_nm),
        "limit": f.limit,
        "message": text(f.message),
        "hint": text(f.hint),
        "contrast": json_number(f.contrast),
        "nils": json_number(f.nils),
        "printed_cd_nm": json_number(f.cd_nm),
        "cd_error_pct": json_number(f.cd_error_pct),
        "exposure_latitude_pct": json_number(f.el_pct),
        "depth_of_focus_nm": json_number(f.dof_nm),
        "edge_placement_nm": json_number(f.epe_nm),
        "shift_nm": json_number(f.shift_nm),
        "mask_bias_nm": json_number(f.bias_nm),
        "worst_line": f.context or None,
        "cut": {
            "bounds_nm": json_numbers(f.cut_bounds_nm),
            "angle_deg": json_number(f.cut_angle_deg),
            "origin_um": origin,
            "threshold": json_number(f.threshold),
        }
        if f.cut_bounds_nm
        else None,
        "checks": [violation_to_dict(v, text) for v in f.violations],
        "array": array_to_dict(f.array) if f.array is not None else None,
        "line_end": tip_to_dict(f.tip) if f.tip is not None else None,
    }


def tip_to_dict(t) -> dict:
    """The clip of a finding on a line end (wafer nm; the angle in the layout)."""
    return {
        "kind": t.kind,
        "pullback_nm": json_number(t.pullback_nm),
        "gap_printed_nm": json_number(t.gap_printed_nm),
        "closes_at_focus_nm": json_number(t.closes_at_focus_nm),
        "angle_deg": json_number(t.angle_deg),
    }


def array_to_dict(a) -> dict:
    """The lattice of a finding on an array of compact features (drawn nm)."""
    return {
        "lattice": a.lattice,
        "a1_nm": json_numbers(a.a1_nm),
        "a2_nm": json_numbers(a.a2_nm),
        "feature_nm": json_numbers(a.feature_nm),
        "feature_angle_deg": json_number(a.feature_angle_deg),
        "features": int(a.features),
        "columns": int(a.columns),
        "rows": int(a.rows),
        "orders": [[int(m), int(n)] for m, n in a.orders],
        "worst_direction_deg": json_number(a.worst_angle_deg),
    }


def violation_to_dict(v, text=_inline) -> dict:
    """One broken limit as the JSON reports give it."""
    return {
        "check": v.check,
        "severity": v.severity,
        "value": json_number(v.value),
        "limit": json_number(v.limit),
        "message": text(v.message),
    }


def placed_groups(c: CellFinding) -> list[dict]:
    """A cell finding's placements, compact: per orientation of the cell, the
    origins (um) as one flat list ``[x0, y0, x1, y1, ...]``."""
    orient = orientations(c.m)
    kinds, inverse = np.unique(orient, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    origins = np.round(c.t / 1000.0, 6) + 0.0
    out = []
    for k, (rot, mag, mirrored) in enumerate(kinds.tolist()):
        out.append(
            {
                "rotation_deg": rot,
                "magnification": mag,
                "mirrored": bool(mirrored),
                "origins_um": origins[inverse == k].ravel().tolist(),
            }
        )
    return out


def entry_to_dict(c: CellFinding, texts: TextTable | None = None) -> dict:
    """A report entry: the finding at its first placement (top frame), its cell and
    every placement of it."""
    row = finding_to_dict(c.finding, texts=texts)
    row["cell"] = c.cell or None
    row["cell_path"] = list(c.path)
    row["cell_bbox_um"] = json_numbers(box_um(c.cell_bbox_nm))
    row["placements"] = c.placements
    row["depends_on_placement"] = c.depends_on_placement
    row["placed"] = placed_groups(c) if c.cell else []
    return row


def to_json(
    result: ScanResult,
    deck: Deck,
    fail_on: str,
    lazy: bool = False,
    texts: TextTable | None = None,
) -> dict:
    """The JSON report of a scan; with ``lazy`` its findings are :class:`Rows`, made
    as they are written (for :func:`write_json`).  With ``texts`` the findings'
    messages and hints are indexes into it, written last as ``texts``."""
    lay = result.layout
    entries = cell_findings(result)
    by_layer = {}
    # A finding's depth_of_focus_nm at its layer's span is "at least" that.
    spans = {r.name: round(r.focus_span_nm, 3) for r in deck.layers}
    lights = {r.name: _light(r.exposure) for r in deck.layers}
    for st in result.layers:
        counts = severity_counts(result.findings, st.name)
        ex = st.extract
        by_layer[st.name] = {
            "source": st.source,
            **counts,
            "shapes": st.shapes,
            "features": ex.features,
            "edges": ex.edges,
            "sites": ex.sites,
            "edges_2d": ex.short_edges,
            "pieces_2d": ex.pieces_2d,
            "isolated_edges": ex.isolated_sites,
            "edge_um": round(ex.edge_nm / 1000.0, 3),
            "judged_um": round(ex.judged_nm / 1000.0, 3),
            "judged_pct": None if ex.edge_nm <= 0 else round(100.0 * ex.coverage, 1),
            "focus_span_nm": spans.get(st.name),
            **lights.get(st.name, {}),
            **ex.extra,
            "seconds": round(st.seconds, 3),
        }
    return {
        "tool": {"name": "pitchguard", "version": __version__},
        "caution": CAUTION,
        "layout": {
            "path": str(lay.path) if lay else None,
            "format": lay.format if lay else None,
            "cells": list(lay.cells) if lay else [],
            "unit_m": lay.unit_m if lay else None,
            "grid_nm": lay.grid_nm if lay else None,
        },
        "deck": {
            "path": str(deck.path) if deck.path else None,
            "name": deck.name,
            "drawn_scale": deck.drawn_scale,
            "reduction": deck.reduction,
        },
        "findings": Rows(entries, lambda c: entry_to_dict(c, texts))
        if lazy
        else [entry_to_dict(c, texts) for c in entries],
        "summary": {
            "findings": len(entries),
            "placements": len(result.findings),
            "by_severity": severity_counts(result.findings),
            "distinct_by_severity": entry_counts(entries),
            "by_layer": by_layer,
            "fail_on": fail_on,
            "tiling": result.tiling,
            "exit_code": exit_code(result.findings, fail_on),
            "seconds": round(result.seconds, 3),
            "warnings": result.warnings,
            "notes": coverage_notes(result.layers),
        },
        **({} if texts is None else {"texts": texts}),
    }


def dump_json(value, fh, ensure_ascii: bool = True, level: int = 0) -> None:
    """Write ``value`` as JSON to ``fh``, a piece at a time.

    Objects are indented by two spaces.  A list of several objects or lists
    is written one compact line per item (by the C encoder: fast, and a diff
    of two reports shows whole findings); a list holding one container is
    expanded like an object; a list of plain values is one line.  Nothing
    the size of the whole file is built in memory.
    """
    pad = "  " * (level + 1)

    def one(v) -> str:
        return json.dumps(v, ensure_ascii=ensure_ascii, allow_nan=False)

    if isinstance(value, dict):
        if not value:
            fh.write("{}")
            return
        fh.write("{\n")
        for k, (key, v) in enumerate(value.items()):
            fh.write(pad + one(str(key)) + ": ")
            dump_json(v, fh, ensure_ascii, level + 1)
            fh.write(",\n" if k < len(value) - 1 else "\n")
        fh.write("  " * level + "}")
    elif isinstance(value, TextTable) and len(value):  # one text per line
        fh.write("[\n" + ",\n".join(pad + one(t) for t in value) + "\n" + "  " * level + "]")
    elif isinstance(value, (list, tuple, Rows)):
        if len(value) == 0:
            fh.write("[]")
        elif len(value) == 1 and isinstance(value[0], (dict, list, tuple)):
            fh.write("[\n" + pad)
            dump_json(value[0], fh, ensure_ascii, level + 1)
            fh.write("\n" + "  " * level + "]")
        elif not isinstance(value, Rows) and not any(
            isinstance(v, (dict, list, tuple)) for v in value
        ):
            fh.write(one(list(value)))
        else:
            fh.write("[\n")
            for k, text in enumerate(map(one, value)):
                fh.write(pad + text + (",\n" if k < len(value) - 1 else "\n"))
            fh.write("  " * level + "]")
    else:
        fh.write(one(value))


def write_json(out: Path, payload: dict, inputs: list[Path], ensure_ascii: bool = True) -> None:
    """Write ``payload`` (see :func:`dump_json`) to ``out`` atomically."""

    def w(tmp: Path) -> None:
        # A name's undecodable bytes (lone surrogates, e.g. from a path) become JSON's
        # own \\udcXX escapes: valid JSON, and UTF-8 throughout.
        with open(tmp, "w", encoding="utf-8", errors="backslashreplace") as fh:
            dump_json(payload, fh, ensure_ascii)
            fh.write("\n")

    atomic_write(out, w, inputs)
