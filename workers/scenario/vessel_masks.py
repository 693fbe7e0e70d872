"""Synthetic vessel masks and intensity images: a capillary network drawn into pixels, a small
volume of straight tubes, and either blurred with noise as a microscope image stand-in.

``network_mask`` draws every edge of a ``CapillaryNetwork`` as a tube whose radius runs
linearly from the radius of one end node to the other's: a pixel is foreground when its centre
lies within ``r0 + t (r1 - r0)`` of the point ``p0 + t (p1 - p0)`` nearest to it on the edge
(``t`` clipped to [0, 1], so the ends are round caps). Isolated nodes are drawn as discs.
Rows run along ``y`` and columns along ``x``: pixel ``(i, j)`` has its centre at
``(x, y) = (j * spacing, i * spacing)``, so in lacuna's array-axis convention (pixel
``(i, j)`` at ``(i * spacing, j * spacing)``) a node ``(x, y)`` sits at ``(y, x)``.

``tube_volume`` draws ``tubes`` straight tubes of constant radius, each from a random point on
one face of the volume to a random point on the opposite face, in voxel units.

``vessel_image`` turns a mask into intensities: ``background`` outside, ``foreground``
inside, smoothed by a Gaussian (scipy.ndimage.gaussian_filter, standing in for the point
spread function of the microscope) plus seeded Gaussian noise; vessels are bright.

The arrays are synthetic demo inputs and describe no real sample.
"""

import math

import numpy as np
from scipy.ndimage import gaussian_filter

from workers.core.errors import ParameterError
from workers.scenario.capillaries import CapillaryNetwork

__all__ = ["network_mask", "tube_volume", "vessel_image"]


def _positive(value: float, name: str) -> float:
    if not (math.isfinite(value) and value > 0):
        raise ParameterError(f"{name} must be positive and finite, not {value}", field=f"/{name}")
    return float(value)


def _draw(
    mask: np.ndarray,
    spacing: float,
    start: np.ndarray,
    end: np.ndarray,
    radii: tuple[float, float],
) -> None:
    """Set the pixels of one tapered tube (x, y in physical units) in ``mask`` (rows = y)."""
    reach = max(radii)
    low = np.floor((np.minimum(start, end) - reach) / spacing).astype(np.int64)
    high = np.ceil((np.maximum(start, end) + reach) / spacing).astype(np.int64)
    column0, row0 = np.maximum(low, 0)
    column1, row1 = np.minimum(high, (mask.shape[1] - 1, mask.shape[0] - 1))
    if column1 < column0 or row1 < row0:
        return
    y = np.arange(row0, row1 + 1)[:, None] * spacing
    x = np.arange(column0, column1 + 1)[None, :] * spacing
    along = end - start
    span = float(along @ along)
    if span > 0.0:
        t = np.clip(((x - start[0]) * along[0] + (y - start[1]) * along[1]) / span, 0.0, 1.0)
    else:
        t = np.zeros(np.broadcast_shapes(x.shape, y.shape))
    distance = np.hypot(x - (start[0] + t * along[0]), y - (start[1] + t * along[1]))
    inside = distance <= radii[0] + t * (radii[1] - radii[0])
    mask[row0 : row1 + 1, column0 : column1 + 1] |= inside


def network_mask(
    network: CapillaryNetwork,
    *,
    spacing: float = 2.0,
    size: tuple[float, float] = (1000.0, 1000.0),
) -> np.ndarray:
    """The 2D binary vessel mask of ``network``: (rows, columns) bool, ``rows =
    ceil(height / spacing) + 1`` and ``columns = ceil(width / spacing) + 1`` for ``size`` =
    (width, height), so the pixel centres cover the region ``[0, width] x [0, height]`` of
    ``capillary_network``; ``spacing`` is the pixel size, in the network's units
    (micrometres). Each edge is a tube of its end nodes' radii (module docstring); parts
    outside the region are cut off.

    Raises ParameterError for a spacing or size that is not positive and finite, or a
    network that is not planar (coordinates not (n, 2)).
    """
    step = _positive(spacing, "spacing")
    if len(size) != 2:
        raise ParameterError(f"size must be two positive lengths, not {size}", field="/size")
    width, height = (_positive(s, "size") for s in size)
    coordinates = np.asarray(network.coordinates, dtype=np.float64)
    if coordinates.ndim != 2 or coordinates.shape[1] != 2:
        raise ParameterError(
            f"the network must be planar, (n, 2) coordinates, not {coordinates.shape}",
            field="/network",
        )
    radius = np.asarray(network.radius, dtype=np.float64)
    shape = (math.ceil(height / step) + 1, math.ceil(width / step) + 1)
    mask = np.zeros(shape, dtype=bool)
    edges = np.asarray(network.edges, dtype=np.int64).reshape(-1, 2)
    for u, v in edges.tolist():
        _draw(mask, step, coordinates[u], coordinates[v], (radius[u], radius[v]))
    lonely = np.setdiff1d(np.arange(len(coordinates)), edges.ravel())
    for node in lonely.tolist():
        point = coordinates[node]
        _draw(mask, step, point, point, (radius[node], radius[node]))
    return mask


