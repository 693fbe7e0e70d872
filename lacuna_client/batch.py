"""``lacuna submit``: many input files in, one job each, results and stacked vectors out.

Each file becomes a job request the way its extension says (``--input-type`` overrides):

    .csv              points: the columns named by --columns (default x, y and z if present);
                      labelled_points with --label-column (uploaded as it is)
    .geojson          labelled_points: Point or Polygon features, the class in the property
                      --label-property names (default "class"; uploaded as it is)
    .npy              image (an array of values); points, mask with --input-type
    .tif .tiff .png   image; mask with --input-type mask (uploaded as they are)
    .graphml          graph (uploaded as it is)
    .json             a whole job request (with "input"), or a graph's "nodes" and "edges"

Each input gets its own result file, named after the whole file name, extension included,
so ``rings.png``, ``rings.tif`` and ``rings.npy`` never share one:

    without --out   next to the input: a/rings.png -> a/rings.png.result.json
    --out DIR       in DIR, in the folder tree of the inputs below the deepest folder
                    they all share: a/rings.csv and b/rings.csv -> DIR/a/rings.csv.result.json
                    and DIR/b/rings.csv.result.json; inputs of one folder land in DIR itself

A job that failed writes ``.problem.json`` in place of ``.result.json``; a file given twice
is refused. The feature vectors of all jobs are stacked, one row per input in the order
given, into ``vectors.npy`` and ``vectors.csv`` (its ``file`` column holds each input's path
as given), and ``vectors.json`` says which file, job and result file each row is, the
spec_ids and the layout.
"""

import csv
import io
import json
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lacuna_client.client import Client, LacunaError

__all__ = [
    "BatchError",
    "BatchOptions",
    "FileJob",
    "LayoutMismatch",
    "request_of",
    "result_stems",
    "run_batch",
]

Json = dict[str, Any]

DEFAULT_TYPES = {
    ".csv": "points",
    ".npy": "image",
    ".tif": "image",
    ".tiff": "image",
    ".png": "image",
    ".graphml": "graph",
    ".geojson": "labelled_points",
    ".json": "graph",
}
"""Input type of each file extension when --input-type does not say."""

DEFAULT_FILTRATIONS = {
    "points": "rips",
    "labelled_points": "rips",
    "image": "cubical",
    "mask": "distance",
}
"""Filtration of each input type when neither --filtration nor the file says (a graph, or a
mask's skeleton, has none by default: its filtrations need a direction, center, seeds or
values)."""

_UPLOADED = {".tif", ".tiff", ".png", ".graphml"}


class BatchError(ValueError):
    """A file cannot be read or turned into a request, or the results do not stack; the
    message says why."""


class LayoutMismatch(BatchError):
    """The jobs succeeded but their vectors have different layouts, so they do not stack."""


@dataclass(frozen=True)
class BatchOptions:
    """What applies to every file of a batch."""

    input_type: str | None = None
    filtration: Json | None = None
    features: list[Json] | None = None
    spacing: list[float] | None = None
    units: str | None = None
    columns: list[str] | None = None
    label_column: str | None = None
    """The class column of .csv tables: given, they are labelled points."""
    label_property: str = "class"
    """The class property of .geojson features."""
    skeletonize: bool = False
    output: list[str] | None = None
    descriptors: Json | None = None
    max_dim: int | None = None
    fields: tuple[tuple[str, Any], ...] = ()
    """``(dotted.field, value)`` pairs set last, over everything else."""


@dataclass
class FileJob:
    """One input file and what became of it: ``status`` is the job's end ("succeeded",
    "failed", "cancelled", "timeout"; "refused" when it could not be submitted), ``written``
    the result or problem file."""

    path: Path
    stem: Path
    job_id: str | None = None
    result: Json | None = None
    problem: Json | None = None
    status: str | None = None
    written: Path | None = None


