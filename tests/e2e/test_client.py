"""The Python client against a real ``lacuna serve`` (API, workers, Redis): every input type
round trips, and the arrays it gives equal the server's own JSON; retries and errors against a
small HTTP peer that answers what the test needs."""

import http.server
import io
import json
import threading
import time
from collections.abc import Iterator
from typing import Any

import gudhi
import networkx as nx
import numpy as np
import pytest
import requests

from lacuna_client import Client, Distances, LacunaError
from tests.support.api import pairs_array
from tests.support.ports import free_port
from tests.support.references import gudhi_diagrams
from tests.support.synthetic import HEXAGON, noisy_circle, ring_mask, smooth_field

pytestmark = pytest.mark.e2e

PERSISTENCE_IMAGE = {
    "type": "persistence_image",
    "dim": 1,
    "birth_range": [0.0, 1.0],
    "persistence_range": [0.0, 1.0],
    "resolution": [5, 5],
    "sigma": 0.1,
    "weight": {"type": "power", "exponent": 1.0},
}


@pytest.fixture
def client(base: str) -> Client:
    return Client(base, timeout=30)


def server_json(base: str, job_id: str) -> dict[str, Any]:
    """The result as the server sends it, read without the client."""
    answer: dict[str, Any] = requests.get(
        f"{base}/v1/jobs/{job_id}/result", headers={"Prefer": "wait=30"}, timeout=60
    ).json()
    return answer


def assert_diagrams_are_the_json(diagrams: list[np.ndarray], result: dict[str, Any]) -> None:
    assert len(diagrams) == max(d["dim"] for d in result["diagrams"]) + 1
    for item in result["diagrams"]:
        got = diagrams[item["dim"]]
        assert got.dtype == np.float64 and got.shape == (len(item["pairs"]), 2)
        np.testing.assert_array_equal(got, pairs_array(item["pairs"]))


def test_points_round_trip(client: Client, base: str) -> None:
    job = client.submit_points(np.array(HEXAGON), {"type": "rips", "max_dim": 1}, units="um")
    diagrams = client.diagrams(job)
    assert_diagrams_are_the_json(diagrams, server_json(base, job))
    # Regular hexagon of side 1 (Adamaszek & Adams 2017, from memory): one H1 class [1, sqrt 3].
    np.testing.assert_allclose(diagrams[1], [[1.0, np.sqrt(3)]], rtol=1e-6)
    assert np.isinf(diagrams[0][:, 1]).sum() == 1  # one class never dies: null -> inf


def test_points_with_features_give_the_servers_vector(client: Client, base: str) -> None:
    points = noisy_circle(80, seed=3)
    job = client.submit_points(points, {"type": "rips", "max_dim": 1}, [PERSISTENCE_IMAGE])
    vector = client.vectors(job)
    # The server's own binary form of the same vector (.npy), and its JSON values.
    npy = requests.get(
        f"{base}/v1/jobs/{job}/result", headers={"Accept": "application/x-npy"}, timeout=30
    )
    np.testing.assert_array_equal(vector, np.load(io.BytesIO(npy.content), allow_pickle=False))
    result = server_json(base, job)
    assert vector.shape == (result["vector_length"],) == (25,)
    np.testing.assert_array_equal(vector, result["vectors"][0]["values"])


def test_given_diagrams_round_trip(client: Client, base: str) -> None:
    given = [np.array([[0.0, np.inf], [0.0, 0.5]]), np.array([[0.2, 0.9]])]
    job = client.submit_diagrams(given, [PERSISTENCE_IMAGE])
    result = client.result(job)
    assert client.vectors(result).shape == (25,)
    np.testing.assert_array_equal(client.vectors(result), result["vectors"][0]["values"])


def test_image_upload_round_trip(client: Client, base: str) -> None:
    values = smooth_field((40, 50), sigma=3.0, seed=1)
    job = client.submit_image(values, {"type": "cubical"}, spacing=[0.5, 0.5], units="um")
    diagrams = client.diagrams(job)
    assert_diagrams_are_the_json(diagrams, server_json(base, job))
    # Reference library: gudhi's CubicalComplex on the same pixels.
    for ours, reference in zip(diagrams, gudhi_diagrams(values), strict=True):
        np.testing.assert_allclose(
            ours[np.lexsort(ours.T[::-1])], reference[np.lexsort(reference.T[::-1])]
        )


