"""Distance matrices over HTTP: refused requests (422 with exact pointers), inline answers
checked against gudhi and scipy, distances between finished jobs, and the 202 path with
progress.

Requests go through ``call`` (tests/support/api.py), so no answer may be a 500.
"""

import io
import math
import subprocess
import time
import uuid
from collections.abc import Iterator
from typing import Any

import gudhi.hera
import gudhi.wasserstein
import numpy as np
import pytest
from flask.testing import FlaskClient
from scipy.spatial.distance import cdist
from scipy.stats import wasserstein_distance as w1_on_the_line
from werkzeug.test import TestResponse

from service.settings import Settings
from tests.support.api import (
    JOBS,
    WAIT,
    app_with,
    call,
    fresh_queue,
    pairs_array,
    post,
    refused,
    result_of,
    said,
    status_once,
    stored_jobs,
)
from tests.support.bodies import rips_job
from tests.support.synthetic import noisy_circle
from tests.support.worker_process import start_worker, stop_worker

DISTANCES = "/v1/distances"
NPY = "application/x-npy"

A = [[0.0, 1.0], [0.5, 2.0]]
B = [[0.0, 1.2], [0.2, 0.9]]
BETTI = {"type": "betti_curve", "dim": 1, "t_range": [0.0, 2.0], "samples": 9}
SUMMARY = {"type": "summary", "dim": 0}


# --- helpers ---------------------------------------------------------------------------------


def random_diagram(
    rng: np.random.Generator, finite: int, essential: int = 0
) -> list[list[float | None]]:
    births = rng.uniform(0.0, 1.0, finite)
    deaths = births + rng.uniform(0.05, 1.0, finite)
    pairs: list[list[float | None]] = [
        [float(b), float(d)] for b, d in zip(births, deaths, strict=True)
    ]
    pairs += [[float(b), None] for b in rng.uniform(0.0, 0.5, essential)]
    return pairs


def matrix_of(answer: dict[str, Any]) -> np.ndarray:
    return np.array(
        [[math.nan if v is None else v for v in row] for row in answer["matrix"]], dtype=float
    )


def assert_distance_matrix(answer: dict[str, Any], count: int) -> None:
    """Symmetric with a zero diagonal: what every metric gives (common practice)."""
    assert answer["count"] == count
    matrix = matrix_of(answer)
    assert matrix.shape == (count, count)
    assert np.array_equal(np.diag(matrix), np.zeros(count))
    assert np.array_equal(matrix, matrix.T, equal_nan=True)


def answered(response: TestResponse) -> dict[str, Any]:
    assert response.status_code == 200, response.get_data(as_text=True)
    answer: dict[str, Any] = response.get_json()
    assert response.headers["Location"] == f"/v1/jobs/{answer['job_id']}"
    return answer


def points_job(points: Any, max_dim: int = 1, features: list[Any] | None = None) -> dict:
    return rips_job(points, max_dim=max_dim, features=features or [])


# --- 422: one case per kind of invalid request ----------------------------------------------

