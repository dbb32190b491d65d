"""Hostile layouts that must end in a scan or one clear line, never a hang, a
traceback or unbounded memory: a named pipe as the layout, overflowed array
counts, very deep reference chains, a reference magnified a billion times.

Each scan runs in a subprocess with a timeout and an address-space cap, so a
regression fails the test instead of hanging or exhausting the machine.

Reference: the README's error contract and docs/limits.md; a flat layout of the
same shapes as the check of a deep chain's findings.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
from pathlib import Path

import gdstk
import pytest

from decks import POLY_ORDERS_DECK
from pitchguard.errors import LayoutError

MEMORY_CAP = 3 * 2**30
"""Address space of each scan subprocess (and its workers): a scan that grows
without bound is stopped by the kernel, not by the machine's OOM killer."""


@pytest.fixture(scope="module")
def deck(tmp_path_factory) -> Path:
    p = tmp_path_factory.mktemp("deck") / "deck.toml"
    p.write_text(POLY_ORDERS_DECK)
    return p


def _capped() -> None:  # runs in the subprocess before it starts
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_CAP, MEMORY_CAP))


def _scan(*args, timeout: float = 90.0, code: str | None = None) -> subprocess.CompletedProcess:
    """``pitchguard`` (or ``python -c code``) with ``args``, capped in memory and time."""
    cmd = [sys.executable, "-c", code or "from pitchguard.cli import main; main()"]
    if code is None:
        cmd = [str(Path(sys.executable).parent / "pitchguard")]
    env = dict(os.environ, COLUMNS="200")
    return subprocess.run(
        [*cmd, *map(str, args)],
        capture_output=True,
        text=True,
        timeout=timeout,
        preexec_fn=_capped,
        env=env,
    )


def _refused(r: subprocess.CompletedProcess, *words: str) -> None:
    """Exit 2 with one ``pitchguard: error:`` line holding every one of ``words``."""
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert r.returncode == 2, (r.returncode, r.stderr)
    assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), r.stderr
    for w in words:
        assert w in lines[0], (w, lines[0])


def _lines(tmp: Path, name: str = "lines.gds") -> Path:
    """Eight 50 nm lines at a 100 nm pitch: below the deck's resolution, a finding."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(8):
        top.add(gdstk.rectangle((k * 0.1, 0), (k * 0.1 + 0.05, 2), layer=7))
    path = tmp / name
    lib.write_gds(str(path))
    return path


# -- a layout that is not a regular file ---------------------------------------


def test_named_pipe_is_refused_at_once(tmp_path, deck):
    fifo = tmp_path / "chip.gds"
    os.mkfifo(fifo)
    for extra in ([], ["--untiled"]):
        r = _scan("scan", fifo, "--rules", deck, "-q", "--read-timeout", "5", *extra, timeout=60)
        _refused(r, "chip.gds", "named pipe")
    real = _lines(tmp_path)
    for base, new in ((fifo, real), (real, fifo)):
        r = _scan("diff", base, new, "--rules", deck, "-q", "--read-timeout", "5", timeout=60)
        _refused(r, "named pipe")


def test_named_pipe_is_refused_where_the_layout_is_read_again(tmp_path):
    """The HTML report reads the geometry around findings back from the layout
    path after a tiled scan: a pipe put there meanwhile is refused, not waited on."""
    from pitchguard.layout.isolated import run_isolated
    from pitchguard.run.tasks import clips_task

    fifo = tmp_path / "chip.gds"
    os.mkfifo(fifo)
    with pytest.raises(LayoutError, match="named pipe"):
        run_isolated(
            clips_task, (str(fifo), None, [(7, 0)], 1.0, [(0, 0, 100, 100)]), fifo, "reading", 20
        )


# -- repetition counts ---------------------------------------------------------


def _overflowed_array(tmp: Path) -> Path:
    """A 100,000 x 100,000 array written to GDSII: its counts read back as 2^64 - 1."""
    lib = gdstk.Library()
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((0, 0), (0.05, 0.05), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, columns=100_000, rows=100_000, spacing=(0.1, 0.1)))
    path = tmp / "array.gds"
    with pytest.warns(RuntimeWarning, match="Invalid repetition"):  # GDSII cannot hold them
        lib.write_gds(str(path))
    back = gdstk.read_gds(str(path))
    ref = next(c for c in back.cells if c.name == "TOP").references[0]
    assert ref.repetition.columns == 2**64 - 1  # the hazard this guards against
    return path


def test_overflowed_array_counts_are_refused(tmp_path, deck):
    path = _overflowed_array(tmp_path)
    for extra in ([], ["--untiled"], ["--max-memory-mb", "1000", "--jobs", "1"]):
        r = _scan("scan", path, "--rules", deck, "-q", *extra)
        _refused(r, "array.gds", "'U'", "'TOP'", "18,446,744,073,709,551,615", "overflowed")


def test_plan_shape_count_is_exact(tmp_path):
    """The hierarchy's shape count never wraps: a count past 2^64 is refused, not
    read as the 1 that gdstk's own repetition size gives."""
    from pitchguard.run.tasks import structure_task

    path = _overflowed_array(tmp_path)
    assert gdstk.read_gds(str(path)).cells[-1].references[0].repetition.size == 1
    with pytest.raises(LayoutError, match="overflowed"):
        structure_task(str(path), None, [(7, 0)], 2_000_000_000)


