"""The Dowker filtration of two classes of labelled points through the API: equal to the core
and to a brute-force gudhi construction, the same diagrams with the roles swapped (duality),
refused above the simplex limit, and every bad filtration a 422 naming its field."""

import itertools
import subprocess
from typing import Any

import gudhi
import numpy as np
import pytest
from flask.testing import FlaskClient

from service.settings import Settings
from tests.support.api import JOBS, WAIT, app_with, pairs_array, post, refused, result_of
from tests.support.bodies import labelled_job
from workers.core.dowker import dowker_diagrams

RADIUS = 1.5


def two_classes(seed: int = 3) -> tuple[np.ndarray, list[str]]:
    """A ring of 12 "tumour" points and 7 "immune" points scattered around it."""
    rng = np.random.default_rng(seed)
    angles = np.sort(rng.uniform(0, 2 * np.pi, 12))
    ring = np.column_stack([np.cos(angles), np.sin(angles)]) + rng.normal(0, 0.02, (12, 2))
    immune = rng.uniform(-1.5, 1.5, size=(7, 2))
    points = np.concatenate([ring, immune])
    return points, ["tumour"] * 12 + ["immune"] * 7


def dowker_body(points: np.ndarray, labels: list[str], **filtration: Any) -> dict[str, Any]:
    given = {"type": "dowker", "vertices": "tumour", "witnesses": "immune", "max_radius": RADIUS}
    return labelled_job(points, labels, {**given, **filtration})


def brute_force(vertices: np.ndarray, witnesses: np.ndarray, max_dim: int) -> list[np.ndarray]:
    """Reference: every vertex subset up to max_dim + 2 vertices entered in a gudhi
    SimplexTree at min over witnesses of max distance to its vertices (the Dowker complex's
    definition, Dowker 1952), within the radius; gudhi computes its persistence."""
    distance = np.linalg.norm(witnesses[:, None, :] - vertices[None, :, :], axis=2)
    tree = gudhi.SimplexTree()
    for size in range(1, max_dim + 3):
        for simplex in itertools.combinations(range(len(vertices)), size):
            value = distance[:, list(simplex)].max(axis=1).min()
            if value <= RADIUS:
                tree.insert(list(simplex), float(value))
    tree.compute_persistence(homology_coeff_field=2, persistence_dim_max=True)
    return [tree.persistence_intervals_in_dimension(dim) for dim in range(max_dim + 1)]


def nonzero_sorted(pairs: np.ndarray) -> np.ndarray:
    pairs = pairs.reshape(-1, 2)
    pairs = pairs[pairs[:, 1] > pairs[:, 0]]
    return pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))]


def test_dowker_through_the_api_equals_the_core_and_gudhi(served_client: FlaskClient) -> None:
    points, labels = two_classes()
    result = result_of(served_client, dowker_body(points, labels, side="vertices"))
    tumour, immune = points[:12], points[12:]
    core = dowker_diagrams(tumour, immune, max_dim=1, max_radius=RADIUS, side="vertices")
    assert result["value_convention"] == "witness_radius"
    assert result["units"] == "um"
    assert result["provenance"]["engine"] == "dowker-witness-float64"
    assert set(result["provenance"]["versions"]) >= {"gudhi", "scipy"}
    assert result["dowker"] == {
        "vertices": "tumour",
        "witnesses": "immune",
        "side_used": "vertices",
        "simplex_count": core.simplex_count,
    }
    assert all(population["computed"] for population in result["populations"])
    reference = brute_force(tumour, immune, 1)
    for item, ours, theirs in zip(result["diagrams"], core.diagrams, reference, strict=True):
        found = pairs_array(item["pairs"])
        np.testing.assert_array_equal(found, ours)
        np.testing.assert_allclose(nonzero_sorted(found), nonzero_sorted(theirs), atol=1e-12)


def test_swapped_roles_give_equal_diagrams(served_client: FlaskClient) -> None:
    # Dowker duality (Dowker 1952; functorial form, Chowdhury & Memoli 2018): the complex of
    # V witnessed by W and of W witnessed by V have the same persistent homology.
    points, labels = two_classes(seed=5)
    forward = result_of(served_client, dowker_body(points, labels, side="vertices"))
    swapped = result_of(
        served_client,
        dowker_body(points, labels, vertices="immune", witnesses="tumour", side="vertices"),
    )
    assert forward["dowker"]["side_used"] == swapped["dowker"]["side_used"] == "vertices"
    for mine, theirs in zip(forward["diagrams"], swapped["diagrams"], strict=True):
        np.testing.assert_allclose(
            pairs_array(mine["pairs"]), pairs_array(theirs["pairs"]), atol=1e-12
        )


def test_a_dowker_filtration_above_the_simplex_limit_fails_at_max_radius(
    settings: Settings, worker: subprocess.Popen[bytes]
) -> None:
    client = app_with(
        redis_url=settings.redis_url, queue=settings.queue, max_dowker_simplices=10
    ).test_client()
    points, labels = two_classes()
    submitted = post(client, JOBS, dowker_body(points, labels), headers=WAIT)
    assert submitted.status_code == 202, submitted.get_data(as_text=True)
    status = submitted.get_json()
    assert status["status"] == "failed"
    assert status["problem"]["status"] == 422
    assert status["problem"]["errors"][0]["pointer"] == "/filtration/max_radius"
    assert "above the limit of 10" in status["problem"]["detail"]
    limits = client.get("/v1/capabilities").get_json()["limits"]
    assert limits["max_dowker_simplices"] == 10


@pytest.mark.parametrize(
    ("change", "pointer", "hint"),
    [
        ({"vertices": "stroma"}, "/filtration/vertices", '"immune", "tumour"'),
        ({"witnesses": "stroma"}, "/filtration/witnesses", '"immune", "tumour"'),
        ({"witnesses": "tumour"}, "/filtration/witnesses", "another"),
        ({"vertices": ""}, "/filtration/vertices", "at least 1 character"),
        ({"max_radius": 0}, "/filtration/max_radius", "greater than 0"),
        ({"max_radius": -1.0}, "/filtration/max_radius", "greater than 0"),
        ({"max_radius": None}, "/filtration/max_radius", "number"),
        ({"max_dim": 3}, "/filtration/max_dim", "less than or equal to 2"),
        ({"side": "both"}, "/filtration/side", "smaller"),
    ],
)
def test_bad_dowker_filtrations_name_the_field(
    client: FlaskClient, change: dict[str, Any], pointer: str, hint: str
) -> None:
    points, labels = two_classes()
    refused(post(client, JOBS, dowker_body(points, labels, **change)), [pointer], hint)


def test_max_dim_above_the_servers_limit_is_refused(settings: Settings) -> None:
    client = app_with(redis_url=settings.redis_url, queue=settings.queue, max_dim=1).test_client()
    body = dowker_body(*two_classes(), max_dim=2)
    refused(post(client, JOBS, body), ["/filtration/max_dim"], "limit of 1")


def test_a_missing_max_radius_is_refused(client: FlaskClient) -> None:
    body = dowker_body(*two_classes())
    del body["filtration"]["max_radius"]
    refused(post(client, JOBS, body), ["/filtration/max_radius"], "required")


def test_dowker_on_plain_points_is_refused(client: FlaskClient) -> None:
    body = dowker_body(*two_classes())
    body["input"] = {"type": "points", "points": [[0, 0], [1, 0]]}
    problem = refused(post(client, JOBS, body), ["/filtration/type"], "dowker")
    assert problem["status"] == 422
