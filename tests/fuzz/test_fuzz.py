"""The short form of ``make fuzz``: the same script, stack and checks, fewer requests.

Schemathesis generates requests from the OpenAPI document a real ``lacuna serve`` serves (its
own embedded Redis, one worker) and checks every answer against that document: no 5xx, and
each status code, media type and body as the document declares them. The stateful phase
follows the document's links, so jobs really run and their results and pictures are fetched.
Any finding fails the test, with schemathesis's report of it in the message.
"""

import json
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = [pytest.mark.e2e, pytest.mark.slow]


def test_fuzzing_the_document_finds_nothing(tmp_path: Path) -> None:
    summary_path = tmp_path / "summary.json"
    command = [
        sys.executable,
        "-m",
        "tests.fuzz.run",
        "--max-examples",
        "10",
        "--phases",
        "examples,fuzzing,stateful",
        "--no-max-time",
        "--wall-clock",
        "300",
        "--min-requests",
        "100",
        "--report-dir",
        str(tmp_path / "reports"),
        "--summary",
        str(summary_path),
    ]
    # The script bounds itself (wall clock, RLIMIT_DATA); this timeout only bounds a hang.
    run = subprocess.run(command, capture_output=True, text=True, timeout=420)
    assert run.returncode == 0, run.stdout + run.stderr
    summary = json.loads(summary_path.read_text(encoding="utf-8"))
    assert summary["failures"] == [] and summary["internal_errors"] == []
    assert summary["requests"] >= 100 and summary["stateful_requests"] > 0
    # The links reached real jobs: results came back from the ids POSTs answered.
    fetched = [key for key in summary["statuses"] if key.endswith("/result 200")]
    assert fetched, summary["statuses"]


def test_an_answer_the_document_leaves_out_is_a_finding(tmp_path: Path) -> None:
    """The checks bite: with the 422 of POST /v1/feature-specs taken out of the document, the
    API's 422 answers are reported as undocumented (schemathesis's status_code_conformance)."""
    from service.openapi import openapi_document

    document = openapi_document()
    del document["paths"]["/v1/feature-specs"]["post"]["responses"]["422"]
    (tmp_path / "openapi.json").write_text(json.dumps(document), encoding="utf-8")
    summary_path = tmp_path / "summary.json"
    command = [
        sys.executable,
        "-m",
        "tests.fuzz.run",
        "--document",
        str(tmp_path / "openapi.json"),
        "--only",
        "registerFeatureSpec",
        "--max-examples",
        "5",
        "--phases",
        "examples,fuzzing",
        "--no-max-time",
        "--wall-clock",
        "300",
        "--min-requests",
        "1",
        "--report-dir",
        str(tmp_path / "reports"),
        "--summary",
        str(summary_path),
    ]
    run = subprocess.run(command, capture_output=True, text=True, timeout=420)
    assert run.returncode == 1, run.stdout + run.stderr
    summary = json.loads(summary_path.read_text(encoding="utf-8"))
    findings = [json.loads(finding) for finding in summary["failures"]]
    assert [(f["type"], f["operations"]) for f in findings] == [
        ("UndefinedStatusCode", ["POST /v1/feature-specs"])
    ]
