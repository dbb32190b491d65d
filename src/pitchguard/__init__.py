"""pitchguard: screen mask layouts for line/space pitches that will not print.

The pipeline, one module per stage::

    deck      rule deck (TOML) -> validated, frozen configuration
    layout    GDSII / OASIS -> flat polygons per deck layer, in nm
    extract   polygons -> features -> 1-D sites (width, space, pitch, run)
    orders    diffraction orders and k1 for a site under an exposure
    classify  sites -> severities -> merged regions (findings)
    report    findings -> terminal table, JSON, marker layout
    scan      the whole chain for one layout (or one region of it)
    cli       thin command-line front end
"""

__version__ = "0.1.0"
