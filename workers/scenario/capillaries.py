"""Synthetic capillary networks: biased random walks of sprout tips that branch and fuse.

A toy model of sprouting angiogenesis in a gel, in the spirit of the tip-cell random walks
of Anderson and Chaplain (Bull. Math. Biol. 60, 857-899, 1998): tips start on a source edge,
are pulled toward a target on the opposite edge, branch now and then, and fuse with vessels
they meet (anastomosis), which is what closes loops. It makes demo inputs for the graph
filtrations; it is not a calibrated model of any real tissue, and the networks are
synthetic.

Coordinates are in micrometres, ``x`` across the region (``0 <= x <= width``) and ``y`` from
the source edge (``y = 0``) to the target edge (``y = height``).

One step:

1. Branching, for every active tip: with probability ``branch_probability`` a new tip starts
   from the tip's node, its heading turned by 30-60 degrees to a random side. A tip does not
   branch while another branch passes within ``2 * fusion_radius`` of it (no room for a
   sprout; this lateral inhibition also keeps the number of tips finite, since without it
   tips multiply geometrically).
2. Advance, for every active tip (new ones included) in order of creation:
   ``heading = normalise(bias * (0, 1) + (1 - bias) * heading + noise)``, with ``noise``
   Gaussian (standard deviation ``HEADING_NOISE`` per component), and a new node ``step``
   further on. A tip that would leave the region gets its last node on the border and stops.
3. Fusion, right after each advance: if a node of another branch lies within
   ``fusion_radius`` of the new node, and is more than ``RECENT_HOPS`` edges away along the
   network (not one of the tip's own last nodes, nor the sibling it just split from), then
   with probability ``fusion_probability`` the tip joins the nearest such node by an edge and
   stops.

The run ends when no tip is active or after ``max_steps`` steps. Neighbours are found with a
k-d tree (scipy.spatial.cKDTree) rebuilt every ``REBUILD_EVERY`` steps, plus a direct scan of
the nodes added since.
"""

import math
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from workers.core.errors import ParameterError

__all__ = [
    "CapillaryNetwork",
    "capillary_network",
    "capillary_request",
    "HEADING_NOISE",
    "RECENT_HOPS",
    "REBUILD_EVERY",
    "SPROUT_RADIUS",
    "RADIUS_FACTOR",
    "MIN_RADIUS",
]

HEADING_NOISE = 0.25
"""Standard deviation of the Gaussian noise added to each component of a tip's direction
before normalising (dimensionless; the pull toward the target has length ``bias``)."""

RECENT_HOPS = 6
"""A tip never fuses with a node this many edges or fewer away from it, so the shortest loop
fusion can close has ``RECENT_HOPS + 2`` edges."""

REBUILD_EVERY = 5
"""Steps between rebuilds of the k-d tree of nodes."""

SPROUT_RADIUS = 4.5
"""Vessel radius of the first-generation sprouts, micrometres."""

RADIUS_FACTOR = 0.85
"""Ratio of a branch's radius to its parent's."""

MIN_RADIUS = 3.0
"""Thinnest vessel radius, micrometres."""


@dataclass(frozen=True)
class CapillaryNetwork:
    """A planar vessel graph.

    ``coordinates``: (n, 2) float64, node centres (x, y) in micrometres.
    ``edges``: (m, 2) int64, pairs of node indices, ``i != j``, each pair at most once.
    ``radius``: (n,) float64, vessel radius at each node in micrometres.
    """

    coordinates: np.ndarray
    edges: np.ndarray
    radius: np.ndarray


def _check(
    branch_probability: float,
    fusion_probability: float,
    sprouts: int,
    size: tuple[float, float],
    step: float,
    bias: float,
    max_steps: int,
    fusion_radius: float,
) -> None:
    for name, value in (
        ("branch_probability", branch_probability),
        ("fusion_probability", fusion_probability),
        ("bias", bias),
    ):
        if not 0.0 <= value <= 1.0:
            raise ParameterError(f"{name} must be between 0 and 1, not {value}", field=f"/{name}")
    if sprouts < 1:
        raise ParameterError(f"sprouts must be at least 1, not {sprouts}", field="/sprouts")
    if len(size) != 2 or not all(math.isfinite(s) and s > 0 for s in size):
        raise ParameterError(f"size must be two positive lengths, not {size}", field="/size")
    if not (math.isfinite(step) and step > 0):
        raise ParameterError(f"step must be positive, not {step}", field="/step")
    if max_steps < 0:
        raise ParameterError(f"max_steps must be >= 0, not {max_steps}", field="/max_steps")
    if not (math.isfinite(fusion_radius) and fusion_radius >= 0):
        raise ParameterError(
            f"fusion_radius must be >= 0, not {fusion_radius}", field="/fusion_radius"
        )


