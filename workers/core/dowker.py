"""Dowker (witness) persistence of two point populations in R^d.

Two finite point sets, *vertices* V (n, d) and *witnesses* W (m, d), float64, in the units of
the coordinates. The Dowker complex of the relation "w is within t of v" has a simplex for
every set of vertices that one witness sees all of; as t grows it gives the filtration

    value(sigma) = min over witnesses w of max over v in sigma of |v - w|

(Euclidean), counting only witnesses within ``max_radius`` of every vertex of sigma: a simplex
no witness sees that closely never enters, and a vertex enters at its distance to the nearest
witness. Value convention ``witness_radius``: a value is the radius of the smallest ball
around one witness that holds the whole simplex, in the units of the coordinates (not a
diameter, unlike Rips edge lengths).

Duality (Dowker 1952, "Homology groups of relations"; functorially in t, Chowdhury & Memoli
2018, "A functorial Dowker theorem and persistent homology of asymmetric networks"): the
complex on V witnessed by W and the one on W witnessed by V have equal diagrams in every
dimension. So either population may play the vertices; ``side`` says which, and by default
the side with fewer candidate simplices is computed (counted from the neighbour counts as in
``dowker_size``). ``DowkerDiagrams.side_used`` reports it.

Construction, vectorised with numpy: the witness-vertex pairs within ``max_radius`` come from
``scipy.spatial.cKDTree.sparse_distance_matrix``; their distances are recomputed as
sqrt(sum over coordinates of the squared differences), in coordinate order, so the values are
exactly that formula. Witnesses with k neighbours are handled together: every j-subset of
their neighbours (indices in increasing vertex order) is a candidate j-simplex at the value of
its farthest member; candidates are encoded as int64 keys and reduced to the minimum per
simplex (sort + ``np.minimum.reduceat``), chunk by chunk so memory stays near the number of
distinct simplices. For diagrams up to dimension k the simplices up to dimension k + 1 are
built; gudhi's SimplexTree (``insert_batch``, one call per dimension, float64 values) computes
the persistence with Z/2 coefficients.

Diagrams: one (p, 2) float64 array of (birth, death) per dimension 0..max_dim, sorted by
(birth, death), zero-length pairs removed, ``np.inf`` for classes alive at ``max_radius``.
"""

import math
from dataclasses import dataclass
from typing import Literal

import gudhi
import numpy as np
from scipy.spatial import cKDTree

from workers.core.diagrams import drop_empty_bars, sort_pairs
from workers.core.errors import InvalidArrayError, ParameterError

__all__ = ["DowkerDiagrams", "MAX_DIM", "Side", "dowker_diagrams", "dowker_size"]

MAX_DIM = 2
"""Highest homology dimension: H2 needs tetrahedra, already the costliest part."""

CHUNK_ROWS = 1 << 21
"""Candidate simplices generated at once before reducing them to one row per simplex."""

QUERY_SLACK = 1e-9
"""Relative slack on the tree query; pairs are then kept by their recomputed distance."""

Side = Literal["vertices", "witnesses", "smaller"]
"""Which population plays the vertices: as given, swapped, or the one with fewer candidates."""


@dataclass(frozen=True)
class DowkerDiagrams:
    """Diagrams of a Dowker filtration and which population played the vertices.

    ``diagrams``: max_dim + 1 arrays (p, 2) float64, values in ``witness_radius`` convention.
    ``side_used``: ``"vertices"`` if the given vertices were the vertices, ``"witnesses"`` if
    the roles were swapped (same diagrams by Dowker duality).
    ``simplex_count``: simplices of the filtered complex built (dimensions 0..max_dim + 1).
    """

    diagrams: list[np.ndarray]
    side_used: Literal["vertices", "witnesses"]
    simplex_count: int


@dataclass(frozen=True)
class _Pairs:
    """Witness-vertex pairs within the radius, grouped by witness, vertices ascending."""

    vertex: np.ndarray  # (q,) int64 vertex index
    distance: np.ndarray  # (q,) float64
    starts: np.ndarray  # (m,) int64 first pair of each witness
    counts: np.ndarray  # (m,) int64 pairs of each witness
    vertex_count: int


def _checked_points(points: np.ndarray, field: str) -> np.ndarray:
    points = np.asarray(points, dtype=np.float64)
    if points.ndim != 2 or points.shape[0] < 1 or points.shape[1] < 1:
        raise InvalidArrayError(f"{field[1:]} must be a non-empty (n, d) array", field=field)
    if not np.isfinite(points).all():
        raise InvalidArrayError(f"{field[1:]} must be finite", field=field)
    return points


