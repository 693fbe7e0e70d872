"""Synthetic two-population cell layouts: where cells of two populations sit in a
rectangular region of a tissue section.

Two generators. ``cell_layout`` places a few hundred cells of populations "A" and "B" after
one of ``PATTERNS``; ``two_population_layout`` packs thousands of cells of the classes
"tumour" and "immune" at tissue spacing after one of ``LAYOUTS`` (described at
``two_population_layout``).

The patterns of ``cell_layout``, the usual qualitative classes of how two cell types share a
tissue:

``"mixed"``
    Both populations uniform over the whole region, independent of each other (two
    homogeneous Poisson patterns with fixed counts, i.e. binomial point processes).
``"segregated"``
    Each population in clusters of its own, apart from the other's: the region is cut into a
    grid of ``SEGREGATED_GRID x SEGREGATED_GRID`` tiles, each tile holds one cluster (centre
    jittered inside the tile, cells Gaussian around it, truncated at ``TRUNCATION`` standard
    deviations), and half the clusters, drawn at random, are "A", the rest "B" (with an odd
    number of tiles, the odd cluster goes to either). Clusters of neighbouring tiles are at
    least ``CLUSTER_GAP`` of a tile's shorter side apart, edge to edge.
``"surrounding"``
    Population "A" in compact nests (uniform in a disc), population "B" in a ring of cells
    around each nest (uniform in an annulus a little outside the disc), one nest per tile of
    a ``SURROUNDING_GRID x SURROUNDING_GRID`` grid; nests and rings stay inside their tile,
    so no ring touches another nest.

Coordinates are in micrometres, ``0 <= x <= width`` and ``0 <= y <= height``. The layouts are
synthetic demo inputs, not a calibrated model of any tissue.
"""

import math

import numpy as np
from scipy.spatial import cKDTree

from workers.core.errors import ParameterError

__all__ = [
    "PATTERNS",
    "cell_layout",
    "SEGREGATED_GRID",
    "SURROUNDING_GRID",
    "JITTER",
    "CLUSTER_SPREAD",
    "TRUNCATION",
    "CLUSTER_GAP",
    "NEST_RADIUS",
    "RING_GAP",
    "RING_WIDTH",
    "LAYOUTS",
    "CLASS_NAMES",
    "CELL_AREA",
    "MIN_DISTANCE",
    "MAX_PACKING",
    "two_population_layout",
]

PATTERNS = ("mixed", "segregated", "surrounding")
"""The arrangements ``cell_layout`` draws."""

SEGREGATED_GRID = 3
"""Tiles per side of the grid of clusters in the "segregated" layout."""

SURROUNDING_GRID = 2
"""Tiles per side of the grid of nests in the "surrounding" layout."""

JITTER = 0.1
"""Largest shift of a cluster or nest centre from its tile's centre, as a fraction of the
tile's width (x) and height (y)."""

CLUSTER_SPREAD = 0.09
"""Standard deviation of a "segregated" cluster, as a fraction of the tile's shorter side."""

TRUNCATION = 2.5
"""Cells of a "segregated" cluster lie within this many standard deviations of its centre
(a draw further out is drawn again)."""

CLUSTER_GAP = 1.0 - 2.0 * JITTER - 2.0 * TRUNCATION * CLUSTER_SPREAD
"""Smallest edge-to-edge distance between two "segregated" clusters of neighbouring tiles, as
a fraction of the tile's shorter side (0.35 with the values above)."""

NEST_RADIUS = 0.14
"""Radius of an "A" nest, as a fraction of the tile's shorter side."""

RING_GAP = 0.03
"""Distance between the edge of a nest and the inner edge of its "B" ring, same unit."""

RING_WIDTH = 0.08
"""Width of a "B" ring, same unit (so a ring's outer radius is 0.25 of the tile's shorter side,
and with the jitter it stays inside its tile)."""


def _check(pattern: str, count: int, size: tuple[float, float]) -> None:
    if pattern not in PATTERNS:
        raise ParameterError(
            f"pattern must be one of {', '.join(PATTERNS)}, not {pattern!r}", field="/pattern"
        )
    if isinstance(count, bool) or not isinstance(count, int | np.integer) or count < 2:
        raise ParameterError(
            f"count must be an integer of at least 2 (one cell of each population), not {count}",
            field="/count",
        )
    if len(size) != 2 or not all(math.isfinite(s) and s > 0 for s in size):
        raise ParameterError(f"size must be two positive lengths, not {size}", field="/size")


