"""The Rips engines compared by the benchmark, each as points (n, d) -> [H0, H1] arrays."""

from collections.abc import Callable

import numpy as np

Engine = Callable[[np.ndarray], list[np.ndarray]]


def lacuna(points: np.ndarray) -> list[np.ndarray]:
    from workers.core.rips import rips_diagrams

    return rips_diagrams(points, max_dim=1)


def ripser(points: np.ndarray) -> list[np.ndarray]:
    from ripser import ripser as run

    return list(run(points, maxdim=1)["dgms"])


def gudhi_collapse(points: np.ndarray) -> list[np.ndarray]:
    import gudhi

    tree = gudhi.RipsComplex(points=points).create_simplex_tree(max_dimension=1)
    tree.collapse_edges(1)  # more iterations shrink the graph little and cost more
    tree.expansion(2)
    tree.compute_persistence()
    return [np.asarray(tree.persistence_intervals_in_dimension(k)).reshape(-1, 2) for k in (0, 1)]


def giotto(threads: int, collapse: bool) -> Engine:
    def run(points: np.ndarray) -> list[np.ndarray]:
        from gph import ripser_parallel

        answer = ripser_parallel(points, maxdim=1, n_threads=threads, collapse_edges=collapse)
        return [np.asarray(d, dtype=np.float64) for d in answer["dgms"]]

    return run


REFERENCES: dict[str, Engine] = {
    "ripser": ripser,
    "gudhi+collapse": gudhi_collapse,
    "giotto-ph 1t": giotto(1, False),
    "giotto-ph 2t": giotto(2, False),
    "giotto-ph 1t+collapse": giotto(1, True),
    "giotto-ph 2t+collapse": giotto(2, True),
}
