"""The job page (``GET /v1/jobs/{id}`` with ``Accept: text/html``) on a real worker: small
whatever the result's size, pictures referenced from the plot route above the JSON, pair
counts, units apart, the request as sent, a progress bar and reloading while unfinished, an
HTML 404 for browsers.

HTML is read with the standard library's parser; pair counts are checked against gudhi's
cubical complex (reference library).
"""

import io
import json
import re
from html import unescape
from html.parser import HTMLParser
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient
from redis import Redis
from werkzeug.test import TestResponse

from service.auth import PUBLIC_OWNER
from service.keys import KeyStore
from service.settings import Settings
from service.submissions import SENT_REQUEST_BYTES, request_as_sent
from tests.support.api import JOBS, WAIT, app_with, call, fresh_queue, post, problem_of, result_of
from tests.support.bodies import PERSISTENCE_IMAGE_SPEC, rips_job
from tests.support.references import gudhi_diagrams
from tests.support.synthetic import noisy_circle
from workers.spec.arrays import to_npy_bytes

HTML = {"Accept": "text/html"}
BROWSER = {"Accept": "text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8"}
"""What a browser sends when it opens a page (Chromium's Accept for a navigation)."""
# RFC 3339 section 5.6 date-time, in UTC with milliseconds as the status answers it.
TIMESTAMP = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}\.\d{3}Z")


class Page(HTMLParser):
    """Element names, attributes by id, image sources, links, text, and where each id sits
    in the document (its start tag's rank)."""

    def __init__(self, html: str) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.images: dict[str, str] = {}
        self.links: list[str] = []
        self.text: list[str] = []
        self.by_id: dict[str, dict[str, str | None]] = {}
        self.order: dict[str, int] = {}
        self.metas: list[dict[str, str | None]] = []
        self.feed(html)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        found = dict(attrs)
        self.tags.append(tag)
        if found.get("id"):
            self.by_id[found["id"] or ""] = found
            self.order[found["id"] or ""] = len(self.tags)
        if tag == "img":
            self.images[found.get("id") or ""] = found.get("src") or ""
        if tag == "meta":
            self.metas.append(found)
        for name in ("href", "src"):
            if found.get(name):
                self.links.append(found[name] or "")

    def handle_data(self, data: str) -> None:
        self.text.append(data)

    @property
    def words(self) -> str:
        return " ".join(" ".join(self.text).split())

    def table(self, table_id: str, html: str) -> list[list[str]]:
        """The cells of the table ``table_id``, row by row (header row included)."""
        start = html.index(f'id="{table_id}"')
        body = html[start : html.index("</table>", start)]
        rows = re.findall(r"<tr>(.*?)</tr>", body, re.S)
        return [
            [
                re.sub(r"<[^>]+>", "", cell).strip()
                for cell in re.findall(r"<t[dh][^>]*>(.*?)</t[dh]>", row, re.S)
            ]
            for row in rows
        ]


def page_of(client: FlaskClient, job_id: str, **headers: str) -> tuple[TestResponse, Page]:
    answer = call(client, "GET", f"{JOBS}/{job_id}", headers={**HTML, **headers})
    return answer, Page(answer.get_data(as_text=True))


def refreshes(page: Page) -> bool:
    return any((meta.get("http-equiv") or "").lower() == "refresh" for meta in page.metas)


@pytest.fixture(scope="module")
def client(served: tuple[FlaskClient, Settings]) -> FlaskClient:
    return served[0]


@pytest.fixture(scope="module")
def circle_job(client: FlaskClient) -> tuple[str, dict[str, Any], list[list[float]]]:
    """A noisy circle's H0 and H1 in um, with a persistence image of H1; the request leaves
    max_dim and every other default out. Its id, result and points."""
    points = noisy_circle(40, seed=2).tolist()
    result = result_of(client, rips_job(points, units="um", features=[PERSISTENCE_IMAGE_SPEC]))
    return result["job_id"], result, points


@pytest.fixture(scope="module")
def noise_image() -> np.ndarray:
    """150 x 150 white noise: thousands of H0 and H1 pairs under the cubical filtration."""
    return np.random.default_rng(4).standard_normal((150, 150))


