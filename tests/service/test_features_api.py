"""Feature vectors over HTTP: refused specs (422 with exact pointers), registered specs, and
the vectors a real worker returns, checked against their published definitions and persim.

Requests go through ``call`` (tests/support/api.py), so no answer may be a 500.
"""

import hashlib
import io
import json
import math
import subprocess
from typing import Any

import numpy as np
import pytest
import rfc8785
from flask.testing import FlaskClient
from pydantic import TypeAdapter

from tests.support.api import (
    JOBS,
    WAIT,
    app_with,
    call,
    fresh_queue,
    pairs_array,
    pointers_of,
    post,
    problem_of,
    refused,
    result_of,
    said,
    stored_jobs,
)
from tests.support.bodies import PERSISTENCE_IMAGE_SPEC, rips_job
from tests.support.references import landscape_by_definition
from tests.support.synthetic import noisy_circle
from workers.jobs.features import feature_values
from workers.spec import FeatureSpec
from workers.spec.arrays import canonical_sha256
from workers.spec.features import FEATURE_SPEC_VERSION, spec_id_of

SPECS = "/v1/feature-specs"
NPY = "application/x-npy"

IMAGE = PERSISTENCE_IMAGE_SPEC
LANDSCAPE: dict[str, Any] = {
    "type": "landscape",
    "dim": 1,
    "levels": 2,
    "t_range": [0.0, 2.0],
    "samples": 41,
}
BETTI: dict[str, Any] = {
    "type": "betti_curve",
    "dim": 0,
    "t_range": [0.0, 1.0],
    "samples": 11,
    "infinite": "cap",
    "cap": 2.5,
}
SUMMARY: dict[str, Any] = {"type": "summary", "dim": 1, "order": 2.0, "quantiles": [0.5, 0.9]}
ALL_FOUR = [IMAGE, LANDSCAPE, BETTI, SUMMARY]

_SPEC = TypeAdapter(FeatureSpec)


# --- helpers ---------------------------------------------------------------------------------


def points_body(features: list[Any], points: Any = None, **filtration: Any) -> dict[str, Any]:
    if points is None:
        points = noisy_circle(40, seed=1).tolist()
    return rips_job(points, features=features, **({"max_dim": 1} | filtration))


def diagrams_body(diagrams: list[Any], features: list[Any] | None = None) -> dict[str, Any]:
    return {"input": {"type": "diagrams", "diagrams": diagrams}, "features": features or []}


def changed(spec: dict[str, Any], **changes: Any) -> dict[str, Any]:
    return {**spec, **changes}


def diagram_of(result: dict[str, Any], dim: int) -> np.ndarray:
    (found,) = [d["pairs"] for d in result["diagrams"] if d["dim"] == dim]
    return pairs_array(found)


# --- 422: feature specs and inputs, one case each ---------------------------------------------

DIAGRAMS = [{"dim": 0, "pairs": [[0.0, 0.5], [0.0, None]]}]

