"""Uploaded tables of labelled points: CSV and GeoJSON decoded into ``LabelledPoints``.

CSV: a header row naming the columns, then one point a line; quoted fields as Python's csv
module reads them (RFC 4180 style); comma or tab separated (``delimiter``, or told from the
header line alone: a tab if it has tabs and no commas, else a comma). A UTF-8 byte order
mark is accepted and dropped (spreadsheet programs write one). Coordinates are Python floats
of the stripped cell and must be finite; blank lines are skipped. The file is read row by
row from the spooled upload, and refused as soon as it holds more points than the limit.

GeoJSON (RFC 7946): a FeatureCollection of Point features, or of Polygon and MultiPolygon
features, each taken at its centroid as shapely computes it (the area-weighted centroid GIS
software reports). Every error points at ``/data`` and names the line and column (CSV) or
the feature (``features/17/geometry``) it concerns.
"""

import csv
import io
import json
import math
from array import array
from typing import IO, Any

import numpy as np

from service.errors import RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.inputs import MAX_LABEL_CHARS, LabelledPointsInput
from workers.spec.kinds.base import LabelledPoints
from workers.spec.kinds.labelled_points import UPLOAD_POINTER

__all__ = ["DEFAULT_COLUMNS", "DEFAULT_LABEL_FIELD", "decode_cell_table"]

DEFAULT_COLUMNS = ("x", "y")
"""Coordinate columns of a CSV table when the request names none."""

DEFAULT_LABEL_FIELD = "class"
"""CSV column or GeoJSON property holding the class when the request names none."""

_CENTROID_TYPES = ("Polygon", "MultiPolygon")


def _refused(message: str) -> RequestInvalid:
    return RequestInvalid([FieldError(pointer=UPLOAD_POINTER, message=message)])


def decode_cell_table(
    stream: IO[bytes], limits: Limits, given: LabelledPointsInput
) -> LabelledPoints:
    """The labelled points of an uploaded CSV or GeoJSON file (a file object at its start),
    as the request's ``format`` says; RequestInvalid at ``/data`` for what is wrong in it."""
    if given.format is None:
        raise RequestInvalid(
            [
                FieldError(
                    pointer="/input/format",
                    message='say what the uploaded table is: "format": "csv" or "geojson"',
                )
            ]
        )
    if given.format == "csv":
        if given.label_property is not None:
            raise RequestInvalid(
                [
                    FieldError(
                        pointer="/input/label_property",
                        message="label_property is for GeoJSON; a CSV table has label_column",
                    )
                ]
            )
        return _csv_table(stream, limits, given)
    for name in ("columns", "label_column", "delimiter"):
        if getattr(given, name) is not None:
            raise RequestInvalid(
                [
                    FieldError(
                        pointer=f"/input/{name}",
                        message=f"{name} is for CSV tables; GeoJSON has label_property",
                    )
                ]
            )
    return _geojson(stream, limits, given.label_property or DEFAULT_LABEL_FIELD)


class _Collected:
    """Points and class codes gathered row by row, classes numbered as first seen."""

    def __init__(self, limits: Limits) -> None:
        self.limits = limits
        self.coordinates = array("d")
        self.codes = array("q")
        self.classes: dict[str, int] = {}
        self.count = 0

    def add(self, point: list[float], label: str, where: str) -> None:
        if self.count >= self.limits.max_input_points:
            raise _refused(
                f"the table holds more than {self.limits.max_input_points} points, the limit "
                "per request"
            )
        if not label:
            raise _refused(f"{where}: the class is empty; every point needs one")
        if len(label) > MAX_LABEL_CHARS:
            raise _refused(f"{where}: the class is longer than {MAX_LABEL_CHARS} characters")
        code = self.classes.setdefault(label, len(self.classes))
        if len(self.classes) > self.limits.max_label_classes:
            raise _refused(f"{where}: more than {self.limits.max_label_classes} classes, the limit")
        self.coordinates.extend(point)
        self.codes.append(code)
        self.count += 1

    def points(self, width: int, centroids: int = 0) -> LabelledPoints:
        if not self.count:
            raise _refused("the table holds no points")
        names = sorted(self.classes)
        renumbered = np.empty(len(names), dtype=np.int64)  # first-seen code -> sorted position
        for position, name in enumerate(names):
            renumbered[self.classes[name]] = position
        return LabelledPoints(
            points=np.frombuffer(self.coordinates, dtype=np.float64).reshape(-1, width).copy(),
            codes=renumbered[np.frombuffer(self.codes, dtype=np.int64)],
            classes=tuple(names),
            centroids=centroids,
        )


