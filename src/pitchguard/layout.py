"""Read GDSII / OASIS layouts into flat, packed polygons per deck layer.

Geometry leaves this module as :class:`PolygonSet`: all vertices of all
polygons of one layer in one ``(n, 2)`` float64 array (nanometres, as drawn)
plus start offsets.  Packed arrays are cheap to pickle, so a region of a layout
can be shipped to another process as is.

gdstk does the format work: the whole hierarchy is flattened by
``Cell.get_polygons`` (references with rotation, x-reflection and
magnification, arrays, OASIS repetitions on references and on polygons, paths
turned into polygons).
"""

from __future__ import annotations

import contextlib
import os
import tempfile
import time
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pitchguard.errors import STOP_POLL_S, LayoutError, check_stop

GDS_MAGIC = b"\x00\x06\x00\x02"
OASIS_MAGIC = b"%SEMI-OASIS\r\n"

DEFAULT_MAX_SHAPES = 20_000_000
"""Refuse to flatten more shapes than this (about 5 GB of polygons)."""


def _starts(sizes: np.ndarray) -> np.ndarray:
    """Start offsets (and the end) of consecutive runs of ``sizes``."""
    starts = np.zeros(len(sizes) + 1, dtype=np.int64)
    np.cumsum(sizes, out=starts[1:])
    return starts


