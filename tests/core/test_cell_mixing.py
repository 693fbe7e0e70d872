"""Cross-population scalars (workers.core.cell_mixing), checked against brute force with
scipy.spatial.distance.cdist and numpy.percentile, and on hand cases."""

import math

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from workers.core.cell_mixing import mixing_descriptors
from workers.core.errors import InvalidArrayError, ParameterError

NAMES = ("tumour", "immune", "stroma")
RADII = (2.0, 5.0, 10.0, 25.0)


def random_cells(seed: int, n: int = 400, d: int = 2) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    return rng.uniform(0.0, 100.0, size=(n, d)), rng.integers(0, 3, size=n)


@pytest.mark.parametrize(("seed", "d"), [(0, 2), (1, 2), (2, 3)])
def test_nearest_distances_and_fractions_equal_brute_force(seed: int, d: int) -> None:
    points, labels = random_cells(seed, d=d)
    found = mixing_descriptors(points, labels, NAMES, RADII)
    assert found.counts == {name: int((labels == k).sum()) for k, name in enumerate(NAMES)}
    assert set(found.pairs) == {(a, b) for a in NAMES for b in NAMES if a != b}
    for (a, b), summary in found.pairs.items():
        # Reference library: scipy.spatial.distance.cdist, every pair, then the row minimum.
        nearest = cdist(points[labels == NAMES.index(a)], points[labels == NAMES.index(b)]).min(
            axis=1
        )
        # Reference: numpy.percentile with its default method, "linear".
        q1, median, q3 = np.percentile(nearest, [25, 50, 75], method="linear")
        assert summary.first_quartile == pytest.approx(q1, rel=1e-12)
        assert summary.median == pytest.approx(median, rel=1e-12)
        assert summary.third_quartile == pytest.approx(q3, rel=1e-12)
        assert summary.mean == pytest.approx(nearest.mean(), rel=1e-12)
        # Brute-force count of the A cells with a B cell at distance <= r.
        expected = [float(np.count_nonzero(nearest <= r)) / len(nearest) for r in RADII]
        assert summary.fraction_within == pytest.approx(expected, abs=0.0)
    assert found.radii == RADII


def test_the_pair_is_ordered() -> None:
    # Hand case: one immune cell at the origin, tumour cells at 1, 2 and 3 on the x axis.
    # Tumour -> immune: distances 1, 2, 3; immune -> tumour: the one distance 1.
    points = np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [3.0, 0.0]])
    labels = np.array([1, 0, 0, 0])
    found = mixing_descriptors(points, labels, NAMES[:2], [1.5])
    outward = found.pairs[("tumour", "immune")]
    assert (outward.first_quartile, outward.median, outward.third_quartile) == (1.5, 2.0, 2.5)
    assert outward.mean == 2.0 and outward.fraction_within == pytest.approx((1 / 3,))
    # A class of one cell: its one distance is every quartile and the mean.
    inward = found.pairs[("immune", "tumour")]
    assert (inward.first_quartile, inward.median, inward.third_quartile, inward.mean) == (
        1.0,
        1.0,
        1.0,
        1.0,
    )
    assert inward.fraction_within == (1.0,)
    assert found.counts == {"tumour": 3, "immune": 1}


def test_within_is_distance_at_most_the_radius() -> None:
    # Hand case (3-4-5 triangle): two cells at distance exactly 5. The convention is the closed
    # ball, d <= r: within 4 none, within 5 (the boundary) and beyond every cell.
    points = np.array([[0.0, 0.0], [3.0, 4.0]])
    found = mixing_descriptors(points, np.array([0, 1]), NAMES[:2], [4.0, 5.0, 6.0])
    for summary in found.pairs.values():
        assert summary.median == 5.0
        assert summary.fraction_within == (0.0, 1.0, 1.0)
    just_below = mixing_descriptors(points, np.array([0, 1]), NAMES[:2], [math.nextafter(5, 0)])
    assert just_below.pairs[("tumour", "immune")].fraction_within == (0.0,)


def test_an_empty_class_gives_nan_summaries_and_no_error() -> None:
    # Documented behaviour: "stroma" has no cell. From stroma: all NaN (no cell to summarise);
    # to stroma: no distance (NaN), and no cell has a stroma cell within any radius (0).
    points = np.array([[0.0, 0.0], [3.0, 4.0]])
    found = mixing_descriptors(points, np.array([0, 1]), NAMES, [1.0, 10.0])
    assert found.counts["stroma"] == 0
    source = found.pairs[("stroma", "tumour")]
    assert all(math.isnan(v) for v in (source.median, source.mean, *source.fraction_within))
    target = found.pairs[("tumour", "stroma")]
    assert math.isnan(target.median) and math.isnan(target.first_quartile)
    assert target.fraction_within == (0.0, 0.0)


@pytest.mark.parametrize(
    ("radii", "field"),
    [
        ([], "/radii"),
        ([[1.0, 2.0]], "/radii"),
        ([0.0, 1.0], "/radii/0"),
        ([-1.0], "/radii/0"),
        ([1.0, float("nan")], "/radii/1"),
        ([1.0, float("inf")], "/radii/1"),
        ([1.0, 3.0, 3.0], "/radii/2"),
        ([2.0, 1.0], "/radii/1"),
    ],
)
def test_radii_must_be_positive_and_increasing(radii: list[object], field: str) -> None:
    points, labels = random_cells(0, n=10)
    with pytest.raises(ParameterError) as caught:
        mixing_descriptors(points, labels, NAMES, radii)  # type: ignore[arg-type]
    assert caught.value.field == field


@pytest.mark.parametrize(
    ("points", "labels", "names", "error", "field"),
    [
        (np.empty((0, 2)), np.empty(0, dtype=int), NAMES, InvalidArrayError, "/points"),
        (np.array([[0.0, np.nan]]), np.array([0]), NAMES, InvalidArrayError, "/points"),
        (np.zeros((2, 2)), np.array([0]), NAMES, InvalidArrayError, "/labels"),
        (np.zeros((2, 2)), np.array([0.0, 1.0]), NAMES, InvalidArrayError, "/labels"),
        (np.zeros((2, 2)), np.array([0, 3]), NAMES, InvalidArrayError, "/labels"),
        (np.zeros((2, 2)), np.array([0, -1]), NAMES, InvalidArrayError, "/labels"),
        (np.zeros((2, 2)), np.array([0, 0]), ("tumour",), ParameterError, "/class_names"),
        (np.zeros((2, 2)), np.array([0, 1]), ("a", "a"), ParameterError, "/class_names"),
    ],
)
def test_unusable_arrays_and_names_are_refused(
    points: np.ndarray,
    labels: np.ndarray,
    names: tuple[str, ...],
    error: type[Exception],
    field: str,
) -> None:
    with pytest.raises(error) as caught:
        mixing_descriptors(points, labels, names, [1.0])
    assert getattr(caught.value, "field", None) == field