def test_mask_skeleton_round_trip(client: Client) -> None:
    # Geometry (common practice): an annulus thins to one loop.
    mask = ring_mask((64, 64), (31.5, 31.5), 14, 20)
    job = client.submit_mask(mask, None, skeletonize=True, output=["descriptors", "graph"])
    result = client.result(job)
    assert result["descriptors"]["cycle_count"] == 1
    assert result["descriptors"]["component_count"] == 1


def test_graph_round_trip(client: Client, base: str) -> None:
    rng = np.random.default_rng(7)
    nodes = rng.uniform(size=(50, 2))
    close = np.linalg.norm(nodes[:, None] - nodes[None], axis=2) < 0.25
    edges = np.column_stack(np.nonzero(np.triu(close, 1)))
    job = client.submit_graph(
        nodes,
        edges,
        {"type": "height", "direction": [0.0, 1.0]},
        output=["diagrams", "descriptors"],
    )
    diagrams = client.diagrams(job)
    result = server_json(base, job)
    assert_diagrams_are_the_json(diagrams, result)
    # Reference library: networkx counts the components, each an H0 class that never dies.
    reference = nx.Graph(edges.tolist())
    reference.add_nodes_from(range(50))
    assert np.isinf(diagrams[0][:, 1]).sum() == nx.number_connected_components(reference)
    assert result["descriptors"]["cycle_count"] == len(nx.cycle_basis(reference))


def test_distances_round_trip(client: Client) -> None:
    a = np.array([[0.0, 1.0], [0.2, 0.5]])
    b = np.array([[0.0, 1.1]])
    c = np.array([[0.0, np.inf]])
    found = client.distances("bottleneck", diagrams=[a, b, c])
    assert isinstance(found, Distances)
    matrix = found.matrix
    # Reference library: gudhi's bottleneck distance on the finite pairs; a class that never
    # dies matches none that dies, so those entries are inf (null in JSON).
    assert matrix[0, 1] == pytest.approx(gudhi.bottleneck_distance(a, b))
    assert np.isinf(matrix[0, 2]) and np.isinf(matrix[2, 1]) and matrix[2, 2] == 0
    # Each of those nulls comes with the service's reason, above the diagonal.
    assert [(n["row"], n["column"]) for n in found.nulls] == [(0, 2), (1, 2)]
    assert all(n["reason"] for n in found.nulls)
    assert found.nulls == found.result["nulls"] and found.result["metric"] == "bottleneck"


def test_distances_between_jobs(client: Client) -> None:
    jobs = [
        client.submit_points(
            noisy_circle(60, seed=s), {"type": "rips", "max_dim": 1}, [PERSISTENCE_IMAGE]
        )
        for s in range(3)
    ]
    for job in jobs:
        client.wait(job, 60)
    found = client.distances("euclidean", job_ids=jobs)
    matrix = found.matrix
    assert found.nulls == []
    vectors = np.stack([client.vectors(job) for job in jobs])
    # Definition of the euclidean distance, computed here on the client's own vectors.
    expected = np.linalg.norm(vectors[:, None] - vectors[None], axis=2)
    np.testing.assert_allclose(matrix, expected, rtol=1e-12, atol=1e-12)


def test_wait_reports_progress_until_it_succeeds(client: Client) -> None:
    seen: list[str] = []
    job = client.submit_points(noisy_circle(200, seed=0), {"type": "rips", "max_dim": 1})
    status = client.wait(job, 60, poll=0.2, progress=lambda s: seen.append(s["status"]))
    assert status["status"] == "succeeded" and seen[-1] == "succeeded"
    assert set(seen) <= {"queued", "running", "succeeded"}


def test_cancelled_job_raises_with_its_problem(client: Client) -> None:
    points = np.random.default_rng(0).uniform(size=(2000, 3))  # H2: tens of seconds
    job = client.submit_points(points, {"type": "rips", "max_dim": 2})
    client.cancel(job)
    with pytest.raises(LacunaError) as raised:
        client.wait(job, 60)
    assert client.status(job)["status"] == "cancelled"
    assert "cancel" in str(raised.value).lower()


def test_invalid_request_raises_with_field_pointers(client: Client) -> None:
    with pytest.raises(LacunaError) as raised:
        client.submit_points(np.array(HEXAGON), {"type": "rips", "max_dim": 7})
    assert raised.value.status == 422
    assert raised.value.pointers == ["/filtration/max_dim"]
    assert raised.value.problem["type"].endswith("invalid-request")


def test_unknown_job_raises_404(client: Client) -> None:
    with pytest.raises(LacunaError) as raised:
        client.status("00000000-0000-4000-8000-000000000000")
    assert raised.value.status == 404


