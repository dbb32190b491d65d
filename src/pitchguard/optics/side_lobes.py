"""Side lobes: printing in the space beside a feature, apart from any feature.

In the space on either side of a drawn feature (from its edge to the
neighbouring feature's, ``2 lo - left`` and ``2 hi - right`` from the
search bounds, which are the spaces' middles), the image prints (above the
threshold for an opening, below it for a line) where nothing is drawn.
Printing that runs in from the feature or from the neighbour is the
feature's own size or a bridge; printing cut off from both by samples that
do not print is a side lobe: a spurious feature on the wafer.
"""

from __future__ import annotations

import numpy as np

NONE, WINDOW, NOMINAL = 0, 1, 2
"""Side-lobe codes: none; prints within the focus and dose window; prints at the
nominal dose and best focus."""


def detached(
    x: np.ndarray,
    images: np.ndarray,
    left: np.ndarray,
    right: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    bright: bool,
    t: np.ndarray,
    reach: np.ndarray,
) -> np.ndarray:
    """Per row of ``images`` ``(R, X)`` (feature ``left``-``right``, search bounds
    ``lo``, ``hi``, threshold ``t``, interaction range ``reach``, each ``(R,)``):
    the largest printing depth of a side lobe, ``I / t`` (openings) or ``t / I``
    (lines) at its extreme sample, 0 where none prints.  Only ``|x| <= reach``
    is looked at: beyond it a cut's periodic window repeats its neighbours."""
    images = np.atleast_2d(images)
    r, n = images.shape
    prints = images > t[:, None] if bright else images < t[:, None]
    idx = np.arange(n)[None, :]
    worst = np.zeros(r)
    for a, b in ((2.0 * lo - left, left), (right, 2.0 * hi - right)):
        a_in, b_in = (a >= x[0]) & (a >= -reach), (b <= x[-1]) & (b <= reach)
        a, b = np.maximum(a, -reach), np.minimum(b, reach)
        inside = (x[None, :] > a[:, None]) & (x[None, :] < b[:, None])
        q = prints & inside
        first = np.where(inside.any(axis=1), inside.argmax(axis=1), n)[:, None]
        last = np.where(inside.any(axis=1), n - 1 - inside[:, ::-1].argmax(axis=1), -1)[:, None]
        # Runs that reach the space's ends: printing all the way from each end;
        # an end beyond the samples (a grating's image of one period ends
        # mid-space) or beyond the reach (no neighbour) anchors none.
        from_lo = np.cumprod(q | (idx < first), axis=1).astype(bool) & a_in[:, None]
        from_hi = np.cumprod((q | (idx > last))[:, ::-1], axis=1)[:, ::-1].astype(bool)
        from_hi &= b_in[:, None]
        lobe = q & ~from_lo & ~from_hi
        depth = images / t[:, None] if bright else t[:, None] / np.maximum(images, 1e-300)
        worst = np.maximum(worst, np.where(lobe, depth, 0.0).max(axis=1))
    return worst


def side_lobe_codes(
    x: np.ndarray,
    images: np.ndarray,
    focus_nm: np.ndarray,
    left: np.ndarray,
    right: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    bright: bool,
    t_nom: np.ndarray,
    el_min_pct: float,
    reach: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """``(code, depth)`` per cut (``images`` ``(C, F, X)``): :data:`NOMINAL` when a
    lobe prints at ``t_nom`` and best focus, :data:`WINDOW` when one prints at
    some focus sample with the dose off nominal by ``el_min_pct / 2`` % the way
    that prints more (up for openings, down for lines), else :data:`NONE`; the
    depth (:func:`detached`) of the worst lobe found."""
    c, f, _ = images.shape
    best = int(np.argmin(np.abs(focus_nm)))
    reach = np.broadcast_to(np.asarray(reach, dtype=np.float64), np.shape(left))
    nominal = detached(x, images[:, best], left, right, lo, hi, bright, t_nom, reach)
    # Dose D prints like threshold t / D.
    d = el_min_pct / 200.0
    t_win = t_nom / (1.0 + d) if bright else t_nom / max(1.0 - d, 1e-9)
    rep = lambda v: np.repeat(v, f)  # noqa: E731
    window = detached(
        x,
        images.reshape(c * f, -1),
        rep(left),
        rep(right),
        rep(lo),
        rep(hi),
        bright,
        rep(t_win),
        rep(reach),
    )
    window = window.reshape(c, f).max(axis=1)
    code = np.where(nominal > 0, NOMINAL, np.where(window > 0, WINDOW, NONE))
    return code, np.where(nominal > 0, nominal, window)
