"""The colours of the homology dimensions stay apart for colour-blind readers.

Each colour is passed through the colour-vision-deficiency simulation of Machado, Oliveira and
Fernandes 2009 ("A physiologically-based model for simulation of color vision deficiency",
IEEE TVCG 15(6)), severity 1.0, on linear RGB (the sRGB transfer function of IEC 61966-2-1),
and every pair is compared with CIEDE2000 (scikit-image's rgb2lab and deltaE_ciede2000,
reference library).
"""

import itertools

import numpy as np
import pytest
from skimage.color import deltaE_ciede2000, rgb2lab

from workers.pictures.drawing import COLOURS, MARKERS

# Machado, Oliveira and Fernandes 2009, table of simulation matrices, severity 1.0.
SIMULATIONS = {
    "protanopia": np.array(
        [
            [0.152286, 1.052583, -0.204868],
            [0.114503, 0.786281, 0.099216],
            [-0.003882, -0.048116, 1.051998],
        ]
    ),
    "deuteranopia": np.array(
        [
            [0.367322, 0.860646, -0.227968],
            [0.280085, 0.672501, 0.047413],
            [-0.011820, 0.042940, 0.968881],
        ]
    ),
    "tritanopia": np.array(
        [
            [1.255528, -0.076749, -0.178779],
            [-0.078411, 0.930809, 0.147602],
            [0.004733, 0.691367, 0.303900],
        ]
    ),
}

MIN_DELTA_E = 20.0
"""Smallest CIEDE2000 difference allowed between two dimensions' colours, simulated or not:
about ten just-noticeable differences (a JND is about 2, common practice)."""


def srgb(hexes: tuple[str, ...] | list[str]) -> np.ndarray:
    return np.array([[int(h[i : i + 2], 16) / 255 for i in (1, 3, 5)] for h in hexes])


def simulated(colours: np.ndarray, matrix: np.ndarray) -> np.ndarray:
    """sRGB colours as seen with the deficiency of ``matrix`` (IEC 61966-2-1 transfer)."""
    linear = np.where(colours <= 0.04045, colours / 12.92, ((colours + 0.055) / 1.055) ** 2.4)
    seen = np.clip(linear @ matrix.T, 0.0, 1.0)
    return np.where(seen <= 0.0031308, 12.92 * seen, 1.055 * seen ** (1 / 2.4) - 0.055)


def smallest_difference(colours: np.ndarray) -> float:
    lab = rgb2lab(colours[np.newaxis])[0]
    return min(
        float(deltaE_ciede2000(lab[i], lab[j]))
        for i, j in itertools.combinations(range(len(lab)), 2)
    )


@pytest.mark.parametrize("deficiency", ["none", *SIMULATIONS])
def test_every_pair_of_dimension_colours_stays_apart(deficiency: str) -> None:
    colours = srgb(COLOURS)
    if deficiency != "none":
        colours = simulated(colours, SIMULATIONS[deficiency])
    assert smallest_difference(colours) >= MIN_DELTA_E


def test_the_check_refuses_a_pair_only_colour_vision_tells_apart() -> None:
    # A red and a green far apart to normal vision run together under deuteranopia.
    pair = srgb(["#cc4400", "#558800"])
    assert smallest_difference(pair) >= MIN_DELTA_E
    assert smallest_difference(simulated(pair, SIMULATIONS["deuteranopia"])) < MIN_DELTA_E


def test_the_simulation_keeps_white_and_black() -> None:
    # Machado et al. normalise each matrix so that its rows sum to 1: greys are unchanged.
    for matrix in SIMULATIONS.values():
        np.testing.assert_allclose(
            simulated(srgb(["#ffffff", "#000000"]), matrix), [[1] * 3, [0] * 3], atol=1e-3
        )


def test_every_dimension_has_its_own_marker_shape() -> None:
    assert len(set(MARKERS)) == len(MARKERS) == len(COLOURS)
