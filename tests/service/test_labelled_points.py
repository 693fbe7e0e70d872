"""Labelled points: JSON, CSV and GeoJSON inputs, the population of a Rips filtration, and
every bad table refused as a 422 naming what is wrong (never a 500)."""

import io
import json
from typing import Any

import gudhi
import numpy as np
import pytest
import shapely.geometry
from flask.testing import FlaskClient

from tests.support.api import JOBS, WAIT, call, pairs_array, post, refused, result_of
from tests.support.bodies import labelled_job

RIPS = {"type": "rips", "max_dim": 1}


def ring(n: int, radius: float, centre: tuple[float, float], seed: int) -> np.ndarray:
    """``n`` points on a circle, slightly jittered."""
    rng = np.random.default_rng(seed)
    angles = np.sort(rng.uniform(0, 2 * np.pi, n))
    circle = np.column_stack([np.cos(angles), np.sin(angles)]) * radius + centre
    return circle + rng.normal(scale=0.01, size=circle.shape)


def two_populations() -> tuple[np.ndarray, list[str]]:
    """A ring of "tumour" points and a scatter of "immune" points, interleaved."""
    rng = np.random.default_rng(7)
    tumour = ring(14, 1.0, (0.0, 0.0), seed=1)
    immune = rng.uniform(-2, 2, size=(9, 2))
    points = np.concatenate([tumour, immune])
    labels = ["tumour"] * len(tumour) + ["immune"] * len(immune)
    order = rng.permutation(len(points))
    return points[order], [labels[i] for i in order]


def labelled_body(points: np.ndarray, labels: list[str], **filtration: Any) -> dict[str, Any]:
    return labelled_job(points, labels, {**RIPS, **filtration})


def upload(client: FlaskClient, given: dict[str, Any], data: bytes, wait: bool = False) -> Any:
    request = json.dumps({"input": {"type": "labelled_points", **given}, "filtration": RIPS})
    return call(
        client,
        "POST",
        JOBS,
        headers=WAIT if wait else {},
        content_type="multipart/form-data",
        data={"request": request, "data": (io.BytesIO(data), "cells")},
    )


CSV = {"format": "csv", "columns": ["x", "y"], "label_column": "class"}
GEOJSON = {"format": "geojson", "label_property": "class"}


def csv_refused(client: FlaskClient, text: str | bytes, hint: str, **given: Any) -> None:
    data = text.encode() if isinstance(text, str) else text
    refused(upload(client, {**CSV, **given}, data), ["/data"], hint)


def feature(geometry: Any, label: Any = "tumour") -> dict[str, Any]:
    return {"type": "Feature", "geometry": geometry, "properties": {"class": label}}


def point(x: float, y: float, label: str = "tumour") -> dict[str, Any]:
    return feature({"type": "Point", "coordinates": [x, y]}, label)


def collection(*features: Any) -> bytes:
    return json.dumps({"type": "FeatureCollection", "features": list(features)}).encode()


# --- JSON ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("change", "pointer", "hint"),
    [
        ({"labels": ["a", "b"]}, "/input/labels", "one class per point"),
        ({"labels": None}, "/input/labels", "one class per point"),
        ({"labels": ["a", "", "a"]}, "/input/labels/1", "at least 1 character"),
        ({"labels": ["a", "b" * 65, "a"]}, "/input/labels/1", "at most 64 characters"),
        ({"points": [[0, 0], [1, 1], [2]]}, "/input/points/2", "at least 2 items"),
        ({"points": [[0, 0], [1, 1], [2, 2, 2]]}, "/input/points/2", "every row"),
        ({"format": "csv"}, "/input/format", "multipart"),
    ],
)
def test_bad_json_labelled_points_name_the_field(
    client: FlaskClient, change: dict[str, Any], pointer: str, hint: str
) -> None:
    body = labelled_body(np.zeros((3, 2)), ["a", "b", "a"])
    body["input"].update(change)
    refused(post(client, JOBS, body), [pointer], hint)


def test_an_unknown_population_names_the_known_classes(client: FlaskClient) -> None:
    points, labels = two_populations()
    problem = refused(
        post(client, JOBS, labelled_body(points, labels, population="stroma")),
        ["/filtration/population"],
        "stroma",
    )
    assert '"immune", "tumour"' in problem["errors"][0]["message"]


def test_an_empty_population_is_refused(client: FlaskClient) -> None:
    points, labels = two_populations()
    refused(
        post(client, JOBS, labelled_body(points, labels, population="")),
        ["/filtration/population"],
        "at least 1 character",
    )


