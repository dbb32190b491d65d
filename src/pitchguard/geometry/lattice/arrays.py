"""Lattice extraction, step 3: links -> arrays with basis, class, extents and roles."""

from __future__ import annotations

import math

import numpy as np

from pitchguard.geometry.lattice.common import (
    CORNER,
    END_A1,
    END_A2,
    INTERIOR,
    MIN_MEMBERS,
    MIN_MEMBERS_ROW,
    NEIGHBOUR_STEPS,
    NOTCH,
    ROW,
    TOL_GRID,
    centroid_keys,
    first_per_group,
    lattice_coords,
    row_dot,
    row_norm,
)
from pitchguard.geometry.lattice.neighbours import (
    lattice_class,
    lattice_sites,
    reduced_basis,
    step_code,
    step_table,
)
from pitchguard.geometry.lattice.records import LatticeArrays, LatticeSites
from pitchguard.geometry.spatial import components
from pitchguard.layout.polygons import PolygonSet

FIT_DECIMALS = 6
"""Fitted bases and origins are rounded to 1e-6 nm: float noise of the sums must
not differ between a tiled and a whole run."""


def _reduce_groups(ufunc, values: np.ndarray, starts: np.ndarray, k: int, fill) -> np.ndarray:
    """``ufunc.reduceat`` over runs starting at ``starts`` (k runs, all non-empty)."""
    if k == 0:
        return np.full((0,) + values.shape[1:], fill)
    return ufunc.reduceat(values, starts, axis=0)


def grow_arrays(seed_of, near_from, near_to, centroid, keys, steps, pitch, tol) -> np.ndarray:
    """Arrays grown round by round: a feature in none (``seed_of`` -1) joins the
    array of a neighbour in one (pairs ``near_from`` -> ``near_to``) when it sits
    one lattice step from that neighbour on the array's lattice (``steps``, see
    :func:`step_table`); of several, the nearest neighbour, then the array of
    shorter pitches (``pitch`` (k, 2)), then the neighbour of least key.  Every
    feature that can join in a round joins in it.  Returns the new ``seed_of``;
    the plain twin is :func:`grow_arrays_plain`."""
    seed_of = seed_of.copy()
    n = len(seed_of)
    while True:
        go = (seed_of[near_from] < 0) & (seed_of[near_to] >= 0)
        i, j = near_from[go], near_to[go]
        a = seed_of[j]
        fit = step_code(steps, a, centroid[i] - centroid[j], tol) >= 0
        if not fit.any():
            return seed_of
        i, j, a = i[fit], j[fit], a[fit]
        dv = centroid[i] - centroid[j]
        order = np.lexsort((keys[j], pitch[a, 1], pitch[a, 0], row_dot(dv, dv), i))
        i, a = i[order], a[order]
        best = first_per_group(i, n)
        chosen = best[best >= 0]
        seed_of[i[chosen]] = a[chosen]


def grow_arrays_plain(seed_of, near_from, near_to, centroid, keys, steps, pitch, tol):
    """Plain twin of :func:`grow_arrays`: breadth first, one feature at a time."""
    seed_of = seed_of.copy()
    partners: dict[int, list[int]] = {}
    for i, j in zip(near_from.tolist(), near_to.tolist(), strict=True):
        partners.setdefault(i, []).append(j)
    while True:
        joined = {}
        for i, js in partners.items():
            if seed_of[i] >= 0:
                continue
            best = None
            for j in js:
                a = int(seed_of[j])
                if a < 0:
                    continue
                dv = centroid[i] - centroid[j]
                code = step_code(steps, np.array([a]), dv[None, :], tol)[0]
                if code < 0:
                    continue
                rank = (float(row_dot(dv, dv)), pitch[a, 0], pitch[a, 1], int(keys[j]))
                if best is None or rank < best[0]:
                    best = (rank, a)
            if best is not None:
                joined[i] = best[1]
        if not joined:
            return seed_of
        for i, a in joined.items():
            seed_of[i] = a


