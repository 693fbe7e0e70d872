"""The job page in a real headless Chromium (Debian's chromium package) against a real
``lacuna serve``: the page loads, names the job and the research-use caution, and shows the
pictures it references from the plot route (pixels of the H0 and H1 colours in the
screenshot, which is kept as a test artifact); a queued or running job's page reloads itself
and shows a progress bar, an ended job's page does neither; an unknown job is a page too.
"""

import io
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from lacuna_client import Client
from tests.support.synthetic import noisy_circle
from tests.support.waiting import wait_until
from workers.pictures.drawing import COLOURS

pytestmark = pytest.mark.e2e

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
# Flags for a sandboxed root session on a closed network (common practice for CI machines).
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-quic",
    "--no-first-run",
    "--hide-scrollbars",
]


def chromium(tmp_path: Path, *args: str) -> subprocess.CompletedProcess[str]:
    assert CHROMIUM is not None
    profile = tmp_path / "profile"
    return subprocess.run(
        [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args],
        capture_output=True,
        text=True,
        timeout=120,
    )


def pixels_near(picture: Image.Image, colour: str, tolerance: int = 12) -> int:
    rgb = np.asarray(picture.convert("RGB"), dtype=np.int64)
    target = np.array([int(colour[i : i + 2], 16) for i in (1, 3, 5)])
    return int((np.abs(rgb - target).max(axis=2) <= tolerance).sum())


@pytest.mark.skipif(
    CHROMIUM is None,
    reason="chromium is not installed (make test installs it where apt-get is available as root)",
)
def test_job_page_loads_and_shows_the_plots(base: str, tmp_path: Path) -> None:
    client = Client(base)
    job = client.submit_points(noisy_circle(40, seed=2), {"type": "rips", "max_dim": 1}, units="um")
    client.wait(job, 60)
    url = f"{base}/v1/jobs/{job}"

    dom = chromium(tmp_path, "--dump-dom", url)
    assert dom.returncode == 0, dom.stderr[-2000:]
    assert f"lacuna job <code>{job}</code>" in dom.stdout
    assert "not for diagnosis or treatment decisions" in dom.stdout
    assert 'id="plot-diagram"' in dom.stdout and 'id="plot-barcode"' in dom.stdout
    # The pictures are resources of their own, fetched by the browser from the plot route.
    assert f'src="/v1/jobs/{job}/plot?kind=diagram"' in dom.stdout
    assert "data:image" not in dom.stdout and 'id="pair-counts"' in dom.stdout
    assert not refreshes(dom.stdout) and "<progress" not in dom.stdout  # it has ended

    shot = tmp_path / "job-page.png"
    done = chromium(tmp_path, f"--screenshot={shot}", "--window-size=1280,2000", url)
    assert done.returncode == 0 and shot.exists(), done.stderr[-2000:]
    picture = Image.open(io.BytesIO(shot.read_bytes()))
    assert picture.size == (1280, 2000)
    # The pictures were drawn: the page's own colours are only grey and pale tints, so pixels
    # of the H0 (blue) and H1 (vermillion) colours come from the diagram and the barcode.
    assert pixels_near(picture, COLOURS[0]) > 200
    assert pixels_near(picture, COLOURS[1]) > 20
    print(f"screenshot: {shot}")


def refreshes(dom: str) -> bool:
    return '<meta http-equiv="refresh"' in dom


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed")
def test_an_unfinished_job_page_reloads_itself_with_a_progress_bar(
    base: str, tmp_path: Path
) -> None:
    client = Client(base)
    # H2 of 2000 random points in 3D: tens of seconds each, so with two workers busy the
    # third job waits in the queue; all are cancelled once their pages are seen.
    points = np.random.default_rng(0).uniform(size=(2000, 3))
    jobs = [client.submit_points(points, {"type": "rips", "max_dim": 2}) for _ in range(3)]
    try:
        states = {job: "" for job in jobs}

        def both_seen() -> bool:
            states.update({job: client.status(job)["status"] for job in jobs})
            return {"queued", "running"} <= set(states.values())

        wait_until(both_seen, 60, lambda: f"a running and a queued job among {states}")
        for state in ("running", "queued"):
            job = next(job for job, seen in states.items() if seen == state)
            dom = chromium(tmp_path, "--dump-dom", f"{base}/v1/jobs/{job}")
            assert dom.returncode == 0, dom.stderr[-2000:]
            assert refreshes(dom.stdout), state
            assert '<progress id="progress"' in dom.stdout, state
    finally:
        for job in jobs:
            client.cancel(job)
    wait_until(lambda: client.status(jobs[0])["status"] == "cancelled", 60, "cancelled")
    dom = chromium(tmp_path, "--dump-dom", f"{base}/v1/jobs/{jobs[0]}")
    assert dom.returncode == 0, dom.stderr[-2000:]
    assert "cancelled" in dom.stdout
    assert not refreshes(dom.stdout) and "<progress" not in dom.stdout


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed")
def test_an_unknown_job_is_a_page(base: str, tmp_path: Path) -> None:
    dom = chromium(tmp_path, "--dump-dom", f"{base}/v1/jobs/00000000-0000-4000-8000-000000000000")
    assert dom.returncode == 0, dom.stderr[-2000:]
    assert "No such job" in dom.stdout and "not for diagnosis or treatment decisions" in dom.stdout
