"""Render scan results: exit code, JSON, marker layout, terminal table.

Every format renders the same :class:`~pitchguard.classify.Finding` records;
none recomputes physics.
"""

from __future__ import annotations

import json
import math
import os
import re
import tempfile
from collections import Counter
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from pitchguard import __version__
from pitchguard.classify import Finding, FindingSet, box_um, centre_um
from pitchguard.deck import SEVERITIES, Deck
from pitchguard.errors import EXIT_FINDINGS, EXIT_OK, OutputError, check_stop
from pitchguard.scan import ScanResult

CAUTION = (
    "pitchguard is a screening aid built on a scalar thin-mask optical model; "
    "sign-off stays with the fab's calibrated models and processes."
)

FAIL_ON_CHOICES = (*SEVERITIES, "never")


def _tally(findings: Sequence[Finding], layer: str | None = None) -> Counter:
    """Findings per severity (of ``layer`` only, if given); a FindingSet from its columns."""
    c: Counter = Counter()
    if isinstance(findings, FindingSet):
        for f, n in zip(findings.distinct, findings.counts().tolist(), strict=True):
            if n and (layer is None or f.layer == layer):
                c[f.severity] += n
    else:
        c.update(f.severity for f in findings if layer is None or f.layer == layer)
    return c


def exit_code(findings: Sequence[Finding], fail_on: str) -> int:
    """0 when no finding is at or above ``fail_on``, else 1 (the one place this is decided)."""
    if fail_on == "never":
        return EXIT_OK
    limit = SEVERITIES.index(fail_on)
    c = _tally(findings)
    return EXIT_FINDINGS if any(c[s] for s in SEVERITIES[: limit + 1]) else EXIT_OK


def severity_counts(findings: Sequence[Finding], layer: str | None = None) -> dict[str, int]:
    """Findings per severity, worst first (of ``layer`` only, if given)."""
    c = _tally(findings, layer)
    return {s: c.get(s, 0) for s in SEVERITIES}


# --------------------------------------------------------------------------- JSON


def _num(x) -> float | None:
    """A plain float, or None for inf and nan (JSON has neither)."""
    x = float(x)
    return x if x - x == 0.0 else None  # inf - inf and nan - nan are nan


def _nums(xs) -> list:
    return [_num(x) for x in xs]


