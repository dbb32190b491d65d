"""Temporary output files: named as ours with the writer's pid, and removed by a
later write into the same folder once that process is gone, never otherwise.

References: POSIX ``kill(pid, 0)`` (no signal sent; ESRCH when no process has
that pid, EPERM when one does that we may not signal).
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
from pathlib import Path

import gdstk

from decks import DRY_ARF_METAL1_DECK
from pitchguard.cli import main


def _scan_into(tmp_path, capsys, out: Path) -> None:
    """A scan (dry ArF, lines at pitch 70 nm: 3 fails) writing ``out`` as JSON."""
    lib = gdstk.Library()
    cell = lib.new_cell("TOP")
    for k in range(12):
        cell.add(gdstk.rectangle((k * 0.07, 0), (k * 0.07 + 0.035, 1.5), layer=17))
    layout = tmp_path / "lines.gds"
    lib.write_gds(str(layout))
    deck = tmp_path / "deck.toml"
    deck.write_text(DRY_ARF_METAL1_DECK)
    code = main(["scan", str(layout), "--rules", str(deck), "-q", "--json", str(out)])
    assert code == 1, capsys.readouterr().err
    assert out.stat().st_size > 0


def _dead_pid() -> int:
    """The pid of a process that has ended (and been reaped)."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


_KILLED_WRITER = """
import os, signal, sys
from pathlib import Path
from pitchguard.outputs.files import atomic_write

def write(tmp):
    with open(tmp, "w") as fh:
        fh.write("{" * 100000)
        fh.flush()
        os.kill(os.getpid(), signal.SIGKILL)  # as kill -9 from outside, mid-write

atomic_write(Path(sys.argv[1]), write, [])
"""


def test_a_killed_writers_temporary_is_removed_by_the_next_write(tmp_path, capsys):
    folder = tmp_path / "reports"
    folder.mkdir()
    out = folder / "report.json"
    child = subprocess.run(
        [sys.executable, "-c", _KILLED_WRITER, str(out)], capture_output=True, timeout=120
    )
    assert child.returncode == -signal.SIGKILL
    left = os.listdir(folder)
    assert len(left) == 1 and not out.exists(), left
    assert re.fullmatch(r"\.report\.json\.pitchguard-[0-9]+-[0-9a-f]{8}\.tmp", left[0]), left
    _scan_into(tmp_path, capsys, out)
    assert sorted(os.listdir(folder)) == ["report.json"]


def test_only_our_temporaries_of_ended_processes_are_removed(tmp_path, capsys):
    folder = tmp_path / "reports"
    folder.mkdir()
    dead = _dead_pid()
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        stale = f".other.sarif.pitchguard-{dead}-0123abcd.tmp"
        kept = [
            f".other.sarif.pitchguard-{sleeper.pid}-0123abcd.tmp",  # its writer is alive
            f".other.sarif.pitchguard-{os.getpid()}-0123abcd.tmp",  # this process
            ".other.sarif.pitchguard-0-0123abcd.tmp",  # this process group: not judged
            ".other.sarif.pitchguard-1-0123abcd.tmp",  # init: alive
            f".other.sarif.pitchguard-{dead}.tmp",  # not our naming
            f"other.sarif.pitchguard-{dead}-0123abcd.tmp",  # not hidden: not ours
            f".other.sarif.pitchguard-{dead}-0123abcd.tmp.bak",
            f".other.sarif.pitchguard-{dead}-0123ABCD.tmp",
            "notes.txt",
        ]
        for name in [stale, *kept]:
            (folder / name).write_text("x")
        as_folder = f".dir.pitchguard-{dead}-0123abcd.tmp"  # a folder is never removed
        (folder / as_folder).mkdir()
        _scan_into(tmp_path, capsys, folder / "report.json")
        left = set(os.listdir(folder))
    finally:
        sleeper.kill()
        sleeper.wait()
    assert stale not in left
    assert left == {*kept, as_folder, "report.json"}


def test_a_temporary_name_fits_any_file_name(tmp_path):
    from pitchguard.outputs.files import temp_name

    for name in ("a.json", "x" * 255, "é" * 127 + ".j"):
        tmp = temp_name(name)
        assert len(os.fsencode(tmp)) <= 255
        assert f".pitchguard-{os.getpid()}-" in tmp and tmp.startswith(".")
        (tmp_path / tmp).write_text("x")  # the file system takes the name
