"""JUnit XML report for CI test views."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import Iterator
from pathlib import Path
from xml.sax.saxutils import escape

import numpy as np

from pitchguard.deck import SEVERITIES, Deck
from pitchguard.judge.checks import CHECKS
from pitchguard.judge.findings import Finding, FindingSet
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.texts import finding_line, placed_texts, where_text_of
from pitchguard.outputs.verdict import CAUTION
from pitchguard.run.scan import ScanResult

_XML_BAD = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _x(text: str) -> str:
    """Drop characters XML 1.0 cannot hold (a deck may name a layer with anything)."""
    return _XML_BAD.sub("", str(text))


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
                        yield from placed_texts(failing, lambda f, w: _piece(failing_case(f, w), 2))
                    else:
                        yield from (failing_case(f, where_text_of(f)) for f in failing)
                else:
                    case = ET.Element(
                        "testcase", classname=_x(f"pitchguard.{name}"), name=check, time="0"
                    )
                    if len(below):
                        out = ET.SubElement(case, "system-out")
                        out.text = _x("\n".join(placed_texts(below, finding_line)))
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
        yield from placed_texts(below, finding_line)


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
