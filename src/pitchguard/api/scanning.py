"""``pitchguard.scan``: a layout scanned with a deck, as a :class:`ScanReport`.

The command line's ``scan`` and ``diff`` run their scans through
:func:`run_scan` and write their files through a report's ``write_*``
methods: the API and the command give the same findings and the same files.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable
from functools import cached_property
from pathlib import Path

from pitchguard import option_bounds as bounds
from pitchguard.api.records import FindingRecord, LayerCoverage
from pitchguard.deck import Deck, load_deck
from pitchguard.errors import PitchguardError
from pitchguard.run.scan import ScanResult

Progress = Callable[[str, int, int], None]


def as_deck(rules: str | Path | Deck) -> Deck:
    """A deck given as a path or already loaded."""
    return rules if isinstance(rules, Deck) else load_deck(rules)


def optional(name: str, value, bound: bounds.Bound):
    """``value`` of the argument ``name`` checked against ``bound``; None stays None."""
    return None if value is None else bounds.checked(name, value, bound)


def checked_fail_on(fail_on: str) -> str:
    """``fail_on`` if it is a severity or "never"."""
    from pitchguard.outputs.verdict import FAIL_ON_CHOICES

    if fail_on not in FAIL_ON_CHOICES:
        raise PitchguardError(f"fail_on must be one of {', '.join(FAIL_ON_CHOICES)}")
    return fail_on


def run_scan(
    layout: str | Path,
    deck: Deck,
    *,
    cell: str | None = None,
    region_um: tuple[float, float, float, float] | None = None,
    untiled: bool = False,
    jobs: int | None = None,
    tile_um: float | None = None,
    max_memory_mb: float | None = None,
    scheduler: str | None = None,
    max_shapes: int | None = None,
    read_timeout_s: float | None = None,
    cells: bool = True,
    ordered: bool = True,
    progress: Progress | None = None,
    note: Callable[[str], None] | None = None,
) -> ScanResult:
    """Scan ``layout`` with ``deck``: tile by tile on local workers or a dask
    scheduler, or (``untiled``) flattened in this process.  ``cells`` names the
    cell of every finding (every report lists findings per cell); without
    ``ordered`` the findings come in no set order (enough for counting)."""
    jobs = optional("jobs", jobs, bounds.JOBS)
    tile_um = optional("tile_um", tile_um, bounds.TILE_UM)
    max_memory_mb = optional("max_memory_mb", max_memory_mb, bounds.MEMORY_MB)
    max_shapes = optional("max_shapes", max_shapes, bounds.SHAPE_COUNT)
    read_timeout_s = optional("read_timeout_s", read_timeout_s, bounds.SECONDS)
    if region_um is not None:
        region_um = bounds.checked_region("region_um", region_um)
    scheduler = bounds.checked_scheduler("scheduler", scheduler)
    if cell is not None and not isinstance(cell, str):
        raise TypeError(f"cell must be a string, got {type(cell).__name__}")
    if untiled and (jobs or tile_um or scheduler or max_memory_mb):
        raise PitchguardError(
            "--untiled cannot be combined with --jobs, --tile-um, --max-memory-mb or --scheduler"
        )
    if untiled:
        from pitchguard.layout.reader import DEFAULT_MAX_SHAPES
        from pitchguard.run.scan import scan_layout

        return scan_layout(
            layout,
            deck,
            cell=cell,
            region_um=region_um,
            max_shapes=max_shapes or DEFAULT_MAX_SHAPES,
            progress=progress,
            read_timeout_s=read_timeout_s,
            cells=cells,
        )
    from pitchguard.run.plan import DEFAULT_TILED_MAX_SHAPES
    from pitchguard.run.tiled import scan_tiled

    return scan_tiled(
        layout,
        deck,
        tile_um=tile_um,
        jobs=jobs,
        scheduler=scheduler,
        cell=cell,
        progress=progress,
        region_um=region_um,
        max_shapes=max_shapes or DEFAULT_TILED_MAX_SHAPES,
        read_timeout_s=read_timeout_s,
        max_memory_mb=max_memory_mb,
        note=note,
        ordered=ordered,
        cells=cells,
    )


class ScanReport:
    """A scan's findings (one :class:`FindingRecord` per distinct finding of a
    cell), its summary and coverage, and the files it can be written as.

    ``fail_on`` (a severity, or ``"never"``) sets :attr:`exit_code` and what
    the reports count as failing.
    """

    def __init__(
        self,
        result: ScanResult,
        deck: Deck,
        *,
        fail_on: str = "fail",
        inputs: Iterable[Path] = (),
        cell: str | None = None,
        read_timeout_s: float | None = None,
    ):
        checked_fail_on(fail_on)
        read_timeout_s = optional("read_timeout_s", read_timeout_s, bounds.SECONDS)
        self.result = result
        self.deck = deck
        self.fail_on = fail_on
        self.layout_path = Path(result.layout.path) if result.layout else None
        self._inputs = list(inputs)
        self._cell = cell
        self._read_timeout_s = read_timeout_s

    @property
    def inputs(self) -> list[Path]:
        """Files no output may overwrite: the layout, the deck, and any given."""
        own = [self.layout_path] + ([Path(self.deck.path)] if self.deck.path else [])
        return [p for p in own if p is not None] + self._inputs

    @cached_property
    def entries(self) -> list:
        from pitchguard.judge.per_cell import cell_findings

        return cell_findings(self.result)

    @cached_property
    def findings(self) -> list[FindingRecord]:
        """Every distinct finding, worst first (report order)."""
        from pitchguard.outputs.json_report import entry_to_dict

        return [FindingRecord.from_row(entry_to_dict(c), k) for k, c in enumerate(self.entries)]

    @property
    def summary(self) -> dict:
        """The JSON report's ``summary``: counts of entries and placements per
        severity and per layer, the exit code, timing, warnings and notes."""
        from pitchguard.outputs.json_report import to_json

        return to_json(self.result, self.deck, self.fail_on, lazy=True)["summary"]

    @property
    def coverage(self) -> list[LayerCoverage]:
        """Per deck layer scanned: shapes, edge length and the share judged."""
        from pitchguard.outputs.verdict import severity_counts

        out = []
        for st in self.result.layers:
            ex = st.extract
            out.append(
                LayerCoverage(
                    layer=st.name,
                    source=st.source,
                    shapes=st.shapes,
                    edge_um=round(ex.edge_nm / 1000.0, 3),
                    judged_um=round(ex.judged_nm / 1000.0, 3),
                    judged_pct=None if ex.edge_nm <= 0 else round(100.0 * ex.coverage, 1),
                    by_severity=severity_counts(self.result.findings, st.name),
                )
            )
        return out

    @property
    def notes(self) -> list[str]:
        """One line per layer whose edges are mostly not judged."""
        from pitchguard.outputs.verdict import coverage_notes

        return coverage_notes(self.result.layers)

    @property
    def exit_code(self) -> int:
        """What the command would exit with: 1 when a finding reaches ``fail_on``."""
        from pitchguard.outputs.verdict import exit_code

        return exit_code(self.result.findings, self.fail_on)

    def select(self, keep: Callable[[FindingRecord], bool]) -> ScanReport:
        """The report of the findings ``keep`` accepts, with all their placements
        (to write markers of a chosen few, say)."""
        import numpy as np

        chosen = [self.entries[f.index].items for f in self.findings if keep(f)]
        idx = np.sort(np.concatenate(chosen)) if chosen else np.zeros(0, np.int64)
        return self._with(idx)

    def _with(self, idx) -> ScanReport:
        import numpy as np

        from pitchguard.judge.findings import FindingSet

        keep = np.zeros(len(self.result.findings), dtype=bool)
        keep[np.asarray(idx, dtype=np.int64)] = True
        findings = FindingSet.of(self.result.findings).select(keep)
        cells = self.result.cells.take(np.flatnonzero(keep)) if self.result.cells else None
        result = dataclasses.replace(self.result, findings=findings, cells=cells)
        return ScanReport(
            result,
            self.deck,
            fail_on=self.fail_on,
            inputs=self._inputs,
            cell=self._cell,
            read_timeout_s=self._read_timeout_s,
        )

    # -- files --------------------------------------------------------------

    def write_json(self, path: str | Path, inline_texts: bool = False, extra=None) -> None:
        """The JSON report; ``extra`` (a dict, or a function of the text table)
        adds top-level sections."""
        from pitchguard.outputs.json_report import TextTable, to_json, write_json

        texts = None if inline_texts else TextTable()
        payload = to_json(self.result, self.deck, self.fail_on, lazy=True, texts=texts)
        if extra:
            payload.update(extra(texts) if callable(extra) else extra)
        write_json(Path(path), payload, self.inputs)

    def write_markers(self, path: str | Path, flat: bool = False) -> None:
        """A marker layout (.gds or .oas) to overlay on the scanned one."""
        from pitchguard.outputs.markers import write_markers

        write_markers(Path(path), self.result, self.deck, self.inputs, flat=flat)

    def write_sarif(self, path: str | Path, root: str | Path | None = None) -> int:
        """SARIF 2.1.0; the layout's location is relative to ``root`` (default:
        the git work tree holding the layout).  Returns the results written."""
        from pitchguard.outputs.sarif import write_sarif

        return write_sarif(
            Path(path),
            self.result,
            self.deck,
            self.layout_path,
            self.fail_on,
            self.inputs,
            root=root,
        )

    def write_junit(self, path: str | Path) -> None:
        """JUnit XML: a test case per finding."""
        from pitchguard.outputs.junit import write_junit

        write_junit(Path(path), self.result, self.deck, self.fail_on, self.inputs)

    def write_html(self, path: str | Path, pictures: int | None = None) -> None:
        """The self-contained HTML report; the worst ``pictures`` groups drawn."""
        from pitchguard.outputs.html import PICTURED_GROUPS
        from pitchguard.outputs.html.clips import add_clip_geometry
        from pitchguard.outputs.html.page import write_html

        groups = (
            PICTURED_GROUPS
            if pictures is None
            else bounds.checked("pictures", pictures, bounds.PICTURED)
        )
        result = self.result
        if result.tiling is not None:  # tiled scans keep no geometry: read the pictures' part
            result = add_clip_geometry(
                result, self.deck, self._cell, groups, timeout_s=self._read_timeout_s
            )
        write_html(Path(path), result, self.deck, self.inputs, self.fail_on, groups)


def scan(
    layout: str | Path,
    rules: str | Path | Deck,
    *,
    fail_on: str = "fail",
    cell: str | None = None,
    region_um: tuple[float, float, float, float] | None = None,
    untiled: bool = False,
    jobs: int | None = None,
    tile_um: float | None = None,
    max_memory_mb: float | None = None,
    scheduler: str | None = None,
    max_shapes: int | None = None,
    read_timeout_s: float | None = None,
    progress: Progress | None = None,
) -> ScanReport:
    """Scan a GDSII or OASIS ``layout`` with a rule deck (a path or a loaded
    :class:`~pitchguard.deck.Deck`).

    Options are the command line's (``--jobs`` is ``jobs``, ``--region`` is
    ``region_um``, ...).  Bad input raises a
    :class:`~pitchguard.errors.PitchguardError` with a one-line message.
    """
    checked_fail_on(fail_on)  # before the scan, not after it
    deck = as_deck(rules)
    result = run_scan(
        layout,
        deck,
        cell=cell,
        region_um=region_um,
        untiled=untiled,
        jobs=jobs,
        tile_um=tile_um,
        max_memory_mb=max_memory_mb,
        scheduler=scheduler,
        max_shapes=max_shapes,
        read_timeout_s=read_timeout_s,
        progress=progress,
    )
    return ScanReport(result, deck, fail_on=fail_on, cell=cell, read_timeout_s=read_timeout_s)