@pytest.fixture(scope="module")
def image_job(client: FlaskClient, noise_image: np.ndarray) -> tuple[str, dict[str, Any]]:
    """The noise image uploaded (multipart) with spacing in um and no filtration options."""
    request = {
        "input": {"type": "image", "spacing": [0.5, 0.25], "units": "um"},
        "filtration": {"type": "cubical"},
    }
    form = {
        "request": json.dumps(request),
        "data": (io.BytesIO(to_npy_bytes(noise_image)), "noise.npy"),
    }
    answer = call(client, "POST", JOBS, data=form, content_type="multipart/form-data", headers=WAIT)
    assert answer.status_code == 200, answer.get_data(as_text=True)
    result: dict[str, Any] = answer.get_json()
    return result["job_id"], result


def test_a_page_of_thousands_of_pairs_is_small_and_references_its_pictures(
    client: FlaskClient, image_job: tuple[str, dict[str, Any]]
) -> None:
    job_id, result = image_job
    pairs = sum(len(diagram["pairs"]) for diagram in result["diagrams"])
    assert pairs > 3000
    answer, page = page_of(client, job_id)
    assert answer.status_code == 200 and answer.mimetype == "text/html"
    assert len(answer.data) < 30_000, len(answer.data)
    assert not re.search(rb"""=\s*["']?data:""", answer.data)  # no data: URI anywhere
    assert page.images == {
        "plot-diagram": f"/v1/jobs/{job_id}/plot?kind=diagram",
        "plot-barcode": f"/v1/jobs/{job_id}/plot?kind=barcode",
    }
    assert f"/v1/jobs/{job_id}/plot?kind=diagram&format=png" in page.links
    # No external asset and no script: every link stays on this server.
    assert "script" not in page.tags and "link" not in page.tags
    assert all(link.startswith("/v1/") for link in page.links), page.links
    assert "not for diagnosis or treatment decisions" in page.words
    assert not refreshes(page)  # it has ended


def test_the_pictures_come_before_the_tables_and_the_request(
    client: FlaskClient, image_job: tuple[str, dict[str, Any]]
) -> None:
    _, page = page_of(client, image_job[0])
    assert page.order["plot-diagram"] < page.order["plot-barcode"] < page.order["pair-counts"]
    assert page.order["plot-barcode"] < page.order["request"] and "progress" not in page.by_id


def test_pair_counts_per_dimension_match_gudhi(
    client: FlaskClient, image_job: tuple[str, dict[str, Any]], noise_image: np.ndarray
) -> None:
    html = call(client, "GET", f"{JOBS}/{image_job[0]}", headers=HTML).get_data(as_text=True)
    rows = Page(html).table("pair-counts", html)
    assert rows[0] == ["Dimension", "Pairs", "of which never die"]
    reference = gudhi_diagrams(noise_image)  # gudhi CubicalComplex (reference library)
    assert rows[1:] == [
        [f"H{dim}", str(len(pairs)), str(int(np.isinf(pairs[:, 1]).sum()))]
        for dim, pairs in enumerate(reference)
    ]


def test_intensities_have_no_unit_and_coordinates_theirs(
    client: FlaskClient, image_job: tuple[str, dict[str, Any]]
) -> None:
    _, page = page_of(client, image_job[0])
    assert page.by_id["values"] is not None
    words = page.words
    assert "pixel_value (no unit)" in words
    assert "spacing 0.5 × 0.25 um" in words
    assert re.search(r"image, stored as 150 × 150 Input SHA-256", words), words


def sent_request(html: str) -> Any:
    """The request the page shows, read back as JSON."""
    start = html.index('<pre id="request">') + len('<pre id="request">')
    return json.loads(unescape(html[start : html.index("</pre>", start)]))


def test_an_upload_shows_its_request_part_as_sent(
    client: FlaskClient, image_job: tuple[str, dict[str, Any]]
) -> None:
    answer, page = page_of(client, image_job[0])
    assert sent_request(answer.get_data(as_text=True)) == {
        "input": {"type": "image", "spacing": [0.5, 0.25], "units": "um"},
        "filtration": {"type": "cubical"},
    }
    assert "multipart/form-data" in page.words and "data file part" in page.words


