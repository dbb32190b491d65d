"""Lattice extraction, step 2: each compact feature's local lattice and links."""

from __future__ import annotations

import math

import numpy as np

from pitchguard.geometry.lattice.common import (
    BASIS_ANGLE_EPS_DEG,
    CENTRED,
    HEXAGONAL,
    LEVEL_BASE_GRID,
    NONE,
    OBLIQUE,
    PAIR_CHUNK,
    RECTANGULAR,
    ROW,
    SQUARE,
    TOL_GRID,
    cell_keys,
    centroid_keys,
    cross_2d,
    dedupe_rows,
    expand_runs,
    first_per_group,
    lattice_coords,
    row_dot,
    row_norm,
)
from pitchguard.geometry.lattice.compact import compact_features
from pitchguard.geometry.lattice.records import CompactFeatures, FeatureColumns, LatticeSites
from pitchguard.geometry.sites import in_region
from pitchguard.geometry.spatial import build_rtree
from pitchguard.layout.polygons import PolygonSet


def same_shape(f: FeatureColumns, i: np.ndarray, j: np.ndarray, tol: float) -> np.ndarray:
    """Features ``i`` and ``j`` have the same size and shape, the same way round:
    extents within ``tol``, frames turned by less than ``tol`` at the corners,
    areas within ``tol`` times half the perimeter."""
    wi, hi = f.size[i, 0], f.size[i, 1]
    dphi = f.angle_deg[j] - f.angle_deg[i]  # (-90, 90): both in (-22.5, 67.5]
    swap = np.abs(dphi) > 45.0
    wj = np.where(swap, f.size[j, 1], f.size[j, 0])
    hj = np.where(swap, f.size[j, 0], f.size[j, 1])
    turn = np.radians(np.where(swap, 90.0 - np.abs(dphi), np.abs(dphi)))
    half_diag = 0.5 * np.hypot(np.maximum(wi, wj), np.maximum(hi, hj))
    ok = (np.abs(wi - wj) <= tol) & (np.abs(hi - hj) <= tol) & (turn * half_diag <= tol)
    return ok & (np.abs(f.area[i] - f.area[j]) <= tol * 0.5 * (wi + hi + wj + hj))