def _checked(
    vertices: np.ndarray, witnesses: np.ndarray, max_dim: int, max_radius: float, side: str
) -> tuple[np.ndarray, np.ndarray]:
    vertices = _checked_points(vertices, "/vertices")
    witnesses = _checked_points(witnesses, "/witnesses")
    if witnesses.shape[1] != vertices.shape[1]:
        raise InvalidArrayError(
            "witnesses must have the dimension of the vertices", field="/witnesses"
        )
    if not 0 <= max_dim <= MAX_DIM:
        raise ParameterError(f"max_dim must be in 0..{MAX_DIM}", field="/max_dim")
    if not (math.isfinite(max_radius) and max_radius > 0):
        raise ParameterError("max_radius must be finite and > 0", field="/max_radius")
    if side not in ("vertices", "witnesses", "smaller"):
        raise ParameterError("side must be vertices, witnesses or smaller", field="/side")
    return vertices, witnesses


def _distances(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise Euclidean distance: sqrt of the squared differences summed in coordinate order."""
    distance: np.ndarray = np.sqrt(np.sum((a - b) ** 2, axis=1))
    return distance


def _near_pairs(
    vertices: np.ndarray, witnesses: np.ndarray, max_radius: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(witness index, vertex index, distance) of every pair within ``max_radius``."""
    found = cKDTree(witnesses).sparse_distance_matrix(
        cKDTree(vertices), max_radius * (1 + QUERY_SLACK), output_type="ndarray"
    )
    witness = found["i"].astype(np.int64)
    vertex = found["j"].astype(np.int64)
    distance = _distances(witnesses[witness], vertices[vertex])
    kept = distance <= max_radius
    return witness[kept], vertex[kept], distance[kept]


def _grouped(
    witness: np.ndarray, vertex: np.ndarray, distance: np.ndarray, m: int, n: int
) -> _Pairs:
    order = np.lexsort((vertex, witness))
    counts = np.bincount(witness, minlength=m).astype(np.int64)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    return _Pairs(vertex[order], distance[order], starts, counts, n)


def _candidate_count(counts: np.ndarray, largest: int) -> int:
    """Sum over witnesses of C(k_w, j), j = 1..largest: every candidate simplex, repeats too."""
    sizes, how_many = np.unique(counts, return_counts=True)
    return sum(
        int(c) * math.comb(int(k), j)
        for k, c in zip(sizes, how_many, strict=True)
        for j in range(1, largest + 1)
    )


def _counts_both_sides(
    vertices: np.ndarray, witnesses: np.ndarray, max_dim: int, max_radius: float
) -> tuple[tuple[np.ndarray, np.ndarray, np.ndarray], int, int]:
    """The near pairs, and the candidate counts with V as vertices and with W as vertices."""
    pairs = _near_pairs(vertices, witnesses, max_radius)
    witness, vertex, _ = pairs
    largest = max_dim + 2
    as_given = _candidate_count(np.bincount(witness, minlength=len(witnesses)), largest)
    swapped = _candidate_count(np.bincount(vertex, minlength=len(vertices)), largest)
    return pairs, as_given, swapped


def dowker_size(
    vertices: np.ndarray,
    witnesses: np.ndarray,
    *,
    max_dim: int,
    max_radius: float,
    side: Side = "smaller",
) -> int:
    """Upper bound on the simplices ``dowker_diagrams`` builds, without building them.

    The sum over witnesses w of C(k_w, j) for j = 1..max_dim + 2, k_w the number of vertices
    within ``max_radius`` of w: every simplex is a subset of some witness's neighbours, so
    this counts each at least once (it is the work of the construction, repeats included).
    With ``side="smaller"`` the smaller of the two sides' counts. Arguments as in
    ``dowker_diagrams``; a Python int, exact however large.
    """
    vertices, witnesses = _checked(vertices, witnesses, max_dim, max_radius, side)
    _, as_given, swapped = _counts_both_sides(vertices, witnesses, max_dim, max_radius)
    if side == "vertices":
        return as_given
    if side == "witnesses":
        return swapped
    return min(as_given, swapped)


def _combinations(k: int, j: int) -> np.ndarray:
    """(C(k, j), j) int64: every increasing j-tuple of 0..k-1, in lexicographic order."""
    if j == 1:
        return np.arange(k, dtype=np.int64)[:, np.newaxis]
    rows = []
    for first in range(k - j + 1):
        rest = _combinations(k - first - 1, j - 1) + (first + 1)
        rows.append(np.column_stack([np.full(len(rest), first, dtype=np.int64), rest]))
    return np.concatenate(rows) if rows else np.empty((0, j), dtype=np.int64)


def _keys(rows: np.ndarray, n: int) -> list[np.ndarray]:
    """int64 keys of the rows (entries in 0..n-1), most significant first, in base n: as many
    columns per key as fit in 63 bits, so one key for every case of the module but huge n."""
    per_key = max(1, int(63 // math.log2(max(n, 2))))
    while per_key > 1 and n**per_key >= 2**63:
        per_key -= 1
    keys = []
    for start in range(0, rows.shape[1], per_key):
        key = np.zeros(len(rows), dtype=np.int64)
        for column in range(start, min(start + per_key, rows.shape[1])):
            key = key * n + rows[:, column]
        keys.append(key)
    return keys


def _least(rows: np.ndarray, values: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """One row per distinct simplex with the least of its values."""
    if len(rows) == 0:
        return rows, values
    keys = _keys(rows, n)
    order = np.argsort(keys[0]) if len(keys) == 1 else np.lexsort(keys[::-1])
    change = np.zeros(len(rows), dtype=bool)
    change[0] = True
    for key in keys:
        sorted_key = key[order]
        change[1:] |= sorted_key[1:] != sorted_key[:-1]
    starts = np.flatnonzero(change)
    return rows[order[starts]], np.minimum.reduceat(values[order], starts)


def _simplices(pairs: _Pairs, j: int) -> tuple[np.ndarray, np.ndarray]:
    """Every (j-1)-simplex some witness sees, (s, j) int64 ascending, and its value (s,)."""
    found_rows, found_values = [], []
    for k in np.unique(pairs.counts[pairs.counts >= j]):
        k = int(k)
        combos = _combinations(k, j)
        starts = pairs.starts[pairs.counts == k]
        witnesses_at_once = max(1, CHUNK_ROWS // len(combos))
        combos_at_once = max(1, CHUNK_ROWS // witnesses_at_once)
        for first in range(0, len(starts), witnesses_at_once):
            members = starts[first : first + witnesses_at_once, np.newaxis] + np.arange(k)
            for low in range(0, len(combos), combos_at_once):
                chosen = members[:, combos[low : low + combos_at_once]]  # (g, c, j)
                rows = pairs.vertex[chosen].reshape(-1, j)
                values = pairs.distance[chosen].max(axis=2).reshape(-1)
                rows, values = _least(rows, values, pairs.vertex_count)
                found_rows.append(rows)
                found_values.append(values)
    if not found_rows:
        return np.empty((0, j), dtype=np.int64), np.empty(0)
    if len(found_rows) == 1:
        return found_rows[0], found_values[0]
    return _least(np.concatenate(found_rows), np.concatenate(found_values), pairs.vertex_count)


def _diagrams(tree: gudhi.SimplexTree, max_dim: int) -> list[np.ndarray]:
    # The top dimension of a complex is skipped unless asked for; it is needed only when the
    # complex has no simplex above max_dim (e.g. no triangle: H1 of a graph).
    tree.compute_persistence(
        homology_coeff_field=2, min_persistence=0, persistence_dim_max=tree.dimension() <= max_dim
    )
    return [
        sort_pairs(drop_empty_bars(np.asarray(tree.persistence_intervals_in_dimension(k))))
        for k in range(max_dim + 1)
    ]


def dowker_diagrams(
    vertices: np.ndarray,
    witnesses: np.ndarray,
    *,
    max_dim: int,
    max_radius: float,
    side: Side = "smaller",
) -> DowkerDiagrams:
    """Persistence diagrams of the Dowker filtration of ``vertices`` witnessed by ``witnesses``.

    vertices: (n, d) float64, finite, n >= 1. witnesses: (m, d) float64, finite, m >= 1, the
        same d. Coordinates in any unit; values come out in the same unit.
    max_dim: diagrams for dimensions 0..max_dim (at most ``MAX_DIM``).
    max_radius: > 0, finite; the filtration stops there (classes alive get death inf).
    side: which population plays the vertices (module doc); the diagrams do not depend on it.
    Returns ``DowkerDiagrams``: max_dim + 1 arrays (p, 2), sorted by (birth, death),
        zero-length pairs removed, ``np.inf`` for deaths beyond ``max_radius``.
    """
    vertices, witnesses = _checked(vertices, witnesses, max_dim, max_radius, side)
    (witness, vertex, distance), as_given, swapped = _counts_both_sides(
        vertices, witnesses, max_dim, max_radius
    )
    side_used: Literal["vertices", "witnesses"]
    if side == "witnesses" or (side == "smaller" and swapped < as_given):
        side_used = "witnesses"
        pairs = _grouped(vertex, witness, distance, len(vertices), len(witnesses))
    else:
        side_used = "vertices"
        pairs = _grouped(witness, vertex, distance, len(witnesses), len(vertices))
    tree = gudhi.SimplexTree()
    count = 0
    for j in range(1, max_dim + 3):  # faces first: each is in already, at a value no larger
        rows, values = _simplices(pairs, j)
        if len(rows):
            tree.insert_batch(np.ascontiguousarray(rows.T), values)
        count += len(rows)
    return DowkerDiagrams(_diagrams(tree, max_dim), side_used, count)
