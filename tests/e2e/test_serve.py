"""``lacuna serve`` and ``lacuna worker`` as real processes, talked to over HTTP."""

import io
import json
import math
import os
import signal
import subprocess
import uuid
from pathlib import Path

import numpy as np
import pytest
import requests
import tifffile
from redis import Redis

from tests.support.api import pairs_array
from tests.support.bodies import rips_job
from tests.support.ports import free_port
from tests.support.redis import E2E_DB, with_database
from tests.support.references import gudhi_diagrams
from tests.support.stack import LACUNA, answers, stop, wait_ready
from tests.support.synthetic import smooth_field
from tests.support.waiting import wait_until

# Slow as a module: each test starts and stops its own stack (about 10 s together).
pytestmark = [pytest.mark.e2e, pytest.mark.slow]

JOB = rips_job(max_dim=2)  # the regular hexagon


def test_embedded_stack_answers_and_stops_cleanly(tmp_path: Path) -> None:
    port = free_port()
    env = {k: v for k, v in os.environ.items() if k != "LACUNA_REDIS_URL"}
    env["LACUNA_PORT"] = str(port)
    env["LACUNA_DATA_DIR"] = str(tmp_path / "data")  # never the user's own state folder
    process = subprocess.Popen([LACUNA, "serve"], env=env, stdout=subprocess.PIPE)
    base = f"http://127.0.0.1:{port}"
    try:
        wait_ready(base, workers=2)
        answer = requests.post(base + "/v1/jobs", json=JOB, headers={"Prefer": "wait=20"})
        assert answer.status_code == 200
        # Adamaszek & Adams 2017 (from memory): hexagon H2 = [sqrt 3, 2].
        h2 = answer.json()["diagrams"][2]["pairs"]
        assert h2 == [[pytest.approx(math.sqrt(3), rel=1e-6), pytest.approx(2.0, rel=1e-6)]]
        job = requests.get(base + answer.headers["Location"]).json()
        assert job["status"] == "succeeded"
        spec = requests.get(base + "/v1/openapi.json").json()
        assert spec["openapi"].startswith("3.1")
        _upload_a_stack(base)
        left = stop(process, signal.SIGINT)  # what Ctrl-C sends
        assert left == set(), f"orphaned processes: {left}"
        assert process.returncode == 0
        assert process.stdout is not None
        printed = process.stdout.read().decode()
        assert f"lacuna is up at http://127.0.0.1:{port}" in printed
        assert "not for diagnosis" in printed
        assert printed.rstrip().endswith("lacuna stopped")  # the orderly shutdown ran
        assert f"data directory {tmp_path / 'data'}" in printed
        assert (tmp_path / "data" / "appendonly.aof").stat().st_size > 0
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
        if process.stdout is not None:
            process.stdout.close()


def _upload_a_stack(base: str) -> None:
    """A 3D TIFF stack through gunicorn as multipart: the diagrams equal gudhi's."""
    volume = (smooth_field((8, 20, 22), 1.5, seed=9) * 3000 + 30000).astype(np.uint16)
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, volume)
    request = {"input": {"type": "image"}, "filtration": {"type": "cubical"}}
    answer = requests.post(
        base + "/v1/jobs",
        files={
            "request": (None, json.dumps(request), "application/json"),
            "data": ("stack.tif", buffer.getvalue(), "image/tiff"),
        },
        headers={"Prefer": "wait=20"},
    )
    assert answer.status_code == 200, answer.text
    # Reference library: gudhi's CubicalComplex with the voxels as top-dimensional cells.
    expected = gudhi_diagrams(volume.astype(np.float64))
    for diagram in answer.json()["diagrams"]:
        np.testing.assert_array_equal(pairs_array(diagram["pairs"]), expected[diagram["dim"]])


def test_shared_redis_api_and_separate_worker(redis_server: str) -> None:
    url = with_database(redis_server, E2E_DB)
    Redis.from_url(url).flushdb()
    port = free_port()
    env = dict(
        os.environ, LACUNA_QUEUE=f"e2e-{uuid.uuid4().hex[:12]}", LACUNA_MAX_BODY_BYTES="4096"
    )
    api = subprocess.Popen(
        [
            LACUNA,
            "serve",
            "--redis",
            url,
            "--port",
            str(port),
            "--local-workers",
            "0",
            "--http-workers",
            "1",
            "--threads",
            "4",
        ],
        env=env,
    )
    worker = None
    base = f"http://127.0.0.1:{port}"
    try:
        wait_until(lambda: answers(base + "/healthz"), 60, f"{base}/healthz answering 200")
        assert requests.get(base + "/readyz").status_code == 503  # up, but no worker yet
        # A chunked body (no Content-Length) above the limit is refused, not cut at the limit
        # and parsed from its first bytes (gunicorn hands it over read up to the limit).
        big = json.dumps({**JOB, "padding": "x" * 6000}).encode()
        chunked = requests.post(
            base + "/v1/jobs",
            data=(big[i : i + 1000] for i in range(0, len(big), 1000)),
            headers={"Content-Type": "application/json"},
        )
        assert chunked.status_code == 413, chunked.text
        assert "4096 bytes" in chunked.json()["detail"]
        submitted = requests.post(base + "/v1/jobs", json=JOB)
        assert submitted.status_code == 202
        worker = subprocess.Popen([LACUNA, "worker", "--redis", url], env=env)
        wait_ready(base)
        job_url = base + submitted.headers["Location"]
        wait_until(
            lambda: requests.get(job_url).json()["status"] in {"succeeded", "failed"},
            60,
            f"{job_url} ended",
            interval=0.1,
        )
        assert requests.get(job_url).json()["status"] == "succeeded"
        assert len(requests.get(job_url + "/result").json()["diagrams"]) == 3
        assert stop(worker, signal.SIGTERM) == set()
        assert stop(api, signal.SIGTERM) == set()
    finally:
        for process in (api, worker):
            if process is not None and process.poll() is None:
                process.kill()
                process.wait()
        Redis.from_url(url).flushdb()
