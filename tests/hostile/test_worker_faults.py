"""Worker processes under faults: killed children, a killed command, worker counts, clusters.

A child killed from outside (``kill -9``, the kernel's out-of-memory killer)
is reported as such, not as a corrupt file; children die with the command;
the pool starts no more workers than it can use; cluster workers get paths
they can open from their own folder.

Reference: the README's error contract; prctl(2) PR_SET_PDEATHSIG and signal(7)
(SIGKILL 9, what the kernel's out-of-memory killer sends); a local scan's
findings as the check of a cluster scan's.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import gdstk
import psutil  # a dependency of dask.distributed (test extra)
import pytest

from decks import POLY_ORDERS_DECK

# Runs the command with the first read or every tile task replaced by one that
# leaves its pid in a folder and sleeps: a kill then lands in that child.
DRIVER = """
import os, sys, time
from pathlib import Path

import pitchguard.run.tiled as tiled
from pitchguard.cli import main

MODE, MARKS = sys.argv[1], Path(sys.argv[2])
ORIGINAL = tiled.structure_task


def mark(role):
    (MARKS / f"{role}-{os.getpid()}").write_text("")


def slow_structure(*args):
    mark("reader")
    time.sleep(60)
    return ORIGINAL(*args)


def slow_tile(*args):
    mark("tile")
    time.sleep(60)


if MODE == "reader":
    tiled.structure_task = slow_structure
else:
    tiled.tile_task = slow_tile
sys.exit(main(sys.argv[3:]))
"""


def _chip(path: Path, blocks: int = 3, lines: int = 4) -> Path:
    """``blocks`` x ``blocks`` line groups 20 um apart, each different (its own width)."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("TOP")
    for i in range(blocks):
        for j in range(blocks):
            w = 0.1 + 0.01 * (i * blocks + j)
            for k in range(lines):
                x = 20.0 * i + k * 2 * w
                cell.add(gdstk.rectangle((x, 20.0 * j), (x + w, 20.0 * j + 3.0), layer=7))
    lib.write_gds(str(path))
    return path


@pytest.fixture
def files(tmp_path) -> tuple[Path, Path, Path]:
    deck = tmp_path / "deck.toml"
    deck.write_text(POLY_ORDERS_DECK)
    driver = tmp_path / "driver.py"
    driver.write_text(DRIVER)
    return _chip(tmp_path / "chip.gds"), deck, driver