INVALID = [
    pytest.param({"metric": "bottleneck"}, [""], "exactly one", id="no-source"),
    pytest.param(
        {"metric": "bottleneck", "diagrams": [A, B], "vectors": [[1.0], [2.0]]},
        [""],
        "(got diagrams, vectors)",
        id="diagrams-and-vectors",
    ),
    pytest.param(
        {"metric": "euclidean", "vectors": [[1.0], [2.0]], "job_ids": [str(uuid.uuid4())]},
        [""],
        "(got vectors, job_ids)",
        id="vectors-and-job-ids",
    ),
    pytest.param(
        {"metric": "bottleneck", "diagrams": [{"dim": 0, "pairs": A}, {"dim": 1, "pairs": B}]},
        ["/diagrams/1/dim"],
        "diagram 0 is of dimension 0",
        id="diagrams-of-two-dimensions",
    ),
    pytest.param(
        {"metric": "bottleneck", "dim": 1, "diagrams": [{"dim": 0, "pairs": A}, B]},
        ["/diagrams/0/dim"],
        "dim is of dimension 1",
        id="diagram-dim-other-than-request-dim",
    ),
    pytest.param(
        {"metric": "bottleneck", "vectors": [[1.0, 2.0], [3.0, 4.0]]},
        ["/vectors"],
        "euclidean or cosine",
        id="bottleneck-with-vectors",
    ),
    pytest.param(
        {"metric": "euclidean", "diagrams": [A, B]},
        ["/diagrams"],
        "bottleneck, wasserstein or sliced_wasserstein",
        id="euclidean-with-diagrams",
    ),
    pytest.param(
        {"metric": "bottleneck", "order": 2, "diagrams": [A, B]},
        ["/order"],
        "only used by wasserstein",
        id="order-with-bottleneck",
    ),
    pytest.param(
        {"metric": "wasserstein", "order": 9, "diagrams": [A, B]},
        ["/order"],
        "less than or equal to 8",  # beyond, float64 cannot resolve costs to the order
        id="order-above-8",
    ),
    pytest.param(
        {"metric": "wasserstein", "order": 0.5, "diagrams": [A, B]},
        ["/order"],
        "greater than or equal to 1",
        id="order-below-1",
    ),
    pytest.param(
        {"metric": "wasserstein", "directions": 8, "diagrams": [A, B]},
        ["/directions"],
        "only used by sliced_wasserstein",
        id="directions-with-wasserstein",
    ),
    pytest.param(
        {"metric": "sliced_wasserstein", "directions": 0, "diagrams": [A, B]},
        ["/directions"],
        "greater than or equal to 1",
        id="directions-0",
    ),
    pytest.param(
        {"metric": "cosine", "dim": 1, "vectors": [[1.0], [2.0]]},
        ["/dim"],
        "only used by diagram metrics",
        id="dim-with-a-vector-metric",
    ),
    pytest.param(
        {"metric": "bottleneck", "job_ids": [str(uuid.uuid4())]},
        ["/dim"],
        "homology dimension",
        id="job-ids-and-diagram-metric-without-dim",
    ),
    pytest.param(
        {"metric": "euclidean", "job_ids": [str(uuid.uuid4()), "not-a-uuid"]},
        ["/job_ids/0", "/job_ids/1"],
        "no job",
        id="unknown-job-ids",
    ),
    pytest.param(
        {"metric": "euclidean", "vectors": [[1.0, 2.0], [3.0]]},
        ["/vectors/1"],
        "vector 1 has 1 values, vector 0 has 2",
        id="ragged-vectors",
    ),
    pytest.param(
        {"metric": "bottleneck", "diagrams": [A, [[0.0, 1.0], [1.0, 0.5]]]},
        ["/diagrams/1/1/1"],
        "below birth",
        id="death-below-birth",
    ),
    pytest.param(
        {"metric": "bottleneck", "diagrams": [A, {"dim": 1, "pairs": [[1.0, 0.5]]}]},
        ["/diagrams/1/pairs/0/1"],
        "below birth",
        id="death-below-birth-in-a-diagram-object",
    ),
    pytest.param(
        {"metric": "bottleneck", "diagrams": [5, A]},
        ["/diagrams/0"],
        "list of [birth, death] pairs",
        id="diagram-not-a-list",
    ),
    pytest.param(
        {"metric": "bottleneck", "never_dying": {"mode": "cap"}, "diagrams": [A, B]},
        ["/never_dying/cap"],
        'mode "cap" needs a cap value',
        id="cap-mode-without-cap",
    ),
    pytest.param(
        {"metric": "bottleneck", "never_dying": {"mode": "drop", "cap": 2}, "diagrams": [A, B]},
        ["/never_dying/cap"],
        'only used with mode "cap"',
        id="cap-without-cap-mode",
    ),
    pytest.param(
        {"metric": "wasserstein", "never_dying": {"mode": "cap", "cap": "5"}, "diagrams": [A]},
        ["/never_dying/cap"],
        "valid number",
        id="cap-not-a-number",
    ),
    pytest.param(
        {"metric": "wasserstein", "never_dying": {"mode": "forever"}, "diagrams": [A]},
        ["/never_dying/mode"],
        "'separate', 'drop' or 'cap'",
        id="unknown-never-dying-mode",
    ),
    pytest.param(
        {"metric": "euclidean", "never_dying": {"mode": "drop"}, "vectors": [[1.0], [2.0]]},
        ["/never_dying"],
        "only used by diagram metrics",
        id="never-dying-with-a-vector-metric",
    ),
    pytest.param(
        {"metric": "manhattan", "vectors": [[1.0], [2.0]]},
        ["/metric"],
        "euclidean",
        id="unknown-metric",
    ),
]


