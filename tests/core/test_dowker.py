"""Dowker diagrams against duality, an independent construction, Cech persistence and hand cases."""

import itertools
import math

import gudhi
import numpy as np
import pytest

from workers.core import dowker
from workers.core.dowker import dowker_diagrams, dowker_size
from workers.core.errors import CoreError, InvalidArrayError, ParameterError


def same_diagrams(ours: list[np.ndarray], theirs: list[np.ndarray]) -> bool:
    """Exact equality, dimension by dimension (both sorted by (birth, death))."""
    return len(ours) == len(theirs) and all(
        a.shape == b.shape and np.array_equal(a, b) for a, b in zip(ours, theirs, strict=True)
    )


def brute_force_tree(
    vertices: np.ndarray, witnesses: np.ndarray, max_dim: int, max_radius: float
) -> gudhi.SimplexTree:
    """The filtration straight from its formula: every vertex subset up to max_dim + 2
    vertices, min over witnesses within max_radius of the max member distance, one insert each
    (faces first, so each keeps its own value). No tree search, no vectorised grouping."""
    # |v - w| as the formula reads: sqrt of the squared coordinate differences, summed.
    distance = np.array([np.sqrt(np.sum((vertices - w) ** 2, axis=1)) for w in witnesses])
    tree = gudhi.SimplexTree()
    for size in range(1, max_dim + 3):
        for simplex in itertools.combinations(range(len(vertices)), size):
            candidates = distance[:, list(simplex)].max(axis=1)
            candidates = candidates[candidates <= max_radius]
            if candidates.size:
                tree.insert(list(simplex), float(candidates.min()))
    return tree


def tree_diagrams(tree: gudhi.SimplexTree, max_dim: int) -> list[np.ndarray]:
    tree.compute_persistence(
        homology_coeff_field=2, min_persistence=0, persistence_dim_max=tree.dimension() <= max_dim
    )
    diagrams = []
    for k in range(max_dim + 1):
        pairs = np.asarray(tree.persistence_intervals_in_dimension(k)).reshape(-1, 2)
        pairs = pairs[pairs[:, 1] > pairs[:, 0]]
        diagrams.append(pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))])
    return diagrams


def labelled_cloud(seed: int, d: int, n: int, m: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    return rng.uniform(size=(n, d)), rng.uniform(size=(m, d))


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
@pytest.mark.parametrize(("d", "max_radius"), [(2, 0.25), (3, 0.4)])
def test_duality_swapping_roles_keeps_every_diagram(seed: int, d: int, max_radius: float) -> None:
    # Dowker 1952 ("Homology groups of relations") and, filtered, Chowdhury & Memoli 2018
    # ("A functorial Dowker theorem and persistent homology of asymmetric networks"): the
    # complex on V witnessed by W and the one on W witnessed by V have equal diagrams.
    vertices, witnesses = labelled_cloud(seed, d, 70, 45)
    as_given = dowker_diagrams(
        vertices, witnesses, max_dim=2, max_radius=max_radius, side="vertices"
    )
    swapped = dowker_diagrams(
        vertices, witnesses, max_dim=2, max_radius=max_radius, side="witnesses"
    )
    assert (as_given.side_used, swapped.side_used) == ("vertices", "witnesses")
    assert same_diagrams(as_given.diagrams, swapped.diagrams)
    # and the check has something to compare: loops, and more than one component
    assert len(as_given.diagrams[0]) > 1 and len(as_given.diagrams[1]) > 0
    # the same pair, given the other way round, is the same computation
    mirrored = dowker_diagrams(
        witnesses, vertices, max_dim=2, max_radius=max_radius, side="vertices"
    )
    assert same_diagrams(mirrored.diagrams, as_given.diagrams)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize(("d", "max_radius"), [(2, 0.4), (3, 0.55)])
@pytest.mark.parametrize("max_dim", [0, 1, 2])
def test_same_complex_as_the_formula_inserted_one_simplex_at_a_time(
    seed: int, d: int, max_radius: float, max_dim: int
) -> None:
    # Independent engine: the brute-force construction above (itertools, the formula per
    # witness) in gudhi's SimplexTree; same float64 values, so exact equality.
    vertices, witnesses = labelled_cloud(seed, d, 14, 10)
    for side in ("vertices", "witnesses"):
        ours = dowker_diagrams(
            vertices, witnesses, max_dim=max_dim, max_radius=max_radius, side=side
        )
        v, w = (vertices, witnesses) if side == "vertices" else (witnesses, vertices)
        tree = brute_force_tree(v, w, max_dim, max_radius)
        assert ours.simplex_count == tree.num_simplices()
        assert same_diagrams(ours.diagrams, tree_diagrams(tree, max_dim))


def test_the_formula_comparison_catches_a_value_one_ulp_off() -> None:
    # Meta-test: the exact comparison above fails when one value of the reference moves by
    # one float64 step (the earliest vertex, whose entry is the birth of a class).
    vertices, witnesses = labelled_cloud(5, 2, 14, 10)
    ours = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=0.4).diagrams
    tree = brute_force_tree(vertices, witnesses, 1, 0.4)
    assert same_diagrams(ours, tree_diagrams(tree.copy(), 1))
    earliest = min((s for s, _ in tree.get_skeleton(0)), key=lambda s: tree.filtration(s))
    tree.assign_filtration(earliest, float(np.nextafter(tree.filtration(earliest), np.inf)))
    assert not same_diagrams(ours, tree_diagrams(tree, 1))