def _clean(obj):
    """JSON-safe copy: non-finite floats become null, numpy scalars plain numbers."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if isinstance(obj, float | np.floating):
        return _num(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


def finding_to_dict(f: Finding, holes: bool = False) -> dict:
    """A finding as plain JSON values (built field by field: a chip's report makes
    10^5-10^6 of these, so no generic cleaning pass).  With ``holes`` the values
    that depend on the place (see :func:`placed_fields`) are markers
    (:func:`hole`), for :class:`PlacedRows`."""
    if holes:
        bbox, centre, outline = hole("bbox_um"), hole("centre_um"), hole("outline_um")
        origin = hole("origin_um")
    else:
        b, c, points, o = placed_numbers(f, 0.0, 0.0)
        bbox, centre, outline, origin = _nums(b), _nums(c), [_nums(p) for p in points], _nums(o)
    return {
        "layer": f.layer,
        "source": f.source,
        "exposure": f.exposure,
        "check": f.check,
        "severity": f.severity,
        "pitch_nm": _num(f.pitch_nm),
        "pitch_max_nm": _num(f.pitch_max_nm),
        "width_nm": _num(f.width_nm),
        "space_nm": _num(f.space_nm),
        "wafer_pitch_nm": _num(f.wafer_pitch_nm),
        "k1": _num(f.k1),
        "orientation_deg": _num(f.orientation_deg),
        "bbox_um": bbox,
        "centre_um": centre,
        "outline_um": outline,
        "orders": [int(o) for o in f.orders],
        "orders_on_axis": [int(o) for o in f.orders_on_axis],
        "two_beam_fraction": _num(f.two_beam_fraction),
        "cutoff_pitch_nm": _num(f.cutoff_pitch_nm),
        "lines": int(f.lines),
        "periodicity": f.periodicity,
        "sites": int(f.sites),
        "run_nm": _num(f.run_nm),
        "limit": f.limit,
        "message": f.message,
        "hint": f.hint,
        "contrast": _num(f.contrast),
        "nils": _num(f.nils),
        "printed_cd_nm": _num(f.cd_nm),
        "cd_error_pct": _num(f.cd_error_pct),
        "exposure_latitude_pct": _num(f.el_pct),
        "depth_of_focus_nm": _num(f.dof_nm),
        "worst_line": f.context or None,
        "cut": {
            "bounds_nm": _nums(f.cut_bounds_nm),
            "angle_deg": _num(f.cut_angle_deg),
            "origin_um": origin,
            "threshold": _num(f.threshold),
        }
        if f.cut_bounds_nm
        else None,
        "checks": [
            {
                "check": v.check,
                "severity": v.severity,
                "value": _num(v.value),
                "limit": _num(v.limit),
                "message": v.message,
            }
            for v in f.violations
        ],
    }


def finding_rows(findings: Sequence[Finding]) -> Rows:
    """:func:`finding_to_dict` of each finding, made as it is written."""
    if not isinstance(findings, FindingSet):
        return Rows(findings, finding_to_dict)
    return PlacedRows(
        findings,
        lambda k: finding_to_dict(findings[k]),
        lambda d: finding_to_dict(findings.distinct[d], holes=True),
        lambda k, f, dx, dy: placed_fields(f, dx, dy),
    )


def to_json(result: ScanResult, deck: Deck, fail_on: str, lazy: bool = False) -> dict:
    """The JSON report of a scan; with ``lazy`` its findings are :class:`Rows`, made
    as they are written (for :func:`write_json`)."""
    lay = result.layout
    by_layer = {}
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
        "findings": finding_rows(result.findings)
        if lazy
        else [finding_to_dict(f) for f in result.findings],
        "summary": {
            "findings": len(result.findings),
            "by_severity": severity_counts(result.findings),
            "by_layer": by_layer,
            "fail_on": fail_on,
            "tiling": result.tiling,
            "exit_code": exit_code(result.findings, fail_on),
            "seconds": round(result.seconds, 3),
            "warnings": result.warnings,
        },
    }


# --------------------------------------------------------------------------- files


def _check_not_input(out: Path, inputs: list[Path]) -> None:
    for p in inputs:
        try:
            if out.exists() and p.exists() and out.samefile(p):
                raise OutputError(f"{out}: refusing to overwrite an input file")
        except OSError:
            continue
        if out.resolve() == p.resolve():
            raise OutputError(f"{out}: refusing to overwrite an input file")


def atomic_write(out: Path, write, inputs: list[Path]) -> None:
    """Write via a temporary file in the same folder, then rename over ``out``.

    ``write(tmp_path)`` produces the content.  A failure leaves any existing
    ``out`` untouched; ``out`` may never be one of ``inputs``.
    """
    out = Path(out)
    _check_not_input(out, inputs)
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{out}: folder {folder} does not exist")
    if out.is_dir():
        raise OutputError(f"{out}: is a directory")
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=out.suffix, dir=folder)
    os.close(fd)
    try:
        check_stop()
        write(Path(tmp))
        check_stop()  # a stop asked for while writing: no output
        # mkstemp makes the file private (0600); give it the mode a plain open() would.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, out)
    except OSError as exc:
        raise OutputError(f"{out}: cannot write: {exc.strerror or exc}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


class Rows(Sequence):
    """A read-only list whose items are made when read: ``fn(x)`` for each ``x`` of ``items``.

    A chip's scan may hold 10^5 to 10^6 findings: their report rows are made
    one at a time as the file is written, never all held at once.
    """

    def __init__(self, items: Sequence, fn):
        self._items, self._fn = items, fn

    def __len__(self) -> int:
        return len(self._items)

    def __getitem__(self, k):
        if isinstance(k, slice):
            return [self._fn(x) for x in self._items[k]]
        return self._fn(self._items[k])

    def __iter__(self):
        return map(self._fn, self._items)


def hole(name: str, in_text: bool = False) -> str:
    """A marker for place-dependent JSON in a row template (see :class:`PlacedRows`):
    a whole value, or (``in_text``) a piece of a string."""
    return f"\x02{name}\x02" if in_text else f"\x01{name}\x01"


# json.dumps writes the markers' control characters as \u0001 / \u0002.
_HOLES = re.compile(r'"\\u0001(\w+)\\u0001"|\\u0002(\w+)\\u0002')


def _j(x: float) -> str:
    """A float as json.dumps writes it; null for inf and nan (as _num)."""
    return repr(float(x)) if x - x == 0.0 else "null"


def placed_numbers(f: Finding, dx: float, dy: float) -> tuple:
    """``(bbox_um, centre_um, outline_um, cut origin um)`` of distinct finding ``f``
    moved by ``(dx, dy)`` nm: the same arithmetic and rounding as building the
    moved finding (``FindingSet`` items, which are ``f`` itself at no offset:
    ``-0.0 + 0.0`` would lose a sign) and reading its fields."""
    bbox, outline, (cx, cy) = f.bbox_nm, f.outline_nm, f.cut_origin_nm
    if dx != 0.0 or dy != 0.0:
        x0, y0, x1, y1 = bbox
        bbox = (x0 + dx, y0 + dy, x1 + dx, y1 + dy)
        outline = [(x + dx, y + dy) for x, y in outline]
        cx, cy = cx + dx, cy + dy
    b = box_um(bbox)
    points = [(round(x / 1000.0, 6), round(y / 1000.0, 6)) for x, y in outline]
    return b, centre_um(b), points, (cx / 1000.0, cy / 1000.0)


def placed_fields(f: Finding, dx: float, dy: float, numbers=None) -> dict[str, str]:
    """JSON text of :func:`finding_to_dict`'s place-dependent values for distinct
    finding ``f`` moved by ``(dx, dy)`` nm (as the moved finding's dict would
    be written); ``numbers``: :func:`placed_numbers`, if made already."""
    b, centre, outline, origin = numbers or placed_numbers(f, dx, dy)
    return {
        "bbox_um": "[" + ", ".join(map(_j, b)) + "]",
        "centre_um": f"[{_j(centre[0])}, {_j(centre[1])}]",
        "outline_um": "[" + ", ".join(f"[{_j(x)}, {_j(y)}]" for x, y in outline) + "]",
        "origin_um": f"[{_j(origin[0])}, {_j(origin[1])}]",
    }


class PlacedRows(Rows):
    """The rows of a :class:`~pitchguard.classify.FindingSet`'s items, written from a
    text template made once per distinct finding.

    Items are distinct findings moved; a row differs from its distinct
    finding's only where it depends on the place.  ``template(d)`` makes the
    row of distinct finding ``d`` with :func:`hole` markers there, and
    ``fill(k, f, dx, dy)`` the JSON text of each hole for item ``k`` (``f``
    its distinct finding, moved by ``dx, dy``).  Read as a sequence, the rows
    are ``fn(index)`` as for :class:`Rows`; :meth:`texts` gives the same
    rows as JSON text, 5-10 times faster (measured on the benchmark chip).
    """

    def __init__(self, findings, fn, template, fill):
        super().__init__(range(len(findings)), fn)
        self.findings, self.template, self.fill = findings, template, fill

    def texts(self, one):
        def split(d: int) -> list[str]:
            parts = _HOLES.split(one(self.template(d)))  # text, name | None, None | name, ...
            return [
                p if k % 3 == 0 else parts[k] or parts[k + 1]
                for k, p in enumerate(parts)
                if k % 3 != 2
            ]

        return fill_templates(self.findings, split, self.fill)


def fill_templates(fs: FindingSet, split, fill):
    """For each item ``k`` of ``fs``: the text ``split(d)`` of its distinct finding
    ``d`` (made once per distinct finding: ``[text, name, text, name, ..., text]``)
    with each name replaced by ``fill(k, f, dx, dy)[name]``, ``f`` the distinct
    finding and ``(dx, dy)`` the item's offset."""
    made: dict[int, tuple] = {}
    chunk = 4096
    for c in range(0, len(fs.which), chunk):
        which = fs.which[c : c + chunk].tolist()
        offsets = fs.offset[c : c + chunk].tolist()
        for k, d, (dx, dy) in zip(range(c, c + len(which)), which, offsets, strict=True):
            template = made.get(d)
            if template is None:
                parts = split(d)
                template = made[d] = (parts[0], list(zip(parts[1::2], parts[2::2], strict=True)))
            values = fill(k, fs.distinct[d], dx, dy)
            out = [template[0]]
            for name, text in template[1]:
                out.append(values[name])
                out.append(text)
            yield "".join(out)


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
            texts = value.texts(one) if isinstance(value, PlacedRows) else map(one, value)
            for k, text in enumerate(texts):
                fh.write(pad + text + (",\n" if k < len(value) - 1 else "\n"))
            fh.write("  " * level + "]")
    else:
        fh.write(one(value))


