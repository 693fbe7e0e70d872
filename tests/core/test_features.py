"""Feature vectors of diagrams against reference libraries, closed forms and brute force."""

import math

import numpy as np
import pytest
from gudhi.representations import BettiCurve, Landscape
from persim import PersistenceImager
from persim.persistent_entropy import persistent_entropy

from tests.support.references import landscape_by_definition
from workers.core.betti_curve import betti_curve
from workers.core.diagrams import finite_part
from workers.core.landscape import landscape, sample_grid
from workers.core.persistence_image import persistence_images
from workers.core.summary import SUMMARY_NAMES, summary, summary_names


def random_diagram(rng: np.random.Generator, n: int, scale: float = 0.3) -> np.ndarray:
    """n finite pairs: births uniform in [0, 1), lifetimes exponential with mean ``scale``."""
    births = rng.uniform(0.0, 1.0, n)
    return np.column_stack([births, births + rng.exponential(scale, n)])


def normal_mass(low: float, high: float, centre: float, sigma: float) -> float:
    """Mass of N(centre, sigma^2) on [low, high]: (erf(z_high) - erf(z_low)) / 2."""
    scale = sigma * math.sqrt(2.0)
    return 0.5 * (math.erf((high - centre) / scale) - math.erf((low - centre) / scale))


# --- persistence images --------------------------------------------------------------------

# Two geometries: a coarse grid whose pixels are comparable to sigma (erf on every edge), and
# a fine grid with a narrow Gaussian, where only the edges within a few sigma of a point
# carry any mass (the code under test then evaluates erf on a window around each point).
GEOMETRIES = {
    "coarse": {"birth_range": (-0.5, 1.5), "pixel": 0.1, "resolution": (20, 10), "sigma": 0.08},
    "fine": {"birth_range": (0.0, 1.0), "pixel": 0.02, "resolution": (50, 50), "sigma": 0.01},
}

# Points outside the grid: a little (tails inside), far (nothing inside), and beyond the
# persistence range.
OUTSIDE = np.array([[-0.02, 0.3], [1.03, 1.4], [-0.7, -0.4], [1.9, 2.5], [0.5, 1.6]])


@pytest.mark.parametrize("geometry", GEOMETRIES)
@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize(
    ("persim_weight", "persim_params", "ours"),
    [
        # linear_ramp from 0 at p = 0 to 1 at p = end, constant after: min(p / end, 1).
        (
            "linear_ramp",
            {"low": 0.0, "high": 1.0, "start": 0.0, "end": 0.7},
            {"weight": "linear", "max_persistence": 0.7},
        ),
        ("persistence", {"n": 1.0}, {"weight": "power", "exponent": 1.0}),
        ("persistence", {"n": 2.5}, {"weight": "power", "exponent": 2.5}),
    ],
)
def test_images_match_persim(
    geometry: str, seed: int, persim_weight: str, persim_params: dict, ours: dict
) -> None:
    # Reference library persim 0.4.1 (PersistenceImager; Adams et al. 2017): pixel values are
    # the Gaussian's integral over each pixel, image rows are birth intervals. Its kernel
    # "sigma" is a covariance matrix, hence s**2. The ranges are whole multiples of the pixel
    # size so that persim does not pad them; the 20 x 10 image also pins down the orientation.
    setup = GEOMETRIES[geometry]
    sigma = setup["sigma"]
    diagram = random_diagram(np.random.default_rng(seed), 30, scale=0.25)
    diagram[:3, 0] -= 0.3
    diagram = np.concatenate([diagram, OUTSIDE])
    imager = PersistenceImager(
        birth_range=setup["birth_range"],
        pers_range=(0.0, 1.0),
        pixel_size=setup["pixel"],
        weight=persim_weight,
        weight_params=persim_params,
        kernel="gaussian",
        kernel_params={"sigma": [[sigma**2, 0.0], [0.0, sigma**2]]},
    )
    assert imager.resolution == setup["resolution"]
    reference = imager.transform(diagram)
    image = persistence_images(
        [diagram],
        birth_range=setup["birth_range"],
        persistence_range=(0.0, 1.0),
        resolution=setup["resolution"],
        sigma=sigma,
        **ours,
    )
    assert image.shape == (1, *setup["resolution"])
    assert reference.max() > 0.01  # the comparison is not between two near-zero images
    np.testing.assert_allclose(image[0], reference, rtol=0, atol=1e-12)


