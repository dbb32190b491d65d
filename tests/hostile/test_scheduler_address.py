"""A bad or unreachable ``--scheduler`` is bad input: exit 2 with one line
"cannot connect to the dask scheduler at ADDRESS: why", from the command line,
from the project's settings and from the Python API, within the connection
timeout (never exit 3, a traceback or a wait for ever).

Reference: the README's error contract; dask.distributed's address forms
(``[tcp://]HOST:PORT``, ``ws://``; tls and wss need certificates, ucx its own
packages).
"""

from __future__ import annotations

import shutil
import socket
import threading

import pytest

import pitchguard
from decks import DEMO_DECK, SAMPLE_GDS
from pitchguard.cli import main
from pitchguard.errors import PitchguardError

SHORT_S = 1.0
"""The connection timeout in these tests (the command's own is longer)."""


@pytest.fixture(autouse=True)
def short_timeout(monkeypatch):
    monkeypatch.setattr("pitchguard.run.engine.CONNECT_TIMEOUT_S", SHORT_S, raising=False)


def _scan(capsys, *extra: str) -> tuple[int, str]:
    try:
        code = main(["scan", str(SAMPLE_GDS), "--rules", str(DEMO_DECK), "-q", *extra])
    except SystemExit as exc:
        code = exc.code
    return code, capsys.readouterr().err


def _unreachable(code: int, err: str, address: str) -> None:
    assert code == 2, (code, err)
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(
        f"pitchguard: error: cannot connect to the dask scheduler at {address}: "
    )
    assert len(lines[0]) > len(
        f"pitchguard: error: cannot connect to the dask scheduler at {address}: "
    )


MALFORMED = [
    "5",
    "tcp://",
    "tcp://host",
    "inproc://x",
    "ucx://1.2.3.4:5",
    "tls://127.0.0.1:1",
    "wss://127.0.0.1:1",
    "http://[::1",
    "http://127.0.0.1:80",
    "tcp://127.0.0.1:99999",
    "tcp://127.0.0.1:8786/path",
    " ",
]


@pytest.mark.parametrize("address", MALFORMED)
def test_malformed_addresses_are_one_line(capsys, tmp_path, monkeypatch, address):
    monkeypatch.chdir(tmp_path)
    code, err = _scan(capsys, "--scheduler", address)
    _unreachable(code, err, address)


def test_malformed_address_from_settings(capsys, tmp_path, monkeypatch):
    root = tmp_path / "design"
    (root / ".git").mkdir(parents=True)
    shutil.copy(DEMO_DECK, root / "deck.toml")
    (root / ".pitchguard.toml").write_text('rules = "deck.toml"\nscheduler = 5\n')
    monkeypatch.chdir(root)
    try:
        code = main(["scan", str(SAMPLE_GDS)])
    except SystemExit as exc:
        code = exc.code
    _unreachable(code, capsys.readouterr().err, "5")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _ends(target) -> None:
    """Run ``target`` on a thread and fail if it has not ended well after the
    connection timeout (a wait for ever would hold the test run)."""
    outcome = {}

    def run():
        try:
            target()
        except BaseException as exc:  # reported below
            outcome["error"] = exc

    t = threading.Thread(target=run, daemon=True)
    t.start()
    t.join(30 * SHORT_S)
    assert not t.is_alive(), "still waiting for the scheduler"
    if "error" in outcome:
        raise outcome["error"]


def test_refused_connection_is_one_line(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    address = f"tcp://127.0.0.1:{_free_port()}"  # nothing listens there
    result = {}
    _ends(lambda: result.update(out=_scan(capsys, "--scheduler", address)))
    _unreachable(*result["out"], address)


def test_a_port_that_never_answers_is_one_line(capsys, tmp_path, monkeypatch):
    """A listener that accepts and says nothing (not a scheduler)."""
    monkeypatch.chdir(tmp_path)
    with socket.socket() as silent:
        silent.bind(("127.0.0.1", 0))
        silent.listen()
        address = f"127.0.0.1:{silent.getsockname()[1]}"
        result = {}
        _ends(lambda: result.update(out=_scan(capsys, "--scheduler", address)))
    _unreachable(*result["out"], address)
    assert f"no answer within {SHORT_S:g} s" in result["out"][1]


def test_api_raises_the_same_error():
    address = f"127.0.0.1:{_free_port()}"
    errors = []

    def scan():
        with pytest.raises(PitchguardError) as err:
            pitchguard.scan(SAMPLE_GDS, DEMO_DECK, scheduler=address)
        errors.append(str(err.value))

    _ends(scan)
    assert errors[0].startswith(f"cannot connect to the dask scheduler at {address}: ")
    assert "\n" not in errors[0]
    with pytest.raises(PitchguardError, match="cannot connect to the dask scheduler at 5: "):
        pitchguard.scan(SAMPLE_GDS, DEMO_DECK, scheduler="5")
    with pytest.raises(TypeError, match="scheduler"):
        pitchguard.scan(SAMPLE_GDS, DEMO_DECK, scheduler=8786)