# -- hierarchy depth -----------------------------------------------------------


def _chain(tmp: Path, cells: int) -> tuple[Path, Path]:
    """Eight 50 nm lines at the bottom of a chain of ``cells`` cells, each placing
    the one below 10 nm to the right; and the same lines drawn flat."""
    lib = gdstk.Library()
    prev = lib.new_cell("C0")
    for k in range(8):
        prev.add(gdstk.rectangle((k * 0.1, 0), (k * 0.1 + 0.05, 2), layer=7))
    for i in range(1, cells):
        c = lib.new_cell(f"C{i}")
        c.add(gdstk.Reference(prev, (0.01, 0)))
        prev = c
    deep = tmp / f"chain{cells}.gds"
    lib.write_gds(str(deep))
    flat = gdstk.Library()
    top = flat.new_cell("FLAT")
    shift = 0.01 * (cells - 1)
    for k in range(8):
        top.add(gdstk.rectangle((k * 0.1 + shift, 0), (k * 0.1 + 0.05 + shift, 2), layer=7))
    flat_path = tmp / f"flat{cells}.gds"
    flat.write_gds(str(flat_path))
    return deep, flat_path


def _findings(report: Path) -> list:
    data = json.loads(report.read_text())
    rows = [
        (f["layer"], f["check"], f["severity"], f["pitch_nm"], json.dumps(f["bbox_um"]))
        for f in data["findings"]
    ]
    return sorted(rows)


@pytest.mark.parametrize("cells", [500, 1001])
def test_deep_chain_scans_like_the_flat_layout(tmp_path, deck, cells):
    deep, flat = _chain(tmp_path, cells)
    for extra in ([], ["--untiled"]):
        got = {}
        for name, path in (("deep", deep), ("flat", flat)):
            out = tmp_path / f"{name}{len(extra)}.json"
            r = _scan("scan", path, "--rules", deck, "--json", out, *extra)
            assert r.returncode == 1, (name, extra, r.stderr[-2000:])
            assert "Traceback" not in r.stderr
            got[name] = _findings(out)
        assert got["deep"] and got["deep"] == got["flat"], extra


def test_chain_deeper_than_the_limit_is_refused(tmp_path, deck):
    from pitchguard.layout.walks import MAX_DEPTH

    deep, _ = _chain(tmp_path, MAX_DEPTH + 1)
    for extra in ([], ["--untiled"]):
        r = _scan("scan", deep, "--rules", deck, "-q", *extra)
        _refused(r, f"{MAX_DEPTH:,} cells deep")


# -- magnification -------------------------------------------------------------


def _magnified(tmp: Path, mag: float) -> Path:
    lib = gdstk.Library()
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((0, 0), (0.1, 2), layer=7))
    unit.add(gdstk.rectangle((0.2, 0), (0.3, 2), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, magnification=mag))
    top.add(gdstk.rectangle((0, 0), (0.1, 2), layer=7))
    path = tmp / "magnified.gds"
    lib.write_gds(str(path))
    return path


def test_billion_fold_magnification_is_refused_before_work(tmp_path, deck):
    path = _magnified(tmp_path, 1e9)
    assert path.stat().st_size < 2000
    for extra in (["--max-memory-mb", "1000", "--jobs", "1"], [], ["--untiled"]):
        r = _scan("scan", path, "--rules", deck, "-q", *extra, timeout=60)
        _refused(r, "magnified.gds", "edge pieces", "km", "magnification 1e+09", "'U'")
    # A million-fold magnified cell (edges 2 m long) is work a tile can hold.
    path = _magnified(tmp_path, 1e6)
    r = _scan("scan", path, "--rules", deck, "-q", "--max-memory-mb", "1000", "--jobs", "1")
    assert r.returncode in (0, 1), r.stderr


PAST_THE_CHECKS = """
import sys
import pitchguard.run.plan as plan, pitchguard.run.tasks as tasks
plan.PIECES_PER_SHAPE = tasks.PIECES_PER_SHAPE = 10**9  # the up-front checks let it by
from pitchguard.cli import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.slow
def test_worker_memory_is_capped_by_the_budget(tmp_path, deck):
    """Work the up-front checks do not see (they are switched off here) meets the
    kernel's cap on each worker: one line naming the budget, not a machine out
    of memory (the scan needs about 1 GB; the budget gives a worker 400 MB)."""
    path = _magnified(tmp_path, 3e6)
    args = ("scan", path, "--rules", deck, "-q", "--max-memory-mb", "700", "--jobs", "1")
    r = _scan(*args, code=PAST_THE_CHECKS)
    _refused(r, "ran out of memory", "400 MB")


def test_piece_pitch_is_the_site_grid():
    from pitchguard.geometry.sites import SITE_CELL_NM
    from pitchguard.layout.flat_counts import EDGE_PIECE_NM

    assert EDGE_PIECE_NM == SITE_CELL_NM
