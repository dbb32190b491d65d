"""Judging a cut as OPC would size it: a 1-D retargeting of its mask.

A drawn layout is corrected before the mask is written.  Judged as drawn at one
anchored dose, a pitch far from the anchor prints off size (iso-dense bias),
which OPC routinely removes; what is left after the correction is what matters:
the process window of the corrected mask, and the size of the correction itself.

The retargeting here is the simplest 1-D one: every feature of the cut grows
(or shrinks) by the same bias ``b`` on each edge, found so that the cut's own
feature prints its drawn width at the anchored dose and best focus.  For an
even grating that is exactly the correction OPC makes; for a cut with unequal
neighbours it is the shared part of it (what is left shows as
``edge-placement``).  ``b`` is found on the printed CD, which moves about twice
as far as ``b`` (times the mask error enhancement) and grows with it.

Edges where the cut is clipped (at its interaction range) and the window's own
ends are not moved; the bias stays ``GAP_NM`` short of closing a space or
removing a feature (:func:`bias_limits`), and a cut that would need more is
reported as such.
"""

from __future__ import annotations

import numpy as np

from pitchguard.optics.window_edges import refine_crossing

CD_TOL_NM = 0.05
"""No bias is needed when the printed CD is within this of the drawn one."""

SOLVE_TOL_NM = 0.01
"""The bias is found when the printed CD is within this of the drawn one."""

REACH_NM = 0.5
"""A bias whose printed CD stays further than this from the drawn one did not reach size."""

GAP_NM = 0.5
"""A bias stops this short of closing a space or of removing a feature."""


def _moves(edges: np.ndarray, material: np.ndarray, reach_nm: np.ndarray) -> np.ndarray:
    """Per inner edge of ``edges`` ``(C, W)``: -1 where a feature starts (it moves by
    ``-bias``), +1 where one ends (``+bias``), 0 where it stays (clipped at the
    cut's ``reach_nm`` ``(C,)``, or no change of material)."""
    before, after = material[:, :-1], material[:, 1:]
    inner = np.abs(edges[:, 1:-1]) < reach_nm[:, None] - 1e-9
    return np.where(inner & ~before & after, -1.0, np.where(inner & before & ~after, 1.0, 0.0))


def biased_edges(
    edges: np.ndarray, material: np.ndarray, bias: np.ndarray, reach_nm: np.ndarray
) -> np.ndarray:
    """Segment edges ``(C, W)`` of cuts (``material`` ``(C, W - 1)`` marks drawn
    segments) with every feature grown by ``bias`` ``(C,)`` on each side, within
    the limits of :func:`bias_limits`."""
    e = np.array(edges, dtype=np.float64)
    if e.shape[1] > 2:
        e[:, 1:-1] += _moves(e, material, reach_nm) * bias[:, None]
    return e


def bias_limits(
    edges: np.ndarray, material: np.ndarray, reach_nm: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """``(lo, hi)`` per cut: the most a bias may shrink and grow the features before a
    feature or a space between moving edges comes within ``GAP_NM`` of closing."""
    c, w = edges.shape
    lo, hi = np.full(c, -np.inf), np.full(c, np.inf)
    if w < 3:
        return lo, hi
    moves = np.zeros((c, w))
    moves[:, 1:-1] = np.abs(_moves(edges, material, reach_nm))
    width = np.diff(edges, axis=1)
    k = moves[:, :-1] + moves[:, 1:]  # moving edges around each segment (0, 1 or 2)
    room = np.where(k > 0, np.maximum(width - GAP_NM, 0.0) / np.maximum(k, 1), np.inf)
    hi = np.where(~material & (k > 0), room, np.inf).min(axis=1)  # spaces close by growing
    lo = -np.where(material & (k > 0), room, np.inf).min(axis=1)  # features vanish shrinking
    return np.maximum(lo, -1e6), np.minimum(hi, 1e6)


def solve_bias(printed_cd, drawn: np.ndarray, cd0: np.ndarray, lo: np.ndarray, hi: np.ndarray):
    """The bias per cut (``lo <= b <= hi``) at which ``printed_cd(b)`` ``(C,)`` meets
    ``drawn`` (``printed_cd(b, rows)``: the CD of ``rows`` alone, one bias each);
    ``cd0`` is the printed CD without bias.  Returns ``(bias, reached)``:
    ``reached`` is False where no bias within the bounds prints within
    ``REACH_NM`` of size (a space would close, a feature vanish, or the CD
    never gets there); the bias is then the bound tried.

    The printed CD grows with the bias, from 0 (lost) to infinity (bridged): a
    first guess of half the CD error (overshot by half), the bound beyond it if
    that does not cross size, then :func:`window_edges.refine_crossing` on the
    bracket (false position, bisection where the CD is not finite)."""
    rows = np.arange(len(drawn))

    def cd_at(rr, b):
        return printed_cd(np.asarray(b, dtype=np.float64), rr)

    f0 = _residual(cd0, drawn)
    grow = f0 < 0
    guess = np.clip(-0.75 * f0, lo, hi)
    f1 = _residual(printed_cd(guess), drawn)
    crossed = np.sign(f1) != np.sign(f0)
    bound = np.where(grow, hi, lo)
    out = np.where(crossed, guess, bound)
    rest = rows[~crossed & (np.abs(f0) > CD_TOL_NM)]
    f_bound = np.full(len(drawn), np.nan)
    if len(rest):
        f_bound[rest] = _residual(cd_at(rest, bound[rest]), drawn[rest])
    reachable = crossed | (np.sign(f_bound) != np.sign(f0))
    start = np.where(crossed, 0.0, guess)  # the end on the side of no bias
    todo = rows[reachable & (np.abs(f0) > CD_TOL_NM)]
    bias = np.where(np.abs(f0) <= CD_TOL_NM, 0.0, bound)
    if len(todo):
        bias[todo] = refine_crossing(
            lambda rr, b: cd_at(todo[rr], b),
            np.arange(len(todo)),
            start[todo],
            out[todo],
            drawn[todo],
            SOLVE_TOL_NM / drawn[todo],
        )
    final = _residual(printed_cd(bias), drawn)
    return bias, np.abs(final) <= REACH_NM


def _residual(cd: np.ndarray, drawn: np.ndarray) -> np.ndarray:
    """Printed minus drawn CD, with a lost feature at 0 and a bridged one far too wide."""
    return np.where(np.isfinite(cd), cd - drawn, 1e3)
