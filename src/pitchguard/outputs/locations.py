"""Where a report says the layout is: relative to the repository that holds it.

Code-scanning services match a result to a file of the repository they
scanned, and the folder a CI job checks the repository out into differs
from run to run.  So SARIF names the layout by a path relative to a base
(``uriBaseId``) and says once, in the run, what that base was on this machine
(``originalUriBaseIds``), as SARIF 2.1.0 §3.4.4 and §3.14.14 describe.
"""

from __future__ import annotations

import os
import urllib.parse
from pathlib import Path

from pitchguard.errors import PitchguardError
from pitchguard.outputs.user_text import shown_path

BASE_ID = "REPOROOT"
"""Our name for the base the layout's path is relative to."""


def check_root(root: str | Path) -> None:
    """Refuse (one line) a base that is not an existing folder: a typo would
    silently give absolute locations."""
    if not os.path.isdir(root):
        what = "does not exist" if not os.path.lexists(root) else "is not a folder"
        raise PitchguardError(f"--sarif-root {shown_path(root)}: {what}")


def _resolved(path: Path) -> Path:
    try:
        return Path(path).resolve()
    except (OSError, RuntimeError):  # a loop of symbolic links: as given
        return Path(path).absolute()


def repository_root(path: Path) -> Path | None:
    """The nearest folder at or above ``path`` that holds a ``.git`` (a folder,
    or the file a git worktree or submodule has instead); None when none does."""
    p = _resolved(path)
    for folder in (p, *p.parents) if p.is_dir() else p.parents:
        if (folder / ".git").exists():
            return folder
    return None


def _relative(path: Path, root: Path) -> str | None:
    """``path`` under ``root`` as a percent-encoded relative URI, or None."""
    for a, b in ((path.absolute(), root.absolute()), (_resolved(path), _resolved(root))):
        try:
            rel = a.relative_to(b)
        except ValueError:
            continue
        # Percent-encode (spaces, '%', '#', and ':' which would read as a scheme).
        # Bytes: a name that is not UTF-8 is encoded as the file system holds it.
        return urllib.parse.quote(os.fsencode(rel.as_posix()), safe="/")
    return None


def _folder_uri(folder: Path) -> str:
    uri = _resolved(folder).as_uri()
    return uri if uri.endswith("/") else uri + "/"  # a base URI must end in a slash (§3.14.14)


def artifact_location(layout: Path, root: str | Path | None = None) -> tuple[dict, dict | None]:
    """The SARIF ``artifactLocation`` of ``layout`` and the run's
    ``originalUriBaseIds`` (None when the location is absolute).

    The base is ``root`` when given, else the git work tree holding the
    layout, else the current folder; a layout outside the base gets its
    absolute ``file:`` URI.
    """
    layout = Path(layout)
    if root is not None:
        check_root(root)
    base = Path(root) if root is not None else repository_root(layout) or Path.cwd()
    rel = _relative(layout, base)
    if rel is None:
        return {"uri": _resolved(layout).as_uri()}, None
    return {"uri": rel, "uriBaseId": BASE_ID}, {BASE_ID: {"uri": _folder_uri(base)}}
