"""pitchguard: screen mask layouts for line/space pitches that will not print.

The pipeline, one module per stage::

    deck      rule deck (TOML) -> validated, frozen configuration
    layout    GDSII / OASIS -> flat polygons per deck layer, in nm
    extract   polygons -> features -> 1-D sites (width, space, pitch, run)
    orders    diffraction orders and k1 for a site under an exposure
    classify  sites -> severities -> merged regions (findings)
    report    findings -> terminal table, JSON, marker layout
    scan      the whole chain for one layout (or one region of it)
    api       the Python API: scan, probe, load_deck (records, report writers)
    cli       thin command-line front end over the API

``pitchguard.scan``, ``pitchguard.probe`` and ``pitchguard.load_deck`` are
loaded on first use: ``import pitchguard`` stays light for the command line.
"""

__version__ = "0.1.0"

_API = {
    "scan",
    "probe",
    "load_deck",
    "ScanReport",
    "FindingRecord",
    "CheckRecord",
    "LayerCoverage",
    "ProbeResult",
    "Deck",
}

__all__ = ["__version__", *sorted(_API)]


def __getattr__(name: str):
    if name in _API:
        from pitchguard import api

        return getattr(api, name)
    raise AttributeError(f"module 'pitchguard' has no attribute {name!r}")