class _Growth:
    """The growing network: nodes, adjacency, and the neighbour index."""

    def __init__(self, capacity: int) -> None:
        self.points = np.empty((capacity, 2), dtype=np.float64)
        self.branch = np.empty(capacity, dtype=np.int64)
        self.radius: list[float] = []
        self.adjacency: list[list[int]] = []
        self.edges: list[tuple[int, int]] = []
        self.count = 0
        self.tree: cKDTree | None = None
        self.indexed = 0  # nodes [0, indexed) are in the tree

    def add_node(self, point: np.ndarray, branch: int, radius: float) -> int:
        if self.count == len(self.points):
            self.points = np.concatenate([self.points, np.empty_like(self.points)])
            self.branch = np.concatenate([self.branch, np.empty_like(self.branch)])
        index = self.count
        self.points[index] = point
        self.branch[index] = branch
        self.radius.append(radius)
        self.adjacency.append([])
        self.count += 1
        return index

    def add_edge(self, i: int, j: int) -> None:
        self.edges.append((i, j))
        self.adjacency[i].append(j)
        self.adjacency[j].append(i)

    def reindex(self) -> None:
        self.tree = cKDTree(self.points[: self.count])
        self.indexed = self.count

    def near(self, point: np.ndarray, radius: float) -> np.ndarray:
        """Indices of the nodes within ``radius`` of ``point``."""
        found = []
        if self.tree is not None and self.indexed:
            found.append(np.asarray(self.tree.query_ball_point(point, radius), dtype=np.int64))
        recent = self.points[self.indexed : self.count]
        if len(recent):
            close = np.flatnonzero(np.sum((recent - point) ** 2, axis=1) <= radius * radius)
            found.append(close + self.indexed)
        return np.concatenate(found) if found else np.empty(0, dtype=np.int64)

    def within_hops(self, start: int, hops: int) -> set[int]:
        """Nodes at most ``hops`` edges from ``start`` (breadth-first)."""
        seen = {start}
        frontier = [start]
        for _ in range(hops):
            frontier = [n for node in frontier for n in self.adjacency[node] if n not in seen]
            seen.update(frontier)
            if not frontier:
                break
        return seen


def _exit_fraction(start: np.ndarray, delta: np.ndarray, width: float, height: float) -> float:
    """Fraction of the move ``start -> start + delta`` inside [0, width] x [0, height]."""
    fraction = 1.0
    for value, change, top in ((start[0], delta[0], width), (start[1], delta[1], height)):
        end = value + change
        if end > top:
            fraction = min(fraction, (top - value) / change)
        elif end < 0.0:
            fraction = min(fraction, -value / change)
    return max(fraction, 0.0)


