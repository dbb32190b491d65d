"""Project settings: the deck and options a design repository scans with.

``pitchguard scan chip.oas`` inside a repository finds its settings in the
nearest ``.pitchguard.toml`` (keys at the top level) or ``pyproject.toml``
with a ``[tool.pitchguard]`` table, looking from the current folder up to the
repository's root (the folder holding ``.git``).  Options given on the
command line win; ``--no-config`` ignores the file.
"""

from __future__ import annotations

import argparse
import os
from dataclasses import dataclass, field
from pathlib import Path

from pitchguard.errors import PitchguardError

OWN_FILE = ".pitchguard.toml"
PATH_KEYS = ("rules", "baseline", "sarif_root")
"""Keys naming files or folders: relative to the settings file's folder."""

KEYS = {
    # key: the commands it sets a default for
    "rules": ("scan", "diff", "probe", "sweep"),
    "baseline": ("scan",),
    "fail_on": ("scan", "diff"),
    "cell": ("scan", "diff"),
    "jobs": ("scan", "diff"),
    "max_memory_mb": ("scan", "diff"),
    "tile_um": ("scan", "diff"),
    "read_timeout": ("scan", "diff"),
    "max_shapes": ("scan", "diff"),
    "scheduler": ("scan", "diff"),
    "untiled": ("scan", "diff"),
    "top": ("scan", "diff"),
    "html_pictures": ("scan", "diff"),
    "sarif_root": ("scan", "diff"),
    "flat_markers": ("scan", "diff"),
    "json_inline_texts": ("scan", "diff"),
}


class ConfigError(PitchguardError):
    """The project's settings file is invalid."""


@dataclass
class Settings:
    """Settings found for the current folder: where, and the raw values."""

    path: Path
    table: str  # how the file names the table: "[tool.pitchguard]" or the file itself
    values: dict = field(default_factory=dict)

    def where(self, key: str) -> str:
        prefix = "" if self.table == OWN_FILE else f"{self.table} "
        return f"{self.path}: {prefix}{key}"


def _read_toml(path: Path) -> dict:
    import tomllib

    from pitchguard.errors import read_input_text

    text = read_input_text(path, "settings", ConfigError)  # a regular file, at most 1 MiB
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    except RecursionError:
        raise ConfigError(f"{path}: nested too deeply to be a settings file") from None


def find_settings(start: Path | None = None) -> Settings | None:
    """The nearest settings at or above ``start`` (default: the current folder),
    not looking above the repository root; None when there are none."""
    here = (start or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        own = folder / OWN_FILE
        if os.path.lexists(own):  # a broken or looping link is reported, not skipped
            return Settings(own, OWN_FILE, _read_toml(own))
        project = folder / "pyproject.toml"
        if os.path.lexists(project):
            data = _read_toml(project)
            tool = data.get("tool", {})
            table = tool.get("pitchguard") if isinstance(tool, dict) else None
            if table is not None:
                if not isinstance(table, dict):
                    raise ConfigError(f"{project}: [tool.pitchguard] must be a table")
                return Settings(project, "[tool.pitchguard]", table)
        if (folder / ".git").exists():
            return None
    return None


def _option(parser: argparse.ArgumentParser, key: str) -> argparse.Action | None:
    for action in parser._actions:  # argparse keeps no public index of actions by dest
        if action.dest == key:
            return action
    return None


def defaults_for(settings: Settings, command: str, parser: argparse.ArgumentParser) -> dict:
    """The option defaults ``settings`` give ``command`` (whose parser is
    ``parser``), checked with the options' own converters."""
    from pitchguard.outputs.texts import printable

    out = {}
    for key, value in settings.values.items():
        if key not in KEYS:
            known = ", ".join(sorted(KEYS))
            raise ConfigError(
                f"{settings.where(printable(str(key))[:80])}: unknown key (known: {known})"
            )
        if command not in KEYS[key]:
            continue
        action = _option(parser, key)
        if action is None:
            continue
        where = settings.where(key)
        if isinstance(action, argparse._StoreTrueAction):
            if not isinstance(value, bool):
                raise ConfigError(f"{where}: expected true or false, got {value!r}")
            out[key] = value
            continue
        if isinstance(value, bool) or not isinstance(value, str | int | float):
            raise ConfigError(f"{where}: expected a string or a number, got {type(value).__name__}")
        if key in PATH_KEYS:
            out[key] = settings.path.parent / str(value)
            continue
        text = str(value)
        if action.choices is not None and text not in action.choices:
            raise ConfigError(f"{where}: expected one of {', '.join(action.choices)}, got {text!r}")
        try:
            out[key] = action.type(text) if action.type else text
        except (argparse.ArgumentTypeError, ValueError) as exc:
            raise ConfigError(f"{where}: {exc}") from None
    return out