def find_arrays(
    sites: LatticeSites,
    min_members: int = MIN_MEMBERS,
    min_members_row: int = MIN_MEMBERS_ROW,
    plain: bool = False,
) -> LatticeArrays:
    """Arrays: core features joined by links, grown by the features that sit on
    their lattice next to them, with at least ``min_members`` members (rows:
    ``min_members_row``).

    Growth goes in rounds (:func:`grow_arrays`): a feature that is not core
    joins the array of a same-shape neighbour already in one when it sits one
    lattice step (coordinates in {-1, 0, 1}, within ``tol``) from it on that
    array's lattice (its reference member's); of several, the nearest
    neighbour, then the array with the shorter pitches, then the neighbour
    with the least key.  Of the features left, neighbours that are each
    other's shortest vector (``a1`` up to sign) form rows (a row running
    beside an array, within range, has the array in its second vector).
    Each array's basis is then fitted to all its members by least squares
    (lattice coordinates from the links' steps in its reference member's
    basis, so exact for arrays on the grid) and made canonical; its class,
    rows and columns, feature size, bounding box and each member's role
    follow.  The reference member is the core member with the least centroid
    key (least x, then least y); arrays are numbered in the order of their
    reference members, so nothing depends on the order of the input or on a
    tiling.  ``plain``: grow with :func:`grow_arrays_plain` (for tests).
    """
    f = sites.features
    n = len(f)
    tol, R = sites.tol_nm, sites.range_nm
    c = f.centroid
    keys = centroid_keys(c, sites.grid_nm)
    korder = np.argsort(keys, kind="stable")
    sk = keys[korder]

    def resolve(frm, to):
        if not n:
            return frm[:0], frm[:0]
        pos = np.minimum(np.searchsorted(sk, to), n - 1)
        found = sk[pos] == to
        return frm[found], korder[pos[found]]

    lf, lt = resolve(sites.link_from, sites.link_to)
    nf, nt = resolve(sites.near_from, sites.near_to)
    n_comp, comp = components(n, lf, lt)
    # Seeds: components of core features; their reference member and its lattice.
    seed_of = np.where(sites.core, comp, -1)
    ref_order = np.lexsort((keys, ~sites.core, comp))
    first = first_per_group(comp[ref_order], n_comp)
    ref = ref_order[np.maximum(first, 0)]
    is_seed = sites.core[ref] if n else np.zeros(0, bool)
    line = sites.lattice[ref] == ROW
    s1, s2 = sites.a1[ref], np.where(line[:, None], np.nan, sites.a2[ref])
    pitch = np.stack([row_norm(s1), np.nan_to_num(row_norm(s2), nan=np.inf)], axis=1)
    grow = grow_arrays_plain if plain else grow_arrays
    seed_of = grow(seed_of, nf, nt, c, keys, step_table(s1, s2, line), pitch, tol)
    # Rows among the features left over: neighbours that are each other's shortest
    # vector (a row beside an array sees the array in its second vector).
    free = (seed_of < 0)[nf] & (seed_of < 0)[nt]
    rf, rt = nf[free], nt[free]
    v = c[rt] - c[rf]
    along = np.ones(len(rf), dtype=bool)
    for end in (rf, rt):
        w = sites.a1[end]
        along &= np.minimum(row_norm(v - w), row_norm(v + w)) <= tol
    rf, rt = rf[along], rt[along]
    n_row, row_comp = components(n, rf, rt)
    row_size = np.bincount(row_comp, minlength=n_row)
    in_row = np.flatnonzero(row_size[row_comp] >= min_members_row)
    if len(in_row):
        rows_found, row_id = np.unique(row_comp[in_row], return_inverse=True)
        seed_of[in_row] = n_comp + row_id.ravel()
        order = np.lexsort((keys[in_row], row_id.ravel()))
        row_ref = in_row[order][first_per_group(row_id.ravel()[order], len(rows_found))]
        ref = np.r_[ref, row_ref]
        is_seed = np.r_[is_seed, np.ones(len(rows_found), dtype=bool)]
        line = np.r_[line, np.ones(len(rows_found), dtype=bool)]
        n_comp += len(rows_found)
        lf, lt = np.r_[lf, rf], np.r_[lt, rt]
    size = np.bincount(seed_of[seed_of >= 0], minlength=n_comp)
    is_array = is_seed & (size >= np.where(line, min_members_row, min_members))
    arr_comp = np.flatnonzero(is_array)
    numbering = np.argsort(keys[ref[arr_comp]], kind="stable")
    arr_comp = arr_comp[numbering]
    ref, line = ref[arr_comp], line[arr_comp]
    k = len(arr_comp)
    label_of_comp = np.full(n_comp, -1, dtype=np.int64)
    label_of_comp[arr_comp] = np.arange(k)
    array = np.where(seed_of >= 0, label_of_comp[np.maximum(seed_of, 0)], -1)

    # Members by array.
    mem = np.flatnonzero(array >= 0)
    mem = mem[np.argsort(array[mem], kind="stable")]
    lab = array[mem]
    starts = np.searchsorted(lab, np.arange(k))
    count = np.bincount(lab, minlength=k)
    ml = line[lab]

    def sums(w):
        return np.bincount(lab, weights=w, minlength=k)

    # Basis from the links: their vectors and integer steps in the reference basis.
    b1 = sites.a1[ref]
    b2 = np.where(line[:, None], np.nan, sites.a2[ref])
    inl = (array[lf] >= 0) & (array[lf] == array[lt]) & (keys[lf] < keys[lt])  # each link once
    el = array[lf[inl]]
    ev = c[lt[inl]] - c[lf[inl]]
    t1, t2 = lattice_coords(b1[el], b2[el], ev)
    with np.errstate(invalid="ignore", divide="ignore"):
        s1 = np.rint(row_dot(ev, b1[el]) / row_dot(b1[el], b1[el]))
    sm = np.where(line[el], s1, np.rint(t1))
    sn = np.where(line[el], 0.0, np.rint(t2))

    def esums(w):
        return np.bincount(el, weights=w, minlength=k)

    g00, g01, g11 = esums(sm * sm), esums(sm * sn), esums(sn * sn)
    h0 = np.stack([esums(sm * ev[:, 0]), esums(sm * ev[:, 1])], axis=1)
    h1 = np.stack([esums(sn * ev[:, 0]), esums(sn * ev[:, 1])], axis=1)
    det = g00 * g11 - g01 * g01
    g1, g2 = b1.copy(), b2.copy()
    fit2 = ~line & (det > 0.5)
    with np.errstate(invalid="ignore", divide="ignore"):
        g1[fit2] = ((g11[:, None] * h0 - g01[:, None] * h1) / det[:, None])[fit2]
        g2[fit2] = ((g00[:, None] * h1 - g01[:, None] * h0) / det[:, None])[fit2]
        fit1 = line & (g00 > 0.5)
        g1[fit1] = (h0 / g00[:, None])[fit1]
    # Lattice coordinates of every member, from the reference member.
    rel = c[mem] - c[ref[lab]]
    t1, t2 = lattice_coords(g1[lab], g2[lab], rel)
    with np.errstate(invalid="ignore", divide="ignore"):
        u1 = np.rint(row_dot(rel, g1[lab]) / row_dot(g1[lab], g1[lab]))
    u = np.where(ml, u1, np.rint(t1))
    v = np.where(ml, 0.0, np.rint(t2))
    # Least squares over the members: rel = o + u f1 + v f2.
    S = [sums(w) for w in (np.ones(len(mem)), u, v, u * u, u * v, v * v)]
    Y = [np.stack([sums(w * rel[:, 0]), sums(w * rel[:, 1])], axis=1) for w in (1.0, u, v)]
    N3 = np.stack(
        [
            np.stack([S[0], S[1], S[2]], 1),
            np.stack([S[1], S[3], S[4]], 1),
            np.stack([S[2], S[4], S[5]], 1),
        ],
        axis=1,
    )
    Y3 = np.stack(Y, axis=1)
    o = np.zeros((k, 2))
    f1, f2 = g1.copy(), g2.copy()
    d3 = np.linalg.det(N3) if k else np.zeros(0)
    ok3 = ~line & (d3 > 0.5)
    if ok3.any():
        sol = np.linalg.solve(N3[ok3], Y3[ok3])
        o[ok3], f1[ok3], f2[ok3] = sol[:, 0], sol[:, 1], sol[:, 2]
    d2 = S[0] * S[3] - S[1] * S[1]
    ok2 = line & (d2 > 0.5)
    if ok2.any():
        sol = np.linalg.solve(N3[ok2][:, :2, :2], Y3[ok2][:, :2])
        o[ok2], f1[ok2] = sol[:, 0], sol[:, 1]
    rest = ~ok3 & ~ok2  # too few distinct sites to fit both: the mean offset, the links' basis
    if rest.any():
        mean = (Y[0] - S[1][:, None] * g1 - S[2][:, None] * np.nan_to_num(g2)) / S[0][:, None]
        o[rest] = mean[rest]
    a1, a2, T = reduced_basis(f1, f2, tol)
    a1, a2 = np.round(a1, FIT_DECIMALS) + 0.0, np.round(a2, FIT_DECIMALS) + 0.0
    # Coordinates in the canonical basis: T^-1 (u, v), T unimodular.
    td = T[:, 0, 0] * T[:, 1, 1] - T[:, 0, 1] * T[:, 1, 0]
    T, td, ui, vi = T[lab], td[lab], u.astype(np.int64), v.astype(np.int64)
    uvi = np.stack(
        [(T[:, 1, 1] * ui - T[:, 0, 1] * vi) * td, (-T[:, 1, 0] * ui + T[:, 0, 0] * vi) * td], 1
    )
    umin = _reduce_groups(np.minimum, uvi, starts, k, 0)
    umax = _reduce_groups(np.maximum, uvi, starts, k, 0)
    uvi -= umin[lab]
    a2z = np.nan_to_num(a2)
    origin = c[ref] + o + umin[:, :1] * a1 + umin[:, 1:] * a2z
    origin = np.round(origin, FIT_DECIMALS) + 0.0
    site = origin[lab] + uvi[:, :1] * a1[lab] + uvi[:, 1:] * a2z[lab]
    resid = _reduce_groups(np.maximum, row_norm(c[mem] - site), starts, k, 0.0)
    extent = umax - umin + 1
    lattice = np.where(line, ROW, lattice_class(a1, a2, tol)).astype(np.int8)

    # Roles: which of the eight neighbouring sites hold a member.
    if k and (extent.max() + 2 >= 1 << 21 or k >= 1 << 21):
        raise ValueError("array too large for site keys")
    skey = (lab << 42) + ((uvi[:, 0] + 1) << 21) + (uvi[:, 1] + 1)
    sorted_keys = np.sort(skey)
    bits = np.zeros(len(mem), dtype=np.uint8)
    present = np.zeros((len(mem), 8), dtype=bool)
    for bit, (du, dv) in enumerate(NEIGHBOUR_STEPS.tolist()):
        q = skey + (du << 21) + dv
        p = np.minimum(np.searchsorted(sorted_keys, q), max(len(sorted_keys) - 1, 0))
        present[:, bit] = sorted_keys[p] == q if len(mem) else False
        bits |= present[:, bit].astype(np.uint8) << bit
    step = (
        NEIGHBOUR_STEPS[None, :, :1] * a1[:, None, :]
        + NEIGHBOUR_STEPS[None, :, 1:] * a2z[:, None, :]
    )
    within = row_norm(step) <= R + tol
    within[line] = NEIGHBOUR_STEPS[:, 1] == 0  # a row has neighbours along a1 only
    missing = within[lab] & ~present
    miss1 = missing[:, [0, 4]].any(axis=1)
    miss2 = missing[:, [2, 6]].any(axis=1)
    diag = missing[:, [1, 3, 5, 7]].any(axis=1)
    role_m = np.select(
        [miss1 & miss2, miss1, miss2, diag], [CORNER, END_A1, END_A2, NOTCH], INTERIOR
    ).astype(np.int8)
    kind = np.select([role_m == INTERIOR, role_m == CORNER], [0, 2], 1)
    role_counts = np.stack([sums(kind == q) for q in range(3)], axis=1).astype(np.int64)

    # Bounding boxes and feature size (in the reference member's frame).
    lo = _reduce_groups(np.minimum, f.bbox[mem, :2], starts, k, 0.0)
    hi = _reduce_groups(np.maximum, f.bbox[mem, 2:], starts, k, 0.0)
    fang = f.angle_deg[ref]
    swap = np.abs(f.angle_deg[mem] - fang[lab]) > 45.0
    wh = np.where(swap[:, None], f.size[mem][:, ::-1], f.size[mem])
    feature = np.stack([sums(wh[:, 0]), sums(wh[:, 1])], axis=1) / np.maximum(count, 1)[:, None]

    out_uv = np.full((n, 2), -1, dtype=np.int64)
    out_uv[mem] = uvi
    out_role = np.full(n, -1, dtype=np.int8)
    out_role[mem] = role_m
    out_bits = np.zeros(n, dtype=np.uint8)
    out_bits[mem] = bits
    return LatticeArrays(
        sites=sites,
        array=array,
        uv=out_uv,
        role=out_role,
        neighbours=out_bits,
        lattice=lattice,
        a1=a1,
        a2=a2,
        origin=origin,
        count=count,
        extent=extent.astype(np.int64),
        bbox=np.hstack([lo, hi]),
        feature=feature,
        feature_angle_deg=fang,
        role_counts=role_counts,
        residual=resid,
    )