@pytest.mark.parametrize("sigma", [0.1, 0.01])
@pytest.mark.parametrize(
    ("birth", "death"),
    [
        (0.5, 0.9),  # well inside the grid
        (0.05, 0.35),  # near the left edge: part of the Gaussian is outside
        (0.995, 1.3),  # near the right edge
        (1.1, 1.3),  # centre outside the birth range
        (-0.6, 0.2),  # centre far outside on the other side
        (0.3, 0.32),  # near the persistence-0 edge: about half the mass is below it
        (0.2, 1.9),  # persistence above the range: linear weight saturates at 1
    ],
)
def test_single_point_closed_form(sigma: float, birth: float, death: float) -> None:
    # Adams et al. 2017 (definitions of the persistence surface and image): the image of one
    # point (b, p) with weight w is w times the Gaussian's mass over each pixel, separable into
    # two erf differences; its sum is w times the mass over the whole grid.
    max_persistence = 0.5
    persistence = death - birth
    nx, ny = 25, 16
    image = persistence_images(
        [np.array([[birth, death]])],
        birth_range=(0.0, 1.0),
        persistence_range=(0.0, 1.0),
        resolution=(nx, ny),
        sigma=sigma,
        weight="linear",
        max_persistence=max_persistence,
    )[0]
    weight = min(persistence / max_persistence, 1.0)
    along_birth = [normal_mass(i / nx, (i + 1) / nx, birth, sigma) for i in range(nx)]
    along_persistence = [normal_mass(j / ny, (j + 1) / ny, persistence, sigma) for j in range(ny)]
    expected = weight * np.outer(along_birth, along_persistence)
    np.testing.assert_allclose(image, expected, rtol=1e-9, atol=1e-15)
    total = weight * normal_mass(0.0, 1.0, birth, sigma) * normal_mass(0.0, 1.0, persistence, sigma)
    assert image.sum() == pytest.approx(total, rel=1e-12, abs=1e-15)


def test_images_add_over_unions() -> None:
    # Adams et al. 2017: the image is a sum over the points, so it is additive on unions.
    rng = np.random.default_rng(7)
    first, second = random_diagram(rng, 25), random_diagram(rng, 40)
    options = {
        "birth_range": (0.0, 1.0),
        "persistence_range": (0.0, 1.0),
        "resolution": (12, 9),
        "sigma": 0.1,
        "weight": "power",
        "exponent": 1.5,
    }
    separate = persistence_images([first, second], **options)
    union = persistence_images([np.concatenate([first, second])], **options)[0]
    np.testing.assert_allclose(union, separate[0] + separate[1], rtol=1e-12, atol=1e-14)
    # A batch gives each diagram its own image, as separate calls do.
    np.testing.assert_allclose(separate[1], persistence_images([second], **options)[0], atol=1e-15)


def test_zero_persistence_points_contribute_nothing() -> None:
    # Adams et al. 2017 weight points by persistence so that the diagonal counts for nothing;
    # with the constant weight the diagonal points must be left out explicitly.
    rng = np.random.default_rng(3)
    diagram = random_diagram(rng, 10)
    on_diagonal = np.repeat(rng.uniform(0.0, 1.0, 6)[:, None], 2, axis=1)
    options = {
        "birth_range": (0.0, 1.0),
        "persistence_range": (0.0, 1.0),
        "resolution": (10, 10),
        "sigma": 0.1,
        "weight": "constant",
    }
    only_diagonal, mixed, clean = persistence_images(
        [on_diagonal, np.concatenate([diagram, on_diagonal]), diagram], **options
    )
    assert np.all(only_diagonal == 0.0)
    np.testing.assert_allclose(mixed, clean, rtol=0, atol=1e-15)
    assert clean.sum() > 0