def write_json(out: Path, payload: dict, inputs: list[Path], ensure_ascii: bool = True) -> None:
    """Write ``payload`` (see :func:`dump_json`) to ``out`` atomically."""

    def w(tmp: Path) -> None:
        with open(tmp, "w", encoding="utf-8") as fh:
            dump_json(payload, fh, ensure_ascii)
            fh.write("\n")

    atomic_write(out, w, inputs)


MARKER_CELL = "PITCHGUARD_MARKERS"
_INT32 = 2**31 - 1


def marker_label(f: Finding) -> str:
    return f"{f.severity} {f.check} {f.layer} p={f.pitch_nm:.1f}nm k1={f.k1:.3f}"


def write_markers(out: Path, result: ScanResult, deck: Deck, inputs: list[Path]) -> None:
    """Marker layout: one polygon and one text label per finding, a layer per severity.

    Units (user unit and database grid) are copied from the scanned layout so
    the markers overlay it exactly.  The format follows the extension.
    """
    import gdstk

    out = Path(out)
    ext = out.suffix.lower()
    if ext not in (".gds", ".gds2", ".gdsii", ".oas", ".oasis"):
        raise OutputError(f"{out}: marker file must end in .gds or .oas")
    lay = result.layout
    unit_m = lay.unit_m if lay else 1e-6
    grid_m = (lay.grid_nm if lay else 1.0) * 1e-9
    per_unit = unit_m * 1e9  # nm per user unit
    lib = gdstk.Library("PITCHGUARD", unit=unit_m, precision=grid_m)
    cell = lib.new_cell(MARKER_CELL)
    limit_nm = _INT32 * grid_m * 1e9
    for f in result.findings:
        layer, datatype = deck.markers[f.severity]
        pts = [(x / per_unit, y / per_unit) for x, y in f.outline_nm]
        if any(abs(c) > limit_nm / per_unit for p in pts for c in p):
            raise OutputError(f"{out}: marker coordinates exceed the 32-bit range of the grid")
        cell.add(gdstk.Polygon(pts, layer=layer, datatype=datatype))
        cx = sum(p[0] for p in pts) / 4
        cy = sum(p[1] for p in pts) / 4
        cell.add(gdstk.Label(marker_label(f), (cx, cy), layer=layer, texttype=datatype))

    def w(tmp: Path) -> None:
        if ext in (".oas", ".oasis"):
            lib.write_oas(str(tmp))
        else:
            lib.write_gds(str(tmp))

    atomic_write(out, w, inputs)