def capillary_network(
    *,
    branch_probability: float,
    fusion_probability: float,
    seed: int,
    sprouts: int = 8,
    size: tuple[float, float] = (1000.0, 1000.0),
    step: float = 10.0,
    bias: float = 0.6,
    max_steps: int = 400,
    fusion_radius: float = 8.0,
) -> CapillaryNetwork:
    """Grow a synthetic capillary network from ``sprouts`` tips on the edge ``y = 0``.

    Probabilities are per tip and step; ``size`` is (width, height), ``step`` the advance per
    step and ``fusion_radius`` the reach of fusion, all in micrometres; ``bias`` (0..1) is
    the weight of the pull toward the target edge ``y = height`` against the tip's own
    heading. The same ``seed`` gives the same network (numpy.random.default_rng). Loops
    come only from fusion: with ``fusion_probability = 0`` the network is a forest of
    ``sprouts`` trees.

    Raises ParameterError (``field`` names the argument) for a value out of range.
    """
    _check(
        branch_probability,
        fusion_probability,
        sprouts,
        size,
        step,
        bias,
        max_steps,
        fusion_radius,
    )
    width, height = float(size[0]), float(size[1])
    rng = np.random.default_rng(seed)
    growth = _Growth(capacity=max(1024, 16 * sprouts))
    pull = np.array([0.0, bias])
    room = 2.0 * fusion_radius

    # Tips as parallel lists, in order of creation: node, heading, branch, generation,
    # and whether another branch was within ``room`` at its last node.
    tip_node: list[int] = []
    tip_heading: list[np.ndarray] = []
    tip_branch: list[int] = []
    tip_generation: list[int] = []
    tip_crowded: list[bool] = []
    branches = 0
    for k in range(sprouts):
        start = np.array([(k + 0.5) * width / sprouts, 0.0])
        tip_node.append(growth.add_node(start, branches, SPROUT_RADIUS))
        tip_heading.append(np.array([0.0, 1.0]))
        tip_branch.append(branches)
        tip_generation.append(0)
        tip_crowded.append(False)
        branches += 1

    for step_number in range(max_steps):
        if not tip_node:
            break
        if step_number % REBUILD_EVERY == 0:
            growth.reindex()
        # Branching first; the new tips advance in this same step.
        count = len(tip_node)
        draws = rng.random(count)
        turns = np.radians(rng.uniform(30.0, 60.0, count)) * rng.choice([-1.0, 1.0], count)
        for k in range(count):
            if draws[k] >= branch_probability or tip_crowded[k]:
                continue
            cos, sin = math.cos(turns[k]), math.sin(turns[k])
            hx, hy = tip_heading[k]
            tip_node.append(tip_node[k])
            tip_heading.append(np.array([cos * hx - sin * hy, sin * hx + cos * hy]))
            tip_branch.append(branches)
            tip_generation.append(tip_generation[k] + 1)
            tip_crowded.append(True)  # the parent is beside it
            branches += 1
        count = len(tip_node)
        noise = rng.normal(scale=HEADING_NOISE, size=(count, 2))
        fuse_draws = rng.random(count)
        keep: list[bool] = []
        for k in range(count):
            direction = pull + (1.0 - bias) * tip_heading[k] + noise[k]
            length = float(np.hypot(direction[0], direction[1]))
            heading = direction / length if length > 0.0 else tip_heading[k]
            tip_heading[k] = heading
            start = growth.points[tip_node[k]]
            delta = step * heading
            fraction = _exit_fraction(start, delta, width, height)
            if fraction * step <= 1e-9:  # already on the border, heading out
                keep.append(False)
                continue
            point = start + fraction * delta
            np.clip(point, (0.0, 0.0), (width, height), out=point)
            radius = max(MIN_RADIUS, SPROUT_RADIUS * RADIUS_FACTOR ** tip_generation[k])
            node = growth.add_node(point, tip_branch[k], radius)
            growth.add_edge(tip_node[k], node)
            tip_node[k] = node
            alive = fraction >= 1.0
            neighbours = growth.near(point, room)
            others = neighbours[growth.branch[neighbours] != tip_branch[k]]
            tip_crowded[k] = False
            if alive and len(others):
                close = set(growth.within_hops(node, RECENT_HOPS))
                others = np.array([n for n in others.tolist() if n not in close], dtype=np.int64)
                if len(others):
                    tip_crowded[k] = True
                    distances = np.hypot(*(growth.points[others] - point).T)
                    nearest = int(np.argmin(distances))
                    if distances[nearest] <= fusion_radius and (fuse_draws[k] < fusion_probability):
                        growth.add_edge(node, int(others[nearest]))
                        alive = False
            keep.append(alive)
        tip_node = [v for v, alive in zip(tip_node, keep, strict=True) if alive]
        tip_heading = [v for v, alive in zip(tip_heading, keep, strict=True) if alive]
        tip_branch = [v for v, alive in zip(tip_branch, keep, strict=True) if alive]
        tip_generation = [v for v, alive in zip(tip_generation, keep, strict=True) if alive]
        tip_crowded = [v for v, alive in zip(tip_crowded, keep, strict=True) if alive]

    coordinates = growth.points[: growth.count].copy()
    edges = np.array(growth.edges, dtype=np.int64).reshape(-1, 2)
    return CapillaryNetwork(
        coordinates=coordinates,
        edges=edges,
        radius=np.array(growth.radius, dtype=np.float64),
    )


def capillary_request(network: CapillaryNetwork) -> dict[str, object]:
    """A JSON-ready lacuna job request for ``network``: a ``graph`` input in micrometres,
    filtered by height toward the target edge (direction (0, 1)), asking for the diagrams
    and the network descriptors. Coordinates and radii are rounded to 3 decimals."""
    return {
        "input": {
            "type": "graph",
            "nodes": np.round(network.coordinates, 3).tolist(),
            "edges": network.edges.astype(np.int64).tolist(),
            "radius": np.round(network.radius, 3).tolist(),
            "units": "um",
        },
        "filtration": {"type": "height", "direction": [0, 1]},
        "output": ["diagrams", "descriptors"],
        "descriptors": {"direction": [0, 1]},
    }
