"""The ``lacuna`` command line against a real ``lacuna serve``: a batch of 50 demo files gives
one vector row per file, equal to calling the API file by file; status, fetch and cancel; exit
codes 0 (success), 1 (a job failed) and 2 (usage)."""

import csv
import json
import subprocess
from pathlib import Path

import numpy as np
import pytest

from lacuna_client import Client, LacunaError
from tests.support.ports import free_port
from tests.support.stack import LACUNA

# Slow as a module: one stack and 50 demo files for all its tests (about 40 s), two of
# which take over 10 s on their own (every demo data set; the client's retries against
# a refused port).
pytestmark = [pytest.mark.e2e, pytest.mark.slow]

BETTI = {"type": "betti_curve", "dim": 1, "t_range": [0.0, 60.0], "samples": 16}
SUMMARY = {"type": "summary", "dim": 0}


@pytest.fixture(scope="module")
def cells(tmp_path_factory: pytest.TempPathFactory) -> list[Path]:
    """50 synthetic two-population cell tables written by ``lacuna demo``."""
    folder = tmp_path_factory.mktemp("demo")
    done = run("demo", "cells", "--out", str(folder), "--count", "50")
    assert done.returncode == 0, done.stderr
    files = sorted(folder.glob("*.csv"))
    assert len(files) == 50
    return files


def run(*args: str, check: int | None = None) -> subprocess.CompletedProcess[str]:
    done = subprocess.run([LACUNA, *args], capture_output=True, text=True, timeout=600)
    if check is not None:
        assert done.returncode == check, (done.returncode, done.stdout, done.stderr)
    return done


def table_points(path: Path) -> np.ndarray:
    """The x, y columns of a demo table, read with the csv module (the reference reader)."""
    with path.open(newline="") as table:
        rows = list(csv.DictReader(table))
    return np.array([[float(r["x"]), float(r["y"])] for r in rows], dtype=np.float64)


def test_batch_of_50_files_equals_the_api_one_by_one(
    base: str, cells: list[Path], tmp_path: Path
) -> None:
    features = tmp_path / "features.json"
    features.write_text(json.dumps([BETTI, SUMMARY]))
    out = tmp_path / "out"
    done = run(
        "submit",
        *map(str, cells),
        "--server",
        base,
        "--features",
        str(features),
        "--filtration",
        '{"type": "rips", "max_dim": 1}',
        "--out",
        str(out),
        "--json",
        check=0,
    )
    summary = json.loads(done.stdout)
    assert summary["files"] == summary["succeeded"] == 50 and summary["failed"] == []
    rows = np.load(out / "vectors.npy", allow_pickle=False)
    manifest = json.loads((out / "vectors.json").read_text())
    assert rows.shape[0] == 50 == len(manifest["rows"])
    assert [Path(r["file"]).name for r in manifest["rows"]] == [p.name for p in cells]
    assert len(list(out.glob("*.result.json"))) == 50
    # The same requests, one by one through the client: identical vectors, row for row.
    client = Client(base)
    for path, row in zip(cells[:10], rows[:10], strict=True):
        job = client.submit_points(
            table_points(path), {"type": "rips", "max_dim": 1}, [BETTI, SUMMARY]
        )
        np.testing.assert_array_equal(client.vectors(job), row)
    # vectors.csv: a comment naming the layout and spec_ids, a header, the same numbers.
    lines = (out / "vectors.csv").read_text().splitlines()
    assert lines[0].startswith("# lacuna feature vectors; layout_id " + manifest["layout_id"])
    assert all(spec_id in lines[0] for spec_id in manifest["spec_ids"])
    table = list(csv.reader(lines[1:]))
    assert table[0][:2] == ["file", "job_id"] and len(table[0]) == 2 + rows.shape[1]
    assert table[0][2] == "betti_curve_h1_0" and table[0][-1].startswith("summary_h0_")
    np.testing.assert_array_equal(np.array([r[2:] for r in table[1:]], dtype=float), rows)


def test_failed_jobs_exit_1_and_write_their_problems(base: str, tmp_path: Path) -> None:
    good, nan, bad = tmp_path / "good.csv", tmp_path / "nan.csv", tmp_path / "bad.json"
    good.write_text("x,y\n0,0\n1,0\n0,1\n")
    nan.write_text("x,y\n0,0\nnan,0\n")  # JSON cannot carry NaN: refused before sending
    graph = {"type": "graph", "nodes": [[0, 0], [1, 0]], "edges": [[0, 5]]}
    bad.write_text(
        json.dumps({"input": graph, "filtration": {"type": "height", "direction": [0, 1]}})
    )
    done = run("submit", str(good), str(nan), str(bad), "--server", base, "--quiet", check=1)
    assert "1 of 3 jobs succeeded" in done.stdout and "nan.csv" in done.stdout
    refused = json.loads((tmp_path / "nan.problem.json").read_text())["problem"]
    assert refused["errors"][0]["pointer"] == "/input/points/1/0"
    invalid = json.loads((tmp_path / "bad.problem.json").read_text())["problem"]
    assert invalid["status"] == 422  # the service's own answer
    assert invalid["errors"][0]["pointer"] == "/input/edges/0/1"
    assert json.loads((tmp_path / "good.result.json").read_text())["diagrams"]


