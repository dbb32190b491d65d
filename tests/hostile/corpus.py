"""Seeded corpus of hostile layout files: truncated and byte-mutated copies of the demo chip.

``cases(seed, n)`` yields ``(name, bytes)``; the same seed gives the same
corpus.  Used by tests/hostile/test_hostile_input.py; run as a script it
writes the corpus to a folder for manual runs::

    python tests/hostile/corpus.py OUT_DIR [N]
"""

from __future__ import annotations

import random
import sys
from collections.abc import Iterator
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
SOURCES = (REPO / "sample_layouts" / "demo_chip.gds", REPO / "sample_layouts" / "demo_chip.oas")


def cases(seed: int = 20261202, n: int = 300) -> Iterator[tuple[str, bytes]]:
    rng = random.Random(seed)
    originals = [(p.suffix, p.read_bytes()) for p in SOURCES]
    for k in range(n):
        suffix, data = originals[k % len(originals)]
        kind = rng.choice(("truncate", "flip", "flip", "splice", "zero"))
        b = bytearray(data)
        if kind == "truncate":
            b = b[: rng.randrange(1, len(b))]
        elif kind == "flip":
            for _ in range(rng.randint(1, 8)):
                b[rng.randrange(len(b))] = rng.randrange(256)
        elif kind == "splice":
            i, j = sorted(rng.randrange(len(b)) for _ in range(2))
            b[i:j] = bytes(rng.randrange(256) for _ in range(rng.randint(0, 64)))
        else:  # a run of zero bytes
            i = rng.randrange(len(b))
            b[i : i + rng.randint(1, 32)] = bytes(rng.randint(1, 32))
        yield f"{k:04d}_{kind}{suffix}", bytes(b)


if __name__ == "__main__":
    out = Path(sys.argv[1])
    out.mkdir(parents=True, exist_ok=True)
    count = int(sys.argv[2]) if len(sys.argv) > 2 else 300
    for name, data in cases(n=count):
        (out / name).write_bytes(data)
    print(f"wrote {count} files to {out}")