INVALID_JOBS = [
    pytest.param(
        points_body([changed(IMAGE, birth_range=[1.0, 1.0])]),
        ["/features/0/birth_range"],
        "low < high",
        id="empty-birth-range",
    ),
    pytest.param(
        points_body([changed(IMAGE, birth_range=[2.0, 1.0])]),
        ["/features/0/birth_range"],
        "low < high",
        id="inverted-birth-range",
    ),
    pytest.param(
        points_body([changed(IMAGE, persistence_range=[1.0, 1.0])]),
        ["/features/0/persistence_range"],
        "low < high",
        id="empty-persistence-range",
    ),
    pytest.param(
        points_body([changed(IMAGE, persistence_range=[2.0, 1.0])]),
        ["/features/0/persistence_range"],
        "low < high",
        id="inverted-persistence-range",
    ),
    pytest.param(
        points_body([changed(IMAGE, persistence_range=[-0.5, 1.0])]),
        ["/features/0/persistence_range"],
        "below 0",
        id="persistence-range-below-0",
    ),
    pytest.param(
        points_body([BETTI, changed(LANDSCAPE, t_range=[1.0, 1.0])]),
        ["/features/1/t_range"],
        "low < high",
        id="empty-t-range-at-index-1",
    ),
    pytest.param(
        points_body([changed(BETTI, t_range=[2.0, 1.0])]),
        ["/features/0/t_range"],
        "low < high",
        id="inverted-t-range",
    ),
    pytest.param(
        points_body([changed(IMAGE, resolution=0)]),
        ["/features/0/resolution"],
        "tuple",
        id="resolution-0",
    ),
    pytest.param(
        points_body([changed(IMAGE, resolution=[0, 5])]),
        ["/features/0/resolution/0"],
        "greater than or equal to 1",
        id="resolution-0-by-5",
    ),
    pytest.param(
        points_body([changed(IMAGE, sigma=0.0)]),
        ["/features/0/sigma"],
        "greater than or equal to 1e-100",  # the smallest width float64 can take (MIN_SIGMA)
        id="sigma-0",
    ),
    pytest.param(
        points_body([changed(IMAGE, sigma=-0.1)]),
        ["/features/0/sigma"],
        "greater than or equal to 1e-100",
        id="negative-sigma",
    ),
    pytest.param(
        points_body([changed(IMAGE, weight={"type": "cubic"})]),
        ["/features/0/weight/type"],
        "linear",  # the message lists the weights there are
        id="unknown-weight",
    ),
    pytest.param(
        points_body([{"type": "silhouette", "dim": 1}]),
        ["/features/0/type"],
        "persistence_image",
        id="unknown-feature-type",
    ),
    pytest.param(
        points_body([changed(LANDSCAPE, infinite="cap")]),
        ["/features/0/cap"],
        "needs a cap",
        id="cap-without-cap-value",
    ),
    pytest.param(
        points_body([changed(LANDSCAPE, infinite="drop", cap=2.0)]),
        ["/features/0/cap"],
        'only used with infinite "cap"',
        id="cap-with-drop",
    ),
    pytest.param(
        points_body([changed(BETTI, samples=1)]),
        ["/features/0/samples"],
        "greater than or equal to 2",
        id="betti-samples-1",
    ),
    pytest.param(
        points_body([changed(LANDSCAPE, samples=1)]),
        ["/features/0/samples"],
        "greater than or equal to 2",
        id="landscape-samples-1",
    ),
    pytest.param(
        points_body([changed(LANDSCAPE, levels=0)]),
        ["/features/0/levels"],
        "greater than or equal to 1",
        id="levels-0",
    ),
    pytest.param(
        points_body([changed(BETTI, dim=2)]),
        ["/features/0/dim"],
        "the filtration computes (0, 1)",
        id="dim-2-with-max-dim-1",
    ),
    pytest.param(
        diagrams_body(DIAGRAMS, [changed(SUMMARY, dim=1)]),
        ["/features/0/dim"],
        "the input gives (0)",
        id="dim-not-among-given-diagrams",
    ),
    pytest.param(
        points_body([changed(IMAGE, spec_id="0" * 64)]),
        ["/features/0/spec_id"],
        "hashes to",
        id="mismatched-spec-id",
    ),
    pytest.param(
        points_body([{"spec_id": "ab" * 32}]),
        ["/features/0/spec_id"],
        "post the spec to /v1/feature-specs",
        id="unregistered-reference",
    ),
    pytest.param(points_body([5]), ["/features/0"], "is an object", id="feature-not-an-object"),
    pytest.param(
        {**diagrams_body(DIAGRAMS), "filtration": {"type": "rips", "max_dim": 1}},
        ["/filtration"],
        "no filtration",
        id="diagrams-with-filtration",
    ),
    pytest.param(
        {"input": points_body([])["input"]},
        ["/filtration"],
        "needs a filtration",
        id="points-without-filtration",
    ),
    pytest.param(
        diagrams_body([{"dim": 0, "pairs": [[0.0, 1.0], [1.0, 0.5]]}]),
        ["/input/diagrams/0/pairs/1/1"],
        "below birth",
        id="death-below-birth",
    ),
    pytest.param(
        diagrams_body([{"dim": 0, "pairs": [[0.0, 1.0]]}, {"dim": 0, "pairs": []}]),
        ["/input/diagrams/1/dim"],
        "given twice",
        id="same-dim-twice",
    ),
    # Magnitudes bounded like coordinates, so no grid or cap can overflow float64.
    pytest.param(
        points_body([changed(IMAGE, sigma=1e-101)]),
        ["/features/0/sigma"],
        "1e-100",
        id="sigma-too-small-for-float64",
    ),
    pytest.param(
        points_body([changed(LANDSCAPE, t_range=[-1e308, 1e308])]),
        ["/features/0/t_range/0", "/features/0/t_range/1"],
        "1e+100",
        id="t-range-beyond-float64",
    ),
    pytest.param(
        points_body([changed(SUMMARY, infinite="cap", cap=1.7e308)]),
        ["/features/0/cap"],
        "1e+100",
        id="cap-beyond-float64",
    ),
    pytest.param(
        points_body([changed(SUMMARY, quantiles=[0.5, 0.9, 0.5])]),
        ["/features/0/quantiles"],
        "once",
        id="repeated-quantile",
    ),
]