# --------------------------------------------------------------------------- terminal

SEVERITY_STYLE = {"fail": "bold red", "risk": "bold yellow", "marginal": "magenta"}


def _orders_text(orders: tuple[int, ...]) -> str:
    if not orders:
        return "-"
    if orders == tuple(range(orders[0], orders[-1] + 1)) and orders[0] == -orders[-1]:
        return f"0, ±1..{orders[-1]}" if orders[-1] > 1 else ("0, ±1" if orders[-1] else "0")
    return ", ".join(f"{o:+d}" if o else "0" for o in orders)


def one_line_summary(result: ScanResult, fail_on: str) -> str:
    c = severity_counts(result.findings)
    code = exit_code(result.findings, fail_on)
    verdict = "FAILED" if code else "passed"
    shapes = sum(s.shapes for s in result.layers)
    return (
        f"pitchguard: {verdict} (fail-on {fail_on}): {c['fail']} fail, {c['risk']} risk, "
        f"{c['marginal']} marginal in {len(result.layers)} layers, {shapes:,} shapes, "
        f"{result.seconds:.1f} s"
    )


def print_table(console, result: ScanResult, fail_on: str, top: int = 20) -> None:
    """Counts per layer and severity, then the worst regions."""
    from rich.table import Table

    counts = Table(title="Findings per layer", title_justify="left", show_edge=False)
    counts.add_column("layer")
    counts.add_column("source")
    for s in SEVERITIES:
        counts.add_column(s, justify="right", style=SEVERITY_STYLE[s])
    counts.add_column("sites", justify="right")
    counts.add_column("isolated", justify="right")
    counts.add_column("2-D edges", justify="right")
    counts.add_column("shapes", justify="right")
    for st in result.layers:
        c = severity_counts(result.findings, st.name)
        ex = st.extract
        counts.add_row(
            st.name,
            st.source,
            *(str(c[s]) for s in SEVERITIES),
            f"{ex.sites:,}",
            f"{ex.isolated_sites:,}",
            f"{ex.short_edges + ex.pieces_2d:,}",
            f"{st.shapes:,}",
        )
    console.print(counts)

    if result.findings:
        shown = result.findings[:top]
        worst = Table(
            title=f"Worst regions ({len(shown)} of {len(result.findings)})",
            title_justify="left",
            show_edge=False,
        )
        for col, just in (
            ("#", "right"),
            ("severity", "left"),
            ("layer", "left"),
            ("x, y µm", "right"),
            ("pitch nm", "right"),
            ("w / s nm", "right"),
            ("k1", "right"),
            ("NILS", "right"),
            ("orders", "left"),
            ("lines", "right"),
            ("check", "left"),
        ):
            worst.add_column(col, justify=just)
        for k, f in enumerate(shown, 1):
            cx, cy = f.centre_um
            worst.add_row(
                str(k),
                f"[{SEVERITY_STYLE[f.severity]}]{f.severity}[/]",
                f.layer,
                f"{cx:.3f}, {cy:.3f}",
                f"{f.pitch_nm:.1f}",
                f"{f.width_nm:.0f} / {f.space_nm:.0f}",
                f"{f.k1:.3f}",
                f"{f.nils:.2f}" if math.isfinite(f.nils) else "-",
                _orders_text(f.orders),
                str(f.lines),
                f.check,
            )
        console.print()
        console.print(worst)
        if len(result.findings) > top:
            console.print(f"  … {len(result.findings) - top} more (see --json / --markers)")
    for w in result.warnings[:5]:
        console.print(f"[dim]layout library: {w}[/]")
    console.print()
    console.print(one_line_summary(result, fail_on))
    console.print(f"[dim]{CAUTION}[/]")
