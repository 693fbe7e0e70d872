"""Graph persistence table: lacuna against gudhi's SimplexTree, measured side by side in one run.

Data: a random geometric graph, 200 000 points uniform in the unit square (fixed seed), an
edge between every two points closer than a radius chosen for about 10^6 edges
(``scipy.spatial.cKDTree.query_pairs``). Node values: the height (x coordinate), and for a
second row i.i.d. uniform values, which scatter the union-find over the whole graph. Each
engine runs in forked children: the median of 3 timed runs, then one more child for its peak
memory. Timed: lacuna's ``graph_diagrams`` (H0 + H1, its sort included); gudhi building the
SimplexTree (``insert_batch`` of the nodes, then of the edges at the larger value of their
ends) and ``persistence(persistence_dim_max=True)``, its intervals read out. The diagrams
are checked equal, dimension by dimension.

Second table: skeleton graphs (``workers.core.skeleton_graph``) of a 512^2 capillary mask and
a 128^3 volume of tubes, against scikit-image's ``skeletonize`` alone.

Run: ``.venv/bin/python -m tests.benchmarks.graphs [--cap SECONDS]``.
"""

import argparse
import math
from collections.abc import Callable
from functools import partial

import gudhi
import numpy as np
from scipy.ndimage import distance_transform_edt
from scipy.spatial import cKDTree
from skimage import draw
from skimage.morphology import skeletonize

from tests.benchmarks.cubical import _agreement, _cell, _megabytes, _memory_ratio, _stacked
from tests.benchmarks.vectors import Timed, _other_load, _ratio, _rss_rise, _timed_in_child
from workers.core.graph_persistence import graph_diagrams
from workers.core.skeleton_graph import skeleton_graph
from workers.scenario.capillaries import capillary_network

Engine = Callable[[np.ndarray, np.ndarray], np.ndarray]
"""(values, edges) -> (k, 3) array of (dimension, birth, death), unsorted."""

NODES = 200_000
EDGES = 1_000_000
"""Expected edge count; the radius ignores the border, so a few fewer come out."""
SEED = 2024


