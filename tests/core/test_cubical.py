"""Cubical persistence of images and volumes against gudhi, scikit-image, scipy and geometry."""

import numpy as np
import pytest
from scipy import ndimage
from skimage.measure import euler_number

from tests.support.references import gudhi_diagrams
from workers.core.cubical import cubical_diagrams
from workers.core.diagrams import sort_pairs
from workers.core.errors import InvalidArrayError, ParameterError


def assert_same(ours: list[np.ndarray], reference: list[np.ndarray]) -> None:
    assert len(ours) == len(reference)
    for k, (mine, theirs) in enumerate(zip(ours, reference, strict=True)):
        assert mine.shape == theirs.shape, f"H{k}: {len(mine)} pairs, reference {len(theirs)}"
        assert np.array_equal(np.isinf(mine), np.isinf(theirs)), f"H{k}: infinite deaths differ"
        finite = np.isfinite(theirs)
        if finite.any():
            assert np.max(np.abs(mine[finite] - theirs[finite])) <= 1e-12, f"H{k} differs"


def smoothed(shape: tuple[int, ...], seed: int, sigma: float = 1.5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.asarray(ndimage.gaussian_filter(rng.standard_normal(shape), sigma))


def blob(shape: tuple[int, ...], seed: int, level: float = -0.1) -> np.ndarray:
    """A random mask with several components, holes (and in 3D tunnels and cavities)."""
    return smoothed(shape, seed, sigma=1.5) > level


@pytest.mark.parametrize(
    ("shape", "seed"),
    [
        ((1, 30), 0),
        ((30, 1), 1),
        ((25, 40), 2),
        ((64, 48), 3),
        ((20, 17, 13), 4),
        ((1, 12, 15), 5),
        ((9, 1, 11), 6),
        ((14, 14, 14), 7),
    ],
)
def test_smoothed_noise_matches_gudhi(shape: tuple[int, ...], seed: int) -> None:
    # Reference library gudhi (CubicalComplex, its own matrix reduction), every dimension.
    values = smoothed(shape, seed)
    max_dim = len(shape) - 1
    assert_same(cubical_diagrams(values, max_dim=max_dim), gudhi_diagrams(values, max_dim))


@pytest.mark.parametrize("shape", [(40, 37), (1, 50), (12, 11, 10), (6, 20, 7)])
def test_many_ties_match_gudhi(shape: tuple[int, ...]) -> None:
    # Reference library gudhi. Values 0..3 make most pixels tie; only pairs of positive
    # length are compared, and those do not depend on how ties are broken.
    values = np.random.default_rng(len(shape) * 100 + shape[-1]).integers(0, 4, shape)
    max_dim = len(shape) - 1
    ours = cubical_diagrams(values.astype(np.float64), max_dim=max_dim)
    assert_same(ours, gudhi_diagrams(values.astype(np.float64), max_dim))


@pytest.mark.parametrize(("shape", "seed"), [((50, 45), 10), ((18, 16, 20), 11), ((1, 40), 12)])
def test_infinite_background_matches_gudhi(shape: tuple[int, ...], seed: int) -> None:
    # Reference library gudhi, which keeps the +inf pixels as cells entering at +inf: its
    # (inf, inf) pairs are dropped, its (b, inf) pairs are the classes that only die there.
    values = smoothed(shape, seed + 1)
    values[~blob(shape, seed)] = np.inf
    max_dim = len(shape) - 1
    ours = cubical_diagrams(values, max_dim=max_dim)
    assert_same(ours, gudhi_diagrams(values, max_dim))
    assert not np.isinf(np.concatenate(ours)[:, 0]).any()


def test_lower_max_dim_gives_the_same_lower_diagrams() -> None:
    # Reference library gudhi. A volume's H0 comes from another code path when max_dim is 0
    # (pixel union-find) than when H1 is asked for (edges of the complex, for clearing).
    values = smoothed((15, 12, 10), 20)
    values[values > 0.3] = np.inf
    reference = gudhi_diagrams(values, 2)
    for max_dim in (0, 1, 2):
        assert_same(cubical_diagrams(values, max_dim=max_dim), reference[: max_dim + 1])


def test_any_layout_and_dtype() -> None:
    # Reference library gudhi on the same values; a transposed (Fortran-ordered) integer view.
    values = np.random.default_rng(30).integers(0, 9, (23, 31)).T
    ours = cubical_diagrams(values, max_dim=1)
    assert_same(ours, gudhi_diagrams(np.ascontiguousarray(values, dtype=np.float64), 1))
    for pairs in ours:
        assert pairs.dtype == np.float64 and pairs.shape[1] == 2
        assert np.array_equal(pairs, sort_pairs(pairs))


def test_sequence_by_hand() -> None:
    # Common practice (sublevel persistence of a function on a line, elder rule): minima 0,
    # 1, 2; at 3 the components of 0 and 1 merge and the younger (1) dies, at 4 the one of 2.
    h0, h1 = cubical_diagrams(np.array([[0.0, 3.0, 1.0, 4.0, 2.0]]), max_dim=1)
    assert h0.tolist() == [[0.0, np.inf], [1.0, 3.0], [2.0, 4.0]]
    assert h1.shape == (0, 2)


def test_ring_of_pixels() -> None:
    # Geometry (common practice): an annulus has one component and one hole, both forever.
    values = np.full((9, 9), np.inf)
    values[2:7, 2:7] = 0.0
    values[3:6, 3:6] = np.inf
    h0, h1 = cubical_diagrams(values, max_dim=1)
    assert h0.tolist() == [[0.0, np.inf]]
    assert h1.tolist() == [[0.0, np.inf]]


def test_filled_crater() -> None:
    # Common practice (sublevel sets): the border at 0 is a loop around a square of 1s with
    # a centre at 5. The loop is born at 0; the 1s shrink the hole at 1; it closes at 5.
    values = np.ones((5, 5))
    values[0, :] = values[-1, :] = values[:, 0] = values[:, -1] = 0.0
    values[2, 2] = 5.0
    h0, h1 = cubical_diagrams(values, max_dim=1)
    assert h0.tolist() == [[0.0, np.inf]]
    assert h1.tolist() == [[0.0, 5.0]]


def hollow_cube() -> np.ndarray:
    values = np.full((8, 8, 8), np.inf)
    values[1:7, 1:7, 1:7] = 0.0
    values[2:6, 2:6, 2:6] = np.inf
    return values


def square_ring(hole: float) -> np.ndarray:
    """A thick square ring of 0s, its hole at ``hole``, in a volume at +inf."""
    values = np.full((10, 12, 12), np.inf)
    values[3:7, 2:10, 2:10] = 0.0
    values[3:7, 5:7, 5:7] = hole
    return values


@pytest.mark.parametrize(
    ("values", "h1", "h2"),
    [
        # Geometry (common practice): a cube's surface is a sphere: one component, no
        # tunnel, one cavity.
        (hollow_cube(), [], [[0.0, np.inf]]),
        # Geometry (common practice): a thick square ring is a solid torus: one component,
        # exactly one tunnel that never closes, no cavity.
        (square_ring(np.inf), [[0.0, np.inf]], []),
        # Common practice (sublevel sets): the same tunnel plugged at 2 lives from 0 to 2.
        (square_ring(2.0), [[0.0, 2.0]], []),
    ],
    ids=["sphere", "solid torus", "plugged torus"],
)
def test_known_solids(values: np.ndarray, h1: list[list[float]], h2: list[list[float]]) -> None:
    diagrams = cubical_diagrams(values, max_dim=2)
    assert [d.tolist() for d in diagrams] == [[[0.0, np.inf]], h1, h2]


def alive_at_the_end(diagrams: list[np.ndarray], top: float) -> list[int]:
    """Number of classes of each dimension present at the last finite level ``top``."""
    return [int(np.sum((d[:, 0] <= top) & (d[:, 1] > top))) for d in diagrams]


@pytest.mark.parametrize(
    ("shape", "seed"), [((60, 60), 40), ((80, 50), 41), ((24, 24, 24), 42), ((30, 20, 16), 43)]
)
def test_betti_numbers_of_masks(shape: tuple[int, ...], seed: int) -> None:
    # References scikit-image (euler_number, with foreground connectivity 8 in 2D and 26 in
    # 3D, the corner connectivity of closed pixels) and scipy (ndimage.label with a full
    # 3^d structure). Random integer values on the mask: what is alive at the top level is
    # the homology of the whole mask.
    mask = blob(shape, seed)
    values = np.where(mask, np.random.default_rng(seed).integers(0, 5, shape), np.inf)
    ndim = len(shape)
    diagrams = cubical_diagrams(values, max_dim=ndim - 1)
    betti = alive_at_the_end(diagrams, float(values[mask].max()))
    euler = sum((-1) ** k * b for k, b in enumerate(betti))
    assert euler == euler_number(mask, connectivity=ndim)
    _, components = ndimage.label(mask, structure=np.ones((3,) * ndim))
    assert betti[0] == components
    assert min(betti) > 0  # the masks have something to count in every dimension


def test_refused_values() -> None:
    image = np.zeros((4, 4))
    for bad in (np.nan, -np.inf):
        image[1, 2] = bad
        with pytest.raises(InvalidArrayError):
            cubical_diagrams(image, max_dim=1)
    with pytest.raises(InvalidArrayError):
        cubical_diagrams(np.zeros(5), max_dim=0)
    with pytest.raises(InvalidArrayError):
        cubical_diagrams(np.zeros((0, 3)), max_dim=0)
    with pytest.raises(ParameterError):
        cubical_diagrams(np.zeros((3, 3)), max_dim=2)
    with pytest.raises(ParameterError):
        cubical_diagrams(np.zeros((3, 3, 3)), max_dim=-1)
