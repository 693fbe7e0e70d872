"""Dowker persistence table: lacuna against a plain SimplexTree loop, measured side by side.

Data: two populations ("tumour" and "immune" points) in a square of side 1000 (microns, say)
from a seeded generator of this module: half of each population uniform, half in Gaussian
clusters (tumour: 4 wide clusters; immune: 12 tight ones, so the neighbourhoods are uneven).
The cell spacing is sqrt(area / all points); max_radius is 3 spacings. H0 + H1.

Timed, each in a forked child under RLIMIT_AS and a time cap: lacuna's ``dowker_diagrams``
(tumour as vertices, immune as witnesses, ``side="smaller"``), and the reference: the same
filtered complex (on the side lacuna used) built in a gudhi SimplexTree by a Python loop over
witnesses, ``insert`` of every subset of each witness's neighbours up to triangles at its
farthest member's distance (``insert`` keeps the smaller value of a simplex already in), then
its persistence. Diagrams are checked identical (exact float equality); a difference fails
the run. Peak memory: rise of the resident high-water mark during one call in a fresh child.

Goal from the issue: 20k/5k in under 60 s and under 2 GB peak on 2 cores.

Run: ``.venv/bin/python -m tests.benchmarks.dowker [--cap SECONDS]``.
"""

import argparse
import itertools
import math
import resource
from collections.abc import Callable
from functools import partial
from typing import Any

import gudhi
import numpy as np
from scipy.spatial import cKDTree

from tests.benchmarks.cubical import _cell, _megabytes, _memory_ratio, _stacked
from tests.benchmarks.vectors import Timed, _other_load, _ratio, _rss_rise, _timed_in_child
from workers.core.dowker import dowker_diagrams, dowker_size

CASES = [(2_000, 500), (10_000, 2_500), (20_000, 5_000)]
"""(tumour, immune) point counts."""
SIDE = 1000.0
SEED = 2024
SPACINGS = 3.0
MAX_DIM = 1
MEMORY_CAP = 4 * 2**30
"""RLIMIT_AS of each measured child, bytes."""