def request_of(path: Path, options: BatchOptions) -> tuple[Json, bytes | None]:
    """The job request for ``path`` and the bytes to upload with it (None: JSON only)."""
    suffix = path.suffix.lower()
    if suffix not in DEFAULT_TYPES:
        raise BatchError(
            f"{path}: unknown file type {suffix!r} (not one of {', '.join(DEFAULT_TYPES)})"
        )
    labelled = suffix == ".csv" and options.label_column is not None
    kind = options.input_type or ("labelled_points" if labelled else DEFAULT_TYPES[suffix])
    try:
        raw = path.read_bytes()
    except OSError as error:
        raise BatchError(f"{path}: {error.strerror or error}") from None
    data: bytes | None = None
    given: Json = {"type": kind}
    body: Json = {}
    if suffix == ".json":
        document = _json_of(path, raw)
        if "input" in document:
            body = document
            given = dict(document["input"])
        else:
            given.update(document)
    elif kind == "labelled_points" and suffix in (".csv", ".geojson"):
        data = raw
        if suffix == ".csv":
            given.update(format="csv", label_column=options.label_column or "class")
            if options.columns is not None:
                given["columns"] = options.columns
        else:
            given.update(format="geojson", label_property=options.label_property)
    elif suffix == ".csv":
        given["points"] = _csv_points(path, raw, options.columns).tolist()
    elif suffix == ".npy" and kind == "points":
        given["points"] = _npy_array(path, raw).tolist()
    elif suffix == ".npy" or suffix in _UPLOADED:
        data = raw
    if kind == "mask" and options.skeletonize:
        given["skeletonize"] = True
    if options.spacing is not None:
        given["spacing"] = options.spacing
    if options.units is not None:
        given["units"] = options.units
    body = {**body, "input": given}
    if options.filtration is not None:
        body["filtration"] = options.filtration
    elif "filtration" not in body and kind in DEFAULT_FILTRATIONS and not given.get("skeletonize"):
        body["filtration"] = {"type": DEFAULT_FILTRATIONS[given["type"]]}
    if options.features is not None:
        body["features"] = options.features
    if options.output is not None:
        body["output"] = options.output
    if options.descriptors is not None:
        body["descriptors"] = options.descriptors
    if options.max_dim is not None:
        if not isinstance(body.get("filtration"), dict):
            raise BatchError(f"{path}: --max-dim needs a filtration (--filtration)")
        body["filtration"] = {**body["filtration"], "max_dim": options.max_dim}
    for name, value in options.fields:
        _set_field(body, name, value)
    return body, data


def _set_field(body: Json, name: str, value: Any) -> None:
    """Set the dotted field ``name`` of ``body`` (``filtration.max_edge``), making the
    objects on the way."""
    *parents, last = name.split(".")
    target = body
    for part in parents:
        child = target.get(part)
        if child is None:
            child = target[part] = {}
        if not isinstance(child, dict):
            raise BatchError(f"--set {name}: {part} is not an object in the request")
        target = child
    target[last] = value


def result_stems(paths: Sequence[Path], out: Path | None) -> list[Path]:
    """Where each input's result goes, without the ``.result.json`` / ``.problem.json``
    ending (see the module docstring); BatchError for a file given twice."""
    absolute = [Path(os.path.normpath(os.path.abspath(path))) for path in paths]
    seen: dict[Path, Path] = {}
    for path, given in zip(absolute, paths, strict=True):
        if path in seen:
            raise BatchError(f"{given}: given twice (also as {seen[path]}); give each file once")
        seen[path] = given
    if out is None:
        return list(paths)
    return [out / relative for relative in _below_common_folder(absolute)]


def _below_common_folder(paths: list[Path]) -> list[Path]:
    """Each absolute path relative to the deepest folder all of them share."""
    try:
        common = Path(os.path.commonpath([path.parent for path in paths]))
    except ValueError:  # different drives (Windows): keep the drive as the first folder
        return [Path(path.drive.rstrip(":")) / path.relative_to(path.anchor) for path in paths]
    return [path.relative_to(common) for path in paths]


def _json_of(path: Path, raw: bytes) -> Json:
    try:
        document = json.loads(raw)
    except (ValueError, RecursionError) as error:
        raise BatchError(f"{path}: not JSON ({error})") from None
    if not isinstance(document, dict):
        raise BatchError(f"{path}: expected a JSON object (a job request, or a graph)")
    return document


def _npy_array(path: Path, raw: bytes) -> np.ndarray:
    try:
        array: np.ndarray = np.load(io.BytesIO(raw), allow_pickle=False)
    except (ValueError, OSError, EOFError) as error:
        raise BatchError(f"{path}: not a .npy array ({error})") from None
    return array


def _csv_points(path: Path, raw: bytes, columns: Sequence[str] | None) -> np.ndarray:
    """The coordinates of a point table: the named columns, each a number on every row."""
    try:
        rows = list(csv.reader(io.StringIO(raw.decode("utf-8-sig"))))
    except (UnicodeDecodeError, csv.Error) as error:
        raise BatchError(f"{path}: not a UTF-8 CSV table ({error})") from None
    if not rows:
        raise BatchError(f"{path}: empty table")
    header = [name.strip() for name in rows[0]]
    wanted = list(columns) if columns else [c for c in ("x", "y", "z") if c in header]
    missing = [name for name in wanted if name not in header]
    if missing or not wanted:
        raise BatchError(
            f"{path}: no column {', '.join(missing or ['x, y'])} in the header "
            f"({', '.join(header)}); name the coordinate columns with --columns"
        )
    indices = [header.index(name) for name in wanted]
    points = np.empty((len(rows) - 1, len(indices)), dtype=np.float64)
    for line, row in enumerate(rows[1:], start=2):
        try:
            points[line - 2] = [float(row[i]) for i in indices]
        except (ValueError, IndexError):  # NaN and inf parse: the client names them
            raise BatchError(
                f"{path}, line {line}: columns {', '.join(wanted)} must hold numbers"
            ) from None
    return points


