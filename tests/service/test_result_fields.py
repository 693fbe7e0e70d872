"""What every result says about itself: one small job per filtration through the app and its
worker, checked against /v1/capabilities (the value conventions, the length unit and the
engine of each filtration) and against importlib.metadata (every version provenance names).

Requests go through ``call`` (tests/support/api.py), so no answer may be a 500.
"""

from importlib.metadata import PackageNotFoundError, version
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient

from tests.support.api import call, post, result_of
from tests.support.synthetic import ring_mask

SQUARE_NODES = [[0.0, 0.0], [10.0, 0.0], [10.0, 10.0], [0.0, 10.0], [20.0, 0.0]]
SQUARE_EDGES = [[0, 1], [1, 2], [2, 3], [3, 0], [1, 4]]
RING = ring_mask((16, 16), (7.5, 7.5), 3.0, 6.0).astype(int).tolist()
IMAGE = np.random.default_rng(1).uniform(0, 100, (6, 7)).round(2).tolist()


def graph(**filtration: Any) -> dict[str, Any]:
    return {
        "input": {
            "type": "graph",
            "nodes": SQUARE_NODES,
            "edges": SQUARE_EDGES,
            "spacing": [0.5, 2.0],
            "units": "mm",
        },
        "filtration": filtration,
    }


def mask(spacing: list[float] | None, **filtration: Any) -> dict[str, Any]:
    given: dict[str, Any] = {"type": "mask", "values": RING}
    if spacing is not None:
        given |= {"spacing": spacing, "units": "um"}
    return {"input": given, "filtration": filtration}


def image(direction: str) -> dict[str, Any]:
    given = {"type": "image", "values": IMAGE, "spacing": [0.25, 0.5], "units": "um"}
    return {"input": given, "filtration": {"type": "cubical", "direction": direction}}


POINTS = {
    "input": {"type": "points", "units": "um", "points": [[0, 0], [1, 0], [0, 1], [1, 1]]},
    "filtration": {"type": "rips", "max_dim": 1},
}

DOWKER = {
    "input": {
        "type": "labelled_points",
        "units": "um",
        "points": [[0, 0], [1, 0], [0, 1], [1, 1], [0.5, 0.5], [2, 2]],
        "labels": ["a", "a", "a", "a", "b", "b"],
    },
    "filtration": {"type": "dowker", "vertices": "a", "witnesses": "b", "max_radius": 3},
}

# (name, request, expected coordinate_units, expected spacing)
JOBS = [
    ("rips", POINTS, "um", None),
    ("dowker", DOWKER, "um", None),
    ("cubical-sublevel", image("sublevel"), "um", [0.25, 0.5]),
    ("cubical-superlevel", image("superlevel"), "um", [0.25, 0.5]),
    ("distance", mask([0.5, 0.5], type="distance"), "um", [0.5, 0.5]),
    ("height-mask-in-pixels", mask(None, type="height", direction=[1, 0]), "pixel", None),
    ("radial-mask", mask([2.0, 1.0], type="radial", center=[7.5, 7.5]), "um", [2.0, 1.0]),
    ("height-graph", graph(type="height", direction=[0, 1]), "mm", [0.5, 2.0]),
    ("radial-graph", graph(type="radial", center=[0, 0]), "mm", [0.5, 2.0]),
    ("geodesic", graph(type="geodesic", seeds=[0]), "mm", [0.5, 2.0]),
    ("attribute", graph(type="attribute", values=[5, 4, 3, 2, 1]), "mm", [0.5, 2.0]),
    (
        "geodesic-skeleton",
        {
            "input": {"type": "mask", "values": RING, "skeletonize": True},
            "filtration": {"type": "geodesic", "seeds": [0]},
        },
        "pixel",
        None,
    ),
]


@pytest.fixture
def client(served_client: FlaskClient) -> FlaskClient:
    """Every test of this module may run jobs: the module's app and worker (conftest)."""
    return served_client


@pytest.fixture
def filtrations(client: FlaskClient) -> dict[str, dict[str, Any]]:
    answer = call(client, "GET", "/v1/capabilities").get_json()
    return {entry["type"]: entry for entry in answer["filtrations"]}


def assert_installed_versions(versions: dict[str, str]) -> None:
    """Every key is an installed distribution, at the version importlib.metadata reads."""
    for name, found in versions.items():
        try:
            assert version(name) == found, name
        except PackageNotFoundError:
            pytest.fail(f"{name!r} is not an installed distribution")