def tube_volume(
    seed: int,
    *,
    shape: tuple[int, int, int] = (48, 64, 64),
    tubes: int = 4,
    radius: tuple[float, float] = (2.0, 4.0),
) -> np.ndarray:
    """A 3D binary mask, (planes, rows, columns) bool of ``shape``, holding ``tubes`` straight
    tubes. Each tube runs along an axis drawn at random, from a point on the face ``index 0``
    of that axis to a point on the opposite face (the other two coordinates uniform, at least
    the tube's radius from the border), with a radius uniform in ``radius`` (voxels). A voxel
    is foreground when its centre is within the radius of the tube's axis segment. The same
    ``seed`` gives the same volume (numpy.random.default_rng).

    Raises ParameterError for a shape that is not three sizes of at least 8 voxels, a tube
    count below 1, or a radius range that is not ``0 < low <= high`` with room for the tube.
    """
    if len(shape) != 3 or not all(isinstance(s, int) and s >= 8 for s in shape):
        raise ParameterError(f"shape must be three sizes >= 8, not {shape}", field="/shape")
    if tubes < 1:
        raise ParameterError(f"tubes must be at least 1, not {tubes}", field="/tubes")
    low, high = (float(r) for r in radius)
    if not (math.isfinite(high) and 0.0 < low <= high and 2.0 * high < min(shape) - 1):
        raise ParameterError(
            f"radius must be a range 0 < low <= high below half the smallest side, not {radius}",
            field="/radius",
        )
    rng = np.random.default_rng(seed)
    extent = np.array(shape, dtype=np.float64) - 1.0
    grid = np.stack(
        np.meshgrid(*[np.arange(s, dtype=np.float64) for s in shape], indexing="ij"), axis=-1
    ).reshape(-1, 3)
    inside = np.zeros(len(grid), dtype=bool)
    for _ in range(tubes):
        axis = int(rng.integers(3))
        size = float(rng.uniform(low, high))
        start = rng.uniform(size, extent - size)
        end = rng.uniform(size, extent - size)
        start[axis], end[axis] = 0.0, extent[axis]
        along = end - start
        t = np.clip((grid - start) @ along / float(along @ along), 0.0, 1.0)
        offset = grid - (start + t[:, None] * along)
        inside |= np.einsum("ij,ij->i", offset, offset) <= size * size
    volume: np.ndarray = inside.reshape(shape)
    return volume


def vessel_image(
    mask: np.ndarray,
    seed: int,
    *,
    blur: float = 1.5,
    noise: float = 0.05,
    background: float = 0.1,
    foreground: float = 1.0,
) -> np.ndarray:
    """An intensity image of ``mask`` (2D or 3D, nonzero = vessel): float32 of the mask's
    shape, ``background + (foreground - background) * G(mask) + N``, with ``G`` the Gaussian
    filter of standard deviation ``blur`` pixels (scipy.ndimage.gaussian_filter, borders
    reflected) and ``N`` independent Gaussian noise of standard deviation ``noise`` drawn with
    numpy.random.default_rng(seed). ``noise = 0`` gives the smoothed mask alone.

    Raises ParameterError for a mask that is not a 2D or 3D array, or a blur or noise that is
    negative or not finite.
    """
    array = np.asarray(mask)
    if array.ndim not in (2, 3) or array.size == 0:
        raise ParameterError("mask must be a non-empty 2D or 3D array", field="/mask")
    for name, value in (("blur", blur), ("noise", noise)):
        if not (math.isfinite(value) and value >= 0):
            raise ParameterError(f"{name} must be >= 0 and finite, not {value}", field=f"/{name}")
    smooth = gaussian_filter((array != 0).astype(np.float64), sigma=blur, mode="reflect")
    rng = np.random.default_rng(seed)
    image = background + (foreground - background) * smooth
    image += rng.normal(scale=noise, size=array.shape)
    result: np.ndarray = image.astype(np.float32)
    return result
