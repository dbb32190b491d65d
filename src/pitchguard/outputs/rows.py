"""Report rows made as they are written, and the numbers of a placed finding."""

from __future__ import annotations

from collections.abc import Sequence

from pitchguard.judge.findings import Finding, box_um, centre_um


class Rows(Sequence):
    """A read-only list whose items are made when read: ``fn(x)`` for each ``x`` of ``items``.

    A chip's scan may hold 10^5 to 10^6 findings: their report rows are made
    one at a time as the file is written, never all held at once.
    """

    def __init__(self, items: Sequence, fn):
        self._items, self._fn = items, fn

    def __len__(self) -> int:
        return len(self._items)

    def __getitem__(self, k):
        if isinstance(k, slice):
            return [self._fn(x) for x in self._items[k]]
        return self._fn(self._items[k])

    def __iter__(self):
        return map(self._fn, self._items)


def placed_numbers(f: Finding, dx: float, dy: float) -> tuple:
    """``(bbox_um, centre_um, outline_um, cut origin um)`` of distinct finding ``f``
    moved by ``(dx, dy)`` nm: the same arithmetic and rounding as building the
    moved finding (``FindingSet`` items, which are ``f`` itself at no offset:
    ``-0.0 + 0.0`` would lose a sign) and reading its fields."""
    bbox, outline, (cx, cy) = f.bbox_nm, f.outline_nm, f.cut_origin_nm
    if dx != 0.0 or dy != 0.0:
        x0, y0, x1, y1 = bbox
        bbox = (x0 + dx, y0 + dy, x1 + dx, y1 + dy)
        outline = [(x + dx, y + dy) for x, y in outline]
        cx, cy = cx + dx, cy + dy
    b = box_um(bbox)
    points = [(round(x / 1000.0, 6), round(y / 1000.0, 6)) for x, y in outline]
    return b, centre_um(b), points, (cx / 1000.0, cy / 1000.0)