def test_chunked_reduction_gives_the_same_complex(monkeypatch: pytest.MonkeyPatch) -> None:
    # Candidates generated a few at a time, reduced per chunk then merged: same answer.
    vertices, witnesses = labelled_cloud(7, 2, 60, 40)
    whole = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=0.3, side="vertices")
    monkeypatch.setattr(dowker, "CHUNK_ROWS", 7)
    chunked = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=0.3, side="vertices")
    assert chunked.simplex_count == whole.simplex_count
    assert same_diagrams(chunked.diagrams, whole.diagrams)


def test_vertex_numbers_too_large_for_one_key() -> None:
    # 4-vertex simplices of 60 000 vertices overflow a single base-n int64 key (60000^4 >
    # 2^63): the keys split. The far vertices change nothing but the numbering.
    vertices, witnesses = labelled_cloud(8, 3, 14, 10)
    far = np.full((60_000 - len(vertices), 3), 100.0) + np.arange(60_000 - len(vertices))[:, None]
    padded = np.concatenate([far, vertices])
    few = dowker_diagrams(vertices, witnesses, max_dim=2, max_radius=0.55, side="vertices")
    many = dowker_diagrams(padded, witnesses, max_dim=2, max_radius=0.55, side="vertices")
    assert many.simplex_count == few.simplex_count
    assert same_diagrams(many.diagrams, few.diagrams)


@pytest.mark.parametrize(("d", "n", "spacing"), [(2, 20, 0.05), (3, 12, 0.1)])
def test_dense_witnesses_approach_cech_persistence(d: int, n: int, spacing: float) -> None:
    # Geometry (common practice). Cech value of sigma: radius of its smallest enclosing ball,
    # min over all x in R^d of max |v - x|, so Dowker values (x restricted to witnesses) are
    # never below it. The ball's centre lies in the convex hull of sigma, inside the grid's
    # box, so some grid witness is within spacing * sqrt(d) / 2 of it: Dowker <= Cech +
    # spacing * sqrt(d) / 2 on every simplex. Two filtrations of the same complex that close
    # have diagrams within that bottleneck distance (Cohen-Steiner, Edelsbrunner & Harer 2007,
    # "Stability of persistence diagrams"). The alpha filtration has the Cech diagrams
    # (Edelsbrunner & Harer, "Computational topology", III.4); gudhi gives squared radii.
    rng = np.random.default_rng(11)
    vertices = rng.uniform(size=(n, d))
    low, high = vertices.min(axis=0), vertices.max(axis=0)
    axes = [np.arange(lo, hi + spacing, spacing) for lo, hi in zip(low, high, strict=True)]
    witnesses = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, d)
    reach = 2 * math.sqrt(d)  # beyond every distance in the box: the filtration is whole
    ours = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=reach).diagrams
    alpha = gudhi.AlphaComplex(points=vertices).create_simplex_tree()
    alpha.compute_persistence()
    bound = spacing * math.sqrt(d) / 2
    for k in (0, 1):
        cech = np.sqrt(np.asarray(alpha.persistence_intervals_in_dimension(k)).reshape(-1, 2))
        assert len(cech[np.isfinite(cech[:, 1])]) > 0  # the bound is tested on real pairs
        assert gudhi.bottleneck_distance(ours[k], cech) <= bound * (1 + 1e-9)


def test_two_vertices_and_a_witness_midway_enter_together() -> None:
    # By hand: each vertex is 1 from the witness, so both vertices and the edge enter at 1,
    # half their distance; one component from then on, nothing dies.
    vertices = np.array([[0.0, 0.0], [2.0, 0.0]])
    witness = np.array([[1.0, 0.0]])
    found = dowker_diagrams(vertices, witness, max_dim=1, max_radius=5.0, side="vertices")
    assert same_diagrams(found.diagrams, [np.array([[1.0, np.inf]]), np.empty((0, 2))])
    assert found.simplex_count == 3