def test_a_json_request_shows_as_sent_without_defaults_its_arrays_shortened(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any], list[list[float]]]
) -> None:
    job_id, _, points = circle_job
    html = call(client, "GET", f"{JOBS}/{job_id}", headers=HTML).get_data(as_text=True)
    sent = sent_request(html)
    # The points are a placeholder with their shape, pointing at the input's hash.
    assert len(points) == 40
    assert sent["input"] == {
        "type": "points",
        "points": "<40 × 2 array; see Input SHA-256>",
        "units": "um",
    }
    assert sent["filtration"] == {"type": "rips"}  # no max_dim, max_edge or subsample filled in
    assert sent["features"][0]["resolution"] == PERSISTENCE_IMAGE_SPEC["resolution"]
    assert "max_dim" not in html and "spec_id" not in json.dumps(sent)


def test_the_request_kept_shows_long_lists_in_part_and_is_capped(client: FlaskClient) -> None:
    body = {**rips_job(), "features": [{"type": "summary", "dim": 0}] * 40}
    answer = post(client, JOBS, body, headers=WAIT)
    assert answer.status_code == 200, answer.get_data(as_text=True)
    html = call(client, "GET", f"{JOBS}/{answer.get_json()['job_id']}", headers=HTML).get_data(
        as_text=True
    )
    features = sent_request(html)["features"]
    assert features[:32] == body["features"][:32] and features[32:] == ["<... 8 more items>"]
    # 900 long strings (not an array, so shown item by item: 200 kB) are cut at the cap.
    notes = request_as_sent({"notes": [[{"note": "x" * 200}] * 30] * 30}, "application/json")
    assert len(notes["text"].encode()) <= SENT_REQUEST_BYTES + 100
    assert notes["text"].endswith(f"(cut at {SENT_REQUEST_BYTES} bytes)")


def test_a_rips_job_with_a_persistence_image_shows_three_pictures_that_exist(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any], list[list[float]]]
) -> None:
    job_id, result, _ = circle_job
    _, page = page_of(client, job_id)
    assert set(page.images) == {"plot-diagram", "plot-barcode", "plot-image"}
    for source in page.images.values():  # each picture the page names is served
        picture = call(client, "GET", source)
        assert picture.status_code == 200 and picture.mimetype == "image/svg+xml"
    assert "edge_length in um" in page.words and "succeeded" in page.words
    assert result["layout_id"] in page.words


def test_per_direction_results_show_the_first_direction_and_counts_per_direction(
    client: FlaskClient,
) -> None:
    body = {
        "input": {"type": "graph", "nodes": [[0, 0], [1, 0], [1, 1]], "edges": [[0, 1], [1, 2]]},
        "filtration": {"type": "height", "directions": 3},
    }
    job_id = post(client, JOBS, body, headers=WAIT).get_json()["job_id"]
    answer, page = page_of(client, job_id)
    assert page.images["plot-diagram"] == f"/v1/jobs/{job_id}/plot?kind=diagram&direction=0"
    rows = page.table("pair-counts", answer.get_data(as_text=True))
    assert rows[0] == ["Direction", "Dimension", "Pairs", "of which never die"]
    # A path is one component in every direction (common practice): H0 has one pair that
    # never dies; it has no cycle, so H1 is empty.
    h0 = [row for row in rows[1:] if row[1] == "H0"]
    assert [row[0] for row in h0] == ["0", "1", "2"] and all(row[3] == "1" for row in h0)


def test_a_distance_matrix_shows_its_matrix_picture(client: FlaskClient) -> None:
    body = {"metric": "bottleneck", "diagrams": [[[0, 1]], [[0, 2]], [[1, 3]]]}
    result = result_of(client, body, "/v1/distances")
    _, page = page_of(client, result["job_id"])
    assert page.images == {"plot-matrix": f"/v1/jobs/{result['job_id']}/plot?kind=matrix"}
    assert "pair-counts" not in page.by_id


def test_status_timestamps_are_rfc3339_with_a_z_on_both(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any], list[list[float]]]
) -> None:
    status = call(client, "GET", f"{JOBS}/{circle_job[0]}").get_json()
    _, page = page_of(client, circle_job[0])
    for name in ("created_at", "started_at", "ended_at"):
        assert TIMESTAMP.fullmatch(status[name]), status[name]
        element = name.replace("_", "-")
        assert page.order[element] and status[name] in page.words