def _split(total: int, parts: int) -> list[int]:
    """``total`` cells shared as evenly as possible between ``parts`` groups."""
    return [total // parts + (1 if k < total % parts else 0) for k in range(parts)]


def _tile_centres(rng: np.random.Generator, grid: int, width: float, height: float) -> np.ndarray:
    """(grid * grid, 2) float64: one point per tile, jittered around the tile's centre, tiles
    in row-major order."""
    rows, columns = np.meshgrid(np.arange(grid), np.arange(grid), indexing="ij")
    centre = np.stack([columns.ravel() + 0.5, rows.ravel() + 0.5], axis=1)
    centre += rng.uniform(-JITTER, JITTER, size=centre.shape)
    scaled: np.ndarray = centre * np.array([width / grid, height / grid])
    return scaled


def _mixed(
    rng: np.random.Generator, counts: tuple[int, int], width: float, height: float
) -> list[np.ndarray]:
    return [rng.uniform((0.0, 0.0), (width, height), size=(n, 2)) for n in counts]


def _segregated(
    rng: np.random.Generator, counts: tuple[int, int], width: float, height: float
) -> list[np.ndarray]:
    grid = SEGREGATED_GRID
    centres = _tile_centres(rng, grid, width, height)
    tiles = grid * grid
    # Half the clusters to each population, the odd one to either.
    a_clusters = int(rng.integers(tiles // 2, tiles - tiles // 2 + 1))
    order = rng.permutation(tiles)
    owners = [order[:a_clusters], order[a_clusters:]]
    spread = CLUSTER_SPREAD * min(width, height) / grid
    groups = []
    for n, clusters in zip(counts, owners, strict=True):
        points = []
        for cluster, members in zip(clusters, _split(n, len(clusters)), strict=True):
            drawn = np.empty((0, 2))
            while len(drawn) < members:  # truncated Gaussian by redrawing the far ones
                offsets = rng.normal(scale=spread, size=(members - len(drawn), 2))
                close = np.hypot(offsets[:, 0], offsets[:, 1]) <= TRUNCATION * spread
                drawn = np.concatenate([drawn, offsets[close]])
            points.append(centres[cluster] + drawn)
        groups.append(np.concatenate(points) if points else np.empty((0, 2)))
    return groups


def _annulus(rng: np.random.Generator, n: int, inner: float, outer: float) -> np.ndarray:
    """``n`` points uniform in the annulus ``inner <= r <= outer`` around the origin (radius
    drawn by inverting the area fraction, so the density is uniform)."""
    radius = np.sqrt(rng.uniform(inner * inner, outer * outer, n))
    angle = rng.uniform(0.0, 2.0 * math.pi, n)
    return np.stack([radius * np.cos(angle), radius * np.sin(angle)], axis=1)


def _surrounding(
    rng: np.random.Generator, counts: tuple[int, int], width: float, height: float
) -> list[np.ndarray]:
    grid = SURROUNDING_GRID
    centres = _tile_centres(rng, grid, width, height)
    side = min(width, height) / grid
    nest = NEST_RADIUS * side
    ring = (nest + RING_GAP * side, nest + (RING_GAP + RING_WIDTH) * side)
    a_points, b_points = [], []
    for centre, a, b in zip(
        centres, _split(counts[0], len(centres)), _split(counts[1], len(centres)), strict=True
    ):
        a_points.append(centre + _annulus(rng, a, 0.0, nest))
        b_points.append(centre + _annulus(rng, b, *ring))
    return [np.concatenate(a_points), np.concatenate(b_points)]


_LAYOUTS = {"mixed": _mixed, "segregated": _segregated, "surrounding": _surrounding}


def cell_layout(
    pattern: str,
    seed: int,
    *,
    size: tuple[float, float] = (500.0, 500.0),
    count: int = 300,
) -> tuple[np.ndarray, np.ndarray]:
    """Positions and populations of ``count`` synthetic cells in a ``size`` = (width, height)
    region, in micrometres, arranged by ``pattern`` (one of ``PATTERNS``; see the module
    docstring).

    Returns ``(points, populations)``: ``points`` (count, 2) float64, (x, y) of each cell,
    inside ``[0, width] x [0, height]``; ``populations`` (count,) of str, ``"A"`` or ``"B"``.
    Population "A" has ``count // 2`` cells and comes first, "B" the other
    ``count - count // 2``. The same ``seed`` gives the same layout
    (numpy.random.default_rng).

    Raises ParameterError (``field`` names the argument) for an unknown pattern, a count
    below 2 or a size that is not two positive lengths.
    """
    _check(pattern, count, size)
    width, height = float(size[0]), float(size[1])
    rng = np.random.default_rng(seed)
    counts = (int(count) // 2, int(count) - int(count) // 2)
    groups = _LAYOUTS[pattern](rng, counts, width, height)
    points = np.concatenate(groups).astype(np.float64)
    populations = np.repeat(np.array(["A", "B"]), counts)
    return points, populations


# Two-population layouts at tissue spacing -------------------------------------------------

LAYOUTS = ("mixed", "excluded", "ringed")
"""The arrangements ``two_population_layout`` draws."""

CLASS_NAMES = ("tumour", "immune")
"""The classes of ``two_population_layout``, in the order of its label codes (0, 1)."""

CELL_AREA = 200.0
"""Tissue area per cell when no region is given, um^2: cells about 14 um apart (sqrt of the
area), the nearest neighbour of a cell at a median of about 10.5 um (measured)."""

MIN_DISTANCE = 9.0
"""Hard core: no two cell centres are closer than this, um (a small cell's diameter)."""

MAX_PACKING = 0.45
"""Largest share of the tissue the hard-core discs (diameter MIN_DISTANCE) may cover; random
sequential packing jams at about 0.547 (Feder 1980, J. Theor. Biol. 87:237, from memory) and
slows long before, so a region too small for the cells is refused instead."""

_MAX_ROUNDS = 400
"""Packing rounds before giving up, a guard: 25,000 cells pack in under 10 rounds at
CELL_AREA and in under 200 at MAX_PACKING (measured)."""


def _check_layout(
    kind: str, n_first: int, n_second: int, mixing: float, region: tuple[float, float] | None
) -> None:
    if kind not in LAYOUTS:
        raise ParameterError(
            f"kind must be one of {', '.join(LAYOUTS)}, not {kind!r}", field="/kind"
        )
    for name, count in (("n_first", n_first), ("n_second", n_second)):
        if isinstance(count, bool) or not isinstance(count, int | np.integer) or count < 1:
            raise ParameterError(
                f"{name} must be an integer of at least 1, not {count}", field=f"/{name}"
            )
    if isinstance(mixing, bool) or not (isinstance(mixing, int | float) and 0 <= mixing <= 1):
        raise ParameterError(f"mixing must be a number in [0, 1], not {mixing}", field="/mixing")
    if region is not None and (
        len(region) != 2 or not all(math.isfinite(s) and s > 0 for s in region)
    ):
        raise ParameterError(f"region must be two positive lengths, not {region}", field="/region")


def _hard_core_points(
    rng: np.random.Generator, n: int, width: float, height: float, disc: bool
) -> np.ndarray:
    """(k, 2) float64: ``k = n`` points (fewer if _MAX_ROUNDS did not place them all) in the
    rectangle (or, with ``disc``, in the disc inscribed in it), no two closer than
    MIN_DISTANCE, by random sequential adsorption in batches:
    uniform candidates, those too near an accepted point dropped, and of two candidates too
    near each other the later one dropped."""
    centre = np.array([width / 2.0, height / 2.0])
    radius = min(width, height) / 2.0
    accepted = np.empty((0, 2))
    for _ in range(_MAX_ROUNDS):
        need = n - len(accepted)
        if need == 0:
            return accepted
        candidates = rng.uniform((0.0, 0.0), (width, height), size=(max(4 * need, 256), 2))
        if disc:
            candidates = candidates[np.hypot(*(candidates - centre).T) <= radius]
        if len(accepted):
            nearest, _ = cKDTree(accepted).query(candidates, distance_upper_bound=MIN_DISTANCE)
            candidates = candidates[nearest >= MIN_DISTANCE]
        pairs = cKDTree(candidates).query_pairs(MIN_DISTANCE, output_type="ndarray")
        keep = np.ones(len(candidates), dtype=bool)
        keep[pairs.max(axis=1)] = False  # query_pairs gives i < j in no set order
        accepted = np.concatenate([accepted, candidates[keep][:need]])
    return accepted


def two_population_layout(
    kind: str,
    n_first: int,
    n_second: int,
    mixing: float,
    seed: int,
    region: tuple[float, float] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """A synthetic tissue of ``n_first`` "tumour" and ``n_second`` "immune" cells.

    The cells are packed first, all alike: centres uniform at random, no two closer than
    MIN_DISTANCE um (``_hard_core_points``), over the whole region (``"mixed"``,
    ``"excluded"``) or the disc inscribed in it (``"ringed"``). Then each cell gets a score,
    ``(1 - mixing) * place + mixing * noise`` with ``noise`` uniform in [0, 1] per cell, and
    the ``n_second`` cells of highest score are immune, the rest tumour. ``place`` is what
    names the layout:

    ``"mixed"``
        uniform at random per cell as well: immune cells interspersed among the tumour
        cells at any ``mixing``.
    ``"excluded"``
        ``x / width``: the immune cells kept beyond a straight boundary, in a band along the
        edge ``x = width`` as wide as they need, the tumour cells on the other side.
    ``"ringed"``
        the distance from the region's centre over the disc's radius: the immune cells in a
        ring around a core of tumour cells.

    ``mixing`` (0 to 1) blurs the boundary: 0 draws it sharp, 1 gives labels at random
    whatever the layout (then every layout is mixed).

    ``region`` = (width, height) in um; by default the square that gives each cell
    CELL_AREA um^2 (for ``"ringed"``, the square around the disc that does). A region too
    small to pack the cells with discs covering at most MAX_PACKING of it is refused.

    Returns ``(points, labels)``: ``points`` (n_first + n_second, 2) float64 (x, y) in um,
    inside ``[0, width] x [0, height]``; ``labels`` (n_first + n_second,) int64 codes into
    CLASS_NAMES (0 tumour, 1 immune), the ``n_first`` tumour cells first. The same arguments
    give the same layout (numpy.random.default_rng(seed)).

    Raises ParameterError (``field`` names the argument) for an unknown kind, a count below 1,
    a mixing outside [0, 1] or a region that is not two positive lengths or is too small.
    """
    _check_layout(kind, n_first, n_second, mixing, region)
    n = int(n_first) + int(n_second)
    disc = kind == "ringed"
    if region is None:
        side = math.sqrt(n * CELL_AREA)
        if disc:
            side = 2.0 * math.sqrt(n * CELL_AREA / math.pi)
        region = (side, side)
    width, height = float(region[0]), float(region[1])
    area = math.pi * min(width, height) ** 2 / 4.0 if disc else width * height
    if n * math.pi * MIN_DISTANCE**2 / 4.0 > MAX_PACKING * area:
        raise ParameterError(
            f"region {width:g} x {height:g} um is too small for {n} cells at least "
            f"{MIN_DISTANCE:g} um apart",
            field="/region",
        )
    rng = np.random.default_rng(seed)
    points = _hard_core_points(rng, n, width, height, disc)
    if len(points) < n:  # a guard: MAX_PACKING keeps the rounds well below the limit
        raise ParameterError(
            f"region {width:g} x {height:g} um could not be packed with {n} cells at least "
            f"{MIN_DISTANCE:g} um apart",
            field="/region",
        )
    if kind == "excluded":
        place = points[:, 0] / width
    elif kind == "ringed":
        place = np.hypot(points[:, 0] - width / 2.0, points[:, 1] - height / 2.0)
        place /= min(width, height) / 2.0
    else:
        place = rng.uniform(size=n)
    score = (1.0 - mixing) * place + mixing * rng.uniform(size=n)
    order = np.argsort(score, kind="stable")  # tumour: the n_first lowest scores
    tumour, immune = np.sort(order[: int(n_first)]), np.sort(order[int(n_first) :])
    labels = np.repeat(np.array([0, 1], dtype=np.int64), [int(n_first), int(n_second)])
    return points[np.concatenate([tumour, immune])], labels
