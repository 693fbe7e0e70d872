"""Filtrations of images and masks: values checked against their definitions, and diagrams
against geometry, scipy, scikit-image and the stability theorem."""

import math
from typing import Any

import gudhi.hera
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.ndimage import label
from skimage.measure import euler_number

from tests.support.synthetic import cell_blobs, ring_mask, smooth_field
from workers.core.cubical import cubical_diagrams
from workers.core.mask_filtrations import heights, radial_distances, signed_distance
from workers.jobs.pixels import pixel_diagram_sets
from workers.spec.filtrations import (
    CubicalFiltration,
    DistanceFiltration,
    HeightFiltration,
    RadialFiltration,
)


def _centres(shape: tuple[int, ...], spacing: tuple[float, ...]) -> np.ndarray:
    return np.stack(np.indices(shape), axis=-1).reshape(-1, len(shape)) * np.asarray(spacing)


def _essential(diagrams: dict[int, np.ndarray], dim: int) -> int:
    return int(np.isinf(diagrams[dim][:, 1]).sum())


def _bottleneck(a: np.ndarray, b: np.ndarray) -> float:
    # hera (gudhi.hera), exact; essential classes must match in number, as they do here.
    return float(gudhi.hera.bottleneck_distance(a, b, delta=0))


# --- values against their definitions ---------------------------------------------------------


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (2.0, 0.5), (0.3, 1.0, 1.7)])
def test_signed_distance_is_the_distance_to_the_nearest_centre_across_the_boundary(
    spacing: tuple[float, ...],
) -> None:
    # Definition (signed distance function, common practice), by brute force over all centres.
    shape = (9, 11) if len(spacing) == 2 else (5, 6, 7)
    mask = np.random.default_rng(3).random(shape) < 0.4
    values = signed_distance(mask, spacing).ravel()
    centres = _centres(shape, spacing)
    inside = mask.ravel()
    gaps = np.linalg.norm(centres[:, None, :] - centres[None, :, :], axis=-1)
    expected = np.where(
        inside,
        -np.where(inside[None, :], np.inf, gaps).min(axis=1),
        np.where(inside[None, :], gaps, np.inf).min(axis=1),
    )
    np.testing.assert_allclose(values, expected, rtol=1e-12)


def test_heights_and_radial_distances_follow_their_formulas() -> None:
    # Definitions: projection <x, u> and Euclidean distance |x - c| of pixel centres.
    spacing = (2.0, 0.5, 1.0)
    mask = np.random.default_rng(4).random((4, 5, 6)) < 0.5
    centres = _centres(mask.shape, spacing)
    unit = np.array([0.6, 0.0, -0.8])
    center = np.array([-3.0, 40.0, 2.5])  # outside the array: allowed
    for values, formula in (
        (heights(mask, spacing, unit), centres @ unit),
        (radial_distances(mask, spacing, center), np.linalg.norm(centres - center, axis=1)),
    ):
        flat = values.ravel()
        inside = mask.ravel()
        np.testing.assert_allclose(flat[inside], formula[inside], rtol=1e-12, atol=1e-12)
        assert np.isinf(flat[~mask.ravel()]).all()


# --- diagrams against geometry ----------------------------------------------------------------


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (0.5, 0.5), (1.0, 0.5)])
def test_annulus_under_distance_has_one_long_loop_from_half_width_to_inner_radius(
    spacing: tuple[float, float],
) -> None:
    # Geometry (common practice): a ring of radii r1 < r2 closes its loop once the eroded ring
    # is whole, at -(r2 - r1)/2, and the hole fills when the dilation reaches its centre, at r1;
    # both within one pixel diagonal.
    r1, r2 = 12.0, 20.0
    extent = 2 * r2 + 12
    shape = (round(extent / spacing[0]), round(extent / spacing[1]))
    center = (extent / 2, extent / 2)
    mask = ring_mask(shape, center, r1, r2, spacing)
    sets, convention = pixel_diagram_sets(mask, DistanceFiltration(type="distance"), spacing)
    assert convention == "signed_distance"
    loops = sets[0].diagrams[1]
    long = loops[loops[:, 1] - loops[:, 0] > 3 * math.hypot(*spacing)]
    assert len(long) == 1, loops
    diagonal = math.hypot(*spacing)
    assert abs(long[0, 0] - (-(r2 - r1) / 2)) <= diagonal
    assert abs(long[0, 1] - r1) <= diagonal
    assert _essential(sets[0].diagrams, 0) == 1  # the whole grid is one piece at the end


def test_hollow_sphere_shell_has_one_cavity() -> None:
    # Geometry (common practice): a spherical shell has Betti numbers (1, 0, 1).
    mask = ring_mask((31, 31, 31), (15.0, 15.0, 15.0), 9.0, 13.0)
    for filtration in (
        RadialFiltration(type="radial", center=[15.0, 15.0, 15.0]),
        HeightFiltration(type="height", direction=[0.0, 0.3, 1.0]),
    ):
        sets, _ = pixel_diagram_sets(mask, filtration, None)
        diagrams = sets[0].diagrams
        assert [_essential(diagrams, k) for k in range(3)] == [1, 0, 1]
    # Under distance the cavity is born when the shell closes and dies once it is flooded.
    sets, _ = pixel_diagram_sets(mask, DistanceFiltration(type="distance"), None)
    cavities = sets[0].diagrams[2]
    alive_at_zero = cavities[(cavities[:, 0] <= 0) & (cavities[:, 1] > 0)]
    assert len(alive_at_zero) == 1
    assert abs(alive_at_zero[0, 1] - 9.0) <= math.sqrt(3)  # the inner radius, one voxel diagonal


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("dims", [2, 3])
def test_final_mask_homology_matches_scipy_label_and_skimage_euler_number(
    seed: int, dims: int
) -> None:
    # References: scipy.ndimage.label (components, with the corner-touching structure that
    # matches pixels as closed cells: 8-connectivity in 2D, 26 in 3D) and
    # skimage.measure.euler_number with the same connectivity (2 in 2D, 3 in 3D).
    if dims == 2:
        mask = cell_blobs((60, 70), count=25, radius=5, seed=seed)
        mask[20:40, 30:34] = False  # a cut, so some cells carry holes or split
    else:
        mask = np.random.default_rng(seed).random((14, 15, 16)) < 0.55
    filtration = HeightFiltration(type="height", direction=[1.0] + [0.5] * (dims - 1))
    sets, _ = pixel_diagram_sets(mask, filtration, None)
    betti = [_essential(sets[0].diagrams, k) for k in range(dims)]
    components = label(mask, structure=np.ones((3,) * dims))[1]
    assert betti[0] == components
    euler = sum((-1) ** k * b for k, b in enumerate(betti))
    assert euler == euler_number(mask, connectivity=dims)


