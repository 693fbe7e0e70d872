"""Limits that live in the settings: a deployment sets them, /v1/capabilities shows them and
requests above them are refused naming the field."""

from service.app import create_app
from service.settings import Settings

SUMMARY = {"type": "summary", "dim": 0}
JOB = {
    "input": {"type": "diagrams", "diagrams": [{"dim": 0, "pairs": [[0.0, 1.0]]}]},
}


def test_feature_count_limit_comes_from_the_settings(redis_url: str) -> None:
    app = create_app(Settings(redis_url=redis_url, queue="limits", max_features=2, auth="open"))
    client = app.test_client()
    assert client.get("/v1/capabilities").get_json()["limits"]["max_features"] == 2
    answer = client.post("/v1/jobs", json={**JOB, "features": [SUMMARY] * 3})
    assert answer.status_code == 422
    assert [e["pointer"] for e in answer.get_json()["errors"]] == ["/features"]
    assert "limit of 2" in answer.get_json()["errors"][0]["message"]
    # Two are within it: the request passes validation and is queued (202, no worker here).
    assert client.post("/v1/jobs", json={**JOB, "features": [SUMMARY] * 2}).status_code == 202