def _direction_key(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Direction of the line of ``v`` in [-eps, 180 - eps) degrees, and whether ``v``
    itself points that way (else ``-v`` does)."""
    ang = np.degrees(np.arctan2(v[..., 1], v[..., 0]))  # (-180, 180]
    eps = BASIS_ANGLE_EPS_DEG
    fwd = (ang >= -eps) & (ang < 180.0 - eps)
    return np.where(fwd, ang, np.where(ang < -eps, ang + 180.0, ang - 180.0)), fwd


def _pair_order(group: np.ndarray, v: np.ndarray, d2: np.ndarray) -> np.ndarray:
    """Pairs by group, then length, then direction (exact ties on the grid must not
    be decided by input order)."""
    return np.lexsort((np.arctan2(v[:, 1], v[:, 0]), d2, group))


def _select_basis(loc, v, d2, m: int, tol: float):
    """Per point (local index ``loc`` of each pair, ``m`` points): the shortest vector
    (a1) and the shortest one further than ``tol`` from a1's line (a2), NaN where
    missing.  Returns a1, a2 and the pair order used."""
    order = _pair_order(loc, v, d2)
    loc, v = loc[order], v[order]
    a1 = np.full((m, 2), np.nan)
    a2 = np.full((m, 2), np.nan)
    f1 = first_per_group(loc, m)
    has = f1 >= 0
    a1[has] = v[f1[has]]
    w = a1[loc]
    indep = np.abs(cross_2d(w, v)) > tol * row_norm(w)
    sel = np.flatnonzero(indep)
    f2 = first_per_group(loc[sel], m)
    has2 = f2 >= 0
    a2[has2] = v[sel[f2[has2]]]
    return a1, a2, order


def _level_radii(range_nm: float, base_nm: float) -> np.ndarray:
    radii = []
    r = base_nm
    while r < range_nm:
        radii.append(r)
        r *= 2.0
    radii.append(range_nm)
    return np.array(radii)


_CELL_STEPS = np.array([(dx, dy) for dx in (-1, 0, 1) for dy in (-1, 0, 1)])


def neighbour_lattices(f: FeatureColumns, range_nm: float, grid_nm: float, tol: float):
    """Local lattice of every feature among features of its shape within ``range_nm``.

    Returns ``a1``, ``a2`` (n, 2) as found (the shortest neighbour vector and
    the shortest one further than ``tol`` from its line; NaN where missing;
    exact ties go by direction), ``reach`` (n,): ``|a2| + tol`` capped at
    ``range_nm`` (``range_nm`` without ``a2``), and the pairs ``(i, j)`` of
    same-shape features with ``|c_j - c_i| <= reach_i``, in no set order.

    Searched on numpy grids of growing cell size (radii ``LEVEL_BASE_GRID``
    grid steps times powers of two, then ``range_nm``; a grid of cell ``r``
    holds every neighbour within ``r`` in the 3 x 3 cells around a point): a
    feature is finished at the first radius that holds ``|a2| + tol``.  One
    R-tree query per feature costs more than the whole search (13 s for 10^6
    features, measured); the plain twin, :func:`neighbour_lattices_plain`,
    does exactly that.
    """
    n = len(f)
    c = f.centroid
    a1 = np.full((n, 2), np.nan)
    a2 = np.full((n, 2), np.nan)
    reach = np.zeros(n)
    done = np.zeros(n, dtype=bool)
    out_i, out_j = [], []
    if n == 0:
        z = np.zeros(0, dtype=np.int64)
        return a1, a2, reach, z, z
    radii = _level_radii(range_nm, LEVEL_BASE_GRID * grid_nm)
    start = 2.0 * np.min(f.size, axis=1)  # same-shape neighbours sit at least ~one size apart
    level0 = np.minimum(np.searchsorted(radii, start), len(radii) - 1)
    for lvl, r in enumerate(radii):
        act = np.flatnonzero(~done & (level0 <= lvl))
        if not len(act):
            continue
        k = np.floor(c / r).astype(np.int64)
        key, stride = cell_keys(k[:, 0], k[:, 1])
        order = np.argsort(key, kind="stable")
        sk = key[order]
        new = np.r_[True, sk[1:] != sk[:-1]]
        ukey, ustart = sk[new], np.flatnonzero(new)
        ucount = np.diff(np.r_[ustart, n])
        offs = _CELL_STEPS[:, 0] * stride + _CELL_STEPS[:, 1]
        last = r >= range_nm
        for lo in range(0, len(act), PAIR_CHUNK):
            chunk = act[lo : lo + PAIR_CHUNK]
            m = len(chunk)
            q = (key[chunk][:, None] + offs[None, :]).ravel()
            pos = np.minimum(np.searchsorted(ukey, q), len(ukey) - 1)
            cnt = np.where(ukey[pos] == q, ucount[pos], 0)
            run, p = expand_runs(ustart[pos], cnt)
            loc = run // len(offs)
            i, j = chunk[loc], order[p]
            v = c[j] - c[i]
            d2 = row_dot(v, v)
            keep = (j != i) & (d2 <= r * r)
            loc, i, j, v, d2 = loc[keep], i[keep], j[keep], v[keep], d2[keep]
            keep = same_shape(f, i, j, tol)
            loc, i, j, v, d2 = loc[keep], i[keep], j[keep], v[keep], d2[keep]
            s1, s2, _ = _select_basis(loc, v, d2, m, tol)
            l2 = row_norm(s2)
            has2 = ~np.isnan(l2)
            fin = (has2 & (l2 + tol <= r)) | last
            rch = np.where(has2, np.minimum(range_nm, l2 + tol), range_nm)
            idx = chunk[fin]
            a1[idx], a2[idx], reach[idx] = s1[fin], s2[fin], rch[fin]
            done[idx] = True
            take = fin[loc] & (d2 <= rch[loc] ** 2)
            out_i.append(i[take])
            out_j.append(j[take])
    return a1, a2, reach, np.concatenate(out_i), np.concatenate(out_j)


def neighbour_lattices_plain(f: FeatureColumns, range_nm: float, grid_nm: float, tol: float):
    """Plain twin of :func:`neighbour_lattices`: one R-tree query per feature for
    every feature within ``range_nm``, then a loop per feature."""
    n = len(f)
    c = f.centroid
    a1 = np.full((n, 2), np.nan)
    a2 = np.full((n, 2), np.nan)
    reach = np.zeros(n)
    out_i, out_j = [np.zeros(0, np.int64)], [np.zeros(0, np.int64)]
    tree = build_rtree(c, c) if n else None
    for i in range(n):
        found = np.array(
            sorted(tree.intersection((*(c[i] - range_nm), *(c[i] + range_nm)))), dtype=np.int64
        )
        found = found[found != i]
        v = c[found] - c[i]
        d2 = row_dot(v, v)
        ok = (d2 <= range_nm * range_nm) & same_shape(f, np.full(len(found), i), found, tol)
        found, v, d2 = found[ok], v[ok], d2[ok]
        o = _pair_order(np.zeros(len(found)), v, d2)
        found, v, d2 = found[o], v[o], d2[o]
        rch = range_nm
        if len(found):
            a1[i] = v[0]
            for k in range(1, len(found)):
                if abs(cross_2d(v[0], v[k])) > tol * row_norm(v[0]):
                    a2[i] = v[k]
                    rch = min(range_nm, row_norm(v[k]) + tol)
                    break
        reach[i] = rch
        near = d2 <= rch * rch
        out_i.append(np.full(int(near.sum()), i, dtype=np.int64))
        out_j.append(found[near])
    return a1, a2, reach, np.concatenate(out_i), np.concatenate(out_j)


_STEPS = np.array([(1, 0), (0, 1), (1, 1), (1, -1), (-1, 0), (0, -1), (-1, -1), (-1, 1)])


def reduced_basis(b1: np.ndarray, b2: np.ndarray, tol: float):
    """Canonical reduced basis of the lattices spanned by rows ``b1``, ``b2``.

    Lagrange-Gauss reduction (swap so that ``|b1| <= |b2|``, subtract the
    nearest integer multiple of ``b1`` from ``b2``, until that multiple is 0),
    then the canonical choice of the module notes among the lattice's shortest
    vectors, which for a reduced basis are among ``±b1, ±b2, ±(b1 + b2),
    ±(b1 - b2)``.  Rows with ``b2`` NaN are lines: ``a1 = ±b1``.  Rows with
    ``b1`` NaN stay NaN.  Returns ``a1``, ``a2`` and integer ``T`` (n, 2, 2)
    with ``[a1 a2] = [b1 b2] T`` (vectors as columns).
    """
    n = len(b1)
    a1 = np.array(b1, dtype=np.float64).reshape(n, 2)
    a2 = np.array(b2, dtype=np.float64).reshape(n, 2)
    T = np.zeros((n, 2, 2), dtype=np.int64)
    T[:, 0, 0] = T[:, 1, 1] = 1
    line = ~np.isnan(a1[:, 0]) & np.isnan(a2[:, 0])
    if line.any():
        _, fwd = _direction_key(a1[line])
        s = np.where(fwd, 1, -1)
        a1[line] *= s[:, None]
        T[line, 0, 0] = s
    two = np.flatnonzero(~np.isnan(a1[:, 0]) & ~np.isnan(a2[:, 0]))
    if not len(two):
        return a1, a2, T
    x, y, t = a1[two], a2[two], T[two]
    todo = np.arange(len(two))
    while len(todo):
        xs, ys, ts = x[todo], y[todo], t[todo]
        sw = row_dot(ys, ys) < row_dot(xs, xs)
        xs[sw], ys[sw] = ys[sw].copy(), xs[sw].copy()
        ts[sw] = ts[sw][:, :, ::-1]
        ratio = row_dot(xs, ys) / row_dot(xs, xs)
        # A ratio of +-1/2 is reduced already: rounding it by float noise cycles.
        mu = np.where(np.abs(ratio) <= 0.5 + 1e-9, 0.0, np.rint(ratio))
        ys -= mu[:, None] * xs
        ts[:, :, 1] -= mu.astype(np.int64)[:, None] * ts[:, :, 0]
        x[todo], y[todo], t[todo] = xs, ys, ts
        todo = todo[mu != 0]
    S0, S1 = _STEPS[None, :, 0, None], _STEPS[None, :, 1, None]
    V = x[:, None, :] * S0 + y[:, None, :] * S1
    C = t[:, None, :, 0] * S0 + t[:, None, :, 1] * S1  # coefficients in b1, b2
    length = row_norm(V)
    key, fwd = _direction_key(V)
    lam1 = length.min(axis=1, keepdims=True)
    k1 = np.argmin(np.where(fwd & (length <= lam1 + tol), key, np.inf), axis=1)
    rows = np.arange(len(two))
    v1 = V[rows, k1]
    l1 = row_norm(v1)[:, None]
    cr = cross_2d(v1[:, None, :], V)
    indep = np.abs(cr) > tol * l1
    lam2 = np.where(indep, length, np.inf).min(axis=1, keepdims=True)
    obtuse = row_dot(V, v1[:, None, :]) < -tol * l1
    score2 = 1000.0 * obtuse + 400.0 * (cr <= 0) + (key + 1.0)
    k2 = np.argmin(np.where(indep & (length <= lam2 + tol), score2, np.inf), axis=1)
    t_out = np.stack([C[rows, k1], C[rows, k2]], axis=2)
    det = t_out[:, 0, 0] * t_out[:, 1, 1] - t_out[:, 0, 1] * t_out[:, 1, 0]
    ok = np.abs(det) == 1  # near-ties may pick two vectors that are no basis: keep the reduced one
    a1[two] = np.where(ok[:, None], v1, x)
    a2[two] = np.where(ok[:, None], V[rows, k2], y)
    T[two] = np.where(ok[:, None, None], t_out, t)
    return a1, a2, T


def reduced_basis_plain(b1: np.ndarray, b2: np.ndarray, tol: float, span: int = 12):
    """Plain twin of :func:`reduced_basis` for one lattice: every vector ``m b1 + n
    b2`` with ``|m|, |n| <= span``, then the convention of the module notes applied
    by a loop (enough when the given basis is not too skewed).  Returns a1, a2."""
    vecs = [
        m * b1 + n * b2 for m in range(-span, span + 1) for n in range(-span, span + 1) if m or n
    ]
    eps = BASIS_ANGLE_EPS_DEG

    def direction(v):
        ang = math.degrees(math.atan2(v[1], v[0]))
        return ang + 180.0 if ang < -eps else ang - 180.0 if ang >= 180.0 - eps else ang

    def forward(v):
        return -eps <= math.degrees(math.atan2(v[1], v[0])) < 180.0 - eps

    lam1 = min(math.hypot(*v) for v in vecs)
    first = min((v for v in vecs if math.hypot(*v) <= lam1 + tol and forward(v)), key=direction)
    l1 = math.hypot(*first)
    indep = [v for v in vecs if abs(first[0] * v[1] - first[1] * v[0]) > tol * l1]
    lam2 = min(math.hypot(*v) for v in indep)

    def rank(v):
        cross = first[0] * v[1] - first[1] * v[0]
        return (bool(v @ first < -tol * l1), bool(cross <= 0), direction(v))

    return first, min((v for v in indep if math.hypot(*v) <= lam2 + tol), key=rank)


def lattice_class(a1: np.ndarray, a2: np.ndarray, tol: float) -> np.ndarray:
    """Class of each canonical reduced basis (see the package notes)."""
    l1, l2 = row_norm(a1), row_norm(a2)
    with np.errstate(invalid="ignore", divide="ignore"):
        proj = np.abs(row_dot(a1, a2)) / l1
    eq = l2 - l1 <= tol
    right = proj <= tol
    half = np.abs(proj - 0.5 * l1) <= tol
    cls = np.where(
        right,
        np.where(eq, SQUARE, RECTANGULAR),
        np.where(eq & half, HEXAGONAL, np.where(eq | half, CENTRED, OBLIQUE)),
    ).astype(np.int8)
    cls[np.isnan(a2[:, 0])] = ROW
    cls[np.isnan(a1[:, 0])] = NONE
    return cls


STEP_CHUNK = 1 << 20
"""Pairs whose lattice steps are worked out at once (bounds the temporaries)."""


def step_table(a1: np.ndarray, a2: np.ndarray, line: np.ndarray) -> np.ndarray:
    """Per basis, the columns :func:`step_code` reads: the rows of the inverse basis
    matrix, then a1 and a2.  A row (line) is the basis ``a1, 0`` with the
    projection on ``a1`` as its first coordinate."""
    with np.errstate(invalid="ignore", divide="ignore"):
        det = cross_2d(a1, a2)
        n1 = row_dot(a1, a1)
        inv = np.stack([a2[:, 1] / det, -a2[:, 0] / det, -a1[:, 1] / det, a1[:, 0] / det])
        inv_line = np.stack([a1[:, 0] / n1, a1[:, 1] / n1, 0.0 * n1, 0.0 * n1])
    inv = np.where(line[None, :], inv_line, inv)
    second = np.where(line[:, None], 0.0, a2)
    return np.vstack([inv, a1.T, second.T])


def step_code(table: np.ndarray, b: np.ndarray, v: np.ndarray, tol: float) -> np.ndarray:
    """Which lattice step ``v`` is in basis ``b`` (a column of ``table``, see
    :func:`step_table`): 0 for ±a1, 1 for ±a2, 2 for ±(a1 + a2), 3 for ±(a1 - a2),
    -1 when ``v`` is not within ``tol`` of one."""
    out = np.empty(len(b), dtype=np.int8)
    for lo in range(0, len(b), STEP_CHUNK):
        bb, w = b[lo : lo + STEP_CHUNK], v[lo : lo + STEP_CHUNK]
        vx, vy = w[:, 0], w[:, 1]
        with np.errstate(invalid="ignore"):
            m = np.rint(table[0][bb] * vx + table[1][bb] * vy)
            k = np.rint(table[2][bb] * vx + table[3][bb] * vy)
            rx = vx - m * table[4][bb] - k * table[6][bb]
            ry = vy - m * table[5][bb] - k * table[7][bb]
            ok = (np.abs(m) <= 1) & (np.abs(k) <= 1) & ((m != 0) | (k != 0))
            ok &= rx * rx + ry * ry <= tol * tol
        flip = (m < 0) | ((m == 0) & (k < 0))
        m, k = np.where(flip, -m, m), np.where(flip, -k, k)
        code = np.select([k == 0, m == 0, k == m], [0, 1, 2], 3)
        out[lo : lo + STEP_CHUNK] = np.where(ok, code, -1)
    return out


def same_lattice(a1i, a2i, line_i, a1j, a2j, line_j, tol):
    """The lattices ``i`` and ``j`` are one: each vector of ``j``'s basis within ``tol``
    of an integer combination of ``i``'s, with determinant ±1 (rows: parallel
    ``a1`` of one length)."""
    p1, q1 = (np.rint(t) for t in lattice_coords(a1i, a2i, a1j))
    p2, q2 = (np.rint(t) for t in lattice_coords(a1i, a2i, a2j))
    with np.errstate(invalid="ignore"):
        r1 = a1j - p1[:, None] * a1i - q1[:, None] * a2i
        r2 = a2j - p2[:, None] * a1i - q2[:, None] * a2i
        ok2 = (row_norm(r1) <= tol) & (row_norm(r2) <= tol) & (np.abs(p1 * q2 - p2 * q1) == 1)
        ok1 = np.minimum(row_norm(a1j - a1i), row_norm(a1j + a1i)) <= tol
    return np.where(line_i & line_j, ok1, np.where(~line_i & ~line_j, ok2, False))


def same_lattice_of_pairs(a1, a2, line, bi, bj, tol) -> np.ndarray:
    """:func:`same_lattice` for the basis pairs ``(bi, bj)``: from a table of all
    pairs of bases when there are few (arrays), else per distinct pair."""
    nb = len(a1)
    if nb * nb <= max(4 * len(bi), 1 << 16):
        ii, jj = np.divmod(np.arange(nb * nb), nb)
        table = same_lattice(a1[ii], a2[ii], line[ii], a1[jj], a2[jj], line[jj], tol)
        return table[bi * nb + bj]
    upair, inv = np.unique(bi * nb + bj, return_inverse=True)
    ui, uj = np.divmod(upair, nb)
    return same_lattice(a1[ui], a2[ui], line[ui], a1[uj], a2[uj], line[uj], tol)[inv.ravel()]


def _confirmed(n: int, i, code_i, j, code_j, line) -> np.ndarray:
    """Features whose lattice is confirmed by same-lattice neighbours along two
    independent steps (rows: along one); ``code_*``: the step's line (see
    :func:`step_code`) seen from each end.  Two features alone always agree on
    the lattice their own vector spans (where two arrays meet, facing features
    do); a lattice seen along two directions is an array's."""
    seen = np.zeros((4, n), dtype=bool)
    for a, code in ((i, code_i), (j, code_j)):
        for q in range(4):
            seen[q] |= np.bincount(a[code == q], minlength=n) > 0
    directions = seen.sum(axis=0)
    return np.where(line, directions >= 1, directions >= 2)