def test_a_population_on_plain_points_is_refused(client: FlaskClient) -> None:
    body = {
        "input": {"type": "points", "points": [[0, 0], [1, 0]]},
        "filtration": {**RIPS, "population": "tumour"},
    }
    refused(post(client, JOBS, body), ["/filtration/population"], "labelled_points")


def test_more_classes_than_the_limit_are_refused(client: FlaskClient) -> None:
    labels = [f"class {i}" for i in range(65)]  # the default limit is 64 classes
    refused(
        post(client, JOBS, labelled_body(np.zeros((65, 2)), labels)),
        ["/input/labels"],
        "above the limit of 64",
    )


def test_a_population_subsample_larger_than_the_population_is_refused(
    client: FlaskClient,
) -> None:
    points, labels = two_populations()  # 9 immune points
    body = labelled_body(
        points, labels, population="immune", subsample={"method": "random", "size": 10}
    )
    refused(post(client, JOBS, body), ["/filtration/subsample/size"], "larger than the 9")


# --- CSV -----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "hint"),
    [
        ("", "empty"),
        ("\n\n", "empty"),
        ("1,2,a\n3,4,b\n", "header row"),
        ("x,y,kind\n1,2,a\n", "no column 'class'"),
        ("x,class\n1,a\n", "no column 'y'"),
        ("x,y,class\n1,2,a\n3,4\n", "line 3 has 2 fields, the header has 3"),
        ("x,y,class\n1,2,a\n3,4,b,5\n", "line 3 has 4 fields"),
        ("x,y,class\n1,2,a\n3,four,b\n", "line 3, column 'y': 'four' is not a number"),
        ("x,y,class\n1,2,a\n\n3,nan,b\n", "line 4, column 'y': 'nan' is not finite"),
        ("x,y,class\n1,inf,a\n", "not finite"),
        ("x,y,class\n1,1e400,a\n", "not finite"),
        ("x,y,class\n1,2, \n", "line 2, column 'class': the class is empty"),
        ("x,y,class\n1,2," + "c" * 65 + "\n", "longer than 64"),
        ('x,y,class\n1,2,"unclosed\n', "cannot be read as csv"),
        ("x,y,class\n", "no points"),
        ("x,x,y,class\n1,2,3,a\n", "more than once"),
        (b"x,y,class\n1,2,\xff\n", "not utf-8"),
    ],
)
def test_bad_csv_is_a_422_at_data_naming_the_line_and_column(
    client: FlaskClient, text: str | bytes, hint: str
) -> None:
    csv_refused(client, text, hint)


def test_an_upload_needs_its_format_and_the_points_once(client: FlaskClient) -> None:
    table = b"x,y,class\n0,0,a\n"
    refused(upload(client, {}, table), ["/input/format"], '"format": "csv"')
    doubled = {**CSV, "points": [[0, 0]], "labels": ["a"]}
    refused(upload(client, doubled, table), ["/input/points"], "one way")
    refused(upload(client, {**CSV, "label_property": "a"}, table), ["/input/label_property"], "")


def test_a_csv_with_more_points_than_the_limit_is_refused(redis_url: str) -> None:
    from tests.support.api import app_with, fresh_queue

    client = app_with(redis_url=redis_url, queue=fresh_queue(), max_input_points=3).test_client()
    csv_refused(client, "x,y,class\n" + "1,2,a\n" * 4, "more than 3 points")


def test_a_tab_separated_file_needs_no_delimiter(served_client: FlaskClient) -> None:
    points, labels = two_populations()
    lines = zip(points.tolist(), labels, strict=True)
    rows = "\n".join(f"{x!r}\t{y!r}\t{label}" for (x, y), label in lines)
    tabbed = upload(served_client, CSV, f"x\ty\tclass\n{rows}\n".encode(), wait=True)
    sent = result_of(served_client, labelled_body(points, labels))
    assert tabbed.status_code == 200, tabbed.get_data(as_text=True)
    assert tabbed.get_json()["diagrams"] == sent["diagrams"]
    assert tabbed.get_json()["provenance"]["input_sha256"] == sent["provenance"]["input_sha256"]


