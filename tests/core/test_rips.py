"""Rips diagrams against a reference library, closed-form examples and common practice."""

import math

import gudhi
import numpy as np
import pytest

from tests.support.synthetic import noisy_circle
from workers.core.errors import InvalidArrayError, ParameterError
from workers.core.rips import rips_diagrams


def gudhi_rips(points: np.ndarray, max_dim: int) -> list[np.ndarray]:
    """Reference: gudhi's RipsComplex, whose filtration values are edge lengths too."""
    tree = gudhi.RipsComplex(points=points).create_simplex_tree(max_dimension=max_dim + 1)
    tree.compute_persistence()
    return [
        np.asarray(tree.persistence_intervals_in_dimension(k)).reshape(-1, 2)
        for k in range(max_dim + 1)
    ]


@pytest.mark.parametrize(
    ("seed", "n", "d", "max_dim"),
    # n > 150 takes the relative-neighbourhood cut; smaller sets the whole filtration.
    [
        (0, 80, 2, 1),
        (1, 120, 2, 1),
        (2, 60, 3, 2),
        (3, 100, 3, 1),
        (4, 40, 3, 2),
        (5, 220, 2, 1),
        (6, 180, 3, 1),
    ],
)
def test_matches_gudhi_rips(seed: int, n: int, d: int, max_dim: int) -> None:
    # Reference library gudhi (RipsComplex, its own simplex tree and reduction). Both sides
    # are float64, so the acceptance bound of 1e-5 x the largest finite value is generous.
    points = np.random.default_rng(seed).uniform(size=(n, d))
    ours = rips_diagrams(points, max_dim=max_dim)
    reference = gudhi_rips(points, max_dim)
    assert len(ours) == max_dim + 1
    for k in range(max_dim + 1):
        finite = np.concatenate([ours[k][np.isfinite(ours[k])], [0.0]])
        bound = 1e-5 * float(np.max(finite))
        assert gudhi.bottleneck_distance(ours[k], reference[k]) <= bound
        assert len(ours[k]) == len(reference[k][reference[k][:, 1] > reference[k][:, 0]])


def test_regular_hexagon() -> None:
    # From memory, Adamaszek & Adams 2017 ("The Vietoris-Rips complexes of a circle"): six
    # evenly spaced points on a circle of radius 1 (side 1, short diagonal sqrt 3, long
    # diagonal 2) have H1 = [1, sqrt 3] and H2 = [sqrt 3, 2] in the edge-length convention.
    angles = np.arange(6) * np.pi / 3
    hexagon = np.column_stack([np.cos(angles), np.sin(angles)])
    h0, h1, h2 = rips_diagrams(hexagon, max_dim=2)
    assert h0.shape == (6, 2)
    assert np.all(h0[:, 0] == 0)
    assert h0[:5, 1] == pytest.approx([1.0] * 5, rel=1e-6)
    assert np.isinf(h0[5, 1])
    assert h1 == pytest.approx(np.array([[1.0, math.sqrt(3)]]), rel=1e-6)
    assert h2 == pytest.approx(np.array([[math.sqrt(3), 2.0]]), rel=1e-6)


def long_bars(diagram: np.ndarray, at_least: float) -> int:
    return int(np.sum(diagram[:, 1] - diagram[:, 0] > at_least))


def test_noisy_circle_has_one_long_loop() -> None:
    # Common practice: a dense sample of a circle has exactly one H1 bar much longer than
    # the noise (here radius 1, noise 0.05: the loop lives from ~0.1 to ~sqrt 3).
    h0, h1 = rips_diagrams(noisy_circle(300, seed=7), max_dim=1)
    assert long_bars(h1, 1.0) == 1
    assert long_bars(h0, 1.0) == 1  # the essential component only


def test_two_disjoint_circles() -> None:
    # Common practice: two circles far apart give two long H1 bars and two long H0 bars
    # (the essential class and the merge of the two clusters at their gap, here ~3).
    first = noisy_circle(200, seed=11)
    second = noisy_circle(200, seed=12) + np.array([5.0, 0.0])
    h0, h1 = rips_diagrams(np.vstack([first, second]), max_dim=1)
    assert long_bars(h1, 1.0) == 2
    assert long_bars(h0, 1.0) == 2


def test_max_edge_truncates_the_filtration() -> None:
    # Definition of a truncated filtration: nothing is born after max_edge, and a class
    # alive at max_edge is reported as never dying.
    points = noisy_circle(100, seed=3)
    h0, h1 = rips_diagrams(points, max_dim=1, max_edge=0.5)
    full_h0, _ = rips_diagrams(points, max_dim=1)
    for diagram in (h0, h1):
        assert np.all(diagram[:, 0] <= 0.5)
        assert np.all(np.isinf(diagram[:, 1]) | (diagram[:, 1] <= 0.5))
    assert np.sum(np.isinf(h0[:, 1])) == np.sum(full_h0[:, 1] > 0.5)


def test_pairs_are_sorted_and_single_point_works() -> None:
    (h0,) = rips_diagrams(np.zeros((1, 3)), max_dim=0)
    assert h0.tolist() == [[0.0, np.inf]]
    diagrams = rips_diagrams(np.random.default_rng(5).normal(size=(50, 2)), max_dim=1)
    for diagram in diagrams:
        order = np.lexsort((diagram[:, 1], diagram[:, 0]))
        assert np.array_equal(order, np.arange(len(diagram)))


@pytest.mark.parametrize(
    ("points", "kwargs", "error"),
    [
        (np.array([[0.0, np.nan]]), {}, InvalidArrayError),
        (np.zeros((0, 2)), {}, InvalidArrayError),
        (np.zeros((3, 2)), {"max_dim": 3}, ParameterError),
        (np.zeros((3, 2)), {"max_edge": -1.0}, ParameterError),
    ],
)
def test_refuses_bad_arguments(points: np.ndarray, kwargs: dict[str, float], error: type) -> None:
    with pytest.raises(error):
        rips_diagrams(points, **kwargs)