@pytest.mark.parametrize(("body", "pointers", "hint"), INVALID_JOBS)
def test_invalid_feature_request_is_422(
    client: FlaskClient, body: Any, pointers: list[str], hint: str
) -> None:
    refused(post(client, JOBS, body), pointers, hint)
    assert stored_jobs(client) == 0  # refused before it reaches the queue


@pytest.fixture
def small_client(redis_url: str) -> FlaskClient:
    """An app whose concatenated vectors may hold at most 100 values."""
    return app_with(redis_url=redis_url, queue=fresh_queue(), max_vector_length=100).test_client()


@pytest.mark.parametrize(
    ("spec", "pointer", "length"),
    [
        (changed(IMAGE, resolution=[11, 10]), "/features/0/resolution", 110),
        (changed(LANDSCAPE, levels=3, samples=34), "/features/0/samples", 102),
        (changed(BETTI, samples=101), "/features/0/samples", 101),
    ],
    ids=["image", "landscape", "betti-curve"],
)
def test_feature_longer_than_the_limit_is_422(
    small_client: FlaskClient, spec: dict[str, Any], pointer: str, length: int
) -> None:
    problem = refused(post(small_client, JOBS, points_body([spec])), [pointer], "limit of 100")
    assert str(length) in said(problem)  # how long it is, next to the limit
    assert stored_jobs(small_client) == 0


def test_features_longer_than_the_limit_together_are_422(small_client: FlaskClient) -> None:
    # 60 + 60 values: each is under the limit of 100, their concatenation is not.
    features = [changed(BETTI, samples=60), changed(BETTI, dim=1, samples=60)]
    problem = refused(post(small_client, JOBS, points_body(features)), ["/features"], "100")
    assert "120" in said(problem)
    assert stored_jobs(small_client) == 0


def test_features_at_the_limit_are_accepted(small_client: FlaskClient) -> None:
    # Same app as the refusals above: 100 values is allowed, so they come from the length.
    response = post(small_client, JOBS, points_body([changed(IMAGE, resolution=[10, 10])]))
    assert response.status_code == 202, response.get_data(as_text=True)


# --- /v1/feature-specs -----------------------------------------------------------------------


def test_registering_a_spec_with_a_mismatched_spec_id_is_422(client: FlaskClient) -> None:
    refused(post(client, SPECS, changed(IMAGE, spec_id="0" * 64)), ["/spec_id"], "hashes to")
    # Nothing was kept under the spec's real id either.
    real = spec_id_of(_SPEC.validate_python(IMAGE))
    problem_of(call(client, "GET", f"{SPECS}/{real}"), 404)


@pytest.mark.parametrize(
    ("body", "pointer", "hint"),
    [
        ({"type": "blob", "dim": 1}, "/type", "betti_curve"),
        (changed(LANDSCAPE, t_range=[3.0, 1.0]), "/t_range", "low < high"),
        (changed(SUMMARY, quantiles=[1.5]), "/quantiles/0", "less than or equal to 1"),
    ],
    ids=["unknown-type", "inverted-t-range", "quantile-above-1"],
)
def test_registering_an_invalid_spec_is_422(
    client: FlaskClient, body: dict[str, Any], pointer: str, hint: str
) -> None:
    refused(post(client, SPECS, body), [pointer], hint)


