"""A cut respaced by arithmetic (geometry.cuts.respaced) equals the cut the
extraction builds from the layout redrawn at the new spacing.

The fix hint is judged on the respaced cut, so it must be the cut of the
drawing the hint asks for.  The reference is the extraction stage run on
that drawing (features -> sites -> cuts), not the arithmetic itself.
"""

from __future__ import annotations

import numpy as np
import pytest

from pitchguard.geometry.cuts import Cut, respaced, site_cuts
from pitchguard.geometry.features import build_features
from pitchguard.geometry.sites import find_sites
from pitchguard.layout.polygons import PolygonSet

REACH = 1000.0
HEIGHT = 4000.0


def _lines(widths, spaces) -> tuple[PolygonSet, list[float]]:
    """Vertical lines left to right; and each line's centre."""
    shapes, centres, x = [], [], 0.0
    for k, w in enumerate(widths):
        shapes.append(np.array([(x, 0), (x + w, 0), (x + w, HEIGHT), (x, HEIGHT)], dtype=float))
        centres.append(x + w / 2)
        x += w + (spaces[k] if k < len(spaces) else 0.0)
    return PolygonSet.from_arrays(shapes), centres


def _cut_of(widths, spaces, line: int) -> Cut:
    """The extracted cut of a site on ``line``'s left edge, mid-height."""
    ps, centres = _lines(widths, spaces)
    edges = build_features(ps, 1.0)
    sites = find_sites(edges, 100.0, REACH, 1.0)[0]
    mids = sites.midpoints()
    left = centres[line] - widths[line] / 2
    on_edge = np.flatnonzero(np.abs(mids[:, 0] - left) < 0.5)
    k = int(on_edge[np.argmin(np.abs(mids[on_edge, 1] - HEIGHT / 2))])
    cs = site_cuts(edges, sites, REACH, 1.0)
    return cs.cuts[cs.which[k]]


def _canonical(bounds, lim: float = np.inf) -> tuple[float, ...]:
    """A cut and its mirror image are the same cut (site_cuts keeps the smaller);
    with ``lim``, only what lies within ``lim`` of the feature centre."""
    b: list[float] = []
    for lo, hi in zip(bounds[0::2], bounds[1::2], strict=True):
        if hi > -lim and lo < lim:
            b += [max(lo, -lim), min(hi, lim)]
    t = tuple(round(v, 6) for v in b)
    return min(t, tuple(-v for v in reversed(t)))


CASES = {
    # name: (widths, spaces, judged line, flagged space, new space) -- nm
    "regular array widened": ([140] * 9, [140] * 8, 4, 140, 200),
    "array beside a wider line": ([140] * 5 + [270], [140] * 4 + [170], 4, 140, 214),
    "plate past the cut's end": ([140] * 4 + [3000], [140] * 3 + [170], 3, 140, 260),
    "unequal spaces, only the narrow ones move": (
        [100] * 6,
        [120, 400, 120, 400, 120],
        2,
        120,
        150,
    ),
    "narrowed": ([100] * 7, [300] * 6, 3, 300, 250),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_respaced_cut_is_the_cut_of_the_redrawn_layout(name):
    widths, spaces, line, space, new_space = CASES[name]
    if new_space > space:
        redrawn = [max(s, new_space) for s in spaces]
    else:
        redrawn = [new_space if abs(s - space) < 1 else s for s in spaces]
    got = respaced(_cut_of(widths, spaces, line), space, new_space, 1.0)
    want = _cut_of(widths, redrawn, line)
    # Narrowing pulls in lines from beyond the cut, which it cannot know: they
    # lie past the interaction range, which is what the range is set for.
    lim = np.inf if new_space > space else REACH / 2
    assert _canonical(got.bounds, lim) == _canonical(want.bounds, lim)
    assert got.reach == want.reach


def test_without_a_matching_space_the_narrower_side_moves():
    """The site's space can differ from every space of the cut (a slanted
    neighbour); the hint then moves the narrower space beside the feature."""
    cut = Cut((-500.0, -450.0, -50.0, 50.0, 100.0, 400.0), 1000.0)
    assert respaced(cut, 300.0, 80.0, 1.0).bounds == (-500.0, -450.0, -50.0, 50.0, 130.0, 430.0)