@pytest.mark.parametrize(("body", "pointers", "hint"), INVALID)
def test_invalid_distance_request_is_422(
    client: FlaskClient, body: Any, pointers: list[str], hint: str
) -> None:
    refused(post(client, DISTANCES, body), pointers, hint)
    assert stored_jobs(client) == 0  # refused before it reaches the queue


@pytest.fixture
def capped_client(redis_url: str) -> FlaskClient:
    """At most 3 items per matrix; no waiting, so an accepted request answers 202 at once."""
    return app_with(
        redis_url=redis_url, queue=fresh_queue(), max_distance_count=3, max_wait_s=0
    ).test_client()


@pytest.mark.parametrize(
    ("source", "items"),
    [
        ("diagrams", [A, B, A, B]),
        ("vectors", [[1.0], [2.0], [3.0], [4.0]]),
        ("job_ids", [str(uuid.uuid4()) for _ in range(4)]),
    ],
)
def test_more_items_than_the_limit_is_422(
    capped_client: FlaskClient, source: str, items: list[Any]
) -> None:
    metric = "euclidean" if source == "vectors" else "bottleneck"
    body = {"metric": metric, source: items} | ({"dim": 1} if source == "job_ids" else {})
    # Refused on the count alone, before any job is looked up.
    problem = refused(post(capped_client, DISTANCES, body), [f"/{source}"], "limit of 3")
    assert "4 items" in said(problem)
    assert stored_jobs(capped_client) == 0


def test_items_at_the_limit_are_accepted(capped_client: FlaskClient) -> None:
    response = post(capped_client, DISTANCES, {"metric": "bottleneck", "diagrams": [A, B, A]})
    assert response.status_code == 202, response.get_data(as_text=True)


def test_unfinished_job_is_422(client: FlaskClient) -> None:
    # No worker runs in this test: the job stays queued.
    job_id = post(client, JOBS, points_job(noisy_circle(10, seed=0).tolist())).get_json()["job_id"]
    body = {"metric": "bottleneck", "dim": 1, "job_ids": [job_id]}
    problem = refused(post(client, DISTANCES, body), ["/job_ids/0"], "queued")
    assert job_id in said(problem)
    assert stored_jobs(client) == 1  # only the job itself


def test_failed_job_is_422(redis_url: str) -> None:
    # A real failure: a job that overruns a short time limit is killed by its worker.
    # refuse_costly_jobs=False: the estimate would refuse the job up front.
    settings = Settings(
        redis_url=redis_url,
        queue=fresh_queue(),
        job_time_limit_s=0.5,
        refuse_costly_jobs=False,
        auth="open",
    )
    client = app_with(**settings.model_dump()).test_client()
    worker = start_worker(redis_url, settings.queue)
    try:
        heavy = np.random.default_rng(0).uniform(size=(2000, 3)).tolist()  # H2: tens of s
        job_id = post(client, JOBS, points_job(heavy, max_dim=2)).get_json()["job_id"]
        assert status_once(client, job_id, {"failed", "succeeded"})["status"] == "failed"
        before = stored_jobs(client)
        body = {"metric": "wasserstein", "dim": 0, "job_ids": [job_id]}
        problem = refused(post(client, DISTANCES, body), ["/job_ids/0"], "failed")
        assert job_id in said(problem)
        assert stored_jobs(client) == before
    finally:
        stop_worker(worker)