@pytest.mark.parametrize("spec_id", ["cd" * 32, "not-an-id"], ids=["unknown", "malformed"])
def test_unknown_feature_spec_is_404(client: FlaskClient, spec_id: str) -> None:
    problem = problem_of(call(client, "GET", f"{SPECS}/{spec_id}"), 404)
    assert spec_id in problem["detail"]


def test_registered_spec_round_trips_and_its_id_is_computable(client: FlaskClient) -> None:
    response = post(client, SPECS, IMAGE)
    assert response.status_code == 200, response.get_data(as_text=True)
    answer = response.get_json()
    spec_id = answer["spec_id"]
    assert response.headers["Location"] == f"{SPECS}/{spec_id}"
    assert answer["spec_version"] == FEATURE_SPEC_VERSION
    assert answer["shape"] == [4, 8]
    assert answer["vector_length"] == 32
    # Defaults are filled in: the canonical form is what the id hashes.
    assert answer["canonical"] == {
        **IMAGE,
        "infinite": "drop",
        "cap": None,
        "spec_version": FEATURE_SPEC_VERSION,
    }
    assert canonical_sha256(answer["canonical"]) == spec_id
    assert spec_id_of(_SPEC.validate_python(IMAGE)) == spec_id
    # A client needs no lacuna code for it: SHA-256 of the canonical JSON in the JSON
    # Canonicalization Scheme (RFC 8785; reference implementation: rfc8785 on PyPI).
    assert hashlib.sha256(rfc8785.dumps(answer["canonical"])).hexdigest() == spec_id
    # Idempotent: registering again, with its own id, or with the defaults written out,
    # answers the same.
    for body in (IMAGE, changed(IMAGE, spec_id=spec_id), changed(IMAGE, infinite="drop")):
        again = post(client, SPECS, body)
        assert again.status_code == 200
        assert again.get_json() == answer
    fetched = call(client, "GET", f"{SPECS}/{spec_id}")
    assert fetched.status_code == 200
    assert fetched.get_json() == answer


def test_a_changed_spec_has_another_id(client: FlaskClient) -> None:
    first = post(client, SPECS, IMAGE).get_json()["spec_id"]
    second = post(client, SPECS, changed(IMAGE, sigma=0.2)).get_json()["spec_id"]
    assert first != second
    assert call(client, "GET", f"{SPECS}/{second}").get_json()["canonical"]["sigma"] == 0.2


# --- jobs with features: a real worker -------------------------------------------------------


def test_submitting_features_emits_no_warning(client: FlaskClient) -> None:
    # pytest turns warnings into errors: a job with a feature must be queued cleanly (no
    # worker here, so it stays queued).
    response = post(client, JOBS, points_body([SUMMARY]))
    assert response.status_code == 202, response.get_data(as_text=True)


def _betti_by_definition(pairs: np.ndarray, grid: np.ndarray) -> list[float]:
    # beta(t) = #{(b, d) : b <= t < d}, the half-open convention (common practice).
    return [float(np.sum((pairs[:, 0] <= t) & (t < pairs[:, 1]))) for t in grid]


def _summary_by_definition(pairs: np.ndarray, order: float, quantiles: list[float]) -> list:
    lives = pairs[:, 1] - pairs[:, 0]
    lives = lives[lives > 0]
    shares = lives / lives.sum()
    return [
        float(lives.size),
        float((lives**order).sum()),  # p-th total persistence (Cohen-Steiner et al. 2010)
        float(lives.max()),
        float(lives.mean()),
        float(lives.std()),  # population standard deviation, as documented
        float(
            -(shares * np.log(shares)).sum()
        ),  # persistent entropy, Chintakunta et al. 2015 (from memory)
        *(float(np.quantile(lives, q)) for q in quantiles),  # numpy's linear interpolation
    ]


