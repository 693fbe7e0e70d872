"""Pictures over HTTP: GET /v1/jobs/{id}/plot draws on a real worker, and GET /v1/jobs/{id}
with Accept: text/html answers the job page.

SVG answers are parsed as XML (xml.etree, on our own output) and their marker groups counted
against the diagram the job returned; PNG answers are decoded with Pillow (reference decoder).
Pictures are drawn once per job and query: the plot jobs queued are counted by wrapping the
app's JobQueue.submit, and ETags checked as RFC 9110 section 13.1.2 (If-None-Match) says.
"""

import io
import uuid
import xml.etree.ElementTree as ElementTree
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient
from PIL import Image
from redis import Redis
from rq.serializers import JSONSerializer

from service.keys import KeyStore
from service.queue import Job
from service.settings import Settings
from service.submissions import Submission, plot_submission
from tests.support.api import JOBS, WAIT, app_with, call, fresh_queue, post, problem_of, result_of
from tests.support.bodies import rips_job
from tests.support.synthetic import noisy_circle
from workers.spec.plots import PlotQuery, PlotTask

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


def plot(client: FlaskClient, job_id: str, query: str, **headers: str) -> Any:
    return call(client, "GET", f"{JOBS}/{job_id}/plot?{query}", headers=headers)


@pytest.fixture
def plot_jobs(client: FlaskClient, monkeypatch: pytest.MonkeyPatch) -> list[Submission]:
    """Every submission the app queues from now on (plot jobs, here), in order."""
    queue = client.application.extensions["lacuna"].queue
    queued: list[Submission] = []
    submit = queue.submit

    def counted(submission: Submission, *args: Any, **kwargs: Any) -> Any:
        queued.append(submission)
        return submit(submission, *args, **kwargs)

    monkeypatch.setattr(queue, "submit", counted)
    return queued


def group_ids(svg: bytes, prefix: str) -> list[str]:
    return [i for i in svg_ids(svg) if i.startswith(prefix)]


def svg_texts(svg: bytes) -> list[str]:
    root = ElementTree.fromstring(svg)
    return ["".join(e.itertext()) for e in root.iter("{http://www.w3.org/2000/svg}text")]


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
        ("top=0", "/top"),
        ("top=many", "/top"),
        ("min_persistence=-1", "/min_persistence"),
        ("min_persistence=nan", "/min_persistence"),
        ("kind=image&top=3", "/top"),
        ("kind=image&min_persistence=0.1", "/min_persistence"),
        ("kind=matrix", "/kind"),
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
        answer = plot(app.test_client(), circle_job[0], "kind=diagram&width=401")
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
        answer = plot(drawing.test_client(), circle_job[0], "kind=diagram&width=402")
        assert answer.status_code == 200, answer.get_data(as_text=True)
    finally:
        call(idle.test_client(), "DELETE", queued.headers["Location"])


# --- choosing pairs ----------------------------------------------------------------------------


def persistence(pairs: list[list[float | None]]) -> np.ndarray:
    return np.array([np.inf if d is None else d - b for b, d in pairs])


def test_top_draws_the_most_persistent_pairs_of_each_dimension(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], plot_jobs: list[Submission]
) -> None:
    job_id, result = circle_job
    svg = plot(client, job_id, "kind=diagram&top=3").data
    total = 0
    for diagram in result["diagrams"]:
        dim, lasting = diagram["dim"], persistence(diagram["pairs"])
        total += len(lasting)
        # The three largest persistences (never-dying first), by row in the result.
        expected = sorted(np.argsort(-lasting, kind="stable")[:3].tolist())
        assert sorted(group_ids(svg, f"point-{dim}-")) == sorted(
            f"point-{dim}-{k}" for k in expected
        )
    shown = sum(min(3, len(d["pairs"])) for d in result["diagrams"])
    assert f"showing {shown} of {total} pairs (top 3 per dimension)" in svg_texts(svg)
    # Chosen before queueing: the plot job's input holds only the pairs drawn.
    assert [len(submission.array) for submission in plot_jobs] == [shown]