# --- physical units ---------------------------------------------------------------------------


def test_anisotropic_spacing_matches_the_isotropically_resampled_mask() -> None:
    # Resampling (common practice): the same physical ring sampled on 2.0 x 0.5 um pixels, and
    # that mask repeated to 0.5 x 0.5 um pixels, give diagrams within the coarse pixel diagonal.
    spacing = (2.0, 0.5)
    coarse = ring_mask((40, 160), (40.0, 40.0), 14.0, 26.0, spacing)
    fine = np.repeat(coarse, 4, axis=0)
    filtration = DistanceFiltration(type="distance")
    anisotropic, _ = pixel_diagram_sets(coarse, filtration, spacing)
    resampled, _ = pixel_diagram_sets(fine, filtration, (0.5, 0.5))
    error = math.hypot(*spacing)
    for dim in (0, 1):
        a = anisotropic[0].diagrams[dim]
        b = resampled[0].diagrams[dim]
        assert _bottleneck(a, b) <= error
    # Leaving the spacing out describes another shape: the loop is far off.
    unscaled, _ = pixel_diagram_sets(coarse, filtration, None)
    assert _bottleneck(unscaled[0].diagrams[1], resampled[0].diagrams[1]) > 2 * error


def test_superlevel_of_16_bit_data_negates_without_wrapping_around() -> None:
    # Integer negation wraps (-np.uint16(1) == 65535); the values must be negated as float64.
    image = (smooth_field((20, 24), 2.0, seed=5) * 20000 + 32768).clip(0, 65535)
    image = image.astype(np.uint16)
    image[0, 0], image[5, 5] = 65535, 0
    sets, convention = pixel_diagram_sets(
        image, CubicalFiltration(type="cubical", direction="superlevel"), None
    )
    assert convention == "negated_pixel_value"
    expected = cubical_diagrams(-image.astype(np.float64), max_dim=1)
    for dim in (0, 1):
        np.testing.assert_array_equal(sets[0].diagrams[dim], expected[dim])
    assert sets[0].diagrams[0][:, 0].min() == -65535.0


def test_several_directions_give_one_diagram_set_each_in_order() -> None:
    # Definition (directional transform, common practice): the diagrams for a list of
    # directions are the diagrams of each direction's own height filtration, in that order.
    mask = ring_mask((30, 30), (14.5, 14.5), 6.0, 11.0)
    directions = [[1.0, 0.0], [0.0, -3.0], [1.0, 1.0]]
    sets, _ = pixel_diagram_sets(mask, HeightFiltration(type="height", directions=directions), None)
    assert [s.direction for s in sets] == [
        [1.0, 0.0],
        [0.0, -1.0],
        [1 / math.sqrt(2), 1 / math.sqrt(2)],
    ]
    for direction_set, vector in zip(sets, directions, strict=True):
        single, _ = pixel_diagram_sets(
            mask, HeightFiltration(type="height", direction=vector), None
        )
        for dim in (0, 1):
            np.testing.assert_array_equal(direction_set.diagrams[dim], single[0].diagrams[dim])


# --- stability --------------------------------------------------------------------------------


@st.composite
def _image_and_perturbation(draw: Any) -> tuple[np.ndarray, np.ndarray, float]:
    shape = draw(st.sampled_from([(5, 6), (7, 4), (3, 4, 5)]))
    seed = draw(st.integers(0, 2**32 - 1))
    eta = draw(st.floats(0.0, 0.5))
    rng = np.random.default_rng(seed)
    f = rng.normal(size=shape)
    g = f + rng.uniform(-eta, eta, size=shape)
    return f, g, eta


@settings(max_examples=60, deadline=None)
@given(_image_and_perturbation(), st.sampled_from(["sublevel", "superlevel"]))
def test_cubical_diagrams_are_stable_under_perturbation(
    case: tuple[np.ndarray, np.ndarray, float], direction: str
) -> None:
    # Stability theorem (Cohen-Steiner, Edelsbrunner, Harer 2007): for tame f, g on the same
    # complex, the bottleneck distance of their diagrams is at most |f - g|_inf.
    f, g, _ = case
    eta = float(np.abs(f - g).max())
    filtration = CubicalFiltration(type="cubical", direction=direction)  # type: ignore[arg-type]
    of_f, _ = pixel_diagram_sets(f, filtration, None)
    of_g, _ = pixel_diagram_sets(g, filtration, None)
    for dim in range(f.ndim):
        assert _bottleneck(of_f[0].diagrams[dim], of_g[0].diagrams[dim]) <= eta + 1e-12