@pytest.mark.parametrize(
    ("body", "coordinate_units", "spacing"),
    [pytest.param(body, units, spacing, id=name) for name, body, units, spacing in JOBS],
)
def test_each_filtration_says_what_its_values_and_coordinates_are(
    client: FlaskClient,
    filtrations: dict[str, dict[str, Any]],
    body: dict[str, Any],
    coordinate_units: str,
    spacing: list[float] | None,
) -> None:
    result = result_of(client, body)
    entry = filtrations[body["filtration"]["type"]]
    skeleton = body["input"].get("skeletonize", False)  # a mask's skeleton is a graph
    assert ("graph" if skeleton else body["input"]["type"]) in entry["inputs"]
    assert result["value_convention"] in entry["value_conventions"]
    assert result["coordinate_units"] == coordinate_units
    assert result["spacing"] == spacing
    # Lengths carry the coordinates' unit; pixel and node values have none.
    assert result["units"] == (coordinate_units if entry["values_are_lengths"] else None)
    provenance = result["provenance"]
    assert provenance["engine"] in entry["engines"]
    assert_installed_versions(provenance["versions"])
    assert provenance["engine"] not in provenance["versions"]  # our name, no distribution's
    assert {"lacuna", "numpy", "scipy"} <= set(provenance["versions"])


def test_the_jobs_above_cover_every_filtration(filtrations: dict[str, dict[str, Any]]) -> None:
    assert {body["filtration"]["type"] for _, body, _, _ in JOBS} == set(filtrations)
    conventions = {
        convention for entry in filtrations.values() for convention in entry["value_conventions"]
    }
    assert len(conventions) == 9  # each convention belongs to a filtration


def test_each_engine_names_the_distributions_it_ran_on(client: FlaskClient) -> None:
    # Rips reduces with gudhi's float64 Ripser and Dowker with gudhi's SimplexTree (named in
    # versions, not in the engine); a skeleton graph comes from scikit-image; cubical and
    # graph persistence are lacuna's own C, on numpy and scipy only.
    rips = result_of(client, POINTS)["provenance"]
    assert rips["engine"] == "rips-cut-collapse-float64"
    assert set(rips["versions"]) == {"lacuna", "numpy", "scipy", "gudhi"}
    cubical = result_of(client, image("sublevel"))["provenance"]
    assert cubical["engine"] == "cubical-lacuna-c"
    assert set(cubical["versions"]) == {"lacuna", "numpy", "scipy"}
    dowker = result_of(client, DOWKER)["provenance"]
    assert dowker["engine"] == "dowker-witness-float64"
    assert set(dowker["versions"]) == {"lacuna", "numpy", "scipy", "gudhi"}
    skeleton = result_of(client, JOBS[-1][1])["provenance"]
    assert skeleton["engine"] == "graph-lacuna-c"
    assert set(skeleton["versions"]) == {"lacuna", "numpy", "scipy", "scikit-image"}


def test_pixel_values_keep_their_spacing_apart_from_their_unit(client: FlaskClient) -> None:
    # Intensities have no unit, but the grid they sit on has one: both are said.
    result = result_of(client, image("sublevel"))
    assert result["value_convention"] == "pixel_value"
    assert (result["units"], result["coordinate_units"]) == (None, "um")
    assert result["spacing"] == [0.25, 0.5]


def test_given_diagrams_keep_the_clients_units(client: FlaskClient) -> None:
    body = {
        "input": {"type": "diagrams", "units": "s", "diagrams": [{"dim": 0, "pairs": [[0, 1]]}]},
    }
    result = result_of(client, body)
    assert (result["value_convention"], result["units"]) == (None, "s")
    assert (result["coordinate_units"], result["spacing"]) == (None, None)
    assert result["provenance"]["engine"] is None
    assert_installed_versions(result["provenance"]["versions"])


def test_graph_without_a_filtration_has_no_value_unit(client: FlaskClient) -> None:
    body = {**graph(), "output": ["descriptors"]}
    del body["filtration"]
    result = result_of(client, body)
    assert (result["value_convention"], result["units"]) == (None, None)
    assert result["coordinate_units"] == "mm"  # the descriptors' lengths
    assert result["provenance"]["engine"] is None


@pytest.mark.parametrize(
    ("metric", "engine"),
    [
        ("bottleneck", "bottleneck-lacuna"),
        ("wasserstein", "wasserstein-lacuna"),
        ("sliced_wasserstein", "sliced-wasserstein-lacuna"),
    ],
)
def test_distance_provenance_names_its_engine(
    client: FlaskClient, metric: str, engine: str
) -> None:
    body = {"metric": metric, "diagrams": [[[0, 1]], [[0, 2]]]}
    response = post(client, "/v1/distances", body)
    assert response.status_code == 200, response.get_data(as_text=True)
    provenance = response.get_json()["provenance"]
    assert provenance["engine"] == engine
    assert_installed_versions(provenance["versions"])


def test_capabilities_list_every_engine_and_installed_versions(client: FlaskClient) -> None:
    answer = call(client, "GET", "/v1/capabilities").get_json()
    assert "value_convention" not in answer  # one per filtration now, not one for all
    named = {engine for entry in answer["filtrations"] for engine in entry["engines"]}
    assert named <= set(answer["engines"])
    assert_installed_versions(answer["versions"])
    assert {"gudhi", "scikit-image"} <= set(answer["versions"])
    assert "ripser" not in answer["versions"]  # gudhi's own Ripser build, counted as gudhi
