"""The exit code and severity counts: decided only here."""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence

from pitchguard.deck import SEVERITIES
from pitchguard.errors import EXIT_FINDINGS, EXIT_OK
from pitchguard.judge.findings import Finding, FindingSet

CAUTION = (
    "pitchguard is a screening aid built on a thin-mask optical model; "
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


COVERAGE_NOTE_BELOW = 0.5
"""A layer with shapes whose judged share of edge length is below this gets a note."""


def coverage_text(ex) -> str:
    """A layer's judged share of edge length, as a table cell ("-": no edges)."""
    c = ex.coverage
    return "-" if c != c else f"{100.0 * c:.0f} %"


def coverage_notes(layers) -> list[str]:
    """One line per layer with shapes whose edges are mostly unjudged (``layers``:
    a scan's :class:`LayerStats`): what is not judged must be said."""
    out = []
    for st in layers:
        ex = st.extract
        if st.shapes and not ex.coverage >= COVERAGE_NOTE_BELOW:
            pct = 0.0 if ex.edge_nm <= 0 else 100.0 * ex.coverage
            out.append(
                f"layer {st.name}: only {pct:.0f} % of its edge length was judged; the rest "
                "(line ends, junctions, contacts and vias: 2-D; edges with no neighbour and "
                "no image) passed unexamined"
            )
    return out
