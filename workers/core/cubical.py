"""Persistence of images (2D) and volumes (3D) through their cubical complex.

Convention: every pixel (voxel) is a closed unit square (cube), a top-dimensional cell of a
cubical complex; a lower-dimensional cell (vertex, edge, square face in 3D) enters at the
*minimum* of the pixels containing it, and the filtration is by sublevel sets. So in H0
pixels connect through shared corners (8-connectivity in 2D, 26 in 3D), and holes and
cavities, the components of the complement, through shared faces (4 / 6-connectivity). This
is the filtration gudhi's ``CubicalComplex(top_dimensional_cells=values)`` builds (sometimes
called the T-construction). A pixel at ``+inf`` is never in the complex (the background of a
mask); classes born at ``+inf`` are left out, and a class that only dies at ``+inf`` has
death ``inf``. The outside of the array counts as older than every cell, ties at ``+inf``
included.

Methods (Z/2 coefficients, all exact; the C extension ``workers.core._cubical`` does the
work, with the GIL released):

* H0: union-find over pixels in increasing value (ties by flat index), corner adjacency,
  elder rule (Edelsbrunner, Letscher & Zomorodian 2002, "Topological persistence and
  simplification"). The elder root stays the root (no rank array: fewer random reads),
  with path halving.
* H_{d-1} (H1 of an image, H2 of a volume): Alexander duality. A hole is a bounded
  component of the complement of the sublevel set, so a union-find over pixels in
  *decreasing* value with face adjacency, plus one outside node adjacent to the border,
  gives them: when a pixel of value v joins two complement components whose maxima are
  m1 >= m2, the younger one becomes a hole, the pair (v, m2) (Garin et al. 2020, "Duality in
  persistent homology of images"; the same argument as Wagner, Chen & Vucini 2012,
  "Efficient computation of persistent homology for cubical data").
* H1 of a volume: persistent cohomology (de Silva, Morozov & Vejdemo-Johansson 2011,
  "Dualities in persistent (co)homology") over the cells of the complex in a total order
  that refines the filtration: by (level of the cell's first voxel, dimension, position in
  that voxel). Edges that kill an H0 class are cleared (Chen & Kerber 2011, "Persistent
  homology computation with a twist"); apparent and emergent pairs need no column
  (Bauer 2021, "Ripser: efficient computation of Vietoris-Rips persistence barcodes"). In this
  complex every edge has a coface of its own value, so apparent pairs are read off each
  voxel's 26 neighbours once, and only the remaining columns are reduced, in a heap of
  square keys; a reduced column is kept (as its square keys) for the columns that reach its
  pivot later. Cell values are never stored: a cell's value is that of its first voxel.
"""

import numpy as np

from workers.core import _cubical
from workers.core.diagrams import sort_pairs
from workers.core.errors import InvalidArrayError, ParameterError

__all__ = ["cubical_diagrams"]


def cubical_diagrams(values: np.ndarray, *, max_dim: int) -> list[np.ndarray]:
    """Persistence diagrams of the sublevel filtration of an image or volume.

    ``values``: a 2D (rows, columns) or 3D (planes, rows, columns) array of pixel values,
    each finite or ``+inf`` (never in the complex). ``max_dim``: highest homology dimension,
    0 .. ``values.ndim - 1``.

    Returns ``max_dim + 1`` arrays, one per dimension 0..max_dim, each (k, 2) float64 of
    (birth, death) in the units of ``values``, sorted by ``sort_pairs``; death ``np.inf`` for
    classes that never die. Zero-length pairs and pairs born at ``+inf`` are left out.
    """
    array = np.ascontiguousarray(values, dtype=np.float64)
    if array.ndim not in (2, 3) or array.size == 0:
        raise InvalidArrayError("values must be a non-empty 2D or 3D array")
    if not bool((array > -np.inf).all()):  # NaN compares false too
        raise InvalidArrayError("values must be finite or +inf (never in the complex)")
    if not 0 <= max_dim <= array.ndim - 1:
        raise ParameterError(
            f"max_dim must be between 0 and {array.ndim - 1} for a {array.ndim}D array",
            field="/max_dim",
        )
    packed = _cubical.diagrams(array.data, tuple(int(n) for n in array.shape), max_dim)
    return [sort_pairs(np.frombuffer(pairs, dtype=np.float64).reshape(-1, 2)) for pairs in packed]
