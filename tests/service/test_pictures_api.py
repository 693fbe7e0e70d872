"""Pictures over HTTP: GET /v1/jobs/{id}/plot draws on a real worker, and GET /v1/jobs/{id}
with Accept: text/html answers the job page.

SVG answers are parsed as XML (xml.etree, on our own output) and their marker groups counted
against the diagram the job returned; PNG answers are decoded with Pillow (reference decoder).
"""

import io
import xml.etree.ElementTree as ElementTree
from typing import Any

import pytest
from flask.testing import FlaskClient
from PIL import Image

from service.settings import Settings
from tests.support.api import JOBS, WAIT, app_with, call, fresh_queue, post, problem_of, result_of
from tests.support.bodies import rips_job
from tests.support.synthetic import noisy_circle

IMAGE_FEATURE = {
    "type": "persistence_image",
    "dim": 1,
    "birth_range": [0.0, 1.0],
    "persistence_range": [0.0, 1.0],
    "resolution": [6, 4],
    "sigma": 0.1,
    "weight": {"type": "power", "exponent": 1.0},
}


@pytest.fixture(scope="module")
def client(served: tuple[FlaskClient, Settings]) -> FlaskClient:
    return served[0]


@pytest.fixture(scope="module")
def circle_job(client: FlaskClient) -> tuple[str, dict[str, Any]]:
    """A noisy circle's H0 and H1 with a persistence image of H1: its id and result."""
    points = noisy_circle(40, seed=2).tolist()
    result = result_of(client, rips_job(points, units="um", max_dim=1, features=[IMAGE_FEATURE]))
    return result["job_id"], result


def svg_ids(svg: bytes) -> list[str]:
    """The ids of every element of an SVG document."""
    root = ElementTree.fromstring(svg)
    return [element.get("id", "") for element in root.iter()]


def plot(client: FlaskClient, job_id: str, query: str) -> Any:
    return call(client, "GET", f"{JOBS}/{job_id}/plot?{query}")


def test_diagram_svg_has_one_marker_group_per_point(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]]
) -> None:
    job_id, result = circle_job
    answer = plot(client, job_id, "kind=diagram")
    assert answer.status_code == 200 and answer.mimetype == "image/svg+xml"
    ids = svg_ids(answer.data)
    for diagram in result["diagrams"]:
        points = [i for i in ids if i.startswith(f"point-{diagram['dim']}-")]
        assert len(points) == len(diagram["pairs"]) > 0
    text = answer.get_data(as_text=True)
    assert "birth (um)" in text and "death (um)" in text  # axis labels with units
    assert "H0" in text and "H1" in text  # the legend


def test_one_dimension_only(client: FlaskClient, circle_job: tuple[str, dict[str, Any]]) -> None:
    job_id, result = circle_job
    ids = svg_ids(plot(client, job_id, "kind=diagram&dim=1").data)
    h1 = [d for d in result["diagrams"] if d["dim"] == 1][0]
    assert len([i for i in ids if i.startswith("point-")]) == len(h1["pairs"])


def test_barcode_svg_has_one_bar_per_pair(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]]
) -> None:
    job_id, result = circle_job
    ids = svg_ids(plot(client, job_id, "kind=barcode").data)
    total = sum(len(d["pairs"]) for d in result["diagrams"])
    assert len([i for i in ids if i.startswith("bar-")]) == total


@pytest.mark.parametrize(
    ("query", "size"),
    [
        ("kind=diagram&format=png&width=300&height=200", (300, 200)),
        ("kind=image&format=png&width=256&height=256", (256, 256)),
    ],
)
def test_png_decodes_at_the_requested_size(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], query: str, size: tuple[int, int]
) -> None:
    answer = plot(client, circle_job[0], query)
    assert answer.status_code == 200 and answer.mimetype == "image/png"
    picture = Image.open(io.BytesIO(answer.data))
    picture.load()  # decodes every pixel: a truncated file fails here
    assert picture.format == "PNG" and picture.size == size


def test_plot_jobs_are_deleted_once_drawn(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]]
) -> None:
    queue = client.application.extensions["lacuna"].queue
    before = sum(1 for _ in queue.redis.scan_iter("rq:job:*"))
    assert plot(client, circle_job[0], "kind=barcode").status_code == 200
    assert sum(1 for _ in queue.redis.scan_iter("rq:job:*")) == before


