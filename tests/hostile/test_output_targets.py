"""Output paths that fail or are not plain files: every writer ends with its
output, or with exit 2 and one line naming the path and the reason.

Never exit 3, a traceback, a partial file, a temporary file left behind, or a
device node, FIFO or symbolic link replaced by a regular file.

References: POSIX ``rename`` (replaces the directory entry, whatever it was:
the reason a device given as an output must be written in place), Linux
``mknod(2)``, ``mkfifo(3)`` and ``setrlimit(2)`` (``RLIMIT_FSIZE``: a write
past the limit fails with ``EFBIG``, as a write to a full disk fails with
``ENOSPC``), and the GDSII stream format (a library ends with the 4-byte
record ``ENDLIB``, 00 04 04 00).
"""

from __future__ import annotations

import json
import os
import stat
import subprocess
import sys
import threading
import time
import xml.etree.ElementTree as ET
from pathlib import Path

import gdstk
import pytest

from decks import DRY_ARF_METAL1_DECK
from pitchguard.cli import main

# Dry ArF, conventional sigma 0.8, binary mask: cutoff pitch 193 / (0.93 * 1.8)
# = 115.3 nm (arithmetic), so 35/35 nm lines fail.  Demo data (tests/decks.py).

ROOT = os.geteuid() == 0


@pytest.fixture
def deck(tmp_path) -> str:
    path = tmp_path / "deck.toml"
    path.write_text(DRY_ARF_METAL1_DECK)
    return str(path)