def test_min_persistence_keeps_the_persistent_and_the_never_dying(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]]
) -> None:
    job_id, result = circle_job
    svg = plot(client, job_id, "kind=barcode&min_persistence=0.2").data
    kept = 0
    for diagram in result["diagrams"]:
        lasting = persistence(diagram["pairs"])
        expected = np.flatnonzero(lasting >= 0.2)
        kept += len(expected)
        dim = diagram["dim"]
        assert sorted(group_ids(svg, f"bar-{dim}-")) == sorted(f"bar-{dim}-{k}" for k in expected)
    assert np.isinf(persistence(result["diagrams"][0]["pairs"])).any()  # H0 keeps its class
    total = sum(len(d["pairs"]) for d in result["diagrams"])
    assert f"showing {kept} of {total} pairs (persistence ≥ 0.2 um)" in svg_texts(svg)


# --- the distance matrix -----------------------------------------------------------------------


def test_a_distance_job_draws_its_matrix_labelled_by_job(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]]
) -> None:
    job_id, _ = circle_job
    other = result_of(client, rips_job(noisy_circle(30, seed=7).tolist(), units="um", max_dim=1))
    body = {"metric": "wasserstein", "order": 2, "dim": 1, "job_ids": [job_id, other["job_id"]]}
    answer = post(client, "/v1/distances", body)
    assert answer.status_code == 200
    distances = answer.get_json()
    svg = plot(client, distances["job_id"], "kind=matrix")
    assert svg.status_code == 200 and svg.mimetype == "image/svg+xml"
    words = svg_texts(svg.data)
    assert "wasserstein distance, order 2, H1 (um)" in words  # the colour bar
    assert words.count(f"0 · {job_id[:8]}") == 2  # the row and the column
    assert words.count(f"1 · {other['job_id'][:8]}") == 2
    for query, pointer in (("kind=diagram", "/kind"), ("kind=matrix&dim=1", "/dim")):
        problem = problem_of(plot(client, distances["job_id"], query), 422)
        assert [e["pointer"] for e in problem["errors"]] == [pointer]
    assert (
        "kind=matrix"
        in problem_of(plot(client, distances["job_id"], "kind=barcode"), 422)["detail"]
    )


def test_null_distances_are_drawn_apart_and_explained(client: FlaskClient) -> None:
    # One class that never dies against none: matched only to each other, so infinite.
    body = {"metric": "bottleneck", "diagrams": [[[0, None]], [[0, 1]], [[0, 2]]]}
    distances = post(client, "/v1/distances", body).get_json()
    assert distances["nulls"]
    words = svg_texts(plot(client, distances["job_id"], "kind=matrix").data)
    assert any(w.startswith("null: infinite") for w in words)
    assert "2 of 3 distances are null" in words


# --- the cache ---------------------------------------------------------------------------------


def test_a_picture_is_drawn_once_then_answered_from_the_cache(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], plot_jobs: list[Submission]
) -> None:
    job_id, _ = circle_job
    query = "kind=barcode&width=500&format=png"
    redis = client.application.extensions["lacuna"].queue.redis
    kept_before = set(redis.keys(f"lacuna:picture:{job_id}:*"))
    ttl_before = redis.ttl(f"rq:job:{job_id}")  # the result's, in whole seconds, counting down
    first = plot(client, job_id, query)
    ttl_after = redis.ttl(f"rq:job:{job_id}")
    assert first.status_code == 200 and len(plot_jobs) == 1
    again = plot(client, job_id, query)
    assert again.status_code == 200 and len(plot_jobs) == 1  # no plot job the second time
    assert again.data == first.data and again.mimetype == "image/png"
    etag = first.headers["ETag"]
    assert etag == again.headers["ETag"] and not etag.startswith("W/")  # strong
    cache_control = first.headers["Cache-Control"]
    assert cache_control.startswith("private, max-age=")
    assert 0 < ttl_after <= int(cache_control.split("=")[1]) <= ttl_before
    # One picture kept, among the job's keys.
    (key,) = set(redis.keys(f"lacuna:picture:{job_id}:*")) - kept_before
    assert 0 < redis.ttl(key) <= ttl_before
    # The same query written differently (order, defaults) is the same picture.
    same = plot(client, job_id, "format=png&width=500&height=480&kind=barcode")
    assert same.headers["ETag"] == etag and len(plot_jobs) == 1
    unchanged = plot(client, job_id, query, **{"If-None-Match": etag})
    assert unchanged.status_code == 304 and unchanged.data == b"" and len(plot_jobs) == 1
    assert unchanged.headers["ETag"] == etag
    other = plot(client, job_id, "kind=barcode&width=501&format=png")
    assert other.status_code == 200 and len(plot_jobs) == 2  # another query is drawn
    assert other.headers["ETag"] != etag
    changed = plot(client, job_id, query, **{"If-None-Match": '"something-else"'})
    assert changed.status_code == 200 and changed.data == first.data