@dataclass(frozen=True)
class PolygonSet:
    """Polygons of one layer, packed.

    ``points[starts[k]:starts[k + 1]]`` are the vertices of polygon ``k`` in nm.
    """

    points: np.ndarray
    starts: np.ndarray

    def __len__(self) -> int:
        return len(self.starts) - 1

    @classmethod
    def empty(cls) -> PolygonSet:
        return cls(np.zeros((0, 2)), np.zeros(1, dtype=np.int64))

    @classmethod
    def from_arrays(cls, polygons: Iterable[np.ndarray], scale: float = 1.0) -> PolygonSet:
        """Pack polygons; degenerate ones (fewer than 3 vertices, or not (n, 2)) are dropped."""
        polys = [np.asarray(p, dtype=np.float64) for p in polygons]
        polys = [p for p in polys if p.ndim == 2 and p.shape[1] == 2 and len(p) >= 3]
        if not polys:
            return cls.empty()
        starts = _starts(np.fromiter((len(p) for p in polys), dtype=np.int64, count=len(polys)))
        points = np.concatenate(polys, axis=0)
        if scale != 1.0:
            points *= scale
        return cls(points, starts)

    def polygon(self, k: int) -> np.ndarray:
        return self.points[self.starts[k] : self.starts[k + 1]]

    def __iter__(self) -> Iterator[np.ndarray]:
        for k in range(len(self)):
            yield self.polygon(k)

    def bounding_boxes(self) -> np.ndarray:
        """``(n, 4)`` array of ``x0, y0, x1, y1`` per polygon."""
        if len(self) == 0:
            return np.zeros((0, 4))
        s = self.starts[:-1]
        mins = np.minimum.reduceat(self.points, s, axis=0)
        maxs = np.maximum.reduceat(self.points, s, axis=0)
        return np.hstack([mins, maxs])

    def select(self, keep: np.ndarray) -> PolygonSet:
        """The polygons whose index is in the boolean mask ``keep``."""
        idx = np.flatnonzero(keep)
        if len(idx) == len(self):
            return self
        return self.take(idx)

    def take(self, idx: np.ndarray) -> PolygonSet:
        """The polygons numbered ``idx`` (in that order, repeats allowed)."""
        rows, starts = self.rows_of(idx)
        return PolygonSet(self.points[rows], starts)

    def rows_of(self, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Point rows of the polygons numbered ``idx``, in order, and their starts."""
        idx = np.asarray(idx, dtype=np.int64)
        sizes = self.starts[idx + 1] - self.starts[idx]
        starts = _starts(sizes)
        # Row r of polygon j is its first row plus (r - where j starts in the output).
        rows = np.repeat(self.starts[idx] - starts[:-1], sizes) + np.arange(starts[-1])
        return rows, starts

    @classmethod
    def joined(cls, parts: list[PolygonSet]) -> PolygonSet:
        """The polygons of ``parts``, one after the other."""
        parts = [p for p in parts if len(p)]
        if not parts:
            return cls.empty()
        if len(parts) == 1:
            return parts[0]
        starts = _starts(np.concatenate([np.diff(p.starts) for p in parts]))
        return cls(np.concatenate([p.points for p in parts]), starts)


@dataclass(frozen=True)
class Layout:
    """What a scan needs from a layout file."""

    path: Path
    format: str  # "gds" or "oas"
    unit_m: float  # user unit in metres
    grid_nm: float  # database unit in nanometres
    cells: tuple[str, ...]  # the top cells scanned
    layers: dict[tuple[int, int], PolygonSet]

    @property
    def nm_per_user_unit(self) -> float:
        return self.unit_m * 1e9

    @property
    def shape_count(self) -> int:
        return sum(len(p) for p in self.layers.values())


def sniff_format(path: Path) -> str:
    """Return "gds" or "oas" from the file's first bytes."""
    try:
        with path.open("rb") as fh:
            head = fh.read(len(OASIS_MAGIC))
    except FileNotFoundError:
        raise LayoutError(f"{path}: layout file not found") from None
    except IsADirectoryError:
        raise LayoutError(f"{path}: is a directory, not a layout file") from None
    except OSError as exc:
        raise LayoutError(f"{path}: cannot read layout: {exc.strerror}") from None
    if head.startswith(OASIS_MAGIC):
        return "oas"
    if head.startswith(GDS_MAGIC):
        return "gds"
    if not head:
        raise LayoutError(f"{path}: file is empty")
    raise LayoutError(f"{path}: not a GDSII or OASIS file (unrecognised header)")


@contextlib.contextmanager
def captured_stderr() -> Iterator[list[str]]:
    """Capture what C code writes straight to file descriptor 2.

    gdstk prints ``[GDSTK] ...`` warnings there, sometimes with bytes that are
    not UTF-8; they are collected as text lines instead.
    """
    lines: list[str] = []
    try:
        fd = os.dup(2)
    except OSError:  # no stderr at all
        yield lines
        return
    with tempfile.TemporaryFile() as tmp:
        os.dup2(tmp.fileno(), 2)
        try:
            yield lines
        finally:
            os.dup2(fd, 2)
            os.close(fd)
            tmp.seek(0)
            text = tmp.read().decode("utf-8", errors="replace")
            lines.extend(line for line in text.splitlines() if line.strip())


def _find_cycle(cells) -> list[str] | None:
    """A reference cycle among ``cells`` as a list of names, or None."""
    graph = {c.name: [d.name for d in c.dependencies(False) if hasattr(d, "name")] for c in cells}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(name: str) -> list[str] | None:
        state[name] = 1
        stack.append(name)
        for nxt in graph.get(name, ()):
            if state.get(nxt) == 1:
                return stack[stack.index(nxt) :] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        stack.pop()
        state[name] = 2
        return None

    for name in graph:
        if name not in state:
            found = visit(name)
            if found:
                return found
    return None


def _count_shapes(cell, wanted: set[tuple[int, int]], memo: dict) -> int:
    """Number of polygons ``cell`` flattens to on ``wanted`` layers, without flattening."""
    key = cell.name
    if key in memo:
        return memo[key]
    n = 0
    for p in list(cell.polygons) + list(cell.paths):
        layers = (
            zip(p.layers, p.datatypes, strict=True)
            if hasattr(p, "layers")
            else [(p.layer, p.datatype)]
        )
        hits = sum(1 for ld in layers if ld in wanted)
        if hits:
            rep = p.repetition.size if p.repetition.size else 1
            n += hits * rep
    for ref in cell.references:
        if isinstance(ref.cell, str) or ref.cell is None:
            continue  # an unresolved reference (rawcell or missing): nothing to flatten
        rep = ref.repetition.size if ref.repetition.size else 1
        n += rep * _count_shapes(ref.cell, wanted, memo)
    memo[key] = n
    return n


def count_shapes_within(path: Path, tops, wanted: set, max_shapes: int) -> tuple[int, dict]:
    """Flat shape count of ``tops`` on ``wanted`` layers, from the hierarchy; refuse
    (LayoutError) more than ``max_shapes``.  Returns the count and the per-cell counts."""
    memo: dict = {}
    total = sum(_count_shapes(c, wanted, memo) for c in tops)
    if total > max_shapes:
        raise LayoutError(
            f"{path}: deck layers flatten to {total:,} shapes, over the limit of {max_shapes:,} "
            "(raise --max-shapes or scan a --region)"
        )
    return total, memo


SNAP_TIE_TOL = 1e-6
"""Half-way points within this many grid steps of a tie round up.  Ties are real:
a GDSII array's lattice vectors are stored as whole database units over the
column or row count, so instances can sit on half (or finer) steps; the float
noise of different transform orders (a full flatten, a tile's hierarchy query)
must not decide which way such a vertex goes."""


def snap_to_grid(ps: PolygonSet, grid_nm: float) -> PolygonSet:
    """``ps`` back onto the database grid, in place: nm conversion and transforms
    leave float noise (199.9999999 for 200); the mask writer snaps anyway.
    Ties (to within ``SNAP_TIE_TOL``) round up, whatever the noise."""
    np.divide(ps.points, grid_nm, out=ps.points)
    np.add(ps.points, 0.5 + SNAP_TIE_TOL, out=ps.points)
    np.floor(ps.points, out=ps.points)
    np.multiply(ps.points, grid_nm, out=ps.points)
    return ps


def flatten_layer(tops, layer_datatype: tuple[int, int], scale: float) -> PolygonSet:
    """All polygons of one layer/datatype under ``tops``, flattened and packed.

    ``scale`` converts user units to nm.  References (rotation, reflection,
    magnification, arrays) and repetitions are applied; paths become polygons.
    """
    layer, datatype = layer_datatype
    polys = []
    for top in tops:
        polys.extend(
            q.points
            for q in top.get_polygons(
                apply_repetitions=True,
                include_paths=True,
                depth=None,
                layer=layer,
                datatype=datatype,
            )
        )
    return PolygonSet.from_arrays(polys, scale)


def open_layout(path: Path, wanted: set, cell: str | None, noise: list[str] | None = None):
    """Parse a layout file: ``(library, format, top cells)``, with clear errors.

    Reference cycles are refused here, before anything is flattened (the
    library crashes on them).  Library warnings are appended to ``noise``.
    """
    import gdstk

    p = Path(path)
    fmt = sniff_format(p)
    with captured_stderr() as captured:
        try:
            if fmt == "gds":
                lib = gdstk.read_gds(str(p), filter=wanted or None)
            else:
                lib = gdstk.read_oas(str(p))
        except (OSError, RuntimeError, MemoryError, ValueError) as exc:
            what = str(exc) or type(exc).__name__
            label = "GDSII" if fmt == "gds" else "OASIS"
            raise LayoutError(f"{p}: cannot read {label} file: {what}") from None
    if noise is not None:
        noise.extend(captured)
    cycle = _find_cycle(lib.cells)
    if cycle:
        raise LayoutError(f"{p}: cell reference cycle: {' -> '.join(cycle)}")
    if cell is not None:
        tops = [c for c in lib.cells if c.name == cell]
        if not tops:
            raise LayoutError(f"{p}: no cell named {cell!r}")
    else:
        tops = [c for c in lib.top_level() if isinstance(c, gdstk.Cell)]
        if not tops:
            raise LayoutError(f"{p}: layout has no top cell")
    return lib, fmt, tops


def read_layout(
    path: str | Path,
    layers: Iterable[tuple[int, int]],
    cell: str | None = None,
    max_shapes: int = DEFAULT_MAX_SHAPES,
    warnings: list[str] | None = None,
) -> Layout:
    """Read ``path`` and flatten the given ``(layer, datatype)`` pairs to nm polygons.

    Parameters
    ----------
    path
        GDSII or OASIS file; the format is taken from the file's header.
    layers
        Only these layer/datatype pairs are loaded (the rest is ignored).
    cell
        Top cell to scan; by default every top-level cell.
    max_shapes
        Refuse (LayoutError) a layout that would flatten to more polygons.
    warnings
        If given, library warnings met while reading are appended to it.
    """

    p = Path(path)
    wanted = set(layers)
    noise: list[str] = []
    lib, fmt, tops = open_layout(p, wanted, cell, noise)
    if warnings is not None:
        warnings.extend(noise)

    count_shapes_within(p, tops, wanted, max_shapes)

    scale = lib.unit * 1e9
    out: dict[tuple[int, int], PolygonSet] = {}
    with captured_stderr() as noise:
        for ld in sorted(wanted):
            out[ld] = snap_to_grid(flatten_layer(tops, ld, scale), lib.precision * 1e9)
    if warnings is not None:
        warnings.extend(noise)
    return Layout(
        path=p,
        format=fmt,
        unit_m=lib.unit,
        grid_nm=lib.precision * 1e9,
        cells=tuple(c.name for c in tops),
        layers=out,
    )


# --------------------------------------------------------------------------- isolation

READ_TIMEOUT_S = 3600.0
"""A reader child that runs longer than this is stopped (a hung parse)."""


def _child(conn, fn, args, path) -> None:  # runs in the child process
    import faulthandler

    faulthandler.disable()  # a crash here is expected and reported by the parent
    try:
        conn.send(("ok", fn(*args)))
    except LayoutError as exc:
        conn.send(("error", str(exc)))
    except MemoryError:
        conn.send(("error", f"{path}: out of memory while reading the layout"))
    except Exception as exc:  # noqa: BLE001 - any reader failure is a bad-input error here
        conn.send(("error", f"{path}: cannot read layout: {type(exc).__name__}: {exc}"))
    finally:
        conn.close()


def run_isolated(fn, args: tuple, path: Path, what: str, timeout_s: float = READ_TIMEOUT_S):
    """``fn(*args)`` in a forked child process; its result, or a :class:`LayoutError`.

    For work that parses ``path`` with the layout library, which can die by a
    signal on corrupt files or hang: a crash, an exception, or running over
    ``timeout_s`` becomes one clear error naming the file and ``what`` was
    being done.  The result must pickle.
    """
    import multiprocessing as mp
    import signal

    ctx = mp.get_context("fork")
    recv, send = ctx.Pipe(duplex=False)
    child = ctx.Process(target=_child, args=(send, fn, args, path))
    child.start()
    send.close()
    try:
        deadline = time.monotonic() + timeout_s
        while not recv.poll(min(STOP_POLL_S, max(0.0, deadline - time.monotonic()))):
            check_stop()  # a stop noted where it could not be raised
            if time.monotonic() >= deadline:
                raise LayoutError(f"{path}: {what} took over {timeout_s:.0f} s; stopped")
        try:
            status, payload = recv.recv()
        except EOFError:
            child.join()
            code = child.exitcode
            if code is not None and code < 0:
                try:
                    name = signal.Signals(-code).name
                except ValueError:
                    name = f"signal {-code}"
                raise LayoutError(
                    f"{path}: the layout reader crashed ({name}) while {what}: the file is "
                    "corrupt or not a valid GDSII/OASIS file"
                ) from None
            raise LayoutError(
                f"{path}: the layout reader stopped unexpectedly (exit {code})"
            ) from None
    finally:
        if child.is_alive():
            child.kill()
        child.join()
        recv.close()
    if status != "ok":
        raise LayoutError(payload)
    return payload


def _read_with_warnings(path, layers, cell, max_shapes):
    warnings: list[str] = []
    layout = read_layout(path, layers, cell=cell, max_shapes=max_shapes, warnings=warnings)
    return layout, warnings


def read_layout_isolated(
    path: str | Path,
    layers: Iterable[tuple[int, int]],
    cell: str | None = None,
    max_shapes: int = DEFAULT_MAX_SHAPES,
    warnings: list[str] | None = None,
    timeout_s: float = READ_TIMEOUT_S,
) -> Layout:
    """:func:`read_layout` in a child process, so a crash of the layout library
    (it can die with a segmentation fault on corrupt files) becomes a
    :class:`LayoutError` instead of killing the command.

    The child parses the file and ships back packed numpy arrays; its memory
    (the library's objects) is released when it exits.
    """
    p = Path(path)
    sniff_format(p)  # quick, clear errors for missing/non-layout files, in this process
    layout, child_warnings = run_isolated(
        _read_with_warnings,
        (p, list(layers), cell, max_shapes),
        p,
        "parsing and flattening the file",
        timeout_s,
    )
    if warnings is not None:
        warnings.extend(child_warnings)
    return layout