def _start(tmp_path: Path, driver: Path, mode: str, *argv) -> tuple[subprocess.Popen, Path]:
    marks = tmp_path / f"marks-{time.monotonic_ns()}"
    marks.mkdir()
    proc = subprocess.Popen(
        [sys.executable, str(driver), mode, str(marks), *map(str, argv)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    return proc, marks


def _marked(proc: subprocess.Popen, marks: Path, role: str) -> int:
    """The pid of the first child that marked ``role``, waiting up to 60 s."""
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        found = sorted(marks.glob(f"{role}-*"))
        if found:
            return int(found[0].name.split("-")[1])
        if proc.poll() is not None:
            break
        time.sleep(0.02)
    proc.kill()
    out, err = proc.communicate()
    raise AssertionError(f"no {role} child marked itself: {proc.returncode} {err}")


def _one_error_line(err: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), err
    return lines[0]


def _gone(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() == psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return True


@pytest.mark.slow
@pytest.mark.parametrize("mode", ["reader", "tile"])
def test_a_killed_child_is_told_from_a_crash(tmp_path, files, mode):
    """SIGKILL (what the out-of-memory killer sends) names the signal and memory,
    not the file; SIGSEGV in the same child still points at the file."""
    chip, deck, driver = files
    seen = {}
    for sig in (signal.SIGKILL, signal.SIGSEGV):
        proc, marks = _start(
            tmp_path, driver, mode, "scan", chip, "-r", deck, "-q", "--jobs", "2", "--tile-um", "20"
        )
        os.kill(_marked(proc, marks, mode), sig)
        _, err = proc.communicate(timeout=60)
        assert proc.returncode == 2, err
        seen[sig] = _one_error_line(err)
    killed, crashed = seen[signal.SIGKILL], seen[signal.SIGSEGV]
    assert "killed by signal 9 (SIGKILL)" in killed and "out-of-memory" in killed, killed
    assert "corrupt" not in killed, killed
    assert "SIGSEGV" in crashed and "corrupt" in crashed, crashed


@pytest.mark.slow
@pytest.mark.parametrize("mode", ["reader", "tile"])
def test_children_die_with_a_killed_command(tmp_path, files, mode):
    """kill -9 of the command mid-scan: the reader child or both tile workers end
    within seconds instead of living on, reparented, blocked for ever."""
    chip, deck, driver = files
    proc, marks = _start(
        tmp_path, driver, mode, "scan", chip, "-r", deck, "-q", "--jobs", "2", "--tile-um", "20"
    )
    _marked(proc, marks, mode)
    children = [c.pid for c in psutil.Process(proc.pid).children(recursive=True)]
    try:
        assert len(children) == (1 if mode == "reader" else 2), children
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)  # not its pipes: a surviving child holds them open
        deadline = time.monotonic() + 5
        while time.monotonic() < deadline and not all(map(_gone, children)):
            time.sleep(0.05)
        assert all(map(_gone, children)), [c for c in children if not _gone(c)]
    finally:
        for pid in children:  # the ones this test started, should the check fail
            if not _gone(pid):
                os.kill(pid, signal.SIGKILL)
        proc.stdout.close()
        proc.stderr.close()


class _CountingPool:
    """Stands in for ProcessPoolExecutor and counts the workers it started."""

    started: list[int] = []

    def __init__(self, base):
        self.base = base

    def __call__(self, *args, **kwargs):
        base = self.base
        started = self.started

        class Pool(base):
            def shutdown(self, *a, **k):
                started.append(len(self._processes or {}))
                return super().shutdown(*a, **k)

        return Pool(*args, **kwargs)


@pytest.mark.slow
@pytest.mark.parametrize(
    ("cores", "jobs", "blocks", "expected"),
    [
        (2, 40, 1, 1),  # 4 shapes, one tile: one worker, not 40
        (1, None, 3, 1),  # default: one per core
        (1, 3, 3, 3),  # an explicit count above the cores, within 4 per core
        (1, 40, 3, 4),  # at most 4 per core
        (8, 40, 2, 4),  # never more than the tiles (2 x 2)
    ],
)
def test_workers_started_are_capped(tmp_path, monkeypatch, cores, jobs, blocks, expected):
    import concurrent.futures

    from pitchguard.deck import parse_deck
    from pitchguard.run.tiled import scan_tiled

    chip = _chip(tmp_path / "chip.gds", blocks=blocks, lines=4)
    counting = _CountingPool(concurrent.futures.ProcessPoolExecutor)
    counting.started = []
    monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", counting)
    monkeypatch.setattr(os, "cpu_count", lambda: cores)
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: set(range(cores)))
    result = scan_tiled(chip, parse_deck(POLY_ORDERS_DECK), tile_um=20, jobs=jobs, reuse=False)
    assert result.tiling["tiles"] == blocks * blocks
    assert counting.started == [expected]
    assert result.tiling["workers"] == expected


@pytest.mark.slow
def test_cluster_workers_get_paths_they_can_open(tmp_path, monkeypatch):
    """A relative layout path works on cluster workers running in another folder,
    and finds what the local scan finds."""
    import distributed  # in the test extra

    from decks import DRY_ARF_CUTOFF_NM, DRY_ARF_DECK
    from pitchguard.deck import parse_deck
    from pitchguard.run.tiled import scan_tiled

    deck = parse_deck(DRY_ARF_DECK)
    here = tmp_path / "layouts"
    here.mkdir()
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("TOP")
    pitch = 1.1 * DRY_ARF_CUTOFF_NM * 1e-3  # just resolved: weak images, findings
    for k in range(12):
        cell.add(gdstk.rectangle((k * pitch, 0), (k * pitch + pitch / 2, 2.0), layer=7))
    lib.write_gds(str(here / "chip.gds"))
    local = scan_tiled(here / "chip.gds", deck, tile_um=10, jobs=1)
    assert len(local.findings) > 0

    elsewhere = tmp_path / "workers"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)  # the workers start here
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    ) as cluster:
        monkeypatch.chdir(here)
        remote = scan_tiled("chip.gds", deck, tile_um=10, scheduler=cluster.scheduler_address)
    key = lambda f: (f.layer, f.check, f.severity, f.lines, tuple(round(v, 3) for v in f.bbox_um))  # noqa: E731
    assert sorted(map(key, remote.findings)) == sorted(map(key, local.findings))


FALLBACK = """
import os, sys, time
from pitchguard import processes

processes._PRCTL["fn"] = None  # as where the system has no PR_SET_PDEATHSIG
parent = os.getpid()
child = os.fork()
if child == 0:
    processes.die_with_parent(parent)
    time.sleep(60)
    os._exit(0)
print(child, flush=True)
os._exit(0)
"""


def test_without_the_kernels_help_a_child_still_dies_with_its_parent():
    """The polling fallback: the child ends within a few polls of its parent."""
    out = subprocess.run(
        [sys.executable, "-c", FALLBACK], capture_output=True, text=True, timeout=60
    )
    child = int(out.stdout.split()[0])
    try:
        deadline = time.monotonic() + 5
        while time.monotonic() < deadline and not _gone(child):
            time.sleep(0.05)
        assert _gone(child)
    finally:
        if not _gone(child):
            os.kill(child, signal.SIGKILL)
