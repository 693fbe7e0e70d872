"""The ``lacuna`` command line against a real ``lacuna serve``: a batch of 50 demo files gives
one vector row per file, equal to calling the API file by file; one result per input even
when names repeat; the request's options; status, fetch and cancel; exit codes 0 (success),
1 (a job failed), 2 (usage), 3 (server unreachable), 4 (cancelled), 5 (timed out)."""

import csv
import importlib.metadata
import json
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest
import tifffile
from PIL import Image

from lacuna_client import Client, LacunaError
from tests.support.ports import free_port
from tests.support.stack import LACUNA
from tests.support.synthetic import ring_mask
from workers.core.dowker import dowker_diagrams

# Slow as a module: one stack and 50 demo files for all its tests (about 40 s), one of
# which takes over 10 s on its own (every demo data set).
pytestmark = [pytest.mark.e2e, pytest.mark.slow]

BETTI = {"type": "betti_curve", "dim": 1, "t_range": [0.0, 60.0], "samples": 16}
SUMMARY = {"type": "summary", "dim": 0}


@pytest.fixture(scope="module")
def cells(tmp_path_factory: pytest.TempPathFactory) -> list[Path]:
    """50 synthetic two-population cell tables written by ``lacuna demo``."""
    folder = tmp_path_factory.mktemp("demo")
    done = run("demo", "cells", "--out", str(folder), "--count", "50")
    assert done.returncode == 0, done.stderr
    files = sorted(folder.glob("cells-*.csv"))
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
    refused = json.loads((tmp_path / "nan.csv.problem.json").read_text())["problem"]
    assert refused["errors"][0]["pointer"] == "/input/points/1/0"
    invalid = json.loads((tmp_path / "bad.json.problem.json").read_text())["problem"]
    assert invalid["status"] == 422  # the service's own answer
    assert invalid["errors"][0]["pointer"] == "/input/edges/0/1"
    assert json.loads((tmp_path / "good.csv.result.json").read_text())["diagrams"]


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
    assert run("status", heavy, "--server", base, check=4).stdout.startswith("cancelled")
    assert run("status", "00000000-0000-4000-8000-000000000000", "--server", base, check=1).stderr


def test_fetch_of_a_cancelled_job_says_so_and_exits_4(base: str, tmp_path: Path) -> None:
    client = Client(base)
    heavy = client.submit_points(
        np.random.default_rng(1).uniform(size=(2000, 3)), {"type": "rips", "max_dim": 2}
    )
    client.cancel(heavy)
    with pytest.raises(LacunaError) as raised:
        client.wait(heavy, 60)
    assert raised.value.job_status == "cancelled" and raised.value.job_id == heavy
    status = json.loads(run("status", heavy, "--server", base, "--json", check=4).stdout)
    assert status["status"] == "cancelled" and status["ended_at"]  # it ended: when
    done = run("fetch", heavy, "--server", base, "--out", str(tmp_path / "r.json"), check=4)
    assert done.stderr.strip() == f"lacuna fetch: job {heavy} was cancelled; it has no result"
    assert not (tmp_path / "r.json").exists()
    assert run("status", heavy, "--server", base, check=4).stdout.startswith(
        f"cancelled at {status['ended_at'][:10]}"
    )


def test_fetch_of_a_failed_job_prints_its_problem_and_exits_1(base: str, tmp_path: Path) -> None:
    # Whether equal shells fit is known only from the node distances, on the worker: the
    # job is accepted, then fails with a problem naming the field.
    request = {
        "input": {"type": "graph", "nodes": [[0, 0]], "edges": []},
        "output": ["descriptors"],
        "descriptors": {"shells": {"center": [0, 0], "count": 3}},
    }
    (tmp_path / "lonely.json").write_text(json.dumps(request))
    summary = json.loads(
        run("submit", str(tmp_path / "lonely.json"), "--server", base, "--json", check=1).stdout
    )
    job_id = summary["failed"][0]["job_id"]
    assert summary["failed"][0]["status"] == "failed"
    problem = Client(base).status(job_id)["problem"]
    done = run("fetch", job_id, "--server", base, check=1)
    assert done.stderr.strip() == (
        f"lacuna fetch: job {job_id} failed: {problem['title']}: {problem['detail']}"
    )
    assert done.stdout == ""


def test_fetch_that_outlives_its_timeout_exits_5(base: str) -> None:
    client = Client(base)
    heavy = client.submit_points(
        np.random.default_rng(2).uniform(size=(2000, 3)), {"type": "rips", "max_dim": 2}
    )
    try:
        done = run("fetch", heavy, "--server", base, "--timeout", "1", check=5)
        assert heavy in done.stderr and "--timeout" in done.stderr
    finally:
        client.cancel(heavy)


