"""Printed edges at one threshold (pitchguard.optics.resist.printed_edges).

The function finds edges with the vectorised search of ``cd_of_thresholds``
(running maxima over the whole cut).  Its plain twin here walks out from the
centre sample one sample at a time, as the definition reads: the edge on each
side is the first sample at which the image reaches the threshold, linearly
interpolated from the sample before it.  Both must agree on random profiles
to rounding, and on a closed-form profile with the value worked out by hand.
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
import pytest

from pitchguard.optics.resist import cd_of_thresholds, printed_edges

SAME = 1e-9  # nm: the same arithmetic in a different order of evaluation at most
CASES = 3000
SEED = 20261205


def walked_edges(x, intensity, threshold, bright, centre_nm, search=None):
    """The plain twin: a walk from the centre sample outwards on each side."""
    g = -intensity if bright else intensity
    t = -threshold if bright else threshold
    c = int(np.argmin(np.abs(x - centre_nm)))
    if g[c] >= t:
        return None, None, "lost"

    def crossing(step: int) -> float | None:
        k = c
        while 0 <= k + step < len(x):
            if g[k + step] >= t:
                g0, g1 = g[k], g[k + step]
                frac = (t - g0) / (g1 - g0) if g1 != g0 else 0.0
                return float(x[k] + frac * (x[k + step] - x[k]))
            k += step
        return None

    left, right = crossing(-1), crossing(1)
    lo, hi = search if search is not None else (-math.inf, math.inf)
    ok = left is not None and right is not None and left >= lo and right <= hi
    return left, right, "printed" if ok else "bridged"


def random_case(rng: np.random.Generator) -> tuple[dict, set[str]]:
    """A random cut, image, threshold, tone, centre and search window; and what it exercises."""
    tags = set()
    n = int(rng.choice([1, 2, 3, int(rng.integers(4, 400))]))
    if rng.random() < 0.7:
        x = np.linspace(-200.0, 200.0, n) if n > 1 else np.zeros(1)
    else:  # uneven sampling
        x = np.sort(rng.uniform(-300.0, 300.0, n))
        x = np.unique(x)
    n = len(x)
    k = rng.integers(1, 6, 4)
    phase = rng.uniform(0, 2 * math.pi, 4)
    wave = sum(
        rng.uniform(0.05, 0.4) * np.cos(2 * math.pi * kk * x / 400.0 + ph)
        for kk, ph in zip(k, phase, strict=True)
    )
    inten = 0.5 + wave + rng.normal(0.0, rng.choice([0.0, 0.01, 0.1]), n)
    if rng.random() < 0.25:  # plateaus: equal neighbouring samples
        inten = np.round(inten, 1)
        tags.add("plateau")
    bright = bool(rng.random() < 0.5)
    tags.add("bright" if bright else "dark")
    pick = rng.random()
    if pick < 0.3:  # exactly a sample's value: the crossing lies on that sample
        threshold = float(inten[rng.integers(n)])
        tags.add("at a sample")
    elif pick < 0.4:  # beyond the image: no crossing (or lost)
        threshold = float(inten.max() + 0.1) if rng.random() < 0.5 else float(inten.min() - 0.1)
        tags.add("outside the image")
    else:
        threshold = float(rng.uniform(inten.min(), inten.max()))
    pick = rng.random()
    if pick < 0.2:
        centre = float(x[rng.integers(n)])  # on a sample
    elif pick < 0.3:
        centre = float(rng.choice([-1, 1]) * 500.0)  # beyond the cut: the end sample
        tags.add("centre beyond the cut")
    else:
        centre = float(rng.uniform(x[0], x[-1])) if n > 1 else 0.0
    pick = rng.random()
    if pick < 0.2:
        search = None
    elif pick < 0.3:
        search = (-math.inf, math.inf)
    else:
        a, b = rng.uniform(0.0, 250.0, 2)
        search = (centre - a, centre + b)
    case = {
        "x": x,
        "intensity": inten,
        "threshold": threshold,
        "bright": bright,
        "centre_nm": centre,
        "search": search,
    }
    return case, tags


def same_edge(a: float | None, b: float | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= SAME


def test_printed_edges_agree_with_the_walk_on_random_profiles():
    rng = np.random.default_rng(SEED)
    states, tags = Counter(), Counter()
    for _ in range(CASES):
        case, case_tags = random_case(rng)
        got = printed_edges(**case)
        want = walked_edges(**case)
        assert got.state == want[2], case
        assert same_edge(got.left, want[0]) and same_edge(got.right, want[1]), (got, want, case)
        states[got.state] += 1
        tags.update(case_tags)
        if got.state == "bridged" and None in (got.left, got.right):
            tags["no crossing on a side"] += 1
        if got.state == "bridged" and None not in (got.left, got.right):
            tags["crossing beyond the search window"] += 1
        if None not in (want[0], want[1]):
            # A window ending exactly at an edge keeps it; a hair inside loses it.
            left, right = want[0], want[1]
            for search in ((left, right), (np.nextafter(left, np.inf), right)):
                case["search"] = search
                got, want = printed_edges(**case), walked_edges(**case)
                assert got.state == want[2], case
                states[f"window at the edges: {got.state}"] += 1
    # Every kind of case occurred often enough for the comparison to mean something.
    assert min(states[s] for s in ("printed", "lost", "bridged")) >= 100, states
    assert states["window at the edges: printed"] >= 100, states
    assert states["window at the edges: bridged"] >= 100, states
    for tag in (
        "bright",
        "dark",
        "plateau",
        "at a sample",
        "outside the image",
        "centre beyond the cut",
        "no crossing on a side",
        "crossing beyond the search window",
    ):
        assert tags[tag] >= 30, (tag, tags)


def test_printed_edges_of_a_sampled_gaussian_dip():
    """Edges where the image crosses the threshold nearest the feature (linear interpolation)."""
    x = np.linspace(-100, 100, 2001)
    dark_line = 1.0 - 0.8 * np.exp(-((x / 30.0) ** 2))  # dark at the centre: a printed line
    # 1 - 0.8 exp(-(x/30)^2) = 0.5 at x = 30 sqrt(ln 1.6) = 20.57 nm (arithmetic).
    left, right, state = printed_edges(x, dark_line, 0.5, False, 0.0)
    assert state == "printed"
    assert left == pytest.approx(-20.57, abs=0.02) and right == pytest.approx(20.57, abs=0.02)
    assert printed_edges(x, dark_line, 0.1, False, 0.0) == (None, None, "lost")
    # Crossings beyond the middle of the neighbouring spaces: bridged, still reported.
    beyond = printed_edges(x, dark_line, 0.5, False, 0.0, (-15.0, 15.0))
    assert beyond.state == "bridged" and beyond.left == pytest.approx(left, abs=SAME)
    # No crossing anywhere along the cut: bridged with no edges.
    assert printed_edges(x, dark_line, 1.5, False, 0.0) == (None, None, "bridged")
    # An opening on a dark field prints where the image is above the threshold.
    opening = printed_edges(x, 1.0 - dark_line, 0.5, True, 0.0)
    assert opening.state == "printed"
    assert opening.right == pytest.approx(20.57, abs=0.02)


def test_printed_edges_give_the_cd_the_verdicts_use():
    """Inside the search window the edges are those of ``cd_of_thresholds``, which judges
    every finding: a finite CD is the printed width, a lost feature has CD 0, and a
    bridged one (a crossing beyond the window or none) has an infinite CD."""
    rng = np.random.default_rng(SEED + 1)
    seen = Counter()
    for _ in range(CASES):
        case, _ = random_case(rng)
        if case["search"] is None:
            continue
        lo, hi = case["search"]
        edges = printed_edges(**case)
        cd = cd_of_thresholds(
            case["x"],
            case["intensity"],
            case["centre_nm"],
            lo,
            hi,
            case["bright"],
            np.array([case["threshold"]]),
        )[0]
        if edges.state == "lost":
            assert cd == 0.0, case
        elif edges.state == "bridged":
            assert cd == np.inf, case
        if math.isfinite(cd) and cd > 0:
            assert edges.state == "printed", case
            assert edges.right - edges.left == pytest.approx(cd, abs=SAME)
        seen[edges.state] += 1
    assert min(seen[s] for s in ("printed", "lost", "bridged")) >= 50, seen


def test_profiles_in_a_batch_give_the_cds_of_each_alone():
    """``cd_of_thresholds`` on ``B`` profiles at once (counting, row by row) equals the
    same call on each profile alone (binary search): the batched path and its plain
    twin, on random profiles with plateaus, thresholds at samples and beyond the image."""
    rng = np.random.default_rng(SEED + 2)
    for _ in range(300):
        case, _ = random_case(rng)
        x = case["x"]
        base = case["intensity"]
        batch = np.stack([base, np.round(base, 1), base[::-1], base + 0.05])
        lo, hi = case["search"] if case["search"] is not None else (-np.inf, np.inf)
        t = np.concatenate(
            [np.linspace(base.min() - 0.1, base.max() + 0.1, 37), batch[:, :3].ravel()]
        )
        args = (case["centre_nm"], lo, hi, case["bright"], t)
        together = cd_of_thresholds(x, batch, *args)
        assert together.shape == (len(batch), len(t))
        for row, cd in zip(batch, together, strict=True):
            np.testing.assert_array_equal(cd, cd_of_thresholds(x, row, *args))