def test_json_stays_the_default(
    client: FlaskClient, circle_job: tuple[str, dict[str, Any], list[list[float]]]
) -> None:
    for accept in ("*/*", "application/json", "application/json, text/html;q=0.5"):
        answer = call(client, "GET", f"{JOBS}/{circle_job[0]}", headers={"Accept": accept})
        assert answer.mimetype == "application/json" and answer.get_json()["status"]


def test_page_of_a_failed_job_shows_its_problem(served: tuple[FlaskClient, Settings]) -> None:
    # The same worker, an API whose results may hold one pair: the job fails on the worker.
    _, settings = served
    strict = app_with(redis_url=settings.redis_url, queue=settings.queue, max_result_pairs=1)
    client = strict.test_client()
    body = rips_job(noisy_circle(20, seed=1).tolist(), max_dim=1)
    answer = post(client, JOBS, body, headers=WAIT)
    assert answer.get_json()["status"] == "failed"
    page = call(client, "GET", answer.headers["Location"], headers=HTML)
    text = page.get_data(as_text=True)
    assert page.status_code == 200 and "failed" in text
    assert answer.get_json()["problem"]["title"] in text
    assert "Research use only" in text and "<img" not in text


def test_a_queued_job_reloads_and_shows_an_empty_bar(served: tuple[FlaskClient, Settings]) -> None:
    # A queue no worker serves: the job stays queued.
    _, settings = served
    idle = app_with(redis_url=settings.redis_url, queue=fresh_queue()).test_client()
    job_id = post(idle, JOBS, rips_job()).get_json()["job_id"]
    _, page = page_of(idle, job_id)
    assert refreshes(page)
    assert page.by_id["progress"] == {"id": "progress", "value": "0", "max": "1"}
    assert "queued" in page.words and "<img" not in "".join(page.tags)
    assert "script" not in page.tags


def test_an_unknown_job_is_an_html_404_for_browsers_and_a_problem_otherwise(
    client: FlaskClient,
) -> None:
    unknown = "00000000-0000-4000-8000-000000000000"
    answer, page = page_of(client, unknown)
    assert answer.status_code == 404 and answer.mimetype == "text/html"
    assert len(answer.data) < 5_000
    assert "Research use only" in page.words and unknown in page.words
    assert "script" not in page.tags
    problem_of(call(client, "GET", f"{JOBS}/{unknown}"), 404)
    problem_of(
        call(client, "GET", f"{JOBS}/not-a-job", headers={"Accept": "application/json"}), 404
    )
    # Only the page route has a page: the result of an unknown job stays a problem.
    problem_of(call(client, "GET", f"{JOBS}/{unknown}/result", headers=BROWSER), 404)


def test_another_tenants_job_is_an_html_404(redis_url: str) -> None:
    app = app_with(redis_url=redis_url, queue=fresh_queue(), auth="keys")
    store = KeyStore(Redis.from_url(redis_url))
    a, b = (store.create(tenant).key for tenant in ("lab-a", "lab-b"))
    client = app.test_client()
    job_id = post(client, JOBS, rips_job(), headers={"Authorization": f"Bearer {a}"}).get_json()[
        "job_id"
    ]
    mine, _ = page_of(client, job_id, Authorization=f"Bearer {a}")
    theirs, page = page_of(client, job_id, Authorization=f"Bearer {b}")
    assert mine.status_code == 200
    assert theirs.status_code == 404 and theirs.mimetype == "text/html"
    assert "No such job" in page.words


def test_a_job_queued_before_requests_were_kept_shows_its_task_as_computed(
    client: FlaskClient,
) -> None:
    # A job queued by a server of an earlier version (no request in its meta) keeps a page
    # until its result expires, across the upgrade.
    answer = post(client, JOBS, rips_job(max_dim=1), headers=WAIT)
    job_id = answer.get_json()["job_id"]
    job = client.application.extensions["lacuna"].queue.find(job_id, PUBLIC_OWNER)
    del job.meta["request"]
    job.save_meta()
    html = call(client, "GET", f"{JOBS}/{job_id}", headers=HTML).get_data(as_text=True)
    assert "As computed" in html
    assert sent_request(html)["filtration"]["type"] == "rips"