def _layout(path, placements: int = 3) -> str:
    """12 lines 35 nm wide at pitch 70 nm on 17/0 in a cell placed ``placements`` times."""
    lib = gdstk.Library()
    lines = lib.new_cell("LINES")
    for k in range(12):
        lines.add(gdstk.rectangle((k * 0.07, 0), (k * 0.07 + 0.035, 1.5), layer=17))
    top = lib.new_cell("TOP")
    for i in range(placements):
        top.add(gdstk.Reference(lines, (5.0 * (i % 20), 5.0 * (i // 20))))
    lib.write_gds(str(path))
    return str(path)


@pytest.fixture
def layout(tmp_path) -> str:
    return _layout(tmp_path / "lines.gds")


def _one_line_error(code: int, err: str, *words: str) -> None:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2, (code, err)
    assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), err
    for w in words:
        assert w in lines[0], (w, err)


def _node_id(path) -> tuple:
    st = os.lstat(path)
    return st.st_ino, st.st_mode, st.st_rdev


def _our_temporaries(folder) -> list[str]:
    """Hidden files: a temporary, whatever its naming (the tests make none)."""
    return [n for n in os.listdir(folder) if n.startswith(".")]


# --- what each writer is given: (option, file name) -------------------------------

SCAN_OUTPUTS = [
    ("--json", "out.json"),
    ("--sarif", "out.sarif"),
    ("--junit", "out.xml"),
    ("--html", "out.html"),
    ("--markers", "out.gds"),
    ("--markers", "out.oas"),
    ("--write-baseline", "out.baseline.json"),
]


def _explain_commands(deck: str, option: str, out: str) -> list[str]:
    if option == "sweep-json":
        return ["sweep", "-r", deck, "--layer", "metal1", "--cd", "60", "--json", out]
    if option == "sweep-plot":
        return ["sweep", "-r", deck, "--layer", "metal1", "--cd", "60", "--plot", out]
    return ["probe", "-r", deck, "--layer", "metal1", "--pitch", "120", "--cd", "60"] + [
        "--plot",
        out,
    ]


EXPLAIN_OUTPUTS = [("sweep-json", "out.json"), ("sweep-plot", "out.png"), ("probe-plot", "out.svg")]


def _run(capsys, layout: str, deck: str, option: str, out: str) -> tuple[int, str]:
    if option.startswith("--"):
        argv = ["scan", layout, "--rules", deck, "-q", option, out]
    else:
        argv = _explain_commands(deck, option, out)
    code = main(argv)
    return code, capsys.readouterr().err


ALL_OUTPUTS = SCAN_OUTPUTS + EXPLAIN_OUTPUTS


@pytest.mark.slow
@pytest.mark.parametrize(("option", "name"), ALL_OUTPUTS)
def test_a_file_name_too_long_for_the_file_system(tmp_path, capsys, layout, deck, option, name):
    out = tmp_path / ("x" * 300 + name)
    code, err = _run(capsys, layout, deck, option, str(out))
    _one_line_error(code, err, "File name too long")
    assert not _our_temporaries(tmp_path)


@pytest.mark.slow
@pytest.mark.parametrize(("option", "name"), ALL_OUTPUTS)
def test_a_long_file_name_that_fits_is_written(tmp_path, capsys, layout, deck, option, name):
    """250 characters: the name fits (255 at most) though a temporary named after it
    with a longer suffix would not."""
    out = tmp_path / ("x" * (250 - len(name)) + name)
    code, err = _run(capsys, layout, deck, option, str(out))
    assert code in (0, 1), err
    assert out.stat().st_size > 0 and not _our_temporaries(tmp_path)


@pytest.fixture
def read_only_folder(tmp_path):
    """A folder no file can be created in: a read-only tmpfs mount as root (root
    ignores permission bits), else a folder without write permission."""
    folder = tmp_path / "ro"
    folder.mkdir()
    if not ROOT:
        folder.chmod(0o555)
        yield folder
        folder.chmod(0o755)
        return
    done = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "ro,size=64k", "tmpfs", str(folder)],
        capture_output=True,
        text=True,
    )
    if done.returncode != 0:
        pytest.skip(f"root cannot mount a read-only tmpfs here: {done.stderr.strip()}")
    try:
        yield folder
    finally:
        subprocess.run(["umount", str(folder)], check=True)


@pytest.mark.slow
@pytest.mark.parametrize(("option", "name"), ALL_OUTPUTS)
def test_a_read_only_folder(capsys, layout, deck, read_only_folder, option, name):
    out = read_only_folder / name
    code, err = _run(capsys, layout, deck, option, str(out))
    _one_line_error(code, err, str(out), "Read-only file system" if ROOT else "Permission denied")


def _device(tmp_path, name: str, minor: int, system: str) -> Path:
    """A character device of the memory driver (major 1): a private node as root,
    so a writer that replaced it could not damage the system's own."""
    if not ROOT:
        return Path(system)
    path = tmp_path / name
    os.mknod(path, stat.S_IFCHR | 0o666, os.makedev(1, minor))
    return path


@pytest.mark.slow
@pytest.mark.parametrize(("option", "name"), ALL_OUTPUTS)
def test_a_full_device_is_a_one_line_error_and_stays(tmp_path, capsys, layout, deck, option, name):
    suffix = Path(name).suffix
    full = _device(tmp_path, f"full{suffix}", 7, "/dev/full")  # /dev/full: every write ENOSPC
    before = _node_id(full)
    code, err = _run(capsys, layout, deck, option, str(full))
    _one_line_error(code, err, str(full), "No space left on device")
    assert _node_id(full) == before


@pytest.mark.parametrize(("option", "name"), SCAN_OUTPUTS[:5])
def test_a_null_device_takes_an_output_and_stays(tmp_path, capsys, layout, deck, option, name):
    null = _device(tmp_path, f"null{Path(name).suffix}", 3, "/dev/null")
    if not ROOT and option == "--markers":
        pytest.skip("a marker file needs its extension: only root may make such a null node")
    before = _node_id(null)
    code = main(["scan", layout, "--rules", deck, "-q", option, str(null)])
    assert code == 1, capsys.readouterr().err
    assert _node_id(null) == before and stat.S_ISCHR(os.lstat(null).st_mode)
    assert not _our_temporaries(tmp_path)


class _Reader(threading.Thread):
    """Reads a descriptor until the writer closes it and the test says it is done."""

    def __init__(self, fd: int):
        super().__init__(daemon=True)
        self.fd, self.data, self.done = fd, bytearray(), threading.Event()

    def run(self) -> None:
        while True:
            try:
                chunk = os.read(self.fd, 1 << 16)
            except BlockingIOError:
                chunk = None
            if chunk:
                self.data += chunk
            elif self.done.is_set():
                return
            else:
                time.sleep(0.01)


def _fifo_reader(path: Path) -> _Reader:
    os.mkfifo(path)
    reader = _Reader(os.open(path, os.O_RDONLY | os.O_NONBLOCK))
    reader.start()
    return reader


def _finish(reader: _Reader) -> bytes:
    reader.done.set()
    reader.join(10)
    os.close(reader.fd)
    return bytes(reader.data)


def test_a_fifo_is_written_in_place(tmp_path, capsys, layout, deck):
    fifo_json, fifo_gds = tmp_path / "report.json", tmp_path / "markers.gds"
    readers = [_fifo_reader(fifo_json), _fifo_reader(fifo_gds)]
    code = main(
        ["scan", layout, "--rules", deck, "-q", "--json", str(fifo_json)]
        + ["--markers", str(fifo_gds)]
    )
    err = capsys.readouterr().err
    data_json, data_gds = (_finish(r) for r in readers)
    assert code == 1, err
    assert stat.S_ISFIFO(os.lstat(fifo_json).st_mode) and stat.S_ISFIFO(os.lstat(fifo_gds).st_mode)
    assert json.loads(data_json)["summary"]["placements"] == 3
    assert data_gds.endswith(b"\x00\x04\x04\x00")  # ENDLIB


def test_an_open_descriptor_is_written_as_it_is(tmp_path, capsys, layout, deck):
    r, w = os.pipe()
    os.set_blocking(r, False)
    reader = _Reader(r)
    reader.start()
    try:
        code = main(["scan", layout, "--rules", deck, "-q", "--junit", f"/dev/fd/{w}"])
    finally:
        os.close(w)
    err = capsys.readouterr().err
    reader.done.set()
    reader.join(10)
    os.close(r)
    assert code == 1, err
    assert ET.fromstring(bytes(reader.data)).tag == "testsuites"


def test_a_symbolic_link_stays_and_its_target_is_written(tmp_path, capsys, layout, deck):
    target = tmp_path / "real.json"
    target.write_text("old")
    link = tmp_path / "link.json"
    link.symlink_to(target)
    code = main(["scan", layout, "--rules", deck, "-q", "--json", str(link)])
    assert code == 1, capsys.readouterr().err
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert json.loads(target.read_text())["summary"]["placements"] == 3


def test_nodes_that_are_no_files_are_refused(tmp_path, capsys, layout, deck):
    import socket

    kinds = ["directory", "socket"] + (["block device"] if ROOT else [])
    for kind in kinds:
        node = tmp_path / f"{kind.replace(' ', '-')}.json"
        if kind == "directory":
            node.mkdir()
        elif kind == "block device":  # only root may make one: a loop device's numbers
            os.mknod(node, stat.S_IFBLK | 0o600, os.makedev(7, 0))
        else:
            sock = socket.socket(socket.AF_UNIX)
            sock.bind(str(node))
            sock.close()
        before = _node_id(node)
        code = main(["scan", layout, "--rules", deck, "-q", "--json", str(node)])
        _one_line_error(code, capsys.readouterr().err, str(node), f"is a {kind}")
        assert _node_id(node) == before


# --- a full disk --------------------------------------------------------------------

_LIMITED = """
import resource, sys
from pitchguard.cli import main
resource.setrlimit(resource.RLIMIT_FSIZE, ({limit}, {limit}))
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.slow
def test_a_full_disk_leaves_no_partial_output(tmp_path, deck):
    """The process may write files of at most 1 kB (``RLIMIT_FSIZE``): past that
    every write fails, as on a full disk (Python ignores ``SIGXFSZ``).  The layout
    library does not report its write errors; the SARIF writer is the control."""
    layout = _layout(tmp_path / "many.gds", placements=400)
    folder = tmp_path / "out"
    folder.mkdir()
    for name in ("markers.gds", "markers.oas", "report.sarif"):
        out = folder / name
        option = "--sarif" if name.endswith(".sarif") else "--markers"
        done = subprocess.run(
            [sys.executable, "-c", _LIMITED.format(limit=1024), "scan", layout, "--rules", deck]
            + ["-q", "--untiled", "--flat-markers", option, str(out)],
            capture_output=True,
            text=True,
            timeout=300,
        )
        _one_line_error(done.returncode, done.stderr, str(out))
        assert os.listdir(folder) == [], name


@pytest.fixture
def small_disk(tmp_path):
    """A 64 kB tmpfs (root only): the real thing the rlimit stands for."""
    folder = tmp_path / "small"
    folder.mkdir()
    done = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(folder)],
        capture_output=True,
        text=True,
    )
    if done.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here (needs root): {done.stderr.strip()}")
    try:
        yield folder
    finally:
        subprocess.run(["umount", str(folder)], check=True)


@pytest.mark.slow
def test_markers_on_a_full_tmpfs(tmp_path, capsys, deck, small_disk):
    layout = _layout(tmp_path / "many.gds", placements=400)
    fd = os.open(small_disk / "filler", os.O_WRONLY | os.O_CREAT)
    try:  # the disk full to the last byte
        with pytest.raises(OSError, match="No space left"):
            while True:
                os.write(fd, b"\0" * 4096)
    finally:
        os.close(fd)
    for name in ("markers.gds", "markers.oas", "report.json"):  # JSON: the control
        option = "--json" if name.endswith(".json") else "--markers"
        out = small_disk / name
        code = main(["scan", layout, "--rules", deck, "-q", "--flat-markers", option, str(out)])
        _one_line_error(code, capsys.readouterr().err, str(out))
        assert os.listdir(small_disk) == ["filler"], name