def run_batch(
    client: Client,
    paths: Sequence[Path],
    options: BatchOptions,
    out: Path | None,
    on_done: Callable[[FileJob], object] | None = None,
    timeout: float | None = None,
) -> list[FileJob]:
    """Submit every file, wait for every job, write the results and the stacked vectors.

    Every request is built before the first is sent, so a file that cannot be read stops the
    batch (BatchError) before any job exists; then one ``GET /healthz`` checks that the
    server answers. A server that cannot be reached, then or later, stops the batch with
    its LacunaError (``unreachable``). ``on_done`` hears of each file as its job ends (or
    fails to be submitted)."""
    requests = [(path, *request_of(path, options)) for path in paths]
    stems = result_stems(paths, out)
    client.check_reachable()
    jobs = []
    for (path, body, data), stem in zip(requests, stems, strict=True):
        job = FileJob(path, stem)
        try:
            job.job_id = client.submit(body, data, path.name)
        except LacunaError as error:
            _ended(job, error, "refused")
            if on_done is not None:
                on_done(job)
        jobs.append(job)
    for job in jobs:
        if job.job_id is None:
            continue
        try:
            job.result = client.result(job.job_id, timeout)
            job.status = "succeeded"
        except LacunaError as error:
            _ended(job, error, error.job_status or "failed")
        _written(job)
        if on_done is not None:
            on_done(job)
    _write_vectors([job for job in jobs if job.result is not None], out or Path.cwd())
    return jobs


def _ended(job: FileJob, error: LacunaError, status: str) -> None:
    """The job ended without a result; a server gone away ends the whole batch."""
    if error.unreachable:
        raise error
    job.problem, job.status = error.problem, status
    if status == "refused":
        _written(job)


def _written(job: FileJob) -> None:
    """Write the job's result (or problem) as JSON at its stem."""
    job.stem.parent.mkdir(parents=True, exist_ok=True)
    if job.result is not None:
        target, document = job.stem.with_name(job.stem.name + ".result.json"), job.result
    else:
        target = job.stem.with_name(job.stem.name + ".problem.json")
        document = {
            "file": str(job.path),
            "job_id": job.job_id,
            "status": job.status,
            "problem": job.problem,
        }
    target.write_text(json.dumps(document) + "\n", encoding="utf-8")
    job.written = target


def column_names(result: Json) -> list[str]:
    """A name for each value of a result's concatenated vector: type, dimension, direction
    and position (or the value's label, for summaries)."""
    names: list[str] = []
    for entry, vector in zip(result["layout"], result["vectors"], strict=True):
        stem = f"{entry['type']}_h{entry['dim']}"
        if entry.get("direction") is not None:
            stem += f"_d{entry['direction']}"
        labels = vector.get("labels") or range(entry["stop"] - entry["start"])
        names.extend(f"{stem}_{label}" for label in labels)
    return names


def _write_vectors(jobs: list[FileJob], out: Path) -> None:
    """vectors.npy / .csv / .json of the jobs that have vectors, when all share a layout."""
    having = [job for job in jobs if job.result and job.result.get("vectors")]
    if not having:
        return
    first: Json = having[0].result  # type: ignore[assignment]
    for job in having:
        assert job.result is not None
        if job.result.get("layout_id") != first["layout_id"]:
            raise LayoutMismatch(
                f"{job.path}: its vectors have layout {job.result.get('layout_id')}, "
                f"{having[0].path} has {first['layout_id']}; only one layout stacks"
            )
    rows = np.stack(
        [
            np.concatenate(
                [np.asarray(v["values"], dtype=np.float64) for v in job.result["vectors"]]
            )
            for job in having
            if job.result is not None
        ]
    )
    out.mkdir(parents=True, exist_ok=True)
    np.save(out / "vectors.npy", rows, allow_pickle=False)
    spec_ids = list(dict.fromkeys(entry["spec_id"] for entry in first["layout"]))
    names = column_names(first)
    with (out / "vectors.csv").open("w", newline="", encoding="utf-8") as table:
        table.write(
            f"# lacuna feature vectors; layout_id {first['layout_id']}; "
            f"spec_ids {' '.join(spec_ids)}\n"
        )
        writer = csv.writer(table)
        writer.writerow(["file", "job_id", *names])
        for job, row in zip(having, rows, strict=True):
            writer.writerow([str(job.path), job.job_id, *map(repr, row.tolist())])
    manifest = {
        "layout_id": first["layout_id"],
        "spec_ids": spec_ids,
        "layout": first["layout"],
        "columns": names,
        "rows": [
            {"file": str(job.path), "job_id": job.job_id, "result": str(job.written)}
            for job in having
        ],
    }
    (out / "vectors.json").write_text(json.dumps(manifest, indent=1) + "\n", encoding="utf-8")
