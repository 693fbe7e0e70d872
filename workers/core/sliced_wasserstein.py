"""Sliced Wasserstein distance between finite persistence diagrams (Carriere, Cuturi & Oudot
2017, "Sliced Wasserstein kernel for persistence diagrams", ICML).

Each diagram is completed with the diagonal projections of the other one's points, so both
sides have n + m points; for each direction theta both are projected on the line
(cos theta, sin theta), and the 1-Wasserstein distance between the two projected sets is the
sum of |sorted differences|. The distance is the mean over ``directions`` angles
theta_k = -pi/2 + k pi / directions, k = 0 .. directions - 1: evenly spaced over a half turn
(the other half gives the same values), fixed by the request, never random.
"""

import numpy as np

from workers.core.errors import ParameterError

__all__ = ["sliced_wasserstein_distance", "direction_angles", "sliced_wasserstein_on_angles"]


def direction_angles(directions: int) -> np.ndarray:
    """The ``directions`` angles the distance averages over, in radians."""
    if directions < 1:
        raise ParameterError("directions must be at least 1", field="/directions")
    angles: np.ndarray = -np.pi / 2 + np.pi * np.arange(directions) / directions
    return angles


def sliced_wasserstein_on_angles(a: np.ndarray, b: np.ndarray, angles: np.ndarray) -> float:
    """Mean over ``angles`` of the 1-Wasserstein distance between the projected diagrams."""
    a = np.asarray(a, dtype=np.float64).reshape(-1, 2)
    b = np.asarray(b, dtype=np.float64).reshape(-1, 2)
    lines = np.stack([np.cos(angles), np.sin(angles)])  # (2, k)
    diagonal_a = np.repeat(a.mean(axis=1, keepdims=True), 2, axis=1)
    diagonal_b = np.repeat(b.mean(axis=1, keepdims=True), 2, axis=1)
    left = np.sort(np.concatenate([a, diagonal_b]) @ lines, axis=0)
    right = np.sort(np.concatenate([b, diagonal_a]) @ lines, axis=0)
    return float(np.abs(left - right).sum(axis=0).mean())


def sliced_wasserstein_distance(a: np.ndarray, b: np.ndarray, *, directions: int) -> float:
    """Sliced Wasserstein distance between finite diagrams a (n, 2) and b (m, 2)."""
    return sliced_wasserstein_on_angles(a, b, direction_angles(directions))
