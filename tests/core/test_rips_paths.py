"""Each route through the Rips engine gives ripser's diagrams, and the bounds it relies on hold."""

import itertools

import gudhi
import numpy as np
import pytest
from ripser import ripser
from scipy.spatial.distance import cdist

from tests.support.synthetic import noisy_circle
from workers.core.neighbourhood import longest_neighbourhood_edge
from workers.core.rips import enclosing_radius, loop_death_bound, rips_diagrams


def ripser_reference(points: np.ndarray, max_dim: int, thresh: float = np.inf) -> list[np.ndarray]:
    """Reference library ripser on the exact distance matrix (scipy cdist: repeated points
    at distance 0, which ripser's own point-cloud path blurs to ~1e-8), zero-length bars
    removed as ours are."""
    raw = ripser(cdist(points, points), maxdim=max_dim, thresh=thresh, distance_matrix=True)["dgms"]
    return [d[d[:, 1] > d[:, 0]] for d in raw]


def assert_same(ours: list[np.ndarray], reference: list[np.ndarray]) -> None:
    # ripser reduces in float32 (ours in float64), hence the 1e-6 relative tolerance.
    assert len(ours) == len(reference)
    for a, b in zip(ours, reference, strict=True):
        finite = np.concatenate([a[np.isfinite(a)], [1.0]])
        assert gudhi.bottleneck_distance(a, b) <= 1e-6 * float(finite.max())
        assert len(a) == len(b)
        assert np.isinf(a[:, 1]).sum() == np.isinf(b[:, 1]).sum()


@pytest.mark.parametrize(
    "points",
    [
        np.random.default_rng(0).uniform(size=(500, 2)),  # settled by the first cut
        np.random.default_rng(1).uniform(size=(300, 3)),
        noisy_circle(600, seed=2),  # a loop outlives the first cut: the death bound decides
        np.vstack([noisy_circle(300, seed=3), noisy_circle(300, seed=4) * 0.5 + 3]),
        np.random.default_rng(5).normal(size=(200, 5)),  # d > 3: every edge
        np.column_stack([np.linspace(0, 1, 200), np.zeros(200)]),  # collinear: Qhull refuses
        np.repeat(np.random.default_rng(6).uniform(size=(100, 2)), 2, axis=0),  # repeated points
        np.random.default_rng(7).uniform(size=(100, 2)),  # small: every edge
    ],
    ids=["square", "cube", "circle", "two-circles", "5d", "collinear", "repeated", "small"],
)
def test_every_route_matches_ripser(points: np.ndarray) -> None:
    assert_same(rips_diagrams(points, max_dim=1), ripser_reference(points, 1))


def test_cavities_through_the_collapse_match_ripser() -> None:
    # H2 runs the whole filtration through edge collapse (Boissonnat & Pritam 2020 keep
    # persistence in every dimension); reference: ripser on the dense matrix.
    rng = np.random.default_rng(7)
    sphere = rng.normal(size=(120, 3))
    sphere /= np.linalg.norm(sphere, axis=1, keepdims=True)
    assert_same(rips_diagrams(sphere, max_dim=2), ripser_reference(sphere, 2))
    h2 = rips_diagrams(sphere, max_dim=2)[2]
    assert np.sum(h2[:, 1] - h2[:, 0] > 0.5) == 1  # common practice: a sphere has one cavity


@pytest.mark.parametrize("max_edge", [0.05, 0.3, 1.2])
def test_truncated_filtration_matches_ripser(max_edge: float) -> None:
    points = noisy_circle(500, seed=8)
    assert_same(
        rips_diagrams(points, max_dim=1, max_edge=max_edge),
        ripser_reference(points, 1, thresh=max_edge),
    )


def brute_force_neighbourhood_edge(points: np.ndarray) -> float:
    """Definition (Toussaint 1980): uv is an edge iff no w has max(|uw|, |vw|) < |uv|."""
    longest = 0.0
    distances = cdist(points, points)
    for u, v in itertools.combinations(range(len(points)), 2):
        reach = np.maximum(distances[u], distances[v])
        reach[[u, v]] = np.inf  # u and v are the edge's ends, not witnesses
        length = distances[u, v]
        if not np.any(reach < length):
            longest = max(longest, float(length))
    return longest


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("dim", [2, 3])
def test_longest_neighbourhood_edge_by_brute_force(seed: int, dim: int) -> None:
    points = np.random.default_rng(seed).normal(size=(70, dim))
    assert longest_neighbourhood_edge(points) == pytest.approx(
        brute_force_neighbourhood_edge(points), rel=1e-12
    )


@pytest.mark.slow  # ripser on 800 points: 7 to 10 s on 2 cores
def test_loop_death_bound_holds() -> None:
    # The bound from the 2e-interleaving of a subsample (Chazal, de Silva, Oudot 2014) must
    # be at least the true largest H1 death (reference: ripser), and here well below the
    # enclosing radius, which is what makes it worth computing.
    points = noisy_circle(800, seed=9)
    births = longest_neighbourhood_edge(points)
    assert births is not None
    bound = loop_death_bound(points, births)
    loops = ripser_reference(points, 1)[1]
    assert bound >= loops[:, 1].max()
    assert bound < enclosing_radius(points)


def test_enclosing_radius_of_a_square() -> None:
    # Corners of a unit square: every corner's farthest point is the opposite corner.
    corners = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [1.0, 1.0]])
    assert enclosing_radius(corners) == pytest.approx(np.sqrt(2))


def test_shortcut_declines_where_it_does_not_apply() -> None:
    # The routes above only test what they claim if these sets really skip the shortcut.
    assert (
        longest_neighbourhood_edge(np.column_stack([np.linspace(0, 1, 200), np.zeros(200)])) is None
    )
    assert longest_neighbourhood_edge(np.repeat(np.eye(3)[:, :2] + 5, 2, axis=0)) is None
    assert longest_neighbourhood_edge(np.random.default_rng(0).normal(size=(200, 5))) is None
    assert longest_neighbourhood_edge(np.random.default_rng(0).normal(size=(200, 2))) is not None
