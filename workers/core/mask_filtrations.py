"""Filtration values of a mask from its geometry: signed distance, height and radial distance.

Each function takes a 2D or 3D mask (nonzero = foreground) and the physical size of a pixel
per axis (``spacing``, array-axis order) and returns one float64 value per pixel, in the
units of ``spacing``. The pixel with index ``(i, j[, k])`` has its centre at
``(i * spacing[0], j * spacing[1][, k * spacing[2]])``. Pixels that never enter the complex
(background, for height and radial) get ``+inf``; the cubical engine leaves them out.
"""

from collections.abc import Sequence

import numpy as np
from scipy.ndimage import distance_transform_edt

__all__ = ["signed_distance", "heights", "radial_distances"]


def _axis_coordinates(shape: tuple[int, ...], spacing: Sequence[float]) -> list[np.ndarray]:
    """Per axis, the centre coordinates shaped to broadcast against the whole array."""
    coordinates = []
    for axis, (length, step) in enumerate(zip(shape, spacing, strict=True)):
        view = [1] * len(shape)
        view[axis] = length
        coordinates.append((np.arange(length, dtype=np.float64) * step).reshape(view))
    return coordinates


def signed_distance(mask: np.ndarray, spacing: Sequence[float]) -> np.ndarray:
    """Euclidean distance of each pixel centre to the nearest pixel centre on the other side of
    the boundary: negative for foreground, positive for background.

    Both sides need at least one pixel. Uses the exact Euclidean distance transform
    (scipy.ndimage.distance_transform_edt, Maurer et al. 2003) with ``sampling=spacing``.
    """
    foreground = mask != 0
    inside = distance_transform_edt(foreground, sampling=spacing)
    outside = distance_transform_edt(~foreground, sampling=spacing)
    values: np.ndarray = np.where(foreground, -inside, outside)
    return values


def heights(mask: np.ndarray, spacing: Sequence[float], direction: Sequence[float]) -> np.ndarray:
    """Projection of each foreground pixel centre on the unit vector ``direction``; +inf off
    the mask."""
    values = np.zeros(mask.shape, dtype=np.float64)
    for coordinate, component in zip(
        _axis_coordinates(mask.shape, spacing), direction, strict=True
    ):
        values += coordinate * component
    values[mask == 0] = np.inf
    return values


def radial_distances(
    mask: np.ndarray, spacing: Sequence[float], center: Sequence[float]
) -> np.ndarray:
    """Euclidean distance of each foreground pixel centre from ``center``; +inf off the mask."""
    values = np.zeros(mask.shape, dtype=np.float64)
    for coordinate, origin in zip(_axis_coordinates(mask.shape, spacing), center, strict=True):
        values = np.hypot(values, coordinate - origin)  # hypot: no overflow of the squares
    values[mask == 0] = np.inf
    return values