def _csv_table(stream: IO[bytes], limits: Limits, given: LabelledPointsInput) -> LabelledPoints:
    columns = list(given.columns or DEFAULT_COLUMNS)
    label_column = given.label_column or DEFAULT_LABEL_FIELD
    text = io.TextIOWrapper(stream, encoding="utf-8-sig", newline="")
    try:
        return _csv_rows(text, limits, columns, label_column, given.delimiter)
    except UnicodeDecodeError as error:
        raise _refused(
            f"the CSV file is not UTF-8 text (byte {error.start} of a read block is "
            f"{error.object[error.start : error.start + 1]!r})"
        ) from None
    finally:
        text.detach()  # the upload's own file stays open for werkzeug to close


def _csv_rows(
    text: io.TextIOWrapper,
    limits: Limits,
    columns: list[str],
    label_column: str,
    delimiter: str | None,
) -> LabelledPoints:
    first = text.readline()
    if not first.strip():
        raise _refused("the CSV file is empty; it needs a header row naming its columns")
    if delimiter is None:
        delimiter = "\t" if "\t" in first and "," not in first else ","
    try:
        header = [name.strip() for name in next(csv.reader([first], delimiter=delimiter))]
    except csv.Error as error:
        raise _refused(f"line 1 (the header) cannot be read: {error}") from None
    wanted = columns + [label_column]
    missing = [name for name in wanted if name not in header]
    if missing and any(_is_number(name) for name in header):
        raise _refused(
            "line 1 holds numbers, not only column names; the CSV file needs a header row "
            f"naming its columns ({', '.join(wanted)})"
        )
    if missing:
        separator = "tab" if delimiter == "\t" else "comma"
        raise _refused(
            f"the CSV header has no column {', '.join(repr(name) for name in missing)}; its "
            f"{separator}-separated columns are {', '.join(repr(name) for name in header)}"
        )
    twice = [name for name in wanted if header.count(name) > 1]
    if twice:
        raise _refused(f"the CSV header names column {twice[0]!r} more than once")
    positions = [header.index(name) for name in columns]
    label_position = header.index(label_column)
    collected = _Collected(limits)
    reader = csv.reader(text, delimiter=delimiter, strict=True)
    try:
        for row in reader:
            line = reader.line_num + 1  # the header line was read before the reader
            if not row or (len(row) == 1 and not row[0].strip()):
                continue
            if len(row) != len(header):
                raise _refused(f"line {line} has {len(row)} fields, the header has {len(header)}")
            point = [_number(row[p], line, header[p]) for p in positions]
            collected.add(
                point, row[label_position].strip(), f"line {line}, column {label_column!r}"
            )
    except csv.Error as error:
        raise _refused(f"line {reader.line_num + 1} cannot be read as CSV: {error}") from None
    return collected.points(len(columns))


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _number(cell: str, line: int, column: str) -> float:
    try:
        value = float(cell.strip())
    except ValueError:
        raise _refused(f"line {line}, column {column!r}: {cell[:40]!r} is not a number") from None
    if not math.isfinite(value):
        raise _refused(f"line {line}, column {column!r}: {cell.strip()!r} is not finite")
    return value


