"""The Python API: what the command line does, as functions and records.

::

    import pitchguard

    report = pitchguard.scan("chip.oas", rules="deck.toml", jobs=2)
    worst = report.select(lambda f: f.severity == "fail" and f.layer == "metal1")
    worst.write_markers("metal1_fails.oas")

Errors a user can cause raise :class:`pitchguard.errors.PitchguardError`
(its message is one line); ``exit_code`` says what the command would exit with.
"""

from pitchguard.api.probing import ProbeResult, probe
from pitchguard.api.records import CheckRecord, FindingRecord, LayerCoverage
from pitchguard.api.scanning import ScanReport, run_scan, scan
from pitchguard.deck import Deck, load_deck

__all__ = [
    "CheckRecord",
    "Deck",
    "FindingRecord",
    "LayerCoverage",
    "ProbeResult",
    "ScanReport",
    "load_deck",
    "probe",
    "run_scan",
    "scan",
]