def two_populations(tumour: int, immune: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(tumour (t, 2), immune (i, 2)) points in [0, SIDE]^2: half uniform, half clustered."""
    rng = np.random.default_rng(seed)

    def population(count: int, clusters: int, spread: float) -> np.ndarray:
        uniform = rng.uniform(0, SIDE, (count // 2, 2))
        centres = rng.uniform(0.15 * SIDE, 0.85 * SIDE, (clusters, 2))
        around = centres[rng.integers(clusters, size=count - count // 2)]
        clustered = around + rng.normal(0, spread, around.shape)
        return np.clip(np.concatenate([uniform, clustered]), 0, SIDE)

    return population(tumour, 4, 0.12 * SIDE), population(immune, 12, 0.03 * SIDE)


def max_radius(tumour: int, immune: int) -> float:
    return SPACINGS * math.sqrt(SIDE * SIDE / (tumour + immune))


def _capped(call: Callable[[], Any]) -> Any:
    """``call`` under RLIMIT_AS (run in a forked child: the limit stays there)."""
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_CAP, MEMORY_CAP))
    return call()


def lacuna(vertices: np.ndarray, witnesses: np.ndarray, radius: float) -> np.ndarray:
    found = dowker_diagrams(vertices, witnesses, max_dim=MAX_DIM, max_radius=radius)
    return _stacked(found.diagrams)


def simplex_tree_loop(vertices: np.ndarray, witnesses: np.ndarray, radius: float) -> np.ndarray:
    """The reference: one witness at a time, every subset of its neighbours inserted."""
    tree = gudhi.SimplexTree()
    vertex_tree = cKDTree(vertices)
    for witness in witnesses:
        near = np.asarray(vertex_tree.query_ball_point(witness, radius * (1 + 1e-9)), dtype=int)
        distance = np.sqrt(np.sum((vertices[near] - witness) ** 2, axis=1))
        keep = distance <= radius
        near, distance = near[keep], distance[keep]
        for size in range(1, MAX_DIM + 3):
            for members in itertools.combinations(range(len(near)), size):
                chosen = list(members)
                tree.insert(near[chosen].tolist(), float(distance[chosen].max()))
    tree.compute_persistence(homology_coeff_field=2, min_persistence=0)
    return _stacked(
        [np.asarray(tree.persistence_intervals_in_dimension(k)) for k in range(MAX_DIM + 1)]
    )


def _identical(ours: Timed | None, theirs: Timed | None) -> str:
    if ours is None or theirs is None:
        return "? (capped)"
    if ours.value.shape == theirs.value.shape and np.array_equal(ours.value, theirs.value):
        return "identical"
    raise AssertionError("the reference loop's diagrams differ from lacuna's")


@_other_load()
def dowker_table(cap: float) -> None:
    """lacuna and the SimplexTree loop on three sizes of two populations, H0 + H1."""
    print(
        "\n## Dowker persistence (witness radius, H0 + H1): seconds and peak memory "
        "(2 cores, one run each)\n"
    )
    print(
        f"Goal: 20k/5k under 60 s and 2 GB. Data: `two_populations` (seed {SEED}) in a "
        f"{SIDE:.0f} x {SIDE:.0f} square, max_radius = {SPACINGS:.0f} spacings "
        "(spacing = sqrt(area / all points)). Reference: Python loop over witnesses inserting "
        "into a gudhi SimplexTree, on the side lacuna chose. Each run in a forked child, "
        f"RLIMIT_AS {MEMORY_CAP / 2**30:.0f} GB, {cap:.0f} s cap. Candidates: "
        "`dowker_size` on the side used (repeats included).\n"
    )
    print(
        "| tumour / immune | max_radius | side used | candidates | lacuna s | loop s "
        "| lacuna / loop time | lacuna MB | loop MB | lacuna / loop memory | H0 pairs "
        "| H1 pairs | diagrams |"
    )
    print("|---|" + "---|" * 12)
    for tumour, immune in CASES:
        vertices, witnesses = two_populations(tumour, immune, SEED)
        radius = max_radius(tumour, immune)
        size = partial(dowker_size, vertices, witnesses, max_dim=MAX_DIM, max_radius=radius)
        by_side = {side: size(side=side) for side in ("vertices", "witnesses")}
        side = min(by_side, key=lambda s: (by_side[s], s != "vertices"))  # the core's rule
        candidates = by_side[side]
        ours_call = partial(_capped, partial(lacuna, vertices, witnesses, radius))
        swapped = (witnesses, vertices) if side == "witnesses" else (vertices, witnesses)
        loop_call = partial(_capped, partial(simplex_tree_loop, *swapped, radius))
        timed = {"lacuna": _timed_in_child(ours_call, 1, cap)}
        memory = {"lacuna": _megabytes(_timed_in_child(partial(_rss_rise, ours_call), 1, cap))}
        timed["loop"] = _timed_in_child(loop_call, 1, cap)
        memory["loop"] = (
            None
            if timed["loop"] is None
            else _megabytes(_timed_in_child(partial(_rss_rise, loop_call), 1, cap))
        )
        seconds = {name: None if t is None else t.seconds for name, t in timed.items()}
        ours = timed["lacuna"]
        pairs = (
            [int((ours.value[:, 0] == k).sum()) for k in (0, 1)] if ours is not None else ["?", "?"]
        )
        cells = [f"{tumour} / {immune}", f"{radius:.2f}", side, str(candidates)]
        cells += [_cell(seconds[name], f"> {cap:.0f}", ".2f") for name in timed]
        cells.append(_ratio(seconds["lacuna"], seconds["loop"], cap))
        cells += [_cell(memory[name], "?", ".1f") for name in timed]
        cells.append(_memory_ratio(memory["lacuna"], memory["loop"]))
        cells += [str(count) for count in pairs] + [_identical(ours, timed["loop"])]
        print("| " + " | ".join(cells) + " |", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--cap", type=float, default=300.0, help="seconds per run")
    dowker_table(parser.parse_args().cap)


if __name__ == "__main__":
    main()