def test_all_four_feature_types_on_a_point_set(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    result = result_of(client, points_body(ALL_FOUR))
    models = [_SPEC.validate_python(spec) for spec in ALL_FOUR]
    vectors = result["vectors"]
    assert [v["type"] for v in vectors] == [s["type"] for s in ALL_FOUR]  # request order
    assert [v["dim"] for v in vectors] == [s["dim"] for s in ALL_FOUR]
    assert [v["shape"] for v in vectors] == [[4, 8], [2, 41], [11], [8]]
    assert [v["spec_id"] for v in vectors] == [spec_id_of(m) for m in models]
    assert vectors[3]["labels"][:6] == [
        "count",
        "total_persistence",
        "max_persistence",
        "mean_lifetime",
        "std_lifetime",
        "persistent_entropy",
    ]
    assert len(vectors[3]["labels"]) == 8
    for vector in vectors:
        assert len(vector["values"]) == math.prod(vector["shape"])
    # Layout: consecutive slices of the concatenated vector, in request order.
    assert result["vector_length"] == sum(len(v["values"]) for v in vectors) == 32 + 82 + 11 + 8
    start = 0
    for entry, vector in zip(result["layout"], vectors, strict=True):
        assert (entry["type"], entry["dim"], entry["spec_id"]) == (
            vector["type"],
            vector["dim"],
            vector["spec_id"],
        )
        assert entry["start"] == start
        start = entry["stop"]
        assert entry["stop"] - entry["start"] == len(vector["values"])
    assert start == result["vector_length"]
    # layout_id: SHA-256 of the JSON list of spec_ids (documented; a client can compute it).
    ids = json.dumps([v["spec_id"] for v in vectors], separators=(",", ":"))
    assert result["layout_id"] == hashlib.sha256(ids.encode()).hexdigest()

    # The values, recomputed in this process from the diagrams the job returned.
    for model, vector in zip(models, vectors, strict=True):
        expected = feature_values(model, diagram_of(result, model.dim))
        assert np.asarray(vector["values"]) == pytest.approx(expected.ravel(), rel=1e-12)

    # ... and against references outside lacuna.
    h0, h1 = diagram_of(result, 0), diagram_of(result, 1)
    assert np.isinf(h0[:, 1]).sum() == 1  # one component never dies (Rips, no max_edge)
    image = _persim_image(h1)
    assert np.asarray(vectors[0]["values"]).reshape(4, 8) == pytest.approx(image, abs=1e-12)
    grid = np.linspace(0.0, 2.0, 41)
    assert np.asarray(vectors[1]["values"]).reshape(2, 41) == pytest.approx(
        landscape_by_definition(h1, 2, grid), abs=1e-12
    )
    capped = np.where(np.isinf(h0), 2.5, h0)  # infinite "cap" at 2.5
    betti = vectors[2]["values"]
    assert betti == _betti_by_definition(capped, np.linspace(0.0, 1.0, 11))
    assert betti[0] == 40  # at scale 0 the Rips complex is the 40 points alone
    assert vectors[3]["values"] == pytest.approx(
        _summary_by_definition(h1, 2.0, [0.5, 0.9]), rel=1e-12
    )

    # Same specs on other data: same layout, other values.
    other = result_of(client, points_body(ALL_FOUR, noisy_circle(40, seed=2).tolist()))
    assert other["layout_id"] == result["layout_id"]
    assert other["layout"] == result["layout"]
    assert other["vectors"][1]["values"] != vectors[1]["values"]
    # Other order, other layout.
    swapped = result_of(client, points_body([LANDSCAPE, IMAGE, BETTI, SUMMARY]))
    assert swapped["layout_id"] != result["layout_id"]
    assert swapped["vectors"][0]["values"] == vectors[1]["values"]


def _persim_image(h1: np.ndarray) -> np.ndarray:
    """IMAGE computed by persim (Adams et al. 2017): pixel integrals of Gaussians of
    covariance sigma^2 I, weighted by persistence ** 1, on the same grid."""
    from persim import PersistenceImager

    imager = PersistenceImager(
        birth_range=(0.0, 1.0),
        pers_range=(0.0, 2.0),
        pixel_size=0.25,
        weight="persistence",
        weight_params={"n": 1.0},
        kernel_params={"sigma": [[0.01, 0.0], [0.0, 0.01]]},
    )
    assert imager.resolution == (4, 8)
    image: np.ndarray = imager.transform(h1, skew=True)
    return image


def test_registered_spec_by_id_gives_the_same_vector(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    spec_id = post(client, SPECS, LANDSCAPE).get_json()["spec_id"]
    points = noisy_circle(30, seed=5).tolist()
    by_id = result_of(client, points_body([{"spec_id": spec_id}, SUMMARY], points))
    in_full = result_of(client, points_body([LANDSCAPE, SUMMARY], points))
    assert by_id["vectors"][0]["spec_id"] == spec_id
    assert by_id["vectors"][0]["type"] == "landscape"
    assert by_id["vectors"] == in_full["vectors"]
    assert by_id["layout_id"] == in_full["layout_id"]
    # The same computation: the request is recorded with the spec, not the reference.
    assert by_id["provenance"]["request_sha256"] == in_full["provenance"]["request_sha256"]
    # A full spec carrying its correct id is accepted as well.
    carried = result_of(client, points_body([changed(LANDSCAPE, spec_id=spec_id), SUMMARY], points))
    assert carried["vectors"] == in_full["vectors"]


def test_given_diagrams_are_normalised_and_vectorised(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    diagrams = [
        {"dim": 1, "pairs": [[0.6, 0.9], [0.2, 0.7], [0.4, 0.4], [0.2, 0.5]]},
        {"dim": 0, "pairs": [[0.0, None], [0.0, 0.3], [0.0, 0.1], [0.0, 0.3], [0.2, 0.2]]},
    ]
    body = diagrams_body(diagrams, [changed(BETTI, dim=1, infinite="drop", cap=None), SUMMARY])
    body["input"]["units"] = "px"
    result = result_of(client, body)
    assert result["value_convention"] is None  # the client's values, the client's convention
    assert result["units"] == "px"
    # Sorted by dimension, then (birth, death) with null deaths last; zero-length pairs gone.
    assert result["diagrams"] == [
        {"dim": 0, "pairs": [[0.0, 0.1], [0.0, 0.3], [0.0, 0.3], [0.0, None]]},
        {"dim": 1, "pairs": [[0.2, 0.5], [0.2, 0.7], [0.6, 0.9]]},
    ]
    h1 = diagram_of(result, 1)
    assert result["vectors"][0]["values"] == _betti_by_definition(h1, np.linspace(0, 1, 11))
    assert result["vectors"][1]["values"] == pytest.approx(
        _summary_by_definition(h1, 2.0, [0.5, 0.9]), rel=1e-12
    )
    assert result["vector_length"] == 11 + 8


def test_an_empty_given_diagram_is_kept_in_the_result(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    # The client gave dimension 0 (empty) and 1; the result gives back both, so that, for
    # instance, a distance between jobs in dimension 0 finds the diagram.
    body = diagrams_body([{"dim": 0, "pairs": []}, {"dim": 1, "pairs": [[0.0, 1.0]]}])
    result = result_of(client, body)
    assert result["diagrams"] == [
        {"dim": 0, "pairs": []},
        {"dim": 1, "pairs": [[0.0, 1.0]]},
    ]


def test_npy_result_equals_the_json_vectors(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    result = result_of(client, points_body([BETTI, SUMMARY, IMAGE]))
    location = f"/v1/jobs/{result['job_id']}/result"
    response = call(client, "GET", location, headers={"Accept": NPY})
    assert response.status_code == 200
    assert response.mimetype == NPY
    array = np.load(io.BytesIO(response.data), allow_pickle=False)
    assert array.dtype == np.dtype("<f8")
    assert array.shape == (result["vector_length"],)
    expected = np.concatenate([v["values"] for v in result["vectors"]])
    assert np.array_equal(array, expected)
    for entry, vector in zip(result["layout"], result["vectors"], strict=True):
        assert np.array_equal(array[entry["start"] : entry["stop"]], vector["values"])
    # An Accept that prefers JSON still gets JSON (RFC 9110 content negotiation).
    both = call(client, "GET", location, headers={"Accept": f"application/json, {NPY};q=0.5"})
    assert both.mimetype == "application/json"
    # The inline answer of a submission honours Accept too.
    inline = post(
        client, JOBS, points_body([BETTI, SUMMARY, IMAGE]), headers={**WAIT, "Accept": NPY}
    )
    assert inline.status_code == 200
    assert np.array_equal(np.load(io.BytesIO(inline.data), allow_pickle=False), expected)


def test_feature_values_that_overflow_fail_the_job_naming_the_feature(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    # Lifetime 1e20 to the power 16 is 1e320, beyond float64: the job fails with a problem
    # pointing at the feature, never "succeeds" with values JSON cannot carry.
    body = diagrams_body([{"dim": 0, "pairs": [[0.0, 1e20]]}])
    body["features"] = [changed(SUMMARY, dim=0, order=16.0)]
    submitted = post(client, JOBS, body, headers=WAIT)
    assert submitted.status_code == 202, submitted.get_data(as_text=True)
    status = submitted.get_json()
    assert status["status"] == "failed"
    assert status["problem"]["status"] == 422
    assert status["problem"]["errors"][0]["pointer"] == "/features/0"
    assert "overflow" in status["problem"]["detail"]


def test_asking_npy_of_a_job_without_features_is_406_before_queueing(
    client: FlaskClient,
) -> None:
    # A job that can never have a vector is refused up front, so no job is lost unseen.
    body = diagrams_body([{"dim": 1, "pairs": [[0.0, 1.0]]}])
    problem = problem_of(post(client, JOBS, body, headers={"Accept": NPY}), 406)
    assert "features" in problem["detail"]
    assert client.application.extensions["lacuna"].queue.queue.count == 0


def test_npy_of_a_job_without_vectors_is_406(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    result = result_of(client, diagrams_body([{"dim": 1, "pairs": [[0.0, 1.0]]}]))
    assert result["vectors"] == [] and result["vector_length"] == 0
    assert result["layout"] == [] and result["layout_id"] is None
    location = f"/v1/jobs/{result['job_id']}/result"
    problem = problem_of(call(client, "GET", location, headers={"Accept": NPY}), 406)
    assert "application/json" in problem["detail"]  # says what to ask for instead
    assert call(client, "GET", location).get_json() == result


# --- capabilities ----------------------------------------------------------------------------


def test_capabilities_list_features_and_vector_limits(redis_url: str) -> None:
    client = app_with(
        redis_url=redis_url, queue=fresh_queue(), max_vector_length=777, max_distance_count=55
    ).test_client()
    answer = call(client, "GET", "/v1/capabilities").get_json()
    assert sorted(answer["features"]) == sorted(
        ["persistence_image", "landscape", "betti_curve", "summary"]
    )
    assert answer["feature_spec_version"] == FEATURE_SPEC_VERSION
    assert answer["binary_media_type"] == NPY
    assert answer["limits"]["max_vector_length"] == 777
    assert answer["limits"]["max_distance_count"] == 55
    assert answer["limits"]["max_features"] >= 1


def test_registering_a_spec_longer_than_the_limit_is_422(small_client: FlaskClient) -> None:
    # A spec no job could use is not kept either (the limit is in /v1/capabilities).
    body = changed(BETTI, samples=1_000_000_000_000)
    problem = problem_of(post(small_client, SPECS, body), 422)
    assert pointers_of(problem) == ["/samples"]
    assert "limit" in said(problem)


@pytest.mark.parametrize(
    ("body", "pointer"),
    [
        (changed(SUMMARY, dim=8), "/dim"),
        (changed(IMAGE, birth_range=[1.0, 0.0]), "/birth_range"),
        (changed(IMAGE, weight={"type": "power", "exponent": 0}), "/weight/exponent"),
    ],
)
def test_registering_points_at_the_field_without_the_union_tag(
    client: FlaskClient, body: dict[str, Any], pointer: str
) -> None:
    # The body is the spec itself: pointers start at its own fields (RFC 6901).
    assert pointers_of(problem_of(post(client, SPECS, body), 422)) == [pointer]