def geometric_graph(nodes: int, edges: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(points (nodes, 2), edges (m, 2) int64) of a random geometric graph in the unit
    square with about ``edges`` edges: pi r^2 nodes^2 / 2 of them away from the border."""
    points = np.random.default_rng(seed).random((nodes, 2))
    radius = math.sqrt(2.0 * edges / (math.pi * nodes * nodes))
    pairs = cKDTree(points).query_pairs(radius, output_type="ndarray")
    return points, np.asarray(pairs, dtype=np.int64)


def _rows(diagrams: list[np.ndarray]) -> np.ndarray:
    return np.concatenate(
        [np.column_stack([np.full(len(d), float(k)), d]) for k, d in enumerate(diagrams)]
    )


def lacuna(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    return _rows(graph_diagrams(values, edges, max_dim=1))


def gudhi_graph(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    tree = gudhi.SimplexTree()
    tree.insert_batch(np.arange(len(values))[np.newaxis, :], values)
    tree.insert_batch(edges.T, np.maximum(values[edges[:, 0]], values[edges[:, 1]]))
    tree.persistence(persistence_dim_max=True)  # else H1 of a 1-complex is not computed
    return _rows([np.asarray(tree.persistence_intervals_in_dimension(k)) for k in (0, 1)])


def _sorted(rows: np.ndarray) -> np.ndarray:
    """(dimension, birth, death) rows as the diagrams _stacked sorts and compares."""
    return _stacked([rows[rows[:, 0] == k, 1:] for k in (0, 1)])


@_other_load()
def graph_table(cap: float) -> None:
    """lacuna and gudhi on a random geometric graph of about 10^6 edges, H0 and H1."""
    engines: dict[str, Engine] = {"lacuna": lacuna, "gudhi": gudhi_graph}
    points, edges = geometric_graph(NODES, EDGES, SEED)
    print(
        "\n## Graph persistence (sublevel, node values, edges at the larger end, H0 + H1): "
        "median seconds of 3 runs and peak memory (1 core)\n"
    )
    print(
        f"Goal: lacuna <= 0.5x gudhi's time, with equal diagrams. Data: {NODES} points "
        f"uniform in the unit square (seed {SEED}), edges by cKDTree.query_pairs at the "
        f"radius for {EDGES} edges. Peak memory: rise of the resident high-water mark "
        "(VmHWM) during one call in a fresh forked child, the inputs excluded. Diagrams: max "
        "abs difference of the sorted pairs per dimension, zero-length bars left out.\n"
    )
    print(
        "| node values | nodes | edges | lacuna s | gudhi s "
        "| lacuna / gudhi time (goal <= 0.5) | lacuna MB | gudhi MB | lacuna / gudhi memory "
        "| H0 pairs | H1 pairs | gudhi agrees |"
    )
    print("|---|" + "---|" * 11)
    cases = {
        "height (x)": np.ascontiguousarray(points[:, 0]),
        "uniform i.i.d.": np.random.default_rng(SEED + 1).random(NODES),
    }
    for label, values in cases.items():
        timed: dict[str, Timed | None] = {}
        memory: dict[str, float | None] = {}
        for name, engine in engines.items():
            call = partial(engine, values, edges)
            timed[name] = _timed_in_child(call, 3, cap)
            memory[name] = _megabytes(_timed_in_child(partial(_rss_rise, call), 1, cap))
        ours, theirs = timed["lacuna"], timed["gudhi"]
        seconds = {name: None if t is None else t.seconds for name, t in timed.items()}
        if ours is None or theirs is None:
            agreement, counts = "? (capped)", ["?", "?"]
        else:
            mine = _sorted(ours.value)
            agreement = _agreement(mine, _sorted(theirs.value), 2)
            counts = [str(int((mine[:, 0] == k).sum())) for k in (0, 1)]
        print(
            f"| {label} | {NODES} | {len(edges)} "
            + "".join(f"| {_cell(seconds[n], f'> {cap:.0f}', '.3f')} " for n in engines)
            + f"| {_ratio(seconds['lacuna'], seconds['gudhi'], cap)} "
            + "".join(f"| {_cell(memory[n], '?', '.1f')} " for n in engines)
            + f"| {_memory_ratio(memory['lacuna'], memory['gudhi'])} "
            f"| {counts[0]} | {counts[1]} | {agreement} |",
            flush=True,
        )


def capillary_mask(size: int, seed: int) -> np.ndarray:
    """A 2D vessel mask: a synthetic capillary network (workers.scenario) drawn into a
    ``size`` x ``size`` grid with its vessel radii."""
    network = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=seed)
    scale = size / 1000.0
    centre = np.zeros((size, size), dtype=bool)
    for u, v in network.edges:
        (r0, c0), (r1, c1) = (np.clip(network.coordinates[i] * scale, 0, size - 1) for i in (u, v))
        rows, cols = draw.line(int(r0), int(c0), int(r1), int(c1))
        centre[rows, cols] = True
    mask: np.ndarray = distance_transform_edt(~centre) <= 2.0
    return mask


def tube_volume(size: int, tubes: int, seed: int) -> np.ndarray:
    """A 3D mask of ``tubes`` straight tubes of radius 3 between random points."""
    rng = np.random.default_rng(seed)
    grid = np.stack(np.meshgrid(*[np.arange(size)] * 3, indexing="ij"), axis=-1).reshape(-1, 3)
    inside = np.zeros(len(grid), dtype=bool)
    for _ in range(tubes):
        start, end = rng.uniform(0, size - 1, (2, 3))
        along = end - start
        t = np.clip((grid - start) @ along / (along @ along), 0, 1)
        inside |= np.linalg.norm(grid - (start + t[:, None] * along), axis=1) <= 3.0
    return inside.reshape(size, size, size)


@_other_load()
def skeleton_table(cap: float) -> None:
    """Skeleton graphs of a 512^2 and a 128^3 vessel mask against skeletonize alone."""
    print(
        "\n## Skeleton graphs of masks: median seconds of 3 runs (1 core)\n\n"
        "lacuna: `skeleton_graph` (scikit-image skeletonize, then the graph: shortcuts left "
        "out, junctions merged, radii from the distance transform). Reference: scikit-image "
        "`skeletonize` alone, so the ratio is what building the graph adds.\n"
    )
    print("| mask | pixels | lacuna s | skeletonize s | lacuna / skeletonize | nodes | edges |")
    print("|---|" + "---|" * 6)
    masks = {
        "capillaries 512^2": capillary_mask(512, SEED),
        "tubes 128^3": tube_volume(128, 12, SEED),
    }
    for label, mask in masks.items():
        ours = _timed_in_child(partial(_graph_counts, mask), 3, cap)
        theirs = _timed_in_child(partial(skeletonize, mask), 3, cap)
        seconds = [None if t is None else t.seconds for t in (ours, theirs)]
        counts = [str(int(c)) for c in ours.value] if ours is not None else ["?", "?"]
        print(
            f"| {label} | {mask.size} "
            + "".join(f"| {_cell(t, f'> {cap:.0f}', '.3f')} " for t in seconds)
            + f"| {_ratio(seconds[0], seconds[1], cap)} | {counts[0]} | {counts[1]} |",
            flush=True,
        )


def _graph_counts(mask: np.ndarray) -> tuple[int, int]:
    graph = skeleton_graph(mask, [1.0] * mask.ndim)
    return len(graph.coordinates), len(graph.edges)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cap", type=float, default=120.0, help="seconds allowed to one run")
    cap = parser.parse_args().cap
    graph_table(cap)
    skeleton_table(cap)


if __name__ == "__main__":
    main()
