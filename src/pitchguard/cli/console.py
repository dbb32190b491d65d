"""Terminal output that survives a reader going away (| head), and progress."""

from __future__ import annotations

import os
import sys


def progress_callback(console):
    """A rich progress bar on stderr, or nothing when not a terminal."""
    if not console.is_terminal:
        return None, None
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    bar = Progress(
        TextColumn("scanning {task.description:<24}"),
        BarColumn(),
        TimeElapsedColumn(),
        console=console,
        transient=True,
    )
    task = bar.add_task("", total=1)

    def update(stage: str, done: int, total: int) -> None:
        bar.update(task, description=stage, completed=done, total=total)

    return bar, update


MESSAGE_CHARS = 2000
"""The longest line a note or an error shows (the user text in it cut in the middle)."""


def one_line(text: str) -> str:
    """``text`` as one line a terminal shows as text: control characters (newlines,
    escape sequences) written out, very long text cut in the middle."""
    from pitchguard.outputs.user_text import clipped, printable

    return printable(clipped(text, MESSAGE_CHARS, middle=True))


def show_note(console, text: str) -> None:
    """Advice on stderr, one line (above a progress bar, if one is shown)."""
    console.print(
        f"pitchguard: note: {one_line(text)}", soft_wrap=True, markup=False, highlight=False
    )


def reader_gone(stream) -> None:
    """``stream``'s reader went away (``pitchguard scan ... | head``): what is
    still to write to it goes nowhere, and the command ends with the exit code
    it would have had with all of it read (rich's own handling exits 1, which
    would turn a pass into a fail)."""
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, stream.fileno())
    os.close(devnull)


def tell(text: str) -> None:
    """A line on stderr (see :func:`reader_gone`), as :func:`one_line` shows it."""
    try:
        print(one_line(text), file=sys.stderr, flush=True)
    except BrokenPipeError:
        reader_gone(sys.stderr)


def say(text: str) -> None:
    """A line on stdout (see :func:`reader_gone`)."""
    try:
        print(text, flush=True)
    except BrokenPipeError:
        reader_gone(sys.stdout)


def make_console(stderr: bool = False):
    """A rich console on stdout (120 columns when not a terminal: CI logs,
    pipes) or on stderr; a reader that went away does not change the exit
    code (see :func:`reader_gone`)."""
    from rich.console import Console

    class _Quietly(Console):
        def on_broken_pipe(self) -> None:
            self.quiet = True
            reader_gone(sys.stderr if self.stderr else sys.stdout)

    if stderr:
        return _Quietly(stderr=True)
    c = _Quietly()
    return c if c.is_terminal else _Quietly(width=120)


def number_text(v: float, unit: str = "", digits: int = 2) -> str:
    import math

    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.{digits}f}{unit}"


class NullContext:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False
