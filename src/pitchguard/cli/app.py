"""Entry point: runs a command, maps errors to exit codes, honours stops."""

from __future__ import annotations

import gc
import os
import signal
import sys

from pitchguard.cli.console import tell
from pitchguard.cli.explain import cmd_probe, cmd_rules_check, cmd_sweep
from pitchguard.cli.parser import build_parser
from pitchguard.cli.scanning import cmd_diff, cmd_scan
from pitchguard.cli.stops import (
    GC_PAUSED,
    Terminated,
    install_fork_hooks,
    on_sigint,
    on_sigterm,
    resume_gc,
)
from pitchguard.errors import (
    EXIT_USAGE,
    PitchguardError,
    check_stop,
    request_stop,
    stop_requested,
)

EXIT_INTERNAL = 3


def main(argv: list[str] | None = None) -> int:
    # numpy asks the kernel for huge pages for every array of 4 MB or more; a
    # scan makes and drops such arrays by the thousand, and where the kernel
    # compacts memory to find huge pages that costs more than it saves (see
    # DEVELOPERS.md).  numpy reads the variable when it is first
    # imported, which the command does after this; a value the user set is kept.
    os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")
    install_fork_hooks()
    request_stop(None)
    # No garbage collection while the command starts: importing numpy, pydantic
    # and the deck's models makes objects that live to the end, and collections
    # that walk them find nothing.  Resumed before any scan (workers fork with
    # it on) and before other commands' work.
    if gc.isenabled():
        gc.disable()
        GC_PAUSED["by_us"] = True
    try:
        previous = {
            sig: signal.signal(sig, handler)
            for sig, handler in ((signal.SIGTERM, on_sigterm), (signal.SIGINT, on_sigint))
        }
    except ValueError:  # not the main thread (embedded use): leave signals alone
        previous = {}
    try:
        code = _main(argv)
        # A signal that arrived while Python ran a callback (the import system's,
        # say) was dropped there ("Exception ignored in ..."): honour it now.
        check_stop()
    except KeyboardInterrupt:  # before or after the command ran (while importing, say)
        code = _stopped(130)
    except Terminated:
        code = _stopped(143)
    except Exception:
        if stop_requested() is None:
            raise
        code = _stopped_by_request()  # its exception was turned into another one
    finally:
        resume_gc()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        request_stop(None)
    if code in (130, 143) and argv is None:
        # Run as the command: leave now.  Stopped worker processes can leave the
        # process pool's result thread blocked on a half-written result, and the
        # interpreter would wait for it at exit forever; temporary output files
        # were removed while the stack unwound.
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    if argv is None:
        # The interpreter's last collections would walk every object left; the
        # process ends anyway.
        gc.freeze()
    return code


def _stopped_by_request() -> int:
    return _stopped(130 if stop_requested() is KeyboardInterrupt else 143)


def _stopped(code: int) -> int:
    request_stop(None)  # honoured: main's last check_stop must not report it again
    what = "interrupted" if code == 130 else "terminated"
    tell(f"pitchguard: {what}; no output was left half-written")
    return code


def _settings(argv: list[str] | None):
    """The project's settings, for a command that takes them and was not told
    ``--no-config``; None otherwise."""
    from pitchguard.cli.config import find_settings
    from pitchguard.cli.parser import SETTINGS_COMMANDS

    words = list(sys.argv[1:] if argv is None else argv)
    command = next((w for w in words if not w.startswith("-")), None)
    if command not in SETTINGS_COMMANDS or "--no-config" in words:
        return None
    return find_settings()


def _main(argv: list[str] | None = None) -> int:
    try:  # the project's settings file, and its values through the options' converters
        settings = _settings(argv)
        parser = build_parser(settings)
    except PitchguardError as exc:
        tell(f"pitchguard: error: {exc}")
        return exc.exit_code
    args = parser.parse_args(argv)  # a command is required: argparse says so in one line
    handler = {"scan": cmd_scan, "probe": cmd_probe, "sweep": cmd_sweep, "diff": cmd_diff}.get(
        args.command, cmd_rules_check
    )
    if handler not in (cmd_scan, cmd_diff):  # those resume it when their scans start
        resume_gc()
    try:
        if getattr(args, "rules", "") is None:
            raise PitchguardError(
                "no rule deck: give --rules DECK, or set `rules` in .pitchguard.toml or in "
                "[tool.pitchguard] of pyproject.toml"
            )
        code = handler(args)
        if settings is not None and not getattr(args, "quiet", False):
            # Last: a run that fails says only why (one line).
            tell(f"pitchguard: note: settings from {settings.path}")
        return code
    except KeyboardInterrupt:
        return _stopped(130)
    except Terminated:
        return _stopped(143)
    except Exception as exc:
        if stop_requested() is not None:
            # What the stop broke (a child the same signal stopped, a library
            # that turned the handler's exception into its own): report the stop.
            return _stopped_by_request()
        if getattr(args, "debug", False):
            raise
        if isinstance(exc, PitchguardError):
            for line in exc.lines:  # one per problem: a deck's are all reported at once
                tell(f"pitchguard: error: {line}")
            return exc.exit_code
        if isinstance(exc, MemoryError):  # the machine's limit, not a bug
            tell(
                "pitchguard: error: out of memory: scan tiled (without --untiled), give "
                "--max-memory-mb, use fewer --jobs or a --region"
            )
            return EXIT_USAGE
        # A bug, not the user's fault.
        tell(
            f"pitchguard: internal error: {type(exc).__name__}: {exc} "
            "(run with --debug for a traceback, and please report it)"
        )
        return EXIT_INTERNAL
