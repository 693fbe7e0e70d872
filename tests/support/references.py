"""What tests compare against: reference libraries wrapped to answer in our conventions, and
definitions computed the slow, obvious way."""

import gudhi
import numpy as np

from workers.core.diagrams import sort_pairs


def gudhi_diagrams(values: np.ndarray, max_dim: int | None = None) -> list[np.ndarray]:
    """Reference: gudhi's CubicalComplex on the same top-dimensional cells (pixels), whose
    lower cells enter at the minimum of the pixels around them. Zero-length bars and the
    (inf, inf) pairs of pixels at +inf are left out, as ours leaves them out. Dimensions
    0..max_dim (default: all, d - 1)."""
    if max_dim is None:
        max_dim = values.ndim - 1
    complex_ = gudhi.CubicalComplex(top_dimensional_cells=values)
    complex_.compute_persistence(homology_coeff_field=2)
    diagrams = []
    for k in range(max_dim + 1):
        pairs = np.asarray(complex_.persistence_intervals_in_dimension(k)).reshape(-1, 2)
        pairs = pairs[(pairs[:, 1] > pairs[:, 0]) & np.isfinite(pairs[:, 0])]
        diagrams.append(sort_pairs(pairs))
    return diagrams


def gudhi_graph_diagrams(
    values: np.ndarray, edges: np.ndarray, max_dim: int = 1
) -> list[np.ndarray]:
    """Reference: a gudhi SimplexTree holding the nodes that enter (finite values) at their
    values and the edges between them at the larger one (an edge enters with its later end);
    persistence_dim_max so that H1 of a 1-complex is computed. Zero-length bars left out, as
    ours leaves them out. Dimensions 0..max_dim."""
    tree = gudhi.SimplexTree()
    for v, value in enumerate(values):
        if np.isfinite(value):
            tree.insert([int(v)], filtration=float(value))
    for u, v in edges:
        if np.isfinite(values[u]) and np.isfinite(values[v]):
            tree.insert([int(u), int(v)], filtration=float(max(values[u], values[v])))
    tree.persistence(persistence_dim_max=True)
    diagrams = []
    for k in range(max_dim + 1):
        pairs = np.asarray(tree.persistence_intervals_in_dimension(k)).reshape(-1, 2)
        diagrams.append(sort_pairs(pairs[pairs[:, 1] > pairs[:, 0]]))
    return diagrams


def landscape_by_definition(pairs: np.ndarray, levels: int, grid: np.ndarray) -> np.ndarray:
    """Bubenik 2015 (from memory), the definition: lambda_k(t) is the k-th largest of the
    tents max(0, min(t - b, d - t)); levels beyond the number of pairs are 0."""
    values = np.zeros((levels, grid.size))
    for column, t in enumerate(grid):
        tents = sorted((max(0.0, min(t - b, d - t)) for b, d in pairs), reverse=True)
        for level, tent in enumerate(tents[:levels]):
            values[level, column] = tent
    return values
