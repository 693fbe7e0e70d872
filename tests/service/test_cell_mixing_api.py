"""Cross-population descriptors of labelled points through the API (output "descriptors"):
equal to a brute-force scipy cdist computation, ordered as the demo layouts are named, and
bad radii a 422 naming the field."""

import math
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient
from scipy.spatial.distance import cdist

from tests.support.api import JOBS, post, refused, result_of
from tests.support.bodies import labelled_job
from workers.scenario.cells import CELL_AREA, CLASS_NAMES, two_population_layout

RADII = [0.5, 1.0, 2.0]


def three_classes() -> tuple[np.ndarray, list[str]]:
    rng = np.random.default_rng(11)
    points = rng.uniform(0, 5, size=(40, 2))
    labels = [("a", "b", "c")[i % 3] for i in range(40)]
    return points, labels


def mixing_body(
    points: np.ndarray, labels: list[str], radii: Any = RADII, **extra: Any
) -> dict[str, Any]:
    body = labelled_job(points, labels, {})
    del body["filtration"]
    return {**body, "output": ["descriptors"], "descriptors": {"radii": radii}, **extra}


def test_descriptors_equal_a_brute_force_cdist(served_client: FlaskClient) -> None:
    points, labels = three_classes()
    result = result_of(served_client, mixing_body(points, labels))
    assert result["diagrams"] == []
    assert result["cell_mixing"]["radii"] == RADII
    assert {p["name"]: p["count"] for p in result["populations"]} == {"a": 14, "b": 13, "c": 13}
    found = {(p["source"], p["target"]): p for p in result["cell_mixing"]["pairs"]}
    assert len(found) == 6
    names = np.array(labels)
    for (source, target), pair in found.items():
        # Reference: every source-target distance by scipy's cdist, the least per source;
        # quartiles as numpy.percentile's default (linear interpolation).
        nearest = cdist(points[names == source], points[names == target]).min(axis=1)
        quartiles = np.percentile(nearest, [25, 50, 75])
        assert pair["first_quartile"] == pytest.approx(quartiles[0], abs=1e-12)
        assert pair["median"] == pytest.approx(quartiles[1], abs=1e-12)
        assert pair["third_quartile"] == pytest.approx(quartiles[2], abs=1e-12)
        assert pair["mean"] == pytest.approx(nearest.mean(), abs=1e-12)
        assert pair["fraction_within"] == [np.mean(nearest <= r) for r in RADII]


def test_descriptors_with_dowker_diagrams(served_client: FlaskClient) -> None:
    points, labels = three_classes()
    body = mixing_body(points, labels, output=["diagrams", "descriptors"])
    body["filtration"] = {"type": "dowker", "vertices": "a", "witnesses": "b", "max_radius": 2}
    result = result_of(served_client, body)
    assert result["value_convention"] == "witness_radius"
    assert len(result["diagrams"]) == 2
    assert len(result["cell_mixing"]["pairs"]) == 6
    assert [p["computed"] for p in result["populations"]] == [True, True, False]


def test_the_demo_layouts_order_as_named(served_client: FlaskClient) -> None:
    # Immune cells are interspersed (mixed), around the tumour (ringed) or kept beyond a
    # boundary (excluded): the fraction of immune cells within two cell spacings of a tumour
    # cell orders the same way (the layouts' definition, workers/scenario/cells.py).
    two_spacings = 2 * math.sqrt(CELL_AREA)
    fraction = {}
    for kind in ("mixed", "excluded", "ringed"):
        points, codes = two_population_layout(kind, 400, 100, 0.05, seed=2)
        labels = [CLASS_NAMES[code] for code in codes.tolist()]
        result = result_of(served_client, mixing_body(points, labels, radii=[two_spacings]))
        pairs = {(p["source"], p["target"]): p for p in result["cell_mixing"]["pairs"]}
        fraction[kind] = pairs[("immune", "tumour")]["fraction_within"][0]
    assert fraction["mixed"] > fraction["ringed"] > fraction["excluded"]


@pytest.mark.parametrize(
    ("radii", "pointer", "hint"),
    [
        ([1.0, 1.0], "/descriptors/radii/1", "increase"),
        ([2.0, 1.0], "/descriptors/radii/1", "increase"),
        ([0.0, 1.0], "/descriptors/radii/0", "greater than 0"),
        ([-1.0], "/descriptors/radii/0", "greater than 0"),
        ([], "/descriptors/radii", "at least 1"),
        (None, "/descriptors/radii", "need radii"),
    ],
)
def test_bad_radii_name_the_field(client: FlaskClient, radii: Any, pointer: str, hint: str) -> None:
    points, labels = three_classes()
    refused(post(client, JOBS, mixing_body(points, labels, radii=radii)), [pointer], hint)


def test_descriptors_need_two_classes_and_no_graph_options(client: FlaskClient) -> None:
    points, labels = three_classes()
    refused(post(client, JOBS, mixing_body(points, ["a"] * 40)), ["/output"], "two")
    body = mixing_body(points, labels)
    body["descriptors"]["direction"] = [0, 1]
    refused(post(client, JOBS, body), ["/descriptors/direction"], "graph")
    body = mixing_body(points, labels, output=["graph"])
    del body["descriptors"]
    refused(post(client, JOBS, body), ["/output"], "graph")
    body = mixing_body(points, labels, output=["diagrams", "descriptors"])
    refused(post(client, JOBS, body), ["/filtration"], "rips")


def test_radii_on_a_graph_are_refused(client: FlaskClient) -> None:
    body = {
        "input": {"type": "graph", "nodes": [[0, 0], [1, 0]], "edges": [[0, 1]]},
        "output": ["descriptors"],
        "descriptors": {"radii": [1.0]},
    }
    refused(post(client, JOBS, body), ["/descriptors/radii"], "labelled points")