def test_unreachable_server_fails_fast_with_one_line(tmp_path: Path) -> None:
    url = f"http://127.0.0.1:{free_port()}"  # nothing listens there
    line = (
        f"cannot reach the lacuna server at {url} (connection refused); is it running? "
        "set --server or LACUNA_URL"
    )
    files = []
    for name in ("a", "b", "c"):
        files.append(tmp_path / f"{name}.csv")
        files[-1].write_text("x,y\n0,0\n1,0\n0,1\n")
    for args in (["status", "abc"], ["fetch", "abc"], ["submit", *map(str, files), "--quiet"]):
        started = time.monotonic()
        done = run(*args, "--server", url, check=3)
        # A hang guard, not a speed goal: without the one check before the batch, each
        # file waited out the client's retries.
        assert time.monotonic() - started < 20
        assert done.stderr.splitlines() == [f"lacuna {args[0]}: {line}"], done.stderr
    assert not list(tmp_path.glob("*.json"))  # no result or problem files for a lost server


def test_inputs_with_the_same_name_get_one_result_each(base: str, tmp_path: Path) -> None:
    # rings.png, rings.tif and rings.npy hold the same ring (common practice: an annulus has
    # one loop); a/rings.csv and b/rings.csv two different point sets.
    mask = ring_mask((48, 48), (23.5, 23.5), 10, 16).astype(np.uint8) * 255
    Image.fromarray(mask).save(tmp_path / "rings.png")
    tifffile.imwrite(tmp_path / "rings.tif", mask)
    np.save(tmp_path / "rings.npy", mask, allow_pickle=False)
    for folder, side in (("a", 1.0), ("b", 2.0)):
        (tmp_path / folder).mkdir()
        (tmp_path / folder / "rings.csv").write_text(
            f"x,y\n0,0\n{side},0\n{side},{side}\n0,{side}\n"
        )
    images = [tmp_path / f"rings.{ending}" for ending in ("png", "tif", "npy")]
    # Next to each input: the whole file name, extension kept.
    run("submit", *map(str, images), "--input-type", "mask", "--server", base, "--quiet", check=0)
    for image in images:
        result = json.loads(image.with_name(image.name + ".result.json").read_text())
        assert len(result["diagrams"][1]["pairs"]) == 1
    # Into --out: the folders below the one all inputs share, so nothing collides.
    (tmp_path / "rings.csv").write_text("x,y\n0,0\n3,0\n3,3\n0,3\n")
    out = tmp_path / "out"
    tables = [tmp_path / "a" / "rings.csv", tmp_path / "b" / "rings.csv", tmp_path / "rings.csv"]
    given = list(map(str, tables))
    done = run(
        "submit", *given, "--features", json.dumps(SUMMARY), "--server", base, "--quiet",
        "--json", "--out", str(out), check=0,
    )  # fmt: skip
    targets = [out / "a" / "rings.csv.result.json", out / "b" / "rings.csv.result.json"]
    targets.append(out / "rings.csv.result.json")
    written = [json.loads(target.read_text()) for target in targets]
    # A square of side s: its H1 class is born at s and dies at s * sqrt(2) (Rips, edge
    # lengths; common practice).
    for result, side in zip(written, (1.0, 2.0, 3.0), strict=True):
        np.testing.assert_allclose(
            result["diagrams"][1]["pairs"], [[side, side * np.sqrt(2)]], rtol=1e-9
        )
    summary = json.loads(done.stdout)
    assert [job["result"] for job in summary["jobs"]] == list(map(str, targets))
    manifest = json.loads((out / "vectors.json").read_text())
    assert [row["file"] for row in manifest["rows"]] == given
    assert [row["result"] for row in manifest["rows"]] == list(map(str, targets))
    assert [row["job_id"] for row in manifest["rows"]] == [r["job_id"] for r in written]
    table = list(csv.reader((out / "vectors.csv").read_text().splitlines()[1:]))
    rows = [[name, result["job_id"]] for name, result in zip(given, written, strict=True)]
    assert [row[:2] for row in table[1:]] == rows
    # The same file twice is a usage error, before anything is sent.
    again = run("submit", str(tables[0]), str(tmp_path / "a" / ".." / "a" / "rings.csv"))
    assert again.returncode == 2 and "given twice" in again.stderr