# --- retries, against a small HTTP peer ------------------------------------------------------


class Scripted(http.server.BaseHTTPRequestHandler):
    """Answers each request with the next (status, headers, body) of ``script``."""

    script: list[tuple[int, dict[str, str], dict[str, Any]]] = []
    seen: list[tuple[str, dict[str, str]]] = []

    def _answer(self) -> None:
        length = int(self.headers.get("Content-Length") or 0)
        self.rfile.read(length)
        type(self).seen.append((self.command, dict(self.headers)))
        status, headers, body = type(self).script.pop(0)
        data = json.dumps(body).encode()
        self.send_response(status)
        for name, value in {"Content-Type": "application/json", **headers}.items():
            self.send_header(name, value)
        self.send_header("Content-Length", str(len(data)))
        self.end_headers()
        self.wfile.write(data)

    do_GET = do_POST = do_DELETE = _answer

    def log_message(self, *args: Any) -> None:
        pass


@pytest.fixture
def peer() -> Iterator[tuple[str, type[Scripted]]]:
    handler = type("Handler", (Scripted,), {"script": [], "seen": []})
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_address[1]}", handler
    server.shutdown()
    server.server_close()


BUSY = (503, {"Retry-After": "1"}, {"title": "Queue unavailable", "status": 503})
ACCEPTED = (202, {}, {"job_id": "abc", "status": "queued"})


def test_503_is_retried_after_retry_after_with_the_same_idempotency_key(
    peer: tuple[str, type[Scripted]],
) -> None:
    url, handler = peer
    handler.script = [BUSY, BUSY, ACCEPTED]
    started = time.monotonic()
    job = Client(url, backoff=0.01).submit({"input": {"type": "points", "points": HEXAGON}})
    assert job == "abc"
    assert time.monotonic() - started >= 2.0  # two Retry-After: 1 waits (RFC 9110 10.2.3)
    keys = {headers["Idempotency-Key"] for _, headers in handler.seen}
    assert len(handler.seen) == 3 and len(keys) == 1  # one key: the server makes one job


def test_4xx_is_never_retried(peer: tuple[str, type[Scripted]]) -> None:
    url, handler = peer
    problem = {
        "type": "x",
        "title": "Invalid request",
        "status": 422,
        "detail": "/a: no",
        "errors": [{"pointer": "/a", "message": "no"}],
    }
    handler.script = [(422, {}, problem), ACCEPTED]
    with pytest.raises(LacunaError) as raised:
        Client(url, backoff=0.01).submit({})
    assert len(handler.seen) == 1
    assert raised.value.problem == problem and raised.value.pointers == ["/a"]


def test_503_beyond_the_retries_raises_its_problem(peer: tuple[str, type[Scripted]]) -> None:
    url, handler = peer
    handler.script = [(503, {}, {"title": "Not ready", "status": 503})] * 3
    with pytest.raises(LacunaError) as raised:
        Client(url, retries=2, backoff=0.01).status("abc")
    assert raised.value.status == 503 and len(handler.seen) == 3


def test_unreachable_service_raises_after_retries() -> None:
    client = Client(f"http://127.0.0.1:{free_port()}", retries=2, backoff=0.01)
    with pytest.raises(LacunaError) as raised:
        client.status("abc")
    assert raised.value.status == 0 and raised.value.type == "unreachable"
    assert raised.value.unreachable


def test_a_refused_connection_is_retried_only_briefly() -> None:
    # The default policy: 5 retries from 0.5 s doubling (15.5 s of waiting) for answers and
    # dropped connections, but a port nobody listens on is retried twice (0.5 + 1 s).
    url = f"http://127.0.0.1:{free_port()}"
    client = Client(url)
    started = time.monotonic()
    with pytest.raises(LacunaError) as raised:
        client.check_reachable()
    assert 1.5 <= time.monotonic() - started < 8
    assert raised.value.unreachable
    assert raised.value.problem["url"] == url
    assert raised.value.problem["reason"] == "connection refused"
    assert raised.value.detail.startswith(f"cannot reach the lacuna server at {url} ")


def test_check_reachable_of_a_running_service(client: Client) -> None:
    client.check_reachable()  # /healthz answers: nothing raised


def test_503_is_still_retried_in_full(peer: tuple[str, type[Scripted]]) -> None:
    url, handler = peer
    handler.script = [BUSY] * 4 + [(200, {}, {"status": "ok"})]
    Client(url, retries=5, backoff=0.01, connect_retries=0).check_reachable()
    assert len(handler.seen) == 5 and handler.seen[0][0] == "GET"