def _job_without_dim_1(client: FlaskClient) -> tuple[dict[str, Any], list[str], str]:
    job = result_of(client, points_job(noisy_circle(10, seed=1).tolist(), max_dim=0))
    return (
        {"metric": "bottleneck", "dim": 1, "job_ids": [job["job_id"]]},
        ["/job_ids/0"],
        ("no diagram of dimension 1 (it has [0])"),
    )


def _distance_job_for_vectors(client: FlaskClient) -> tuple[dict[str, Any], list[str], str]:
    distance = answered(post(client, DISTANCES, {"metric": "bottleneck", "diagrams": [A, B]}))
    return (
        {"metric": "euclidean", "job_ids": [distance["job_id"]]},
        ["/job_ids/0"],
        ("computed no feature vectors"),
    )


def _jobs_of_two_layouts(client: FlaskClient) -> tuple[dict[str, Any], list[str], str]:
    points = noisy_circle(10, seed=2).tolist()
    first = result_of(client, points_job(points, features=[BETTI, SUMMARY]))
    second = result_of(client, points_job(points, features=[SUMMARY, BETTI]))
    body = {"metric": "cosine", "job_ids": [first["job_id"], second["job_id"]]}
    return body, ["/job_ids/1"], "only vectors of one layout compare"


@pytest.mark.parametrize(
    "case",
    [_job_without_dim_1, _distance_job_for_vectors, _jobs_of_two_layouts],
    ids=["job-without-the-dim", "distance-job-for-vectors", "two-layouts"],
)
def test_finished_job_that_does_not_fit_is_422(
    client: FlaskClient, worker: subprocess.Popen[bytes], case: Any
) -> None:
    body, pointers, hint = case(client)
    before = stored_jobs(client)
    refused(post(client, DISTANCES, body), pointers, hint)
    assert stored_jobs(client) == before


def test_diagram_objects_are_queued_without_warning(client: FlaskClient) -> None:
    # pytest turns warnings into errors: diagrams given as {"dim", "pairs"} objects must be
    # queued cleanly (Prefer: wait=0, no worker: it answers 202 at once).
    body = {"metric": "bottleneck", "diagrams": [{"dim": 1, "pairs": A}, {"dim": 1, "pairs": B}]}
    response = post(client, DISTANCES, body, headers={"Prefer": "wait=0"})
    assert response.status_code == 202, response.get_data(as_text=True)


# --- inline diagrams against references ------------------------------------------------------


def _sliced_by_definition(a: np.ndarray, b: np.ndarray, directions: int) -> float:
    """Carriere, Cuturi & Oudot 2017 (ICML), from memory: each diagram joined by the diagonal
    projections of the other's points, projected on ``directions`` lines at angles evenly
    spaced from -pi/2 over a half turn; the mean of the 1-D 1-Wasserstein distances between
    the projected sets (unnormalised: scipy's W1 between equal-size samples times their size).
    gudhi 3.13's SlicedWassersteinDistance keeps one angle fewer, so it is not used here."""
    on_diagonal_a = np.repeat(a.mean(axis=1, keepdims=True), 2, axis=1)
    on_diagonal_b = np.repeat(b.mean(axis=1, keepdims=True), 2, axis=1)
    left, right = np.concatenate([a, on_diagonal_b]), np.concatenate([b, on_diagonal_a])
    total = 0.0
    for k in range(directions):
        theta = -np.pi / 2 + k * np.pi / directions
        line = np.array([np.cos(theta), np.sin(theta)])
        total += len(left) * w1_on_the_line(left @ line, right @ line)
    return total / directions


def bottleneck_reference(a: np.ndarray, b: np.ndarray) -> float:
    """gudhi's Hera bottleneck with delta=0 (exact). Not gudhi.bottleneck_distance: on
    tied candidates it can answer the next value up (seen with gudhi 3.13 on seed 15 below,
    where a point's distance to the diagonal attains the bottleneck; a brute force over all
    matchings agrees with Hera)."""
    return float(gudhi.hera.bottleneck_distance(a, b, delta=0))