@pytest.mark.parametrize(
    "args",
    [
        ["submit"],  # no files
        ["submit", "missing.csv"],  # cannot be read
        ["submit", "table.xlsx"],  # unknown file type
        ["submit", "x.csv", "--features", "{not json"],
        ["submit", "x.csv", "--input-type", "volume"],
        ["status"],  # no job id
        ["no-such-command"],
    ],
)
def test_usage_errors_exit_2(args: list[str], tmp_path: Path) -> None:
    (tmp_path / "table.xlsx").write_text("")
    done = subprocess.run([LACUNA, *args], capture_output=True, text=True, cwd=tmp_path, timeout=60)
    assert done.returncode == 2, (done.stdout, done.stderr)
    assert done.stderr


def test_status_fetch_and_cancel(base: str, tmp_path: Path) -> None:
    client = Client(base)
    job = client.submit_points(np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]), {"type": "rips"})
    client.wait(job, 60)
    status = json.loads(run("status", job, "--server", base, "--json", check=0).stdout)
    assert status["status"] == "succeeded" and status["job_id"] == job
    assert run("status", job, "--server", base, check=0).stdout.strip() == "succeeded"
    target = tmp_path / "result.json"
    run("fetch", job, "--server", base, "--out", str(target), check=0)
    assert json.loads(target.read_text()) == client.result(job)
    # Cancelling a job that has ended is refused (409): exit 1 with the problem.
    done = run("cancel", job, "--server", base, "--json", check=1)
    assert json.loads(done.stdout)["problem"]["status"] == 409
    heavy = client.submit_points(
        np.random.default_rng(0).uniform(size=(2000, 3)), {"type": "rips", "max_dim": 2}
    )
    cancelled = json.loads(run("cancel", heavy, "--server", base, "--json", check=0).stdout)
    assert cancelled["status"] in ("cancelled", "running")  # 202 while a running job stops
    with pytest.raises(LacunaError):
        client.wait(heavy, 60)
    assert run("status", heavy, "--server", base, check=1).stdout.startswith("cancelled")
    assert run("status", "00000000-0000-4000-8000-000000000000", "--server", base, check=1).stderr


def test_unreachable_server_exits_1(tmp_path: Path) -> None:
    done = run("status", "abc", "--server", f"http://127.0.0.1:{free_port()}", check=1)
    assert "unreachable" in done.stderr.lower()


def test_every_demo_data_set_submits(base: str, tmp_path: Path) -> None:
    # `lacuna demo --out DIR` writes every kind; each goes through `lacuna submit` as it is.
    run("demo", "--out", str(tmp_path / "demo"), check=0)
    demo = tmp_path / "demo"
    height = '{"type": "height", "direction": [0, 1]}'
    batches = [
        [*map(str, sorted((demo / "images").iterdir())), "--out", str(tmp_path / "images")],
        [
            *(str(p) for p in sorted((demo / "masks").iterdir()) if p.suffix in (".png", ".tif")),
            "--input-type",
            "mask",
            "--out",
            str(tmp_path / "masks"),
        ],
        [
            *map(str, sorted((demo / "masks").glob("*.png"))),
            "--input-type",
            "mask",
            "--skeletonize",
            "--filtration",
            height,
            "--out",
            str(tmp_path / "skeletons"),
        ],
        [
            *map(str, sorted((demo / "network").glob("*.graphml"))),
            "--filtration",
            height,
            "--out",
            str(tmp_path / "graphml"),
        ],
        [*map(str, sorted((demo / "network").glob("*.json"))), "--out", str(tmp_path / "json")],
    ]
    for files in batches:
        files = [f for f in files if not f.endswith("README.txt")]
        summary = json.loads(
            run("submit", *files, "--server", base, "--quiet", "--json", check=0).stdout
        )
        assert summary["succeeded"] == summary["files"] > 0, summary["failed"]


def test_vectors_of_different_layouts_do_not_stack(base: str, tmp_path: Path) -> None:
    # Each file's request carries its own feature: the jobs succeed, the rows would not be
    # comparable, so nothing is stacked and the exit code says so.
    points = [[0, 0], [1, 0], [0, 1], [1, 1]]
    for name, feature in (("a", SUMMARY), ("b", BETTI)):
        request = {
            "input": {"type": "points", "points": points},
            "filtration": {"type": "rips"},
            "features": [feature],
        }
        (tmp_path / f"{name}.json").write_text(json.dumps(request))
    done = run(
        "submit",
        str(tmp_path / "a.json"),
        str(tmp_path / "b.json"),
        "--server",
        base,
        "--quiet",
        "--input-type",
        "points",
        "--out",
        str(tmp_path / "out"),
        check=1,
    )
    assert "only one layout stacks" in done.stderr
    assert not (tmp_path / "out" / "vectors.npy").exists()
    assert len(list((tmp_path / "out").glob("*.result.json"))) == 2
