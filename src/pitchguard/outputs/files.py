"""Writing output files safely: never over an input, atomically."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from pitchguard.errors import OutputError, check_stop


def check_not_input(out: Path, inputs: list[Path]) -> None:
    for p in inputs:
        try:
            if out.exists() and p.exists() and out.samefile(p):
                raise OutputError(f"{out}: refusing to overwrite an input file")
        except OSError:
            continue
        if out.resolve() == p.resolve():
            raise OutputError(f"{out}: refusing to overwrite an input file")


def atomic_write(out: Path, write, inputs: list[Path]) -> None:
    """Write via a temporary file in the same folder, then rename over ``out``.

    ``write(tmp_path)`` produces the content.  A failure leaves any existing
    ``out`` untouched; ``out`` may never be one of ``inputs``.
    """
    out = Path(out)
    check_not_input(out, inputs)
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{out}: folder {folder} does not exist")
    if out.is_dir():
        raise OutputError(f"{out}: is a directory")
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=out.suffix, dir=folder)
    os.close(fd)
    try:
        check_stop()
        write(Path(tmp))
        check_stop()  # a stop asked for while writing: no output
        # mkstemp makes the file private (0600); give it the mode a plain open() would.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, out)
    except OSError as exc:
        raise OutputError(f"{out}: cannot write: {exc.strerror or exc}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
