"""Labelled points through the client and the command line against a real ``lacuna serve``:
a .csv with --label-column and a .geojson file give the diagrams of the same points sent as
JSON; a population computes on its class alone."""

import json
import subprocess
from pathlib import Path

import gudhi
import numpy as np
import pytest

from lacuna_client import Client
from tests.support.stack import LACUNA

pytestmark = pytest.mark.e2e

# Two classes: a unit square of "tumour" points and a far pair of "immune" points.
POINTS = [[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0], [5.0, 5.0], [5.0, 7.0]]
LABELS = ["tumour"] * 4 + ["immune"] * 2
CSV_TEXT = "x,y,class\n" + "".join(
    f"{x},{y},{label}\n" for (x, y), label in zip(POINTS, LABELS, strict=True)
)
GEOJSON = {
    "type": "FeatureCollection",
    "features": [
        {
            "type": "Feature",
            "geometry": {"type": "Point", "coordinates": point},
            "properties": {"kind": label},
        }
        for point, label in zip(POINTS, LABELS, strict=True)
    ],
}


def run(*args: str) -> subprocess.CompletedProcess[str]:
    done = subprocess.run([LACUNA, *args], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, (done.stdout, done.stderr)
    return done


def test_csv_and_geojson_files_submit_as_labelled_points(base: str, tmp_path: Path) -> None:
    table = tmp_path / "cells.csv"
    table.write_text(CSV_TEXT)
    shapes = tmp_path / "cells.geojson"
    shapes.write_text(json.dumps(GEOJSON))
    run(
        "submit", str(table), "--label-column", "class", "--set", 'filtration.population="tumour"',
        "--units", "um", "--server", base, "--quiet",
    )  # fmt: skip
    run("submit", str(shapes), "--label-property", "kind", "--server", base, "--quiet")
    from_csv = json.loads((tmp_path / "cells.csv.result.json").read_text())
    from_geojson = json.loads((tmp_path / "cells.geojson.result.json").read_text())
    client = Client(base, timeout=30)
    tumour = client.result(
        client.submit_labelled_points(
            np.array(POINTS), LABELS, {"type": "rips", "population": "tumour"}, units="um"
        )
    )
    every = client.result(client.submit_labelled_points(np.array(POINTS), LABELS, {"type": "rips"}))
    uploaded = client.result(
        client.submit_labelled_table(CSV_TEXT.encode(), "csv", {"type": "rips"})
    )
    assert from_csv["diagrams"] == tumour["diagrams"]
    assert from_csv["units"] == "um"
    assert from_csv["populations"] == [
        {"name": "immune", "count": 2, "computed": False},
        {"name": "tumour", "count": 4, "computed": True},
    ]
    assert from_geojson["diagrams"] == every["diagrams"] == uploaded["diagrams"]
    # Reference (common practice, Rips edge lengths): the unit square's four points join at
    # length 1, and its loop is born at 1 and filled at the diagonal sqrt(2).
    assert sorted(tumour["diagrams"][0]["pairs"], key=str) == sorted(
        [[0.0, 1.0]] * 3 + [[0.0, None]], key=str
    )
    assert tumour["diagrams"][1]["pairs"] == [[1.0, pytest.approx(2**0.5)]]
    # And gudhi's RipsComplex on the same square agrees.
    tree = gudhi.RipsComplex(points=POINTS[:4]).create_simplex_tree(max_dimension=2)
    tree.compute_persistence()
    np.testing.assert_allclose(tree.persistence_intervals_in_dimension(1), [[1.0, 2**0.5]])
