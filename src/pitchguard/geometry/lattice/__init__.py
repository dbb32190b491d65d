"""Lattices of compact features: contacts, vias, posts and short lines in arrays.

Three steps, each usable on its own:

``compact_features``
    Polygons of one layer -> features (touching shapes merged) whose extents in
    their own frame are both below ``max_extent_nm`` (the layer's ``min_run_nm``),
    Manhattan (at any rotation) and without holes; every polygon that is not
    part of one gets a reason.
``lattice_sites``
    Per compact feature, its local lattice: the shortest vector to a feature of
    the same shape within the interaction range and the shortest one
    independent of it, reduced and made canonical; its links to neighbours of
    the same lattice; and, where its lattice is not confirmed, its same-shape
    neighbours.  Every value depends only on the layout within ``HALO_RANGES``
    interaction ranges of the feature, so tiles with that much halo give the
    whole layout's values (``region`` keeps what a tile owns,
    ``LatticeSites.joined`` puts tiles together).
``find_arrays``
    Linked features -> arrays, grown by the features that sit on an array's
    lattice next to it; basis fitted to all members, lattice class, feature
    size, rows and columns, bounding box, hull, and each member's place
    (interior, last column, last row, corner).

``extract_lattices`` runs all three on one layer.

Conventions (all lengths nm as drawn):

* Feature frame: the direction of the feature's edges (modulo 90 degrees),
  ``angle_deg`` in (-22.5, 67.5]; ``w`` is the extent along that direction,
  ``h`` across it.  The cut sits away from the usual placements (0, 30, 45, 60,
  90 degrees), so snapping noise does not swap ``w`` and ``h`` there.
* Basis: ``a1`` is the shortest lattice vector; among vectors within the
  tolerance of the shortest length, the one whose direction is smallest in
  [0, 180) degrees.  ``a2`` is the shortest vector independent of ``a1``; among
  near-ties, one at no more than 90 degrees from ``a1``, then the one
  counter-clockwise from ``a1``.  So ``|a1| <= |a2|``, the angle between them is
  60 to 90 degrees, and the basis is reduced (Lagrange-Gauss).
* Lattice classes from the reduced basis (tolerance ``tol``): square
  (``|a1| = |a2|``, 90 degrees), rectangular (90 degrees), hexagonal
  (``|a1| = |a2|``, 60 degrees), centred (staggered rows: ``|a1| = |a2|`` at
  another angle, or ``a2`` projecting onto half of ``a1``), oblique; ``row``
  for features in a line with no second direction within the interaction
  range (``a2`` is NaN).
* Lattice coordinates ``(u, v)`` of a member: its centroid is
  ``origin + u a1 + v a2``, with ``u, v >= 0`` and both reaching 0 in the array.

The tolerance ``tol`` is ``tol_grid`` database grid steps (2 by default): the
centroid of a snapped, rotated shape moves by up to half a step per axis.

Speed: numpy grids, not one R-tree query per feature (13 s for 10^6 features);
identical shapes and identical local bases are worked out once.
``tests/benchmarks/bench_lattice.py`` prints the figures beside a gdstk read.

Limits:

* Only features of the same size, shape and orientation share an array; a
  lattice of two alternating sizes gives one array per size.
* Octagonal or round posts are not Manhattan and so not compact.
* Pitches within ``tol`` of each other count as equal (a 100 x 101.5 nm
  lattice is square at 1 nm grid); an array whose pitch drifts by less than
  ``tol`` per step is one array (its ``max_residual_nm`` shows the drift).
* Four features at the corners of a parallelogram form an array, three
  evenly spaced in a line a row: among 10^5 vias at random places (about 2.5
  others within range of each) one such parallelogram and two such rows
  turned up (``bench_lattice.py``).
* A row whose shortest vector points at a foreign feature (another array
  closer than its own pitch) is not found as a row: its members are isolated.
* Centroid keys hold coordinates up to 2^31 / 16 grid steps (134 mm at 1 nm).
"""

from __future__ import annotations

from pitchguard.geometry.lattice.arrays import (  # noqa: F401
    FIT_DECIMALS,
    extract_lattices,
    find_arrays,
    grow_arrays,
    grow_arrays_plain,
    member_roles_plain,
)
from pitchguard.geometry.lattice.common import (  # noqa: F401
    BASIS_ANGLE_EPS_DEG,
    CENTRED,
    COMPACT,
    CORNER,
    DEGENERATE,
    END_A1,
    END_A2,
    FRAME_CUT_DEG,
    HALO_RANGES,
    HEXAGONAL,
    HOLE,
    INTERIOR,
    KEY_STEPS,
    LARGE,
    LATTICE_NAMES,
    LEVEL_BASE_GRID,
    MIN_MEMBERS,
    MIN_MEMBERS_ROW,
    NEIGHBOUR_STEPS,
    NONE,
    NOT_MANHATTAN,
    NOTCH,
    OBLIQUE,
    PAIR_CHUNK,
    REASON_NAMES,
    RECTANGULAR,
    ROLE_NAMES,
    ROW,
    SQRT2,
    SQUARE,
    TOL_GRID,
    cell_keys,
    centroid_keys,
    convex_hull,
    cross_2d,
    dedupe_rows,
    expand_runs,
    first_per_group,
    lattice_coords,
    row_dot,
    row_norm,
)
from pitchguard.geometry.lattice.compact import (  # noqa: F401
    compact_features,
    compact_features_plain,
    points_on_features,
    points_on_features_plain,
)
from pitchguard.geometry.lattice.neighbours import (  # noqa: F401
    STEP_CHUNK,
    lattice_class,
    lattice_sites,
    neighbour_lattices,
    neighbour_lattices_plain,
    reduced_basis,
    reduced_basis_plain,
    same_lattice,
    same_lattice_of_pairs,
    same_shape,
    step_code,
    step_table,
)
from pitchguard.geometry.lattice.records import (  # noqa: F401
    CompactFeatures,
    FeatureColumns,
    LatticeArray,
    LatticeArrays,
    LatticeSites,
)