REFERENCES = {
    # gudhi as the reference library; L-infinity ground metric throughout.
    "bottleneck": bottleneck_reference,
    "wasserstein": lambda a, b: gudhi.wasserstein.wasserstein_distance(
        a, b, order=1.0, internal_p=np.inf
    ),
    "wasserstein-2": lambda a, b: gudhi.wasserstein.wasserstein_distance(
        a, b, order=2.0, internal_p=np.inf
    ),
}


DIAGRAM_CASES = [
    # (metric, extra request fields, echoed order and directions, reference)
    ("bottleneck", {}, (None, None), REFERENCES["bottleneck"]),
    ("wasserstein", {"order": 2}, (2.0, None), REFERENCES["wasserstein-2"]),
    ("wasserstein", {}, (1.0, None), REFERENCES["wasserstein"]),  # default order 1
]


def test_diagram_metrics_match_gudhi(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    rng = np.random.default_rng(11)
    # One class that never dies in each: essential parts are matched to each other (gudhi
    # does the same: births sorted against births).
    diagrams = [random_diagram(rng, finite=k, essential=1) for k in (3, 5, 4, 0)]
    for metric, parameters, echo, reference in DIAGRAM_CASES:
        answer = answered(
            post(client, DISTANCES, {"metric": metric, "diagrams": diagrams, **parameters})
        )
        assert answer["metric"] == metric
        assert (answer["order"], answer["directions"]) == echo, metric
        assert answer["ground_metric"] == "l_infinity"
        assert answer["nulls"] == []
        assert_distance_matrix(answer, 4)
        matrix = matrix_of(answer)
        for i in range(4):
            for j in range(i + 1, 4):
                expected = reference(pairs_array(diagrams[i]), pairs_array(diagrams[j]))
                assert matrix[i, j] == pytest.approx(expected, abs=1e-9), (metric, i, j)
                assert matrix[i, j] > 0  # distinct diagrams


def test_sliced_wasserstein_matches_its_definition(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    rng = np.random.default_rng(12)
    diagrams = [random_diagram(rng, finite=k) for k in (2, 4, 3)]
    for directions, echoed in [(8, 8), (None, 50)]:
        body: dict[str, Any] = {"metric": "sliced_wasserstein", "diagrams": diagrams}
        if directions is not None:
            body["directions"] = directions
        answer = answered(post(client, DISTANCES, body))
        assert answer["directions"] == echoed  # the default is echoed: the answer says it all
        assert answer["order"] is None
        assert answer["ground_metric"] == "l_infinity"
        assert_distance_matrix(answer, 3)
        matrix = matrix_of(answer)
        for i in range(3):
            for j in range(i + 1, 3):
                a, b = pairs_array(diagrams[i]), pairs_array(diagrams[j])
                expected = _sliced_by_definition(a, b, echoed)
                assert matrix[i, j] == pytest.approx(expected, abs=1e-9), (directions, i, j)


def test_unmatched_essential_classes_give_null_and_inf(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    rng = np.random.default_rng(13)
    diagrams = [
        random_diagram(rng, finite=3, essential=1),
        random_diagram(rng, finite=3, essential=0),
        random_diagram(rng, finite=2, essential=1),
    ]
    answer = answered(post(client, DISTANCES, {"metric": "bottleneck", "diagrams": diagrams}))
    arrays = [pairs_array(d) for d in diagrams]
    # gudhi agrees that these are infinitely far apart.
    assert bottleneck_reference(arrays[0], arrays[1]) == math.inf
    assert bottleneck_reference(arrays[1], arrays[2]) == math.inf
    assert answer["matrix"][0][1] is None and answer["matrix"][1][0] is None
    assert answer["matrix"][1][2] is None and answer["matrix"][2][1] is None
    finite = bottleneck_reference(arrays[0], arrays[2])
    assert answer["matrix"][0][2] == pytest.approx(finite, abs=1e-9)
    assert [(n["row"], n["column"]) for n in answer["nulls"]] == [(0, 1), (1, 2)]
    for null in answer["nulls"]:
        assert "never die" in null["reason"]
    # The .npy form says inf where JSON says null; the rest is the same.
    expected = np.array([[0.0, math.inf, finite], [math.inf, 0.0, math.inf], [finite, math.inf, 0]])
    location = f"/v1/jobs/{answer['job_id']}/result"
    for response in (
        call(client, "GET", location, headers={"Accept": NPY}),
        post(
            client,
            DISTANCES,
            {"metric": "bottleneck", "diagrams": diagrams},
            headers={"Accept": NPY},
        ),
    ):
        assert response.status_code == 200
        assert response.mimetype == NPY
        array = np.load(io.BytesIO(response.data), allow_pickle=False)
        assert array.dtype == np.dtype("<f8")
        assert array.shape == (3, 3)
        assert np.isinf(array[0, 1]) and np.isinf(array[1, 2])
        assert array == pytest.approx(expected, abs=1e-9)


def test_vector_metrics_match_scipy(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    vectors = np.random.default_rng(14).normal(size=(4, 6))
    body = {"metric": "euclidean", "vectors": vectors.tolist()}
    answer = answered(post(client, DISTANCES, body))
    assert answer["ground_metric"] is None and answer["dim"] is None
    assert_distance_matrix(answer, 4)
    assert matrix_of(answer) == pytest.approx(cdist(vectors, vectors), abs=1e-12)
    # Cosine of an all-zero vector is undefined: null in JSON, NaN in .npy.
    with_zero = np.vstack([np.zeros(6), vectors[:3]])
    body = {"metric": "cosine", "vectors": with_zero.tolist()}
    answer = answered(post(client, DISTANCES, body))
    matrix = matrix_of(answer)
    assert matrix[1:, 1:] == pytest.approx(cdist(vectors[:3], vectors[:3], "cosine"), abs=1e-12)
    assert answer["matrix"][0][1:] == [None, None, None]
    assert [(n["row"], n["column"]) for n in answer["nulls"]] == [(0, 1), (0, 2), (0, 3)]
    response = call(client, "GET", f"/v1/jobs/{answer['job_id']}/result", headers={"Accept": NPY})
    array = np.load(io.BytesIO(response.data), allow_pickle=False)
    assert np.isnan(array[0, 1:]).all() and np.isnan(array[1:, 0]).all()
    assert array[0, 0] == 0.0
    assert array[1:, 1:] == pytest.approx(matrix[1:, 1:], abs=0)


# --- between finished jobs -------------------------------------------------------------------


def test_distances_between_jobs(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    jobs = [
        result_of(client, points_job(noisy_circle(30, seed=s).tolist(), features=[BETTI, SUMMARY]))
        for s in (21, 22, 23)
    ]
    ids = [job["job_id"] for job in jobs]

    def of_dim(job: dict[str, Any], dim: int) -> np.ndarray:
        (pairs,) = [d["pairs"] for d in job["diagrams"] if d["dim"] == dim]
        return pairs_array(pairs)

    # Diagram metrics on the jobs' own diagrams, against gudhi.
    for metric, dim, reference in [
        ("bottleneck", 1, REFERENCES["bottleneck"]),
        ("wasserstein", 0, REFERENCES["wasserstein-2"]),  # one essential class in each H0
    ]:
        body = {"metric": metric, "dim": dim, "job_ids": ids}
        if metric == "wasserstein":
            body["order"] = 2
        answer = answered(post(client, DISTANCES, body))
        assert answer["dim"] == dim
        assert_distance_matrix(answer, 3)
        for i in range(3):
            for j in range(i + 1, 3):
                expected = reference(of_dim(jobs[i], dim), of_dim(jobs[j], dim))
                assert answer["matrix"][i][j] == pytest.approx(expected, abs=1e-9)

    # Vector metrics on the concatenated vectors (one layout), against scipy.
    assert len({job["layout_id"] for job in jobs}) == 1
    stacked = np.array([np.concatenate([v["values"] for v in job["vectors"]]) for job in jobs])
    for metric in ("euclidean", "cosine"):
        answer = answered(post(client, DISTANCES, {"metric": metric, "job_ids": ids}))
        assert_distance_matrix(answer, 3)
        assert matrix_of(answer) == pytest.approx(cdist(stacked, stacked, metric), abs=1e-12)


def test_a_matrix_of_jobs_of_one_unit_is_in_that_unit(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    # Bottleneck and Wasserstein distances are lengths in the diagrams' values (L-infinity
    # between points: common practice), so they share the diagrams' units when there is one.
    def job(seed: int, units: str | None) -> str:
        body = rips_job(noisy_circle(20, seed=seed).tolist(), units=units)
        return str(result_of(client, body)["job_id"])

    in_um = [job(31, "um"), job(32, "um")]
    for ids, units in [(in_um, "um"), ([*in_um, job(33, "mm")], None), ([job(34, None)], None)]:
        answer = answered(
            post(client, DISTANCES, {"metric": "bottleneck", "dim": 0, "job_ids": ids})
        )
        assert answer["units"] == units, ids
    inline = answered(post(client, DISTANCES, {"metric": "bottleneck", "diagrams": [A, B]}))
    assert inline["units"] is None  # inline diagrams say no units


# --- large requests: 202, progress, result ---------------------------------------------------


@pytest.fixture
def few_inline(redis_url: str) -> Iterator[FlaskClient]:
    """An app that answers inline only up to 10 pairs, with a worker on its queue."""
    settings = Settings(
        redis_url=redis_url, queue=fresh_queue(), inline_distance_pairs=10, auth="open"
    )
    worker = start_worker(redis_url, settings.queue)
    try:
        yield app_with(**settings.model_dump()).test_client()
    finally:
        stop_worker(worker)


def test_large_request_answers_202_and_reports_progress(few_inline: FlaskClient) -> None:
    rng = np.random.default_rng(15)
    diagrams = [random_diagram(rng, finite=int(k)) for k in rng.integers(1, 6, 12)]
    pairs = 12 * 11 // 2  # 66, above the 10 answered inline
    submitted = post(few_inline, DISTANCES, {"metric": "bottleneck", "diagrams": diagrams})
    assert submitted.status_code == 202, submitted.get_data(as_text=True)
    status = submitted.get_json()
    job_id = status["job_id"]
    assert submitted.headers["Location"] == f"/v1/jobs/{job_id}"
    assert status["status"] in {"queued", "running", "succeeded"}
    seen = []
    deadline = time.monotonic() + 30
    while status["status"] in {"queued", "running"} and time.monotonic() < deadline:
        time.sleep(0.02)
        status = call(few_inline, "GET", f"/v1/jobs/{job_id}").get_json()
        if status["progress"] is not None:
            seen.append(status["progress"])
    assert status["status"] == "succeeded", status
    # The last report stays.
    assert status["progress"] == {"done": pairs, "total": pairs, "stage": "distances"}
    assert all(p["total"] == pairs and 0 <= p["done"] <= pairs for p in seen)
    result = call(few_inline, "GET", f"/v1/jobs/{job_id}/result").get_json()
    assert_distance_matrix(result, 12)
    for i in range(12):
        for j in range(i + 1, 12):
            expected = bottleneck_reference(pairs_array(diagrams[i]), pairs_array(diagrams[j]))
            assert result["matrix"][i][j] == pytest.approx(expected, abs=1e-9)
    # The client may still ask to wait for a large one (RFC 7240).
    waited = post(
        few_inline, DISTANCES, {"metric": "bottleneck", "diagrams": diagrams}, headers=WAIT
    )
    assert answered(waited)["matrix"] == result["matrix"]
    # At the threshold (5 diagrams, 10 pairs) the answer comes inline without asking.
    inline = answered(
        post(few_inline, DISTANCES, {"metric": "bottleneck", "diagrams": diagrams[:5]})
    )
    assert inline["matrix"] == [row[:5] for row in result["matrix"][:5]]
    # Prefer: wait=0 asks for no waiting, however small the matrix.
    two = {"metric": "bottleneck", "diagrams": diagrams[:2]}
    response = post(few_inline, DISTANCES, two, headers={"Prefer": "wait=0"})
    assert response.status_code == 202
    job_id = response.get_json()["job_id"]
    assert status_once(few_inline, job_id, {"succeeded", "failed"})["status"] == "succeeded"


def test_never_dying_drop_and_cap_give_finite_distances(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    rng = np.random.default_rng(14)
    diagrams = [
        random_diagram(rng, finite=3, essential=1),
        random_diagram(rng, finite=4, essential=0),
        random_diagram(rng, finite=2, essential=2),
    ]
    arrays = [pairs_array(d) for d in diagrams]
    kept_apart = answered(post(client, DISTANCES, {"metric": "bottleneck", "diagrams": diagrams}))
    assert kept_apart["never_dying"] == {"mode": "separate", "cap": None}  # the default, echoed
    assert len(kept_apart["nulls"]) == 3 and "never_dying" in kept_apart["nulls"][0]["reason"]
    cap = 1.5
    cases = [
        ("bottleneck", {}, bottleneck_reference),
        ("wasserstein", {"order": 2}, REFERENCES["wasserstein-2"]),
    ]
    for never_dying in ({"mode": "drop", "cap": None}, {"mode": "cap", "cap": cap}):
        # The same transform written out: dropped, or death max(birth, cap).
        def transformed(pairs: np.ndarray, mode: str = str(never_dying["mode"])) -> np.ndarray:
            essential = np.isinf(pairs[:, 1])
            if mode == "drop":
                return pairs[~essential]
            deaths = np.where(essential, np.maximum(pairs[:, 0], cap), pairs[:, 1])
            return np.column_stack([pairs[:, 0], deaths])

        for metric, parameters, reference in cases:
            body = {"metric": metric, "never_dying": never_dying, "diagrams": diagrams}
            answer = answered(post(client, DISTANCES, {**body, **parameters}))
            assert answer["never_dying"] == never_dying
            assert answer["nulls"] == []
            assert_distance_matrix(answer, 3)
            matrix = matrix_of(answer)
            for i in range(3):
                for j in range(i + 1, 3):
                    # Reference libraries gudhi's Hera and gudhi.wasserstein (POT) on the
                    # transformed diagrams.
                    expected = reference(transformed(arrays[i]), transformed(arrays[j]))
                    assert matrix[i, j] == pytest.approx(expected, abs=1e-9), (metric, i, j)


def test_capped_class_against_nothing_by_hand(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    # Hand computation: [0, inf] capped at 5 is [0, 5], which goes to the diagonal at half
    # its persistence, 2.5, in the bottleneck and the order-1 Wasserstein distance.
    never_dying = {"mode": "cap", "cap": 5}
    for metric in ("bottleneck", "wasserstein"):
        body = {"metric": metric, "never_dying": never_dying, "diagrams": [[[0, None]], []]}
        answer = answered(post(client, DISTANCES, body))
        assert answer["matrix"] == [[0.0, 2.5], [2.5, 0.0]], metric
        assert answer["nulls"] == []
    vectors = answered(post(client, DISTANCES, {"metric": "euclidean", "vectors": [[1.0], [2.0]]}))
    assert vectors["never_dying"] is None


# --- capabilities ----------------------------------------------------------------------------


def test_capabilities_list_metrics_and_distance_limits(redis_url: str) -> None:
    client = app_with(redis_url=redis_url, queue=fresh_queue(), max_distance_count=42).test_client()
    answer = call(client, "GET", "/v1/capabilities").get_json()
    assert sorted(answer["metrics"]) == sorted(
        ["bottleneck", "wasserstein", "sliced_wasserstein", "euclidean", "cosine"]
    )
    assert answer["limits"]["max_distance_count"] == 42
    assert answer["binary_media_type"] == NPY
