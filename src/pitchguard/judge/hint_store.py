"""What the fix hints have judged, kept per process and bounded: ideal gratings
on the hint search's grid (handed between processes), ideal gratings of an
exact CD and pitch, and finished hint texts.

:mod:`judge.hints` (one hint at a time) and :mod:`judge.hint_batch` (many at
once) read and fill the same stores, so a verdict found by either serves both.
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

from pitchguard.deck import LayerRule

LIMIT = 65536
"""Entries per store; a full store is emptied (hints recur within a layer, rarely across)."""


class Store:
    """A dict emptied when it reaches ``limit`` entries."""

    def __init__(self, limit: int = LIMIT) -> None:
        self._d: dict = {}
        self.limit = limit

    def get(self, key):
        return self._d.get(key)

    def __contains__(self, key) -> bool:
        return key in self._d

    def __len__(self) -> int:
        return len(self._d)

    def put(self, key, value):
        """``store[key] = value``; returns ``value``."""
        if len(self._d) >= self.limit:
            self._d.clear()
        self._d[key] = value
        return value

    def clear(self) -> None:
        self._d.clear()


class JudgedGrating(NamedTuple):
    """An ideal grating judged for a hint, as passed between processes: keyed
    by the rule's values and the grating on the hint search's grid."""

    rule_values: tuple
    cd_q: int
    pitch_q: int
    angle_q: int
    quantum: float
    passes: bool

    @property
    def key(self) -> tuple:
        return (self.rule_values, self.cd_q, self.pitch_q, self.angle_q, self.quantum)


class GridStore(Store):
    """Verdicts of gratings on the search grid, which also remembers those judged
    here since they were last taken, to hand to other processes."""

    def __init__(self, limit: int = LIMIT) -> None:
        super().__init__(limit)
        self._fresh: list[JudgedGrating] = []

    def put(self, key, value):
        self._fresh.append(JudgedGrating(*key, value))
        return super().put(key, value)

    def take(self) -> list[JudgedGrating]:
        """Gratings judged here since the last call."""
        rows = list(self._fresh)
        self._fresh.clear()
        return rows

    def give(self, rows: list[JudgedGrating]) -> None:
        """Gratings another process judged (not handed on again)."""
        if len(self._d) + len(rows) > self.limit:
            self._d.clear()
        for row in rows:
            self._d[row.key] = row.passes

    def clear(self) -> None:
        super().clear()
        self._fresh.clear()


@lru_cache(maxsize=64)
def rule_values(rule: LayerRule) -> tuple:
    """A layer rule by value (equal for equal exposures and limits, in any process)."""
    return tuple(getattr(rule, k) for k in type(rule).__slots__)


def grid_key(rule: LayerRule, cd_q: int, pitch_q: int, angle_q: int, quantum: float) -> tuple:
    """The key of a grating on the search grid in :data:`grid`."""
    return (rule_values(rule), cd_q, pitch_q, angle_q, quantum)


grid = GridStore()  # grid_key(...) -> passes
exact = Store()  # (rule, cd_nm, pitch_nm, angle_deg) -> passes
texts = Store()  # (rule, hint key) -> text


def forget() -> None:
    """Drop every verdict and text this process holds, its own and those given to it."""
    grid.clear()
    exact.clear()
    texts.clear()