@pytest.mark.parametrize("sigma", [0.02, 0.2])  # windowed and full erf evaluation
def test_blocks_of_points_give_the_same_images(sigma: float) -> None:
    # Common practice: taking the points a block at a time must not change the result. More
    # than 8192 points in all, so diagrams straddle blocks when computed together.
    rng = np.random.default_rng(5)
    diagrams = [random_diagram(rng, n) for n in (4000, 3000, 2500, 10)]
    options = {
        "birth_range": (0.0, 1.0),
        "persistence_range": (0.0, 2.0),
        "resolution": (40, 40),
        "sigma": sigma,
        "weight": "linear",
        "max_persistence": 1.0,
    }
    together = persistence_images(diagrams, **options)
    apart = np.stack([persistence_images([d], **options)[0] for d in diagrams])
    assert np.allclose(together, apart, rtol=1e-12, atol=1e-15)
    assert np.all(together.sum(axis=(1, 2)) > 0)


# --- landscapes ----------------------------------------------------------------------------


@pytest.mark.parametrize(("seed", "n", "levels"), [(0, 1, 3), (1, 12, 4), (2, 60, 8), (3, 5, 7)])
def test_landscape_matches_definition(seed: int, n: int, levels: int) -> None:
    # Bubenik 2015: brute force from the definition, levels beyond the number of pairs are 0.
    diagram = random_diagram(np.random.default_rng(seed), n)
    grid = sample_grid((-0.2, 2.0), 301)
    values = landscape(diagram, levels=levels, grid=grid)
    assert values.shape == (levels, 301)
    expected = landscape_by_definition(diagram, levels, grid)
    np.testing.assert_allclose(values, expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("seed", [4, 5])
def test_landscape_order_and_lipschitz(seed: int) -> None:
    # Bubenik 2015 (from memory): lambda_1 >= lambda_2 >= ... >= 0 and each lambda_k is 1-Lipschitz.
    diagram = random_diagram(np.random.default_rng(seed), 40)
    grid = np.sort(np.random.default_rng(seed + 100).uniform(-0.5, 2.5, 400))
    values = landscape(diagram, levels=6, grid=grid)
    assert np.all(values >= 0)
    assert np.all(np.diff(values, axis=0) <= 0)
    steps = np.diff(grid)
    assert np.all(np.abs(np.diff(values, axis=1)) <= steps + 1e-12)
    assert values[0].max() > 0


def test_landscape_of_one_pair_is_a_tent() -> None:
    # Bubenik 2015: one pair (b, d) gives a tent of peak (d - b) / 2 at (b + d) / 2, zero
    # outside (b, d), and nothing above the first level.
    b, d = 0.25, 1.75
    grid = sample_grid((0.0, 2.0), 81)  # step 0.025, so (b + d) / 2 = 1.0 is on the grid
    values = landscape(np.array([[b, d]]), levels=2, grid=grid)
    peak = int(np.argmax(values[0]))
    assert grid[peak] == pytest.approx(1.0)
    assert values[0, peak] == pytest.approx(0.75)
    np.testing.assert_allclose(values[0], np.maximum(0.0, np.minimum(grid - b, d - grid)))
    assert np.all(values[0][(grid <= b) | (grid >= d)] == 0)
    assert np.all(values[1] == 0)


def test_sample_grid_is_evenly_spaced_with_both_ends() -> None:
    # Common practice (numpy.linspace): both ends of the range are samples.
    grid = sample_grid((0.5, 2.5), 5)
    np.testing.assert_allclose(grid, [0.5, 1.0, 1.5, 2.0, 2.5])


@pytest.mark.parametrize("seed", [6, 7])
def test_landscape_matches_gudhi(seed: int) -> None:
    # Reference library gudhi (representations.Landscape). Its grid with a fixed sample_range
    # is numpy.linspace(min, max, resolution), the same samples as ours (checked below). gudhi
    # scales every value by sqrt(2) (its source: `np.sqrt(2) * np.ravel(landscapes)`), so
    # its values are divided by sqrt(2) before comparing.
    diagram = random_diagram(np.random.default_rng(seed), 25)
    grid = sample_grid((0.0, 2.0), 120)
    reference = Landscape(num_landscapes=5, resolution=120, sample_range=[0.0, 2.0])
    theirs = reference.fit_transform([diagram])[0].reshape(5, 120) / math.sqrt(2)
    assert np.array_equal(reference.grid_, grid)
    np.testing.assert_allclose(landscape(diagram, levels=5, grid=grid), theirs, atol=1e-12)


# --- Betti curves --------------------------------------------------------------------------


def brute_betti(pairs: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """Count, at each t, the pairs with b <= t < d (half-open bars, common practice)."""
    return np.array([sum(1 for b, d in pairs if b <= t < d) for t in grid], dtype=float)


def integer_diagram(rng: np.random.Generator, n: int, essential: int) -> np.ndarray:
    """Integer births and deaths, so grid points fall exactly on them; some deaths inf."""
    births = rng.integers(0, 8, n).astype(float)
    deaths = births + rng.integers(0, 5, n)
    deaths[:essential] = np.inf
    return np.column_stack([births, deaths])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_betti_curve_counts_half_open_bars(seed: int) -> None:
    # Brute force from the definition; the grid holds every birth and death exactly, where
    # the half-open convention matters, and points between them.
    rng = np.random.default_rng(seed)
    diagram = integer_diagram(rng, 30, essential=3)
    grid = np.arange(-1.0, 14.0, 0.5)
    curve = betti_curve(diagram, grid=grid)
    np.testing.assert_array_equal(curve, brute_betti(diagram, grid))
    # Common practice: essential classes count at every t >= their birth.
    assert curve[-1] == 3


@pytest.mark.parametrize("seed", [3, 4])
def test_betti_curve_of_capped_diagram(seed: int) -> None:
    # Essential classes ended at a cap count as alive before the cap, and not from it on.
    rng = np.random.default_rng(seed)
    diagram = integer_diagram(rng, 20, essential=4)
    cap = 9.0
    grid = np.arange(-1.0, 14.0, 0.25)
    capped = betti_curve(finite_part(diagram, "cap", cap), grid=grid)
    before = grid < cap
    np.testing.assert_array_equal(capped[before], brute_betti(diagram, grid[before]))
    np.testing.assert_array_equal(capped, brute_betti(finite_part(diagram, "cap", cap), grid))
    assert np.all(capped[grid >= 13] == 0)


@pytest.mark.parametrize("seed", [5, 6])
def test_betti_curve_matches_gudhi(seed: int) -> None:
    # Reference library gudhi (representations.BettiCurve with predefined_grid): it adds a
    # birth and removes a death once the grid value reaches them, the same b <= t < d
    # convention, so the values must be equal, on a grid that holds the pairs' own values.
    rng = np.random.default_rng(seed)
    diagram = integer_diagram(rng, 25, essential=2)
    grid = np.unique(np.concatenate([np.arange(-1.0, 13.0, 0.5), diagram[:, 0]]))
    theirs = BettiCurve(predefined_grid=grid).fit_transform([diagram])[0]
    np.testing.assert_array_equal(betti_curve(diagram, grid=grid), theirs)


# --- summaries -----------------------------------------------------------------------------


def test_summary_by_hand() -> None:
    # Hand computation: lifetimes 1, 3, 1 (the zero-length bar (2, 2) carries nothing).
    pairs = np.array([[0.0, 1.0], [0.0, 3.0], [1.0, 2.0], [2.0, 2.0]])
    values = summary(pairs, order=2.0, quantiles=[0.0, 0.5, 1.0])
    shares = np.array([0.2, 0.6, 0.2])
    expected = [
        3,  # count
        1 + 9 + 1,  # total persistence of order 2
        3,  # max persistence
        5 / 3,  # mean
        math.sqrt(8 / 9),  # population standard deviation
        -float((shares * np.log(shares)).sum()),  # entropy, natural log
        1.0,  # minimum
        1.0,  # median
        3.0,  # maximum
    ]
    assert values == pytest.approx(expected, rel=1e-12)
    assert summary_names([0.0, 0.5, 1.0])[: len(SUMMARY_NAMES)] == list(SUMMARY_NAMES)
    assert len(summary_names([0.0, 0.5, 1.0])) == values.size


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_summary_matches_references(seed: int) -> None:
    rng = np.random.default_rng(seed)
    pairs = random_diagram(rng, 50)
    lives = pairs[:, 1] - pairs[:, 0]
    quantiles = [0.1, 0.25, 0.5, 0.9]
    for order in (0.5, 1.0, 2.5):
        values = summary(pairs, order=order, quantiles=quantiles)
        # Cohen-Steiner et al. 2010: total persistence of order p is sum of l ** p.
        assert values[1] == pytest.approx(float((lives**order).sum()), rel=1e-12)
    values = summary(pairs, order=1.0, quantiles=quantiles)
    assert values[0] == 50
    assert values[2] == lives.max()
    assert values[3] == pytest.approx(float(np.mean(lives)), rel=1e-12)
    assert values[4] == pytest.approx(float(np.std(lives)), rel=1e-12)
    # Reference library persim (persistent_entropy, normalize=False): -sum p log p with
    # p = l / sum l and the natural log, as Chintakunta et al. 2015 define it.
    assert values[5] == pytest.approx(float(persistent_entropy(pairs, normalize=False)[0]))
    # numpy.quantile with its default (linear) method.
    assert values[6:] == pytest.approx(np.quantile(lives, quantiles), rel=1e-12)


def test_summary_of_empty_diagram_is_zero() -> None:
    for empty in (np.empty((0, 2)), np.array([[1.0, 1.0], [2.0, 2.0]])):
        values = summary(empty, order=1.0, quantiles=[0.5])
        assert values.shape == (len(SUMMARY_NAMES) + 1,)
        assert np.all(values == 0)


def test_entropy_of_equal_bars_is_log_count() -> None:
    # Chintakunta et al. 2015: n bars of equal length have entropy log n, the maximum.
    pairs = np.column_stack([np.arange(7.0), np.arange(7.0) + 2.0])
    assert summary(pairs, order=1.0, quantiles=[])[5] == pytest.approx(math.log(7))


# --- finite parts --------------------------------------------------------------------------


def test_finite_part_drop_and_cap() -> None:
    # Module contract: "drop" removes essential classes, "cap" ends them at max(birth, cap),
    # and zero-length bars are removed either way.
    pairs = np.array(
        [
            [0.0, 1.0],
            [0.5, 0.5],  # zero length
            [0.2, np.inf],
            [3.0, np.inf],  # born after the cap: zero length once capped
            [2.0, np.inf],  # born at the cap
            [1.0, 4.0],
        ]
    )
    dropped = finite_part(pairs, "drop", None)
    np.testing.assert_array_equal(dropped, [[0.0, 1.0], [1.0, 4.0]])
    capped = finite_part(pairs, "cap", 2.0)
    np.testing.assert_array_equal(capped, [[0.0, 1.0], [0.2, 2.0], [1.0, 4.0]])
    assert np.all(np.isfinite(capped))
    assert np.all(capped[:, 1] > capped[:, 0])
    # The input is left as it was.
    assert np.isinf(pairs[2, 1])