def test_quoted_fields_and_a_bom_read_as_the_csv_module_reads_them(
    served_client: FlaskClient,
) -> None:
    # Quoted fields per RFC 4180 (a comma, a doubled quote and a line break inside quotes);
    # the byte order mark spreadsheet programs write is accepted and dropped.
    text = (
        '\ufeff"x","y","class","note"\n'
        '0,0,"tumour, core","a ""quoted"" note"\n'
        '1,0,"tumour, core",x\n'
        '0,1,immune,"two\nlines"\n'
    )
    response = upload(served_client, CSV, text.encode("utf-8"), wait=True)
    assert response.status_code == 200, response.get_data(as_text=True)
    result = response.get_json()
    assert result["populations"] == [
        {"name": "immune", "count": 1, "computed": True},
        {"name": "tumour, core", "count": 2, "computed": True},
    ]
    sent = result_of(
        served_client,
        labelled_body(
            np.array([[0, 0], [1, 0], [0, 1]]), ["tumour, core", "tumour, core", "immune"]
        ),
    )
    assert result["diagrams"] == sent["diagrams"]
    assert result["provenance"]["input_sha256"] == sent["provenance"]["input_sha256"]


def test_a_given_delimiter_overrides_the_header_sniff(served_client: FlaskClient) -> None:
    # The header has a comma inside a quoted name, so sniffing takes commas; "delimiter"
    # says tabs.
    text = 'x\ty\t"class, kind"\n0\t0\ta\n1\t0\tb\n'
    given = {**CSV, "label_column": "class, kind"}
    refused(upload(served_client, given, text.encode()), ["/data"], "no column 'x'")
    response = upload(served_client, {**given, "delimiter": "\t"}, text.encode(), wait=True)
    assert response.status_code == 200, response.get_data(as_text=True)
    assert [p["name"] for p in response.get_json()["populations"]] == ["a", "b"]


# --- GeoJSON -------------------------------------------------------------------------------


SQUARE = {"type": "Polygon", "coordinates": [[[0, 0], [2, 0], [2, 2], [0, 2], [0, 0]]]}


@pytest.mark.parametrize(
    ("data", "hint"),
    [
        (b"{not json", "cannot be parsed as json"),
        (json.dumps(point(0, 0)).encode(), "not a featurecollection"),
        (json.dumps({"type": "FeatureCollection"}).encode(), "no features list"),
        (collection(), "no points"),
        (collection(point(0, 0), feature(None)), "features/1/geometry is null"),
        (
            collection(point(0, 0), feature({"type": "LineString", "coordinates": [[0, 0]]})),
            "features/1/geometry is a linestring",
        ),
        (
            collection(feature({"type": "GeometryCollection", "geometries": []})),
            "features/0/geometry is a geometrycollection",
        ),
        (collection(point(0, 0), {"type": "Feature", "geometry": None}), "features/1"),
        (
            collection(point(0, 0), feature({"type": "Point", "coordinates": [0, 0]}, None)),
            "features/1/properties/class: missing",
        ),
        (collection(feature({"type": "Point", "coordinates": [0, 0]}, 3)), "not a string"),
        (
            b'{"type": "FeatureCollection", "features": [{"type": "Feature", "geometry": '
            b'{"type": "Point", "coordinates": [NaN, 0]}, "properties": {"class": "a"}}]}',
            "features/0/geometry/coordinates",
        ),
        (
            b'{"type": "FeatureCollection", "features": [{"type": "Feature", "geometry": '
            b'{"type": "Point", "coordinates": [Infinity, 0]}, "properties": {"class": "a"}}]}',
            "not finite",
        ),
        (
            collection(point(0, 0), feature({"type": "Point", "coordinates": [0, 0, 1]})),
            "features/1/geometry has 3 coordinates, features/0 has 2",
        ),
        (
            collection(
                feature({"type": "Polygon", "coordinates": [[[0, 0, 1], [1, 0, 1], [0, 1]]]})
            ),
            "mixes 2d and 3d",
        ),
        (
            collection(feature({"type": "Polygon", "coordinates": [[[0, 0], [1, 0]]]})),
            "features/0/geometry is not a valid polygon",
        ),
        (collection(feature({"type": "Point", "coordinates": [0, True]})), "2 or 3 numbers"),
    ],
)
def test_bad_geojson_is_a_422_at_data_naming_the_feature(
    client: FlaskClient, data: bytes, hint: str
) -> None:
    refused(upload(client, GEOJSON, data), ["/data"], hint)


def test_a_csv_option_on_geojson_is_refused(client: FlaskClient) -> None:
    response = upload(client, {**GEOJSON, "label_column": "class"}, collection(point(0, 0)))
    refused(response, ["/input/label_column"], "csv")


