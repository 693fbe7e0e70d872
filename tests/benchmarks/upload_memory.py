"""Memory of one gunicorn API process under parallel GraphML uploads: peak and retained RSS.

    python -m tests.benchmarks.upload_memory FILE.graphml [--uploads 4] [--cap-gb 8]

Starts its own redis-server and one gunicorn worker (the argv of ``lacuna serve``, one HTTP
worker, 16 threads) under an address-space cap (RLIMIT_AS via prlimit), sends ``--uploads``
multipart job requests with FILE as the data part at once to 127.0.0.1, and samples the
worker's RSS every 20 ms: fresh, then after one warm-up upload, the peak during the uploads
and what is still held 5 s after the last answer. No worker runs the jobs; they stay queued.
Make a file with the project's generators, e.g. a ``workers.scenario.capillary_network``
written with ``networkx.write_graphml``.
"""

import argparse
import json
import os
import subprocess
import sys
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import requests

from tests.support.ports import free_port
from tests.support.processes import descendants
from tests.support.redis import own_redis_server
from tests.support.stack import answers
from tests.support.waiting import wait_until

REQUEST = json.dumps({"input": {"type": "graph"}, "output": ["descriptors"]})


def _rss(pid: int) -> int:
    """Resident set size of ``pid`` in bytes (Linux /proc)."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) * 1024
    raise RuntimeError(f"no VmRSS for {pid}")


def _gunicorn(port: int, redis_url: str, cap_bytes: int, config: str) -> subprocess.Popen[bytes]:
    argv = [sys.executable, "-m", "gunicorn", "service.wsgi:app"]
    argv += ["--bind", f"127.0.0.1:{port}", "--workers", "1", "--threads", "16"]
    argv += ["--timeout", "300", "--no-control-socket"]
    argv += ["--config", config] if config else []
    env = dict(
        os.environ, LACUNA_REDIS_URL=redis_url, LACUNA_QUEUE="upload-memory", LACUNA_AUTH="open"
    )
    return subprocess.Popen(["prlimit", f"--as={cap_bytes}", *argv], env=env)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("file", type=Path)
    parser.add_argument("--uploads", type=int, default=4)
    parser.add_argument("--cap-gb", type=float, default=8.0)
    parser.add_argument(
        "--config", default="python:service.gunicorn_config", help="'' for gunicorn's defaults"
    )
    args = parser.parse_args()
    data = args.file.read_bytes()
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    with own_redis_server() as redis_url:
        master = _gunicorn(port, redis_url, int(args.cap_gb * 2**30), args.config)
        try:
            wait_until(lambda: answers(base + "/healthz"), 60, "gunicorn up")
            (worker,) = descendants(master.pid)  # prlimit execs gunicorn: one worker below
            samples: list[int] = []
            stop = threading.Event()

            def sample() -> None:
                while not stop.is_set():
                    samples.append(_rss(worker))
                    time.sleep(0.02)

            def upload(_: int) -> str:
                answer = requests.post(
                    base + "/v1/jobs",
                    files={"request": (None, REQUEST), "data": ("g.graphml", data)},
                    timeout=600,
                )
                return f"{answer.status_code} {answer.headers.get('Content-Type')}"

            fresh = _rss(worker)
            upload(0)  # warm-up: imports and first allocations
            time.sleep(1)
            baseline = _rss(worker)
            sampler = threading.Thread(target=sample, daemon=True)
            sampler.start()
            started = time.monotonic()
            with ThreadPoolExecutor(args.uploads) as pool:
                statuses = list(pool.map(upload, range(args.uploads)))
            took = time.monotonic() - started
            time.sleep(5)
            stop.set()
            sampler.join()
            retained = _rss(worker)
            mib = 2**20
            print(f"file {len(data) / 1e6:.1f} MB, {args.uploads} parallel uploads in {took:.1f} s")
            print(f"answers: {statuses}")
            print(
                f"RSS MiB: fresh {fresh / mib:.0f}, after one upload {baseline / mib:.0f}, "
                f"peak {max(samples) / mib:.0f}, retained 5 s later {retained / mib:.0f}"
            )
        finally:
            master.terminate()
            master.wait(30)


if __name__ == "__main__":
    main()