@pytest.mark.parametrize(
    ("query", "pointer"),
    [
        ("kind=histogram", "/kind"),
        ("dim=2", "/dim"),
        ("dim=-1", "/dim"),
        ("format=gif", "/format"),
        ("width=10", "/width"),
        ("height=99999", "/height"),
        ("direction=0", "/direction"),
        ("colour=red", "/colour"),
        ("kind=image&dim=0", "/kind"),
    ],
)
def test_bad_query_is_422_naming_the_parameter(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], query: str, pointer: str
) -> None:
    problem = problem_of(plot(client, circle_job[0], query), 422)
    assert [e["pointer"] for e in problem["errors"]] == [pointer]


def test_plot_of_an_unknown_job_is_404(client: FlaskClient) -> None:
    problem_of(plot(client, "00000000-0000-4000-8000-000000000000", "kind=diagram"), 404)


def test_plot_of_an_unfinished_job_is_409(served: tuple[FlaskClient, Settings]) -> None:
    # A job on a queue no worker serves stays queued.
    client, settings = served
    app = app_with(redis_url=settings.redis_url, queue=fresh_queue())
    idle = app.test_client()
    body = {"input": {"type": "points", "points": [[0, 0], [1, 1]]}, "filtration": {"type": "rips"}}
    job_id = post(idle, JOBS, body).get_json()["job_id"]
    problem = problem_of(plot(idle, job_id, "kind=diagram"), 409)
    assert problem["job_status"] == "queued"


def test_per_direction_jobs_need_a_direction(client: FlaskClient) -> None:
    body = {
        "input": {"type": "graph", "nodes": [[0, 0], [1, 0], [1, 1]], "edges": [[0, 1], [1, 2]]},
        "filtration": {"type": "height", "directions": 3},
    }
    job_id = post(client, JOBS, body, headers=WAIT).get_json()["job_id"]
    problem = problem_of(plot(client, job_id, "kind=diagram"), 422)
    assert problem["errors"][0]["pointer"] == "/direction" and "0..2" in problem["detail"]
    ids = svg_ids(plot(client, job_id, "kind=diagram&direction=2").data)
    assert len([i for i in ids if i.startswith("point-0-")]) == 1  # a path: one component


# RFC 9110 section 15.6.4: 503 with Retry-After (section 10.2.3) when the server is overloaded.
# A picture is drawn by waiting on a plot job, so it takes a waiter like Prefer: wait does.
def test_past_the_waiter_cap_a_plot_is_503_and_queues_nothing(
    served: tuple[FlaskClient, Settings], circle_job: tuple[str, dict[str, Any]]
) -> None:
    _, settings = served
    app = app_with(redis_url=settings.redis_url, queue=settings.queue, max_waiters=1)
    waiters = app.extensions["lacuna.gates"].waiters
    redis = app.extensions["lacuna"].queue.redis
    before = sum(1 for _ in redis.scan_iter("rq:job:*"))
    assert waiters.acquire(blocking=False)  # another request is waiting
    try:
        answer = plot(app.test_client(), circle_job[0], "kind=diagram")
    finally:
        waiters.release()
    problem = problem_of(answer, 503)
    assert problem["type"].endswith(":server-busy") and int(answer.headers["Retry-After"]) > 0
    assert sum(1 for _ in redis.scan_iter("rq:job:*")) == before


def test_a_plot_does_not_count_against_the_unfinished_jobs_quota(
    served: tuple[FlaskClient, Settings], circle_job: tuple[str, dict[str, Any]]
) -> None:
    # The tenant's last unfinished job allowed is taken by a job no worker serves.
    client, settings = served
    full = call(client, "GET", "/v1/capabilities").get_json()["caller"]["usage"]
    limit = full["unfinished_jobs"] + 1
    idle = app_with(redis_url=settings.redis_url, queue=fresh_queue(), max_unfinished_jobs=limit)
    queued = post(idle.test_client(), JOBS, rips_job())
    assert queued.status_code == 202
    drawing = app_with(
        redis_url=settings.redis_url, queue=settings.queue, max_unfinished_jobs=limit
    )
    try:
        answer = plot(drawing.test_client(), circle_job[0], "kind=diagram")
        assert answer.status_code == 200, answer.get_data(as_text=True)
    finally:
        call(idle.test_client(), "DELETE", queued.headers["Location"])
