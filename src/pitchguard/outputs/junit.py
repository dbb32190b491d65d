"""JUnit XML report for CI test views."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import Iterator
from pathlib import Path
from xml.sax.saxutils import escape

from pitchguard.deck import SEVERITIES, Deck
from pitchguard.judge.checks import CHECKS
from pitchguard.judge.per_cell import CellFinding, cell_findings
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.texts import cell_sentence, clipped, finding_line, where_text_of
from pitchguard.outputs.verdict import CAUTION
from pitchguard.run.scan import ScanResult

_XML_BAD = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def _code(m: re.Match) -> str:
    n = ord(m.group())
    return f"\\x{n:02x}" if n < 0x100 else f"\\u{n:04x}"


def _x(text: str) -> str:
    """Characters XML 1.0 cannot hold written as ``\\xNN`` / ``\\uNNNN`` (a deck or a
    layout may name a layer or a cell with anything)."""
    return _XML_BAD.sub(_code, str(text))


def _entry_line(c: CellFinding) -> str:
    return finding_line(c.finding) + cell_sentence(c)


def _junit_suites(result: ScanResult, deck: Deck, fail_on: str) -> list[tuple]:
    """Per layer: ``(attributes, properties, testcases, system-out lines)``.

    A test case per report entry (a distinct finding of a cell, with its
    placements) at or above ``fail_on``.  ``testcases()`` makes the suite's
    ``<testcase>`` elements one at a time, so a writer can stream them.
    """
    entries = cell_findings(result)
    layers = [(st.name, st.source, st.seconds) for st in result.layers]
    known = {name for name, _, _ in layers}
    for c in entries:
        if c.finding.layer not in known:
            layers.append((c.finding.layer, c.finding.source, 0.0))
            known.add(c.finding.layer)
    checks = list(CHECKS) + sorted({c.finding.check for c in entries} - set(CHECKS))
    exposures = {r.name: r.exposure_name for r in deck.layers}
    layout_path = str(result.layout.path) if result.layout else ""
    rank = {s: k for k, s in enumerate(SEVERITIES)}
    # Per (layer, check): worst first, then by place (the first placement's box).
    by_key: dict[tuple, list[CellFinding]] = {}
    for c in sorted(entries, key=lambda c: (rank[c.finding.severity], c.finding.bbox_nm)):
        by_key.setdefault((c.finding.layer, c.finding.check), []).append(c)
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
        suite_out: list[CellFinding] = []  # entries below fail_on of failing pairs
        for check in checks:
            found = by_key.get((name, check), [])
            failing = [c for c in found if rank[c.finding.severity] <= limit]
            below = [c for c in found if rank[c.finding.severity] > limit]
            plan.append((check, failing, below))
            if failing:
                tests += len(failing)
                failures += len(failing)
                suite_out.extend(below)
            else:
                tests += 1

        def failing_case(c: CellFinding, name=name) -> ET.Element:
            f = c.finding
            place = f"in {clipped(c.cell)} " if c.cell else ""
            case = ET.Element(
                "testcase",
                classname=_x(f"pitchguard.{clipped(name)}.{f.check}"),
                name=_x(f"{f.check} {place}at {where_text_of(f)}"),
                time="0",
            )
            fail = ET.SubElement(case, "failure", message=_x(f.message), type=f.check)
            fail.text = _x(_entry_line(c))
            return case

        def testcases(plan=plan, name=name, texts=False, failing_case=failing_case):
            """The suite's test cases; with ``texts`` as indented XML text (level 2)."""
            for check, failing, below in plan:
                if failing:
                    for c in failing:
                        yield _piece(failing_case(c), 2) if texts else failing_case(c)
                else:
                    case = ET.Element(
                        "testcase",
                        classname=_x(f"pitchguard.{clipped(name)}"),
                        name=check,
                        time="0",
                    )
                    if below:
                        out = ET.SubElement(case, "system-out")
                        out.text = _x("\n".join(map(_entry_line, below)))
                    yield _piece(case, 2) if texts else case

        attrs = {
            "name": _x(f"pitchguard.{clipped(name)}"),
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


def _suite_lines(suite_out: list[CellFinding]) -> Iterator[str]:
    return map(_entry_line, suite_out)


def _suite_out(suite_out: list[CellFinding]) -> ET.Element:
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