def test_request_options_reach_the_request(base: str, tmp_path: Path) -> None:
    demo = tmp_path / "demo"
    run("demo", "network", "--out", str(demo), "--count", "1", check=0)
    graphml = next(demo.glob("*.graphml"))
    # Descriptors of a GraphML file, which has no filtration: --output alone.
    run("submit", str(graphml), "--output", "descriptors", "--server", base, "--quiet", check=0)
    result = json.loads(graphml.with_name(graphml.name + ".result.json").read_text())
    assert result["descriptors"]["node_count"] > 0 and result["diagrams"] == []
    # Repeated and comma-separated --output, --descriptors, and a mask's skeleton.
    mask = tmp_path / "ring.png"
    Image.fromarray(ring_mask((64, 64), (31.5, 31.5), 14, 20).astype(np.uint8) * 255).save(mask)
    run(
        "submit", str(mask), "--input-type", "mask", "--skeletonize",
        "--output", "descriptors", "--output", "graph,descriptors",
        "--descriptors", '{"direction": [0, 1]}', "--server", base, "--quiet", check=0,
    )  # fmt: skip
    result = json.loads((tmp_path / "ring.png.result.json").read_text())
    # Geometry (common practice): an annulus thins to one loop.
    assert result["descriptors"]["cycle_count"] == 1 and result["graph"]["nodes"]
    assert result["descriptors"]["extent"] > 0  # measured along the direction given
    # --max-dim and --set: a square of side 1 with max_dim 0 and max_edge 1.2 keeps H0 only,
    # and every point joins at length 1 (Rips, edge lengths; common practice).
    square = tmp_path / "square.csv"
    square.write_text("x,y\n0,0\n1,0\n1,1\n0,1\n")
    run(
        "submit", str(square), "--max-dim", "0", "--set", "filtration.max_edge=1.2",
        "--server", base, "--quiet", check=0,
    )  # fmt: skip
    result = json.loads((tmp_path / "square.csv.result.json").read_text())
    assert [d["dim"] for d in result["diagrams"]] == [0]
    assert result["diagrams"][0]["pairs"] == [[0.0, 1.0]] * 3 + [[0.0, None]]
    # Options that cannot be parsed are usage errors.
    for bad in (
        ["--output", "pictures"],
        ["--set", "filtration.max_edge"],
        ["--set", "max_edge=[1"],
        ["--max-dim", "-1"],
        ["--descriptors", "[1]"],
    ):
        done = run("submit", str(square), *bad, "--server", base)
        assert done.returncode == 2 and done.stderr, bad


def test_version_and_help_texts() -> None:
    done = run("--version", check=0)
    assert done.stdout == f"lacuna {importlib.metadata.version('lacuna')}\n"
    commands = [
        ["serve"], ["worker"], ["demo"], ["openapi"], ["keys"], ["keys", "create"],
        ["keys", "list"], ["keys", "revoke"], ["keys", "quotas"], ["submit"], ["status"],
        ["fetch"], ["cancel"],
    ]  # fmt: skip
    top = run("--help", check=0).stdout
    assert top.startswith("usage: lacuna ") and "exit status:" in top
    for command in commands:
        text = run(*command, "--help", check=0).stdout
        assert text.startswith(f"usage: lacuna {' '.join(command)} "), text
        # Written for users: no internals, every option explained.
        for internal in ("python -m", "RQ", "SimpleWorker", "gunicorn", "``"):
            assert internal not in text, (command, internal)
        lines = text.splitlines()
        for index, line in enumerate(lines):
            if line.startswith("  -") and "  " not in line.strip():
                # No help on the option's line: argparse puts it on the next one, indented.
                assert lines[index + 1].startswith(" " * 10), (command, line)
    for command in (["submit"], ["status"], ["fetch"], ["cancel"]):
        text = run(*command, "--help", check=0).stdout
        assert "exit status:" in text and "  3  the server could not be reached" in text


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


def test_a_dowker_filtration_and_cell_mixing_of_a_labelled_table(base: str, tmp_path: Path) -> None:
    rng = np.random.default_rng(4)
    angles = np.linspace(0, 2 * np.pi, 10, endpoint=False)
    tumour = np.round(np.column_stack([np.cos(angles), np.sin(angles)]) * 3, 3)
    immune = np.round(rng.uniform(-3, 3, size=(6, 2)), 3)
    table = tmp_path / "layout.csv"
    rows = [f"{x},{y},tumour" for x, y in tumour] + [f"{x},{y},immune" for x, y in immune]
    table.write_text("x,y,class\n" + "\n".join(rows) + "\n")
    dowker = {"type": "dowker", "vertices": "tumour", "witnesses": "immune", "max_radius": 4}
    run(
        "submit", str(table), "--label-column", "class", "--filtration", json.dumps(dowker),
        "--output", "diagrams,descriptors", "--descriptors", '{"radii": [1, 2]}',
        "--server", base, "--quiet", check=0,
    )  # fmt: skip
    result = json.loads((tmp_path / "layout.csv.result.json").read_text())
    # Reference: the core on the same arrays (itself checked against gudhi in
    # tests/core/test_dowker.py); duality makes the side irrelevant to the diagrams.
    expected = dowker_diagrams(tumour, immune, max_dim=1, max_radius=4)
    assert result["value_convention"] == "witness_radius"
    assert result["dowker"]["side_used"] == expected.side_used
    for item, pairs in zip(result["diagrams"], expected.diagrams, strict=True):
        found = [[b, np.inf if d is None else d] for b, d in item["pairs"]]
        np.testing.assert_array_equal(np.array(found).reshape(-1, 2), pairs)
    assert len(result["cell_mixing"]["pairs"]) == 2