def test_polygons_are_taken_at_their_centroids(served_client: FlaskClient) -> None:
    lobed = {
        "type": "MultiPolygon",
        "coordinates": [
            [[[5, 5], [6, 5], [6, 6], [5, 6], [5, 5]]],
            [[[8, 5], [11, 5], [11, 7], [8, 7], [8, 5]]],
        ],
    }
    triangle = {"type": "Polygon", "coordinates": [[[0, 4], [3, 4], [0, 7], [0, 4]]]}
    data = collection(
        feature(SQUARE), feature(lobed, "immune"), feature(triangle), point(4.0, 0.5, "immune")
    )
    response = upload(served_client, {"format": "geojson"}, data, wait=True)  # "class": default
    assert response.status_code == 200, response.get_data(as_text=True)
    result = response.get_json()
    assert result["warnings"] == [
        {
            "pointer": "/data",
            "message": "3 polygon features were taken at their centroid (shapely), one point each",
        }
    ]
    # Reference: shapely's centroids; for the square, its centre (common practice), and for
    # the triangle the mean of its corners (common practice).
    centres = [shapely.geometry.shape(g).centroid for g in (SQUARE, lobed, triangle)]
    assert (centres[0].x, centres[0].y) == (1.0, 1.0)
    assert (centres[2].x, centres[2].y) == pytest.approx((1.0, 5.0))
    expected = [[c.x, c.y] for c in centres] + [[4.0, 0.5]]
    sent = result_of(
        served_client,
        labelled_body(np.array(expected), ["tumour", "immune", "tumour", "immune"]),
    )
    assert result["diagrams"] == sent["diagrams"]
    assert result["populations"] == sent["populations"]


# --- Rips on a population ------------------------------------------------------------------


def gudhi_rips(points: np.ndarray, max_dim: int) -> list[np.ndarray]:
    """Reference: gudhi's RipsComplex, whose filtration values are edge lengths."""
    tree = gudhi.RipsComplex(points=points).create_simplex_tree(max_dimension=max_dim + 1)
    tree.compute_persistence()
    return [tree.persistence_intervals_in_dimension(dim) for dim in range(max_dim + 1)]


def sorted_pairs(pairs: np.ndarray) -> np.ndarray:
    return pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))] if len(pairs) else pairs.reshape(0, 2)


def test_rips_on_a_population_equals_rips_on_its_points(served_client: FlaskClient) -> None:
    points, labels = two_populations()
    chosen = result_of(served_client, labelled_body(points, labels, population="tumour"))
    tumour = points[[label == "tumour" for label in labels]]
    plain = result_of(
        served_client, {"input": {"type": "points", "points": tumour.tolist()}, "filtration": RIPS}
    )
    assert chosen["diagrams"] == plain["diagrams"]
    assert chosen["value_convention"] == "edge_length"
    assert chosen["units"] == "um"
    assert chosen["populations"] == [
        {"name": "immune", "count": 9, "computed": False},
        {"name": "tumour", "count": 14, "computed": True},
    ]
    for item, reference in zip(chosen["diagrams"], gudhi_rips(tumour, 1), strict=True):
        np.testing.assert_allclose(
            sorted_pairs(pairs_array(item["pairs"])), sorted_pairs(reference), atol=1e-9
        )
    assert len(pairs_array(chosen["diagrams"][1]["pairs"])) >= 1  # the ring's loop


def test_without_a_population_rips_runs_on_every_point(served_client: FlaskClient) -> None:
    points, labels = two_populations()
    every = result_of(served_client, labelled_body(points, labels))
    plain = result_of(
        served_client, {"input": {"type": "points", "points": points.tolist()}, "filtration": RIPS}
    )
    assert every["diagrams"] == plain["diagrams"]
    assert all(population["computed"] for population in every["populations"])
    assert plain.get("populations") is None


def test_a_population_subsample_names_rows_of_the_input(served_client: FlaskClient) -> None:
    points, labels = two_populations()
    body = labelled_body(
        points, labels, population="immune", subsample={"method": "maxmin", "size": 4}
    )
    rows = result_of(served_client, body)["provenance"]["subsample_indices"]
    assert len(rows) == 4 and all(labels[row] == "immune" for row in rows)


def test_class_names_count_in_the_request_hash(served_client: FlaskClient) -> None:
    points, labels = two_populations()
    first = result_of(served_client, labelled_body(points, labels))
    renamed = [{"tumour": "z", "immune": "b"}[label] for label in labels]  # same order
    second = result_of(served_client, labelled_body(points, renamed))
    assert first["provenance"]["input_sha256"] == second["provenance"]["input_sha256"]
    assert first["provenance"]["request_sha256"] != second["provenance"]["request_sha256"]
