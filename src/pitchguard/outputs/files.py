"""Writing output files safely: never over an input, atomically, errors as one line.

A regular file (or a new one) is written to a temporary file beside it and
renamed into place, so a failure or a stop leaves the old file untouched.
A character device or a FIFO (``/dev/stdout``, ``/dev/null``, a named pipe)
cannot be replaced: it is written in place, from a temporary file checked
first.  Block devices, directories and sockets are refused.

Temporary files are named ``.<name>.pitchguard-<pid>-<token>.tmp``; one left
by a process that died (``kill -9``) is removed by the next write into the
same folder, and only when no process of that pid is alive.
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import stat
import tempfile
from pathlib import Path

from pitchguard.errors import STOP_POLL_S, OutputError, check_stop
from pitchguard.outputs.user_text import shown_path

TEMP_NAME_BYTES = 160
"""Bytes of the output's name kept in its temporary's name (a name has at most 255)."""

FIFO_WAIT_S = 60.0
"""How long a FIFO given as an output may wait for a reader to open it."""

_TEMP = re.compile(r"\..*\.pitchguard-([0-9]{1,10})-[0-9a-f]{8}\.tmp", re.DOTALL)


def temp_name(name: str) -> str:
    """The temporary file's name for output file ``name``: recognisable as ours, with
    the writing process's pid (see :func:`remove_stale_temporaries`)."""
    stem = os.fsdecode(os.fsencode(name)[:TEMP_NAME_BYTES])  # a cut character stays bytes
    return f".{stem}.pitchguard-{os.getpid()}-{secrets.token_hex(4)}.tmp"


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (OSError, OverflowError, ValueError):
        return True  # someone else's process, or a pid we cannot judge: keep its file
    return True


def remove_stale_temporaries(folder: Path) -> list[str]:
    """Remove our temporary files in ``folder`` whose writing process is gone; the
    names removed.  Nothing that does not match our naming exactly is touched."""
    removed = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _TEMP.fullmatch(entry.name)
        if m is None or _alive(int(m.group(1))):
            continue
        try:
            if entry.is_file(follow_symlinks=False):
                os.unlink(entry.path)
                removed.append(entry.name)
        except OSError:
            continue
    return removed


def check_not_input(out: Path, inputs: list[Path]) -> None:
    target = resolved(out)
    for p in inputs:
        try:
            if out.exists() and p.exists() and out.samefile(p):
                raise OutputError(f"{shown_path(out)}: refusing to overwrite an input file")
        except OSError:
            continue
        if target == resolved(p, strict=False):
            raise OutputError(f"{shown_path(out)}: refusing to overwrite an input file")


def resolved(path: Path, strict: bool = True) -> Path:
    """``path`` absolute with its symbolic links followed.  A loop of links is an
    :class:`OutputError` (``strict``) or leaves the path as given, made absolute."""
    try:
        return Path(path).resolve()
    except (OSError, RuntimeError):  # RuntimeError: a loop, before Python 3.13
        if not strict:
            return Path(path).absolute()
        raise OutputError(
            f"{shown_path(path)}: cannot follow its symbolic links (they form a loop)"
        ) from None


def _reason(exc: OSError) -> str:
    return exc.strerror or str(exc) or type(exc).__name__


def atomic_write(out: Path, write, inputs: list[Path], check=None) -> None:
    """Write ``out`` with ``write(path)``, which produces the content in ``path``.

    A failure (an OS error, a stop) leaves any existing ``out`` untouched and no
    temporary file behind; ``out`` may never be one of ``inputs``.  ``check(path)``,
    if given, returns why a written file is not whole (a library that does not
    report its write errors), or None.  Every OS error is an :class:`OutputError`
    naming ``out`` and the reason.
    """
    out = Path(out)
    try:
        check_not_input(out, inputs)
        target, open_node = _target(out)
        if open_node is not None:
            _write_in_place(out, open_node, write, check)
            return
        check_not_input(target, inputs)
        folder = target.parent
        if not folder.is_dir():
            raise OutputError(f"{shown_path(out)}: folder {shown_path(folder)} does not exist")
        remove_stale_temporaries(folder)
        tmp = _create_temp(out, folder, target.name)
        try:
            check_stop()
            write(tmp)
            _verify(out, tmp, check)
            check_stop()  # a stop asked for while writing: no output
            os.replace(tmp, target)
        finally:
            _unlink(tmp)
    except OSError as exc:
        raise OutputError(f"{shown_path(out)}: cannot write: {_reason(exc)}") from None


