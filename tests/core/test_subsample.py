"""Subsampling: reproducibility and the covering radius, checked by brute force."""

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from workers.core.errors import ParameterError
from workers.core.subsample import maxmin_subsample, random_subsample


def hausdorff_to_sample(points: np.ndarray, indices: np.ndarray) -> float:
    """Brute force (scipy cdist): max over points of the distance to the nearest sample."""
    return float(cdist(points, points[indices]).min(axis=1).max())


@pytest.mark.parametrize("choose", [maxmin_subsample, random_subsample])
def test_same_seed_same_indices(choose) -> None:  # type: ignore[no-untyped-def]
    points = np.random.default_rng(0).normal(size=(500, 3))
    first = choose(points, size=40, seed=9)
    again = choose(points, size=40, seed=9)
    other = choose(points, size=40, seed=10)
    assert np.array_equal(first.indices, again.indices)
    assert not np.array_equal(first.indices, other.indices)
    assert len(set(first.indices.tolist())) == 40


@pytest.mark.parametrize("choose", [maxmin_subsample, random_subsample])
@pytest.mark.parametrize("size", [1, 7, 60])
def test_covering_radius_bounds_hausdorff(choose, size: int) -> None:  # type: ignore[no-untyped-def]
    # The reported covering radius must be >= the true Hausdorff distance (brute force).
    points = np.random.default_rng(size).uniform(size=(400, 2))
    sample = choose(points, size=size, seed=1)
    truth = hausdorff_to_sample(points, sample.indices)
    assert sample.covering_radius >= truth
    assert sample.covering_radius == pytest.approx(truth, rel=1e-12)


def test_maxmin_is_greedy_furthest_point() -> None:
    # Gonzalez 1985: each new point is the one furthest from those already chosen.
    points = np.random.default_rng(4).normal(size=(200, 2))
    sample = maxmin_subsample(points, size=10, seed=2)
    for k in range(1, 10):
        nearest = cdist(points, points[sample.indices[:k]]).min(axis=1)
        assert nearest[sample.indices[k]] == pytest.approx(nearest.max())


def test_maxmin_covers_better_than_random_on_clustered_data() -> None:
    # Common practice: furthest-point sampling reaches outlying clusters that uniform
    # sampling misses, so its covering radius is smaller.
    rng = np.random.default_rng(8)
    points = np.vstack([rng.normal(size=(990, 2)) * 0.1, rng.normal(size=(10, 2)) * 0.1 + 10])
    assert (
        maxmin_subsample(points, size=20, seed=0).covering_radius
        < random_subsample(points, size=20, seed=0).covering_radius
    )


@pytest.mark.parametrize("size", [0, 11])
def test_size_outside_one_to_n(size: int) -> None:
    with pytest.raises(ParameterError) as raised:
        maxmin_subsample(np.zeros((10, 2)), size=size)
    assert raised.value.field == "/size"  # a pointer into its own arguments
