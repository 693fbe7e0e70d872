"""Reference libraries wrapped to answer in our conventions, for tests to compare against."""

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