def _geojson(stream: IO[bytes], limits: Limits, label_property: str) -> LabelledPoints:
    try:
        document = json.load(stream)
    except (ValueError, RecursionError) as error:
        raise _refused(f"the GeoJSON file cannot be parsed as JSON: {error}") from None
    if not isinstance(document, dict) or document.get("type") != "FeatureCollection":
        kind = document.get("type") if isinstance(document, dict) else type(document).__name__
        raise _refused(f"the GeoJSON file is a {kind!s}, not a FeatureCollection")
    features = document.get("features")
    if not isinstance(features, list):
        raise _refused("the FeatureCollection has no features list")
    collected = _Collected(limits)
    width: int | None = None
    centroids = 0
    for index, feature in enumerate(features):
        where = f"features/{index}"
        if not isinstance(feature, dict) or feature.get("type") != "Feature":
            raise _refused(f"{where} is not a Feature")
        point, dims = _feature_point(feature.get("geometry"), f"{where}/geometry")
        if width is None:
            width = dims
        elif dims != width:
            raise _refused(
                f"{where}/geometry has {dims} coordinates, features/0 has {width}; every "
                "feature needs the same number"
            )
        centroids += feature["geometry"]["type"] in _CENTROID_TYPES
        properties = feature.get("properties")
        label = properties.get(label_property) if isinstance(properties, dict) else None
        if not isinstance(label, str):
            raise _refused(
                f"{where}/properties/{label_property}: "
                + ("missing" if label is None else f"{label!r} is not a string")
                + "; every feature needs its class as a string property"
            )
        collected.add(point, label.strip(), f"{where}/properties/{label_property}")
    return collected.points(width or 2, centroids)


def _feature_point(geometry: Any, where: str) -> tuple[list[float], int]:
    """The point of one feature's geometry (a Point, or a polygon's centroid) and how many
    coordinates its positions have."""
    if geometry is None:
        raise _refused(f"{where} is null; every feature needs a geometry")
    kind = geometry.get("type") if isinstance(geometry, dict) else None
    if kind == "Point":
        coordinates = geometry.get("coordinates")
        dims = _position_width(coordinates, f"{where}/coordinates")
        return [float(value) for value in coordinates], dims
    if kind not in _CENTROID_TYPES:
        raise _refused(
            f"{where} is a {kind!s}; labelled points take Point, Polygon or MultiPolygon features"
        )
    depth = 2 if kind == "Polygon" else 3  # rings of positions; polygons of rings
    dims = _nested_width(geometry.get("coordinates"), depth, f"{where}/coordinates")
    if dims != 2:
        raise _refused(f"{where} has {dims}D positions; a polygon's centroid is taken in 2D")
    import shapely.geometry  # the API loads the geometry library only when a table needs it

    try:
        centroid = shapely.geometry.shape(geometry).centroid
    except Exception as error:  # shapely and GEOS raise several types on malformed rings
        raise _refused(f"{where} is not a valid {kind}: {error}") from None
    if centroid.is_empty or not all(math.isfinite(v) for v in (centroid.x, centroid.y)):
        raise _refused(f"{where} has no centroid (an empty or degenerate {kind})")
    return [float(centroid.x), float(centroid.y)], 2


def _position_width(position: Any, where: str) -> int:
    """The length (2 or 3) of a GeoJSON position of finite numbers."""
    if (
        not isinstance(position, list)
        or len(position) not in (2, 3)
        or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in position)
    ):
        raise _refused(f"{where}: a position is 2 or 3 numbers")
    try:
        finite = all(math.isfinite(float(v)) for v in position)
    except OverflowError:  # an integer beyond float64
        finite = False
    if not finite:
        raise _refused(f"{where}: {position} has a coordinate that is not finite")
    return len(position)


def _nested_width(value: Any, depth: int, where: str) -> int:
    """The one length of every position in ``depth`` levels of nested lists."""
    if not isinstance(value, list) or not value:
        raise _refused(f"{where}: expected a non-empty list")
    widths = {
        _position_width(item, f"{where}/{i}")
        if depth == 1
        else _nested_width(item, depth - 1, f"{where}/{i}")
        for i, item in enumerate(value)
    }
    if len(widths) > 1:
        raise _refused(f"{where} mixes 2D and 3D positions")
    return widths.pop()