def test_a_witness_beyond_max_radius_connects_nothing() -> None:
    # By hand: the far witness is 10 from both vertices; with max_radius 3 only the near
    # witness (1 from vertex 0, 1.5 from vertex 1) counts; with 0.5 nothing enters.
    vertices = np.array([[0.0, 0.0], [2.5, 0.0]])
    witnesses = np.array([[1.0, 0.0], [1.25, 10.0 + 0.078125]])
    found = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=3.0).diagrams
    assert same_diagrams(found, [np.array([[1.0, np.inf]]), np.empty((0, 2))])
    alone = dowker_diagrams(vertices, witnesses[1:], max_dim=1, max_radius=3.0)
    assert alone.simplex_count == 0
    assert same_diagrams(alone.diagrams, [np.empty((0, 2))] * 2)
    nothing = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=0.5)
    assert nothing.simplex_count == 0


@pytest.mark.parametrize(
    ("centre", "death"),
    [(False, 2 * math.sin(3 * math.pi / 8)), (True, 1.0)],
)
def test_ring_of_four_with_witnesses_on_the_ring(centre: bool, death: float) -> None:
    # By hand: vertices at angles 0, 90, 180, 270 on the unit circle, witnesses at 45, 135,
    # 225, 315. A witness is 2 sin(pi/8) from its two neighbours and 2 sin(3 pi/8) from the
    # other two, so every vertex and the four sides enter at 2 sin(pi/8) (one loop is born)
    # and the diagonals, with the whole tetrahedron, at 2 sin(3 pi/8) (it dies). A witness at
    # the centre sees all four at 1 and kills the loop there instead.
    s = math.sqrt(0.5)  # exact symmetry of the coordinates: all eight distances equal
    vertices = np.array([[1.0, 0.0], [0.0, 1.0], [-1.0, 0.0], [0.0, -1.0]])
    witnesses = np.array([[s, s], [-s, s], [-s, -s], [s, -s]] + ([[0.0, 0.0]] if centre else []))
    h0, h1 = dowker_diagrams(vertices, witnesses, max_dim=1, max_radius=3.0).diagrams
    birth = 2 * math.sin(math.pi / 8)
    assert h0.shape == (1, 2) and h0[0, 0] == pytest.approx(birth) and h0[0, 1] == np.inf
    assert h1.shape == (1, 2)
    assert h1[0] == pytest.approx([birth, death])


def test_size_counts_the_candidates_of_each_side() -> None:
    # By hand: one witness sees ten vertices: C(10,1) + C(10,2) + C(10,3) = 175 candidates up
    # to triangles; swapped, each of ten witnesses sees one vertex: 10. The smaller side runs.
    angles = np.linspace(0, 2 * np.pi, 10, endpoint=False)
    vertices = np.column_stack([np.cos(angles), np.sin(angles)])
    witness = np.zeros((1, 2))
    kwargs = {"max_dim": 1, "max_radius": 1.5}
    assert dowker_size(vertices, witness, side="vertices", **kwargs) == 175
    assert dowker_size(vertices, witness, side="witnesses", **kwargs) == 10
    assert dowker_size(vertices, witness, **kwargs) == 10
    found = dowker_diagrams(vertices, witness, **kwargs)
    assert found.side_used == "witnesses"
    assert found.simplex_count <= 10
    # every simplex is somewhere among the candidates: the count bounds the complex
    for side in ("vertices", "witnesses"):
        cloud = labelled_cloud(3, 2, 50, 30)
        built = dowker_diagrams(*cloud, max_dim=2, max_radius=0.3, side=side)
        assert built.simplex_count <= dowker_size(*cloud, max_dim=2, max_radius=0.3, side=side)


@pytest.mark.parametrize(
    ("change", "error", "field"),
    [
        ({"max_radius": 0.0}, ParameterError, "/max_radius"),
        ({"max_radius": -1.0}, ParameterError, "/max_radius"),
        ({"max_radius": math.nan}, ParameterError, "/max_radius"),
        ({"max_radius": math.inf}, ParameterError, "/max_radius"),
        ({"max_dim": 3}, ParameterError, "/max_dim"),
        ({"max_dim": -1}, ParameterError, "/max_dim"),
        ({"side": "both"}, ParameterError, "/side"),
        ({"vertices": np.array([[0.0, math.nan]])}, InvalidArrayError, "/vertices"),
        ({"witnesses": np.array([[math.inf, 0.0]])}, InvalidArrayError, "/witnesses"),
        ({"vertices": np.empty((0, 2))}, InvalidArrayError, "/vertices"),
        ({"witnesses": np.empty((0, 2))}, InvalidArrayError, "/witnesses"),
        ({"witnesses": np.zeros((3, 3))}, InvalidArrayError, "/witnesses"),
    ],
)
def test_bad_arguments_name_their_field(
    change: dict[str, object], error: type[CoreError], field: str
) -> None:
    arguments: dict[str, object] = {
        "vertices": np.zeros((2, 2)),
        "witnesses": np.ones((2, 2)),
        "max_dim": 1,
        "max_radius": 1.0,
        "side": "smaller",
    } | change
    for function in (dowker_diagrams, dowker_size):
        with pytest.raises(error) as raised:
            function(**arguments)
        assert raised.value.field == field