def test_pictures_over_the_size_cap_are_drawn_every_time(
    served: tuple[FlaskClient, Settings], circle_job: tuple[str, dict[str, Any]]
) -> None:
    _, settings = served
    app = app_with(redis_url=settings.redis_url, queue=settings.queue, picture_cache_max_bytes=0)
    queue = app.extensions["lacuna"].queue
    before = len(queue.redis.keys(f"lacuna:picture:{circle_job[0]}:*"))
    for _ in range(2):
        assert plot(app.test_client(), circle_job[0], "kind=diagram&width=403").status_code == 200
    assert len(queue.redis.keys(f"lacuna:picture:{circle_job[0]}:*")) == before


def test_tenants_cannot_read_each_others_pictures(served: tuple[FlaskClient, Settings]) -> None:
    _, settings = served
    assert settings.redis_url is not None
    store = KeyStore(Redis.from_url(settings.redis_url))
    a, b = ({"Authorization": f"Bearer {store.create(t).key}"} for t in ("lab-a", "lab-b"))
    app = app_with(redis_url=settings.redis_url, queue=settings.queue, auth="keys")
    client = app.test_client()
    answer = post(client, JOBS, rips_job(max_dim=1), headers={**a, **WAIT})
    job_id = answer.get_json()["job_id"]
    drawn = plot(client, job_id, "kind=diagram", **a)
    assert drawn.status_code == 200
    assert plot(client, job_id, "kind=diagram", **a).data == drawn.data  # A reads it again
    etag = drawn.headers["ETag"]
    for headers in (b, {**b, "If-None-Match": etag}):
        problem = problem_of(plot(client, job_id, "kind=diagram", **headers), 404)
        assert problem["type"].endswith("job-not-found")


def test_a_jobs_pictures_are_kept_within_its_byte_budget(
    served: tuple[FlaskClient, Settings],
) -> None:
    client, settings = served
    job_id = result_of(client, rips_job(noisy_circle(30, seed=4).tolist(), max_dim=1))["job_id"]
    redis = client.application.extensions["lacuna"].queue.redis
    kept = f"lacuna:picture:{job_id}:*"
    on = {"redis_url": settings.redis_url, "queue": settings.queue}
    # Budget 0: drawn, never kept; this measures the picture's size.
    first = plot(app_with(**on, picture_cache_bytes_per_job=0).test_client(), job_id, "width=400")
    assert first.status_code == 200 and redis.keys(kept) == []
    size = len(first.data)
    # Budget 1.5 pictures: the first is kept, the next (about as large) drawn but not kept.
    budgeted = app_with(**on, picture_cache_bytes_per_job=size + size // 2).test_client()
    assert plot(budgeted, job_id, "width=400").data == first.data
    assert len(redis.keys(kept)) == 1
    for _ in range(2):
        other = plot(budgeted, job_id, "width=401")
        assert other.status_code == 200 and b"<svg" in other.data[:1000]
        assert len(redis.keys(kept)) == 1
    used = f"lacuna:picture-bytes:{job_id}"
    assert int(redis.get(used)) == size
    # Expires with the job: TTL rounds to whole seconds (the job's remaining TTL, read at
    # store time, is a whole number of seconds), so allow the one second of rounding.
    assert 0 < redis.pttl(used) <= redis.pttl(f"rq:job:{job_id}") + 1000


def test_if_none_match_compares_weakly(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], plot_jobs: list[Submission]
) -> None:
    # RFC 9110 section 13.1.2: If-None-Match uses the weak comparison, so W/"x" matches "x".
    job_id, _ = circle_job
    etag = plot(client, job_id, "kind=diagram&width=410").headers["ETag"]
    unchanged = plot(client, job_id, "kind=diagram&width=410", **{"If-None-Match": f"W/{etag}"})
    assert unchanged.status_code == 304 and unchanged.headers["ETag"] == etag
    listed = plot(client, job_id, "kind=diagram&width=410", **{"If-None-Match": f'"x", {etag}'})
    assert listed.status_code == 304
    assert len(plot_jobs) <= 1  # drawn at most once (the first request, unless kept before)


