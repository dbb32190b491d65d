"""Per-placement report rows made from templates (the fast path of JSON and SARIF rows)."""

from __future__ import annotations

import re
from collections.abc import Sequence

from pitchguard.judge.findings import Finding, FindingSet, box_um, centre_um


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


def hole(name: str, in_text: bool = False) -> str:
    """A marker for place-dependent JSON in a row template (see :class:`PlacedRows`):
    a whole value, or (``in_text``) a piece of a string."""
    return f"\x02{name}\x02" if in_text else f"\x01{name}\x01"


# json.dumps writes the markers' control characters as \u0001 / \u0002.
_HOLES = re.compile(r'"\\u0001(\w+)\\u0001"|\\u0002(\w+)\\u0002')


def _j(x: float) -> str:
    """A float as json.dumps writes it; null for inf and nan (as json_number)."""
    return repr(float(x)) if x - x == 0.0 else "null"


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


def placed_fields(f: Finding, dx: float, dy: float, numbers=None) -> dict[str, str]:
    """JSON text of :func:`finding_to_dict`'s place-dependent values for distinct
    finding ``f`` moved by ``(dx, dy)`` nm (as the moved finding's dict would
    be written); ``numbers``: :func:`placed_numbers`, if made already."""
    b, centre, outline, origin = numbers or placed_numbers(f, dx, dy)
    return {
        "bbox_um": "[" + ", ".join(map(_j, b)) + "]",
        "centre_um": f"[{_j(centre[0])}, {_j(centre[1])}]",
        "outline_um": "[" + ", ".join(f"[{_j(x)}, {_j(y)}]" for x, y in outline) + "]",
        "origin_um": f"[{_j(origin[0])}, {_j(origin[1])}]",
    }


class PlacedRows(Rows):
    """The rows of a :class:`~pitchguard.judge.findings.FindingSet`'s items, written from a
    text template made once per distinct finding.

    Items are distinct findings moved; a row differs from its distinct
    finding's only where it depends on the place.  ``template(d)`` makes the
    row of distinct finding ``d`` with :func:`hole` markers there, and
    ``fill(k, f, dx, dy)`` the JSON text of each hole for item ``k`` (``f``
    its distinct finding, moved by ``dx, dy``).  Read as a sequence, the rows
    are ``fn(index)`` as for :class:`Rows`; :meth:`texts` gives the same
    rows as JSON text, several times faster than dumping each row (tests
    check the two agree).
    """

    def __init__(self, findings, fn, template, fill):
        super().__init__(range(len(findings)), fn)
        self.findings, self.template, self.fill = findings, template, fill

    def texts(self, one):
        def split(d: int) -> list[str]:
            parts = _HOLES.split(one(self.template(d)))  # text, name | None, None | name, ...
            return [
                p if k % 3 == 0 else parts[k] or parts[k + 1]
                for k, p in enumerate(parts)
                if k % 3 != 2
            ]

        return fill_templates(self.findings, split, self.fill)


def fill_templates(fs: FindingSet, split, fill):
    """For each item ``k`` of ``fs``: the text ``split(d)`` of its distinct finding
    ``d`` (made once per distinct finding: ``[text, name, text, name, ..., text]``)
    with each name replaced by ``fill(k, f, dx, dy)[name]``, ``f`` the distinct
    finding and ``(dx, dy)`` the item's offset."""
    made: dict[int, tuple] = {}
    chunk = 4096
    for c in range(0, len(fs.which), chunk):
        which = fs.which[c : c + chunk].tolist()
        offsets = fs.offset[c : c + chunk].tolist()
        for k, d, (dx, dy) in zip(range(c, c + len(which)), which, offsets, strict=True):
            template = made.get(d)
            if template is None:
                parts = split(d)
                template = made[d] = (parts[0], list(zip(parts[1::2], parts[2::2], strict=True)))
            values = fill(k, fs.distinct[d], dx, dy)
            out = [template[0]]
            for name, text in template[1]:
                out.append(values[name])
                out.append(text)
            yield "".join(out)