def extract_lattices(
    ps: PolygonSet,
    grid_nm: float,
    max_extent_nm: float,
    interaction_range_nm: float,
    tol_grid: float = TOL_GRID,
) -> LatticeArrays:
    """Arrays of compact features on one layer (nm as drawn): :func:`lattice_sites`
    then :func:`find_arrays`."""
    return find_arrays(
        lattice_sites(ps, grid_nm, max_extent_nm, interaction_range_nm, tol_grid=tol_grid)
    )


def member_roles_plain(arrays: LatticeArrays) -> tuple[np.ndarray, np.ndarray]:
    """Plain twin of the roles and neighbour bits of :func:`find_arrays`: the
    occupied sites in a set, one loop per member and neighbour."""
    n = len(arrays.array)
    R, tol = arrays.sites.range_nm, arrays.sites.tol_nm
    occupied = {
        (int(a), int(u), int(v))
        for a, (u, v) in zip(arrays.array, arrays.uv, strict=True)
        if a >= 0
    }
    role = np.full(n, -1, dtype=np.int8)
    bits = np.zeros(n, dtype=np.uint8)
    for i in range(n):
        a = int(arrays.array[i])
        if a < 0:
            continue
        u, v = (int(x) for x in arrays.uv[i])
        missing = []
        for bit, (du, dv) in enumerate(NEIGHBOUR_STEPS.tolist()):
            here = (a, u + du, v + dv) in occupied
            bits[i] |= int(here) << bit
            if arrays.lattice[a] == ROW:
                considered = dv == 0
            else:
                step = du * arrays.a1[a] + dv * arrays.a2[a]
                considered = math.hypot(*step) <= R + tol
            if considered and not here:
                missing.append((du, dv))
        m1 = (1, 0) in missing or (-1, 0) in missing
        m2 = (0, 1) in missing or (0, -1) in missing
        if m1 and m2:
            role[i] = CORNER
        elif m1:
            role[i] = END_A1
        elif m2:
            role[i] = END_A2
        elif missing:
            role[i] = NOTCH
        else:
            role[i] = INTERIOR
    return role, bits
