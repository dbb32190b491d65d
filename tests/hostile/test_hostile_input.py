"""Hostile input never kills the command: mutated and pathological layouts.

Every case must end with exit 0/1 (it scanned) or 2 with one clear
``pitchguard: error:`` line, never a traceback (exit 3) and never a signal.
The layout library is known to crash on some corrupt files (see
DEVELOPERS.md); the reader runs in a child process so that such a crash is
reported as bad input.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import gdstk
import pytest

from pitchguard.cli import main

sys.path.insert(0, str(Path(__file__).resolve().parent))
from corpus import cases

DECK = """
[exposures.a]
wavelength_nm = 193.0
na = 0.93
illumination = { shape = "conventional", sigma = 0.8 }
[layer_defaults]
image_checks = false
[[layers]]
name = "active"
source = "1/0"
exposure = "a"
field = "clear"
optional = true
[[layers]]
name = "poly"
source = "7/0"
exposure = "a"
field = "clear"
[[layers]]
name = "metal1"
source = "17/0"
exposure = "a"
field = "dark"
optional = true
"""

CORPUS_SIZE = 200  # seeded: the same files every run


@pytest.fixture(scope="module")
def deck(tmp_path_factory) -> Path:
    p = tmp_path_factory.mktemp("deck") / "deck.toml"
    p.write_text(DECK)
    return p


def _run(capsys, layout: Path, deck: Path, *extra: str) -> tuple[int, str]:
    code = main(["scan", str(layout), "--rules", str(deck), "-q", "--read-timeout", "30", *extra])
    out, err = capsys.readouterr()
    return code, err


def _clean(code: int, err: str) -> None:
    assert code in (0, 1, 2), (code, err)
    assert "Traceback" not in err and "internal error" not in err, err
    if code == 2:
        lines = [ln for ln in err.splitlines() if ln.strip()]
        assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), err


@pytest.mark.slow
def test_mutated_and_truncated_corpus(tmp_path, capsys, deck):
    seen = {0: 0, 1: 0, 2: 0}
    crashes = 0
    for name, data in cases(n=CORPUS_SIZE):
        f = tmp_path / name
        f.write_bytes(data)
        t0 = time.monotonic()
        code, err = _run(capsys, f, deck)
        assert time.monotonic() - t0 < 120, name  # bounded (generous: a loaded CI machine)
        _clean(code, err)
        seen[code] += 1
        crashes += "crashed" in err
        f.unlink()
    # The corpus exercises both outcomes: files that still scan, and rejected ones.
    assert seen[2] > 0 and seen[0] + seen[1] > 0, seen
    print(f"corpus outcomes {seen}, reader crashes contained: {crashes}")


@pytest.mark.slow
def test_reader_crash_is_contained_in_a_real_process(tmp_path, deck):
    """Find corpus files on which the reader dies by a signal; the command still exits 2."""
    import multiprocessing as mp

    from pitchguard.layout.reader import read_layout

    def reader(path):
        import faulthandler

        faulthandler.disable()  # the crash is what we look for: keep the log quiet
        read_layout(path, [(1, 0), (7, 0), (17, 0)])

    crashers = []
    for name, data in cases(n=CORPUS_SIZE):
        f = tmp_path / name
        f.write_bytes(data)
        p = mp.get_context("fork").Process(target=reader, args=(f,), daemon=True)
        p.start()
        p.join(20)
        if p.is_alive():  # a parse that hangs: not what this test looks for
            p.kill()
            p.join()
            continue
        if p.exitcode is not None and p.exitcode < 0:
            crashers.append(f)
            if len(crashers) == 5:
                break
    assert crashers, "the seeded corpus holds no file that crashes the reader"
    # A crash on corrupt data need not repeat in another process (memory layout
    # differs): every run must end cleanly, and at least one must report a crash.
    exe = Path(sys.executable).parent / "pitchguard"
    reported = 0
    for f in crashers:
        r = subprocess.run(
            [exe, "scan", f, "--rules", deck, "--read-timeout", "60"],
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert r.returncode in (0, 1, 2), r
        assert "Traceback" not in r.stderr
        reported += r.returncode == 2 and "crashed" in r.stderr
    assert reported >= 1


def _lib_write(tmp_path: Path, lib: gdstk.Library, name: str = "p.gds") -> Path:
    path = tmp_path / name
    (lib.write_gds if name.endswith(".gds") else lib.write_oas)(str(path))
    return path


def _case_self_reference(tmp_path):
    lib = gdstk.Library()
    a = lib.new_cell("A")
    a.add(gdstk.rectangle((0, 0), (1, 1), layer=7))
    a.add(gdstk.Reference(a, (5, 0)))
    return _lib_write(tmp_path, lib), ["--cell", "A"], 2, "cycle"


def _case_ab_cycle(tmp_path):
    lib = gdstk.Library()
    a, b = lib.new_cell("A"), lib.new_cell("B")
    a.add(gdstk.Reference(b))
    b.add(gdstk.Reference(a, (3, 0)))
    b.add(gdstk.rectangle((0, 0), (1, 1), layer=7))
    return _lib_write(tmp_path, lib, "p.oas"), ["--cell", "A"], 2, "cycle"


def _case_huge_array(tmp_path):
    lib = gdstk.Library()
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((0, 0), (0.05, 0.05), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, columns=100_000, rows=100_000, spacing=(0.1, 0.1)))
    return _lib_write(tmp_path, lib, "p.oas"), [], 2, "over the limit"


def _case_missing_cell(tmp_path):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference("NOT_THERE", (0, 0)))
    top.add(gdstk.rectangle((0, 0), (0.2, 2), layer=7))
    return _lib_write(tmp_path, lib), [], 0, None


def _case_degenerate_polygons(tmp_path):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    top.add(gdstk.Polygon([(0, 0), (1, 0), (2, 0)], layer=7))  # zero area
    top.add(gdstk.Polygon([(0, 0), (1, 1), (1, 0), (0, 1)], layer=7))  # self-intersecting
    top.add(gdstk.Polygon([(3, 3), (3, 3), (3, 3)], layer=7))  # a point
    return _lib_write(tmp_path, lib), [], 0, None  # no line beside another: nothing to flag


def _case_far_coordinates(tmp_path):
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("TOP")
    far = 2_100_000.0  # um: 2.1e9 database units of 1 nm, near the 32-bit limit
    for k in range(6):
        x = far + k * 0.11
        top.add(gdstk.rectangle((x, far), (x + 0.055, far + 1.5), layer=7))
    return _lib_write(tmp_path, lib), [], 1, None


def _case_empty_layout(tmp_path):
    lib = gdstk.Library()
    lib.new_cell("EMPTY")
    return _lib_write(tmp_path, lib), [], 2, "no shapes in cell EMPTY: poly (7/0)"


def _case_no_cells(tmp_path):
    return _lib_write(tmp_path, gdstk.Library()), [], 2, "no top cell"


def _case_layers_absent(tmp_path):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    top.add(gdstk.rectangle((0, 0), (1, 1), layer=99))
    # A deck whose layer map misses the layout must not pass: exit 2, naming both.
    return _lib_write(tmp_path, lib), [], 2, "poly (7/0); the file has 99/0"


def _case_not_a_layout(tmp_path):
    p = tmp_path / "p.gds"
    p.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(100))
    return p, [], 2, "not a GDSII or OASIS file"


PATHOLOGICAL = [
    _case_self_reference,
    _case_ab_cycle,
    _case_huge_array,
    _case_missing_cell,
    _case_degenerate_polygons,
    _case_far_coordinates,
    _case_empty_layout,
    _case_no_cells,
    _case_layers_absent,
    _case_not_a_layout,
]


@pytest.mark.parametrize("make", PATHOLOGICAL, ids=lambda f: f.__name__[6:])
def test_pathological_layouts(tmp_path, capsys, deck, make):
    path, extra, want, needle = make(tmp_path)
    t0 = time.monotonic()
    code, err = _run(capsys, path, deck, *extra)
    assert time.monotonic() - t0 < 120
    _clean(code, err)
    assert code == want, err
    if needle:
        assert needle in err


def test_far_coordinates_markers_are_written_where_the_finding_is(tmp_path, capsys, deck):
    """GDSII coordinates are 4-byte signed integers (GDSII stream format: common
    practice), up to 2^31 - 1 = 2,147,483,647 nm here: the marker of an array at
    2.1e9 nm must land on it, not wrap round."""
    path, _, _, _ = _case_far_coordinates(tmp_path)
    markers = tmp_path / "m.gds"
    code, err = _run(capsys, path, deck, "--markers", str(markers))
    _clean(code, err)
    assert code == 1, err  # the 110 nm pitch is below this deck's 115.3 nm cutoff
    (cell,) = gdstk.read_gds(str(markers)).cells
    (marker,) = cell.polygons
    far = 2_100_000.0  # um, as drawn by _case_far_coordinates: 6 lines 55 nm wide at 110 nm
    (x0, y0), (x1, y1) = marker.bounding_box()
    assert (x0, y0, x1, y1) == pytest.approx(
        (far, far, far + 5 * 0.11 + 0.055, far + 1.5), abs=1e-6
    )


def _big_layout(tmp_path):
    lib = gdstk.Library()
    cell = lib.new_cell("ARR")
    for k in range(300):
        cell.add(gdstk.rectangle((k * 0.11, 0), (k * 0.11 + 0.055, 3), layer=7))
    top = lib.new_cell("TOP")
    # Placed with a seeded jitter of whole nm: no two tiles hold the same content,
    # so the scan cannot reuse tiles and finish early.
    rng = random.Random(11)
    for i in range(40):
        for j in range(40):
            top.add(
                gdstk.Reference(
                    cell, (i * 40 + rng.randint(0, 999) * 1e-3, j * 5 + rng.randint(0, 999) * 1e-3)
                )
            )
    return _lib_write(tmp_path, lib, "big.oas")


@pytest.mark.slow
def test_sigterm_exits_143_and_leaves_no_partial_output(tmp_path, deck):
    """A scan terminated while it works: exit 143, a short message, no output file."""
    layout = _big_layout(tmp_path)
    out = tmp_path / "out.json"
    exe = Path(sys.executable).parent / "pitchguard"
    proc = subprocess.Popen(
        [exe, "scan", layout, "--rules", deck, "--json", out, "-q"],
        stderr=subprocess.PIPE,
        text=True,
    )
    time.sleep(3.0)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    if proc.returncode in (0, 1):
        pytest.fail("the scan finished before SIGTERM: make the layout larger")
    assert proc.returncode == 143, err
    assert "terminated" in err and "Traceback" not in err
    assert not out.exists()
    assert not [p for p in os.listdir(tmp_path) if p.startswith(".out.json")]


@pytest.mark.slow
def test_mutated_file_with_inconsistent_cut_scans(tmp_path, capsys):
    """A corpus file whose damaged geometry gives a site whose cut crosses the
    feature's far side nearer than the site's width (tests/fixtures/README.md):
    the cut builder must cope, tiled and untiled alike."""
    layout = Path(__file__).resolve().parents[1] / "fixtures" / "mutated_demo_inconsistent_cut.gds"
    deck = Path(__file__).resolve().parents[2] / "rules" / "demo_chip.toml"
    summaries = []
    for extra in ([], ["--untiled"]):
        code = main(["scan", str(layout), "--rules", str(deck), "-q", *extra])
        out, err = capsys.readouterr()
        _clean(code, err)
        summaries.append((code, out.rsplit(", ", 1)[0]))  # all but the time taken
    assert summaries[0] == summaries[1]


def test_array_piled_into_one_tile_is_refused_quickly(tmp_path, capsys):
    """A (corrupt-looking) array of 10^6 instances at zero spacing, in a sparse 5 mm
    layout, puts every shape in one tile: refused from the hierarchy's count,
    before any is read (the memory model's limit: about 243,000 at 2 GB)."""
    lib = gdstk.Library()
    leaf = lib.new_cell("LEAF")
    leaf.add(gdstk.rectangle((0, 0), (0.05, 1), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(leaf, (0, 0), columns=1000, rows=1000, spacing=(0, 0)))
    top.add(gdstk.rectangle((5000, 5000), (5000.05, 5001), layer=7))  # a 5 mm extent
    path = tmp_path / "piled.gds"
    lib.write_gds(str(path))
    deck = tmp_path / "deck.toml"
    deck.write_text(DECK)
    t0 = time.monotonic()
    code = main(["scan", str(path), "--rules", str(deck), "-q"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "memory budget" in err and "1,000,000 shapes" in err
    assert time.monotonic() - t0 < 60


@pytest.mark.parametrize(
    ("sig", "delay_s", "code", "word"),
    [
        (signal.SIGTERM, 0.3, 143, "terminated"),  # while starting up (imports, structure)
        (signal.SIGINT, 0.3, 130, "interrupted"),
        (signal.SIGINT, 2.0, 130, "interrupted"),  # while tiles are scanned
    ],
)
@pytest.mark.slow
def test_stopped_scans_exit_cleanly_at_any_stage(tmp_path, deck, sig, delay_s, code, word):
    """Stopped early or late: the documented exit code and message, no traceback,
    no output file, and the command ends, even with a worker stopped half-way
    through sending its result."""
    layout = _big_layout(tmp_path)
    out = tmp_path / "out.json"
    exe = Path(sys.executable).parent / "pitchguard"
    proc = subprocess.Popen(
        [exe, "scan", layout, "--rules", deck, "--json", out, "-q"],
        stderr=subprocess.PIPE,
        text=True,
    )
    time.sleep(delay_s)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == code, err
    assert word in err and "Traceback" not in err
    assert err.count("no output was left half-written") == 1, err  # the command's, not a worker's
    assert not out.exists()


def test_a_stop_lost_in_a_callback_is_still_honoured(tmp_path, deck, monkeypatch, capsys):
    """Python drops an exception raised while it runs a callback (a Ctrl-C landing
    in the import system's module-lock callback, say), so the handler also notes
    the stop.  Here only the note is left, after the scan: still exit 130, no
    output."""
    import pitchguard.run.tiled as parallel
    from pitchguard.errors import request_stop

    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(20):
        top.add(gdstk.rectangle((k * 0.11, 0), (k * 0.11 + 0.055, 3), layer=7))
    layout = _lib_write(tmp_path, lib, "small.gds")
    real = parallel.scan_tiled

    def scan_then_lost_signal(*args, **kwargs):
        result = real(*args, **kwargs)
        request_stop(KeyboardInterrupt)  # what _on_sigint notes before its raise is lost
        return result

    monkeypatch.setattr(parallel, "scan_tiled", scan_then_lost_signal)
    out = tmp_path / "out.json"
    code = main(["scan", str(layout), "--rules", str(deck), "--json", str(out), "-q"])
    err = capsys.readouterr().err
    assert code == 130, err
    assert "interrupted" in err and "Traceback" not in err
    assert not out.exists()
    monkeypatch.undo()
    # The note is gone: the scan ends on its verdict (the 110 nm pitch is below the
    # deck's 115.3 nm cutoff).
    assert main(["scan", str(layout), "--rules", str(deck), "-q"]) == 1


def test_one_far_coordinate_with_a_small_tile_is_refused(tmp_path, capsys, deck):
    """One vertex 1.6 m out, as a mutated file can have, makes 160,000 tiles of
    10 um (1.6 m / 10 um, arithmetic) for 41 shapes: a tiling of almost all empty
    tiles is refused (exit 2); the automatic tile size still scans the file."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(40):
        top.add(gdstk.rectangle((k * 0.2, 0), (k * 0.2 + 0.1, 2), layer=7))
    top.add(gdstk.Polygon([(0, 3), (1_600_000, 3), (0, 3.1)], layer=7))  # a stray vertex
    path = _lib_write(tmp_path, lib, "far.gds")
    code, err = _run(capsys, path, deck, "--tile-um", "10")
    _clean(code, err)
    assert code == 2 and "almost all empty" in err and "--tile-um" in err
    code, err = _run(capsys, path, deck)
    _clean(code, err)
    assert code in (0, 1)


_FORKED_CHILD_SCRIPT = r"""
import os, signal, sys, time
from multiprocessing import get_context
from pitchguard.cli import stops as cli

signal.signal(signal.SIGTERM, cli.on_sigterm)  # as cli.main installs them
signal.signal(signal.SIGINT, cli.on_sigint)
cli.install_fork_hooks()

def slow_init():
    print("in-init", flush=True)
    time.sleep(30)  # still starting up when it is stopped

# Forked as the tile pool forks its workers (plain processes: the pool's own
# thread would race this script to reap them).
procs = [get_context("fork").Process(target=slow_init) for _ in range(2)]
for p in procs:
    p.start()
time.sleep(1.0)
for p in procs:
    os.kill(p.pid, signal.SIGINT)  # a Ctrl-C reaches the whole process group
time.sleep(0.5)
alive_after_sigint = [p.is_alive() for p in procs]
for p in procs:
    p.terminate()  # SIGTERM, as the engine stops its workers
for p in procs:
    p.join(10)
blocked = signal.pthread_sigmask(signal.SIG_BLOCK, [])
print("result", alive_after_sigint, [p.exitcode for p in procs],
      signal.SIGTERM in blocked, signal.getsignal(signal.SIGTERM) is cli.on_sigterm, flush=True)
"""


@pytest.mark.slow
def test_forked_children_leave_stopping_to_the_command():
    """Children forked from the command ignore SIGINT and die quietly on SIGTERM
    from their first instruction, so a tile worker stopped while it still runs
    its initializer prints no traceback (stopping is the command's to report);
    the parent keeps its handlers and an unblocked signal mask."""
    proc = subprocess.run(
        [sys.executable, "-c", _FORKED_CHILD_SCRIPT], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.count("in-init") == 2, proc.stdout
    assert "Traceback" not in proc.stderr, proc.stderr
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("result")][0]
    assert line == f"result [True, True] [{-signal.SIGTERM}, {-signal.SIGTERM}] False True", line


_PENDING_AT_FORK_SCRIPT = r"""
import os, signal
from pitchguard.cli import stops as cli
from pitchguard.errors import check_stop

signal.signal(signal.SIGTERM, cli.on_sigterm)  # as cli.main installs them
signal.signal(signal.SIGINT, cli.on_sigint)
cli.install_fork_hooks()
# A SIGTERM that arrives while a fork has the stop signals blocked is pending
# when the parent's after-fork hook unblocks them.
signal.pthread_sigmask(signal.SIG_BLOCK, cli.STOP_SIGNALS)
os.kill(os.getpid(), signal.SIGTERM)
try:
    cli.after_fork_in_parent()
    print("hook returned", flush=True)
except BaseException as exc:
    print("hook raised", type(exc).__name__, flush=True)
try:
    check_stop()
    print("not honoured", flush=True)
except cli.Terminated:
    print("honoured", flush=True)
"""


def test_a_stop_pending_at_a_fork_is_noted_not_raised_in_the_hook():
    """A SIGTERM pending while the tile pool forks is delivered in the after-fork
    hook, where Python would print a raised exception's traceback ("Exception
    ignored in: ...") and drop it: in the hook the stop is only noted, and the
    wait that follows raises it (next test)."""
    proc = subprocess.run(
        [sys.executable, "-c", _PENDING_AT_FORK_SCRIPT], capture_output=True, text=True, timeout=60
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split("\n")[:2] == ["hook returned", "honoured"], proc.stdout + proc.stderr


def _sleeper(seconds):
    time.sleep(seconds)
    return "done"


def test_waits_on_a_child_honour_a_noted_stop(tmp_path):
    """The guarded reader's wait wakes every STOP_POLL_S and raises a noted stop,
    killing the child, instead of waiting out the read (here 30 s)."""
    from pitchguard.cli.stops import Terminated
    from pitchguard.errors import request_stop
    from pitchguard.layout.isolated import run_isolated

    request_stop(Terminated)
    t0 = time.monotonic()
    try:
        with pytest.raises(Terminated):
            run_isolated(_sleeper, (30,), tmp_path / "x.gds", "sleeping", 60)
    finally:
        request_stop(None)
    assert time.monotonic() - t0 < 10


def test_a_read_over_its_time_limit_is_stopped(tmp_path):
    """--read-timeout: the guarded read's wait, taken in slices (see above), ends
    at the limit with a clear error, and the child is killed."""
    from pitchguard.errors import LayoutError
    from pitchguard.layout.isolated import run_isolated

    t0 = time.monotonic()
    with pytest.raises(LayoutError, match="took over 1 s; stopped"):
        run_isolated(_sleeper, (30,), tmp_path / "x.gds", "sleeping", 0.6)
    assert 0.5 < time.monotonic() - t0 < 10


@pytest.mark.parametrize("where", ["scan", "start-up"])
def test_a_stop_turned_into_another_exception_is_still_a_stop(
    tmp_path, deck, monkeypatch, capsys, where
):
    """Library code may turn the handler's exception into one of its own
    (pydantic-core, building a deck model's validator at import, raises a
    SchemaError from it).  Whatever exception a noted stop leaves behind, the
    command reports the stop (143 here) and nothing else."""
    import pitchguard.cli.app as app
    import pitchguard.run.tiled as parallel
    from pitchguard.cli.stops import Terminated
    from pitchguard.errors import request_stop

    def stopped_then_wrapped(*args, **kwargs):
        request_stop(Terminated)  # what the handler notes before it raises
        raise ValueError("a library's own error, raised from the handler's")

    if where == "scan":
        monkeypatch.setattr(parallel, "scan_tiled", stopped_then_wrapped)
    else:
        monkeypatch.setattr(app, "build_parser", stopped_then_wrapped)
    code = main(["scan", str(tmp_path / "x.gds"), "--rules", str(deck), "-q"])
    err = capsys.readouterr().err
    assert code == 143, err
    assert err == "pitchguard: terminated; no output was left half-written\n"


def test_a_stop_in_the_import_systems_lock_callback_is_noted_not_raised():
    """A Ctrl-C may run the handler inside the import system's module-lock
    callback, where Python prints "Exception ignored in: <function
    _get_module_lock.<locals>.cb>" with a traceback and drops a raised
    exception: there the stop is only noted (and honoured at the next check);
    anywhere else it is raised at once."""
    import pitchguard.cli.stops as cli
    from pitchguard.errors import request_stop, stop_requested

    ns = {"sys": sys}
    exec(
        compile("def cb():\n    return sys._getframe()\n", "<frozen importlib._bootstrap>", "exec"),
        ns,
    )
    in_callback = ns["cb"]()
    try:
        try:
            cli.on_sigint(signal.SIGINT, in_callback)
        except KeyboardInterrupt:
            pytest.fail("raised inside the import system's callback")
        assert stop_requested() is KeyboardInterrupt
        request_stop(None)
        with pytest.raises(KeyboardInterrupt):
            cli.on_sigint(signal.SIGINT, sys._getframe())
    finally:
        request_stop(None)