def test_if_none_match_never_hides_a_query_that_does_not_fit_the_job(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], plot_jobs: list[Submission]
) -> None:
    # A Rips job has no matrix and no H3: 422 naming the field, even to If-None-Match: *.
    job_id, _ = circle_job
    unfit = (("kind=matrix", "/kind"), ("dim=3", "/dim"), ("kind=image&top=2", "/top"))
    for query, pointer in unfit:
        problem = problem_of(plot(client, job_id, query, **{"If-None-Match": "*"}), 422)
        assert [e["pointer"] for e in problem["errors"]] == [pointer]
    assert plot(client, job_id, "kind=diagram", **{"If-None-Match": "*"}).status_code == 304
    assert plot_jobs == []


def test_the_etag_changes_with_lacunas_version(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]], monkeypatch: pytest.MonkeyPatch
) -> None:
    # An upgrade may change the drawing without a DRAWING_VERSION bump: its pictures are new.
    job_id, _ = circle_job
    etag = plot(client, job_id, "kind=diagram&width=420").headers["ETag"]
    monkeypatch.setattr("service.pictures._lacuna_version", lambda: "0.0.0+another")
    assert plot(client, job_id, "kind=diagram&width=420").headers["ETag"] != etag


def test_remaining_ttl_of_a_job(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any]]
) -> None:
    state = client.application.extensions["lacuna"]
    redis = state.queue.redis
    ended = Job(circle_job[0], connection=redis)
    assert 0 < (state.queue.remaining_ttl_s(ended) or 0) <= state.settings.result_ttl_s
    gone = Job(str(uuid.uuid4()), connection=redis)
    assert state.queue.remaining_ttl_s(gone) == 0  # Redis: -2
    forever = Job(str(uuid.uuid4()), connection=redis)
    redis.hset(forever.key, "status", "finished")
    assert state.queue.remaining_ttl_s(forever) is None  # Redis: -1
    redis.delete(forever.key)


@pytest.mark.parametrize(
    ("body", "meaning"),
    [
        ({"metric": "bottleneck"}, "infinite: unequal numbers of classes that never die"),
        ({"metric": "bottleneck", "never_dying": {"mode": "drop"}}, "beyond the range of float64"),
        (
            {"metric": "wasserstein", "never_dying": {"mode": "cap", "cap": 3.0}},
            "beyond the range of float64",
        ),
        ({"metric": "euclidean", "vectors": [[0, 1], [1, 0]]}, "beyond the range of float64"),
        ({"metric": "cosine", "vectors": [[0, 1], [1, 0]]}, "undefined: a vector of all zeros"),
    ],
)
def test_the_null_text_of_a_matrix_follows_its_metric_and_never_dying(
    client: FlaskClient, body: dict[str, Any], meaning: str
) -> None:
    # Only "separate" (the default) makes a diagram distance infinite for unequal counts of
    # classes that never die; with drop or cap (and euclidean) a null can only be an overflow.
    # Such overflows are out of reach of the inputs' bounds, so the null is put in the result.
    items = {} if "vectors" in body else {"diagrams": [[[0, 1], [0, None]], [[0, 2]]]}
    answer = post(client, "/v1/distances", {**items, **body})
    assert answer.status_code == 200, answer.get_json()
    distances = answer.get_json()
    queue = client.application.extensions["lacuna"].queue
    job = Job.fetch(distances["job_id"], connection=queue.redis, serializer=JSONSerializer)
    distances["matrix"][0][1] = distances["matrix"][1][0] = None
    query = PlotQuery(kind="matrix")
    drawn = plot_submission(query, distances, queue.payload_of(job), job.id)
    assert isinstance(drawn.task, PlotTask)
    assert (drawn.task.null_meaning or "").startswith(meaning), drawn.task.null_meaning


def test_the_openapi_document_describes_the_plot_answers(client: FlaskClient) -> None:
    operation = client.get("/v1/openapi.json").get_json()["paths"]["/v1/jobs/{job_id}/plot"]["get"]
    responses = operation["responses"]
    assert {"ETag", "Cache-Control"} <= set(responses["200"]["headers"])
    assert "304" in responses and set(responses["304"]["headers"]) == {"ETag", "Cache-Control"}
    assert "If-None-Match" in [p["name"] for p in operation["parameters"]]
    words = operation["description"]
    assert "kind=matrix" in words and "never dies" in words and "point-<dim>s-never" in words
    assert "dashed" not in words and "infinity tick" not in words  # not the old look