_DESCRIPTOR = re.compile(r"/(?:dev/fd|proc/self/fd|proc/([0-9]+)/fd)/([0-9]+)")
_STANDARD = {"/dev/stdin": 0, "/dev/stdout": 1, "/dev/stderr": 2}


def _descriptor(out: Path) -> int | None:
    """The open descriptor ``out`` names (``/dev/stdout``, ``/dev/fd/3``), or None:
    written as it is open (a ``>>`` redirection appends), never replaced."""
    path = os.path.normpath(os.path.abspath(out))
    if path in _STANDARD:
        return _STANDARD[path]
    m = _DESCRIPTOR.fullmatch(path)
    if m is None or (m.group(1) is not None and int(m.group(1)) != os.getpid()):
        return None
    return int(m.group(2))


def _target(out: Path):
    """Where to write ``out``: ``(path, None)`` for a regular or new file (a symbolic
    link's target: the link stays), ``(out, open_node)`` for a node written in place,
    ``open_node()`` giving a descriptor to write it."""
    fd = _descriptor(out)
    if fd is not None:
        return out, lambda: os.dup(fd)
    try:
        st = os.stat(out)
    except FileNotFoundError:
        st = None
    if st is None or stat.S_ISREG(st.st_mode):
        return (Path(os.path.realpath(out)) if os.path.islink(out) else out), None
    mode = st.st_mode
    if stat.S_ISCHR(mode) or stat.S_ISFIFO(mode):
        return out, lambda: _open_node(out, mode)
    kind = (
        "a directory"
        if stat.S_ISDIR(mode)
        else "a block device"
        if stat.S_ISBLK(mode)
        else "a socket"
        if stat.S_ISSOCK(mode)
        else "not a regular file"
    )
    raise OutputError(f"{shown_path(out)}: is {kind}; give a file to write")


def _create_temp(out: Path, folder: Path, name: str) -> Path:
    tmp = folder / temp_name(name)
    try:
        # 0o666 less the umask: the mode a plain open() gives a new file.
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, 0o666)
    except OSError as exc:
        raise OutputError(
            f"{shown_path(out)}: cannot create a file in {shown_path(folder)}: {_reason(exc)}"
        ) from None
    os.close(fd)
    return tmp


def _verify(out: Path, tmp: Path, check) -> None:
    why = None if check is None else check(tmp)
    if why:
        raise OutputError(f"{shown_path(out)}: cannot write: {why}")


def _unlink(path: Path) -> None:
    with contextlib.suppress(OSError):
        os.unlink(path)


def _write_in_place(out: Path, open_node, write, check) -> None:
    """Write a character device, a FIFO or an open descriptor: the content goes to a
    private temporary file first (checked whole), then is copied into the node,
    which stays."""
    staging = Path(tempfile.gettempdir())
    remove_stale_temporaries(staging)
    tmp = _create_temp(out, staging, out.name)
    try:
        check_stop()
        write(tmp)
        _verify(out, tmp, check)
        check_stop()
        fd = open_node()
        with open(tmp, "rb") as src, open(fd, "wb", closefd=True) as dst:
            while block := src.read(1 << 20):
                dst.write(block)
    finally:
        _unlink(tmp)


def _open_node(out: Path, mode: int) -> int:
    """A descriptor writing to ``out`` (no create, no truncate); a FIFO waits for a
    reader (at most :data:`FIFO_WAIT_S`, stops honoured) instead of hanging."""
    flags = os.O_WRONLY | os.O_CLOEXEC | os.O_NOCTTY
    if not stat.S_ISFIFO(mode):
        return os.open(out, flags)
    import time

    deadline = time.monotonic() + FIFO_WAIT_S
    while True:
        try:
            fd = os.open(out, flags | os.O_NONBLOCK)
        except OSError as exc:
            if exc.errno != errno.ENXIO:  # ENXIO: no reader yet
                raise
            if time.monotonic() > deadline:
                raise OutputError(
                    f"{shown_path(out)}: a FIFO that no reader opened within {FIFO_WAIT_S:g} s"
                ) from None
            check_stop()
            time.sleep(min(STOP_POLL_S, 0.1))
            continue
        os.set_blocking(fd, True)
        return fd
