"""``lacuna submit``: many input files in, one job each, results and stacked vectors out.

Each file becomes a job request the way its extension says (``--input-type`` overrides):

    .csv              points: the columns named by --columns (default x, y and z if present)
    .npy              image (an array of values); points, mask with --input-type
    .tif .tiff .png   image; mask with --input-type mask (uploaded as they are)
    .graphml          graph (uploaded as it is)
    .json             a whole job request (with "input"), or a graph's "nodes" and "edges"

Results are written as ``<stem>.result.json`` (or ``<stem>.problem.json`` for a job that
failed) next to each input or into ``--out``; the feature vectors of all jobs are stacked, one
row per input in the order given, into ``vectors.npy`` and ``vectors.csv``, and
``vectors.json`` says which file each row is, the spec_ids and the layout.
"""

import csv
import io
import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lacuna_client.client import Client, LacunaError

__all__ = ["BatchError", "BatchOptions", "FileJob", "LayoutMismatch", "request_of", "run_batch"]

Json = dict[str, Any]

DEFAULT_TYPES = {
    ".csv": "points",
    ".npy": "image",
    ".tif": "image",
    ".tiff": "image",
    ".png": "image",
    ".graphml": "graph",
    ".json": "graph",
}
"""Input type of each file extension when --input-type does not say."""

DEFAULT_FILTRATIONS = {"points": "rips", "image": "cubical", "mask": "distance"}
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
    skeletonize: bool = False


@dataclass
class FileJob:
    """One input file and what became of it."""

    path: Path
    job_id: str | None = None
    result: Json | None = None
    problem: Json | None = None


def request_of(path: Path, options: BatchOptions) -> tuple[Json, bytes | None]:
    """The job request for ``path`` and the bytes to upload with it (None: JSON only)."""
    suffix = path.suffix.lower()
    if suffix not in DEFAULT_TYPES:
        raise BatchError(
            f"{path}: unknown file type {suffix!r} (not one of {', '.join(DEFAULT_TYPES)})"
        )
    kind = options.input_type or DEFAULT_TYPES[suffix]
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
    return body, data


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
    batch (BatchError) before any job exists. ``on_done`` hears of each file as its job
    ends (or fails to be submitted)."""
    requests = [(path, *request_of(path, options)) for path in paths]
    jobs = []
    for path, body, data in requests:
        job = FileJob(path)
        try:
            job.job_id = client.submit(body, data, path.name)
        except LacunaError as error:
            job.problem = error.problem
            _written(job, out)
            if on_done is not None:
                on_done(job)
        jobs.append(job)
    for job in jobs:
        if job.job_id is None:
            continue
        try:
            job.result = client.result(job.job_id, timeout)
        except LacunaError as error:
            job.problem = error.problem
        _written(job, out)
        if on_done is not None:
            on_done(job)
    _write_vectors([job for job in jobs if job.result is not None], out or Path.cwd())
    return jobs


def _written(job: FileJob, out: Path | None) -> None:
    """Write the job's result (or problem) as JSON next to its input or into ``out``."""
    folder = out or job.path.parent
    folder.mkdir(parents=True, exist_ok=True)
    if job.result is not None:
        target, document = folder / f"{job.path.stem}.result.json", job.result
    else:
        target = folder / f"{job.path.stem}.problem.json"
        document = {"file": str(job.path), "job_id": job.job_id, "problem": job.problem}
    target.write_text(json.dumps(document) + "\n", encoding="utf-8")


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
            writer.writerow([job.path.name, job.job_id, *map(repr, row.tolist())])
    manifest = {
        "layout_id": first["layout_id"],
        "spec_ids": spec_ids,
        "layout": first["layout"],
        "columns": names,
        "rows": [{"file": str(job.path), "job_id": job.job_id} for job in having],
    }
    (out / "vectors.json").write_text(json.dumps(manifest, indent=1) + "\n", encoding="utf-8")