def lattice_sites(
    ps: PolygonSet | None,
    grid_nm: float,
    max_extent_nm: float,
    interaction_range_nm: float,
    region: tuple[float, float, float, float] | None = None,
    tol_grid: float = TOL_GRID,
    compact: CompactFeatures | None = None,
    plain: bool = False,
) -> LatticeSites:
    """Local lattices of the compact features of ``ps`` and their links.

    A link joins feature ``i`` to a feature ``j`` of the same shape within
    ``i``'s reach when ``c_j - c_i`` is a lattice step (coordinates in {-1, 0, 1})
    and both local lattices are one lattice, each confirmed along two
    independent steps (core features, see :func:`_confirmed`).  A feature
    that is not core (the last columns of an array beside another array see
    the other's features among their nearest) keeps its same-shape
    neighbours for :func:`find_arrays`.

    With ``region`` only features whose centroid lies in it are kept (with
    their links); read shapes ``HALO_RANGES`` ranges plus ``2 sqrt(2)
    max_extent_nm`` around it.  ``compact``: features already selected from
    ``ps``.  ``plain``: the R-tree neighbour search (the plain twin, for tests).
    Identical raw bases (the common case in arrays) are reduced once.
    """
    tol = tol_grid * grid_nm
    cf = compact if compact is not None else compact_features(ps, grid_nm, max_extent_nm, tol_grid)
    f = cf.features
    c = f.centroid
    search = neighbour_lattices_plain if plain else neighbour_lattices
    r1, r2, _, pi, pj = search(f, interaction_range_nm, grid_nm, tol)
    rep, bid = dedupe_rows(np.hstack([r1, r2]))
    ua1, ua2, _ = reduced_basis(r1[rep], r2[rep], tol)
    # Round a feature inside a lattice its nearest neighbours are a reduced basis.
    # A basis that reduces to shorter vectors implies sites nobody occupies (four
    # contacts in a zigzag, or the last column beside another array): such a
    # feature confirms no lattice; it may still join a neighbouring array's.
    with np.errstate(invalid="ignore"):
        short = (row_norm(ua1) < row_norm(r1[rep]) - tol) | (
            row_norm(ua2) < row_norm(r2[rep]) - tol
        )
    ucls = lattice_class(ua1, ua2, tol)
    uline = ucls == ROW
    a1, a2, cls = ua1[bid], ua2[bid], ucls[bid]
    v = c[pj] - c[pi]
    bi, bj = bid[pi], bid[pj]
    table = step_table(ua1, ua2, uline)
    code_i = step_code(table, bi, v, tol)
    cand = np.flatnonzero(code_i >= 0)
    cand = cand[same_lattice_of_pairs(ua1, ua2, uline, bi[cand], bj[cand], tol)]
    code_j = step_code(table, bj[cand], -v[cand], tol)
    cand, code_j = cand[code_j >= 0], code_j[code_j >= 0]
    core = _confirmed(len(f), pi[cand], code_i[cand], pj[cand], code_j, cls == ROW)
    core &= ~short[bid]
    core_pair = np.zeros(len(pi), dtype=bool)
    core_pair[cand] = core[pi[cand]] & core[pj[cand]]
    # Features that are not core keep their same-shape neighbours, from both ends: a
    # feature's own reach can be too short to see the array it ends (its nearest
    # neighbours belong to another array).
    loose_i, loose_j = ~core[pi], ~core[pj]
    near_from = np.concatenate([pi[loose_i], pj[loose_j]])
    near_to = np.concatenate([pj[loose_i], pi[loose_j]])
    keys = centroid_keys(c, grid_nm)
    link_from, link_to = pi[core_pair], pj[core_pair]
    if region is not None:
        own = in_region(c, region)
        new_index = np.cumsum(own) - 1
        keep = own[link_from]
        link_from, link_to = new_index[link_from[keep]], link_to[keep]
        keep = own[near_from]
        near_from, near_to = new_index[near_from[keep]], near_to[keep]
        idx = np.flatnonzero(own)
        f, a1, a2, cls, core = f.take(idx), a1[idx], a2[idx], cls[idx], core[idx]
    return LatticeSites(
        f,
        a1,
        a2,
        cls,
        core,
        link_from,
        keys[link_to],
        near_from,
        keys[near_to],
        grid_nm,
        tol,
        interaction_range_nm,
    )
