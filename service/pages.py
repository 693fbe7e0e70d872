"""The HTML pages of jobs (``GET /v1/jobs/{id}`` with ``Accept: text/html``): one small
document per job, no script and no external asset. Pictures are not drawn here: the page
points at ``GET /v1/jobs/{id}/plot``, so it stays small however many pairs the job found,
and refreshes itself every few seconds while the job is unfinished."""

import json
from typing import Any
from urllib.parse import urlencode

from flask import Request, render_template

from service.queue import Job
from workers.spec import JobPayload, JobState, JobStatus

__all__ = ["REFRESH_S", "job_page", "not_found_page", "wants_html"]

REFRESH_S = 2
"""Seconds between two loads of the page of an unfinished job."""

_DIAGRAM_PICTURES = (("diagram", "Persistence diagram"), ("barcode", "Barcode"))
_IMAGE_PICTURE = ("image", "Persistence image")
_MATRIX_PICTURE = ("matrix", "Distance matrix")

_COORDINATE_INPUTS = ("points", "labelled_points", "image", "mask", "graph")
"""Input types whose request ``units`` are those of coordinates (points, spacing, nodes)."""


def wants_html(request: Request) -> bool:
    """Does the client prefer HTML to JSON (a browser's Accept header)?"""
    accept = request.accept_mimetypes
    return accept.best_match(["application/json", "text/html"]) == "text/html"


def job_page(
    status: JobStatus, job: Job, payload: JobPayload, result: Any, sent: dict[str, str] | None
) -> str:
    """The page of ``job``: its ``status``, the ``payload`` it was queued with, its
    ``result`` once it has succeeded (None before) and the request as it was ``sent``
    (``JobQueue.request_as_sent``)."""
    unfinished = status.status in (JobState.queued, JobState.running)
    return render_template(
        "job.html",
        status=status,
        times=status.model_dump(mode="json", include={"created_at", "started_at", "ended_at"}),
        refresh_s=REFRESH_S if unfinished else None,
        unfinished=unfinished,
        payload=payload,
        description=job.description or "",
        sent=_sent(sent, payload),
        result=result,
        pictures=_pictures(job.id, result) if result is not None else [],
        per_direction=bool(result and result.get("per_direction")),
        pair_counts=_pair_counts(result) if result is not None else [],
        values=_values(result) if result is not None else None,
        coordinates=_coordinates(payload, result),
        links={"result": f"/v1/jobs/{job.id}/result"},
    )


def not_found_page(detail: str, request_id: str | None) -> str:
    """The page of a job that does not exist (or is another tenant's)."""
    return render_template("not_found.html", detail=detail, request_id=request_id)


def _sent(sent: dict[str, str] | None, payload: JobPayload) -> dict[str, str]:
    """The request as the client sent it; a job queued before requests were kept (by a
    server of an earlier version, still within its result TTL) shows its task as computed,
    and says so."""
    if sent is not None:
        return {**sent, "kept": "as sent"}
    task = payload.task.model_dump(mode="json", exclude_none=True)
    return {"media_type": "", "text": json.dumps(task, indent=1), "kept": "as computed"}


def _pictures(job_id: str, result: dict[str, Any]) -> list[dict[str, Any]]:
    """The pictures of a result: what ``GET /v1/jobs/{id}/plot`` draws of it, the first
    direction's of a sweep."""
    sets = result.get("per_direction") or []
    direction = 0 if sets else None
    kinds: list[tuple[str, str]] = []
    if result.get("diagrams") or (sets and sets[0].get("diagrams")):
        kinds += _DIAGRAM_PICTURES
    if any(
        vector.get("type") == "persistence_image" and vector.get("direction") == direction
        for vector in result.get("vectors") or []
    ):
        kinds.append(_IMAGE_PICTURE)
    if result.get("matrix") is not None:
        kinds.append(_MATRIX_PICTURE)
    pictures = []
    for kind, caption in kinds:
        query: dict[str, Any] = {"kind": kind}
        if direction is not None and kind != "matrix":
            query["direction"] = direction
        href = f"/v1/jobs/{job_id}/plot?{urlencode(query)}"
        pictures.append(
            {
                "id": f"plot-{kind}",
                "caption": caption,
                "svg": href,
                "png": href + "&format=png",
            }
        )
    return pictures


def _pair_counts(result: dict[str, Any]) -> list[dict[str, Any]]:
    """One row per diagram (per direction of a sweep): its dimension, pairs and how many of
    them never die."""
    sets = result.get("per_direction")
    named: list[tuple[int | None, list[dict[str, Any]]]] = (
        [(index, item.get("diagrams") or []) for index, item in enumerate(sets)]
        if sets
        else [(None, result.get("diagrams") or [])]
    )
    return [
        {
            "direction": direction,
            "dim": diagram["dim"],
            "pairs": len(diagram["pairs"]),
            "never_die": sum(1 for _, death in diagram["pairs"] if death is None),
        }
        for direction, diagrams in named
        for diagram in diagrams
    ]


def _values(result: dict[str, Any]) -> dict[str, str | None] | None:
    """What the diagram values are and their unit (None: no unit, as pixel intensities)."""
    if "value_convention" not in result:  # a distance matrix has no diagram values
        return None
    return {
        "convention": result.get("value_convention") or "as given",
        "units": result.get("units"),
    }


def _coordinates(payload: JobPayload, result: Any) -> dict[str, Any] | None:
    """The spacing and unit of the input's coordinates: the result's own once it names them
    (``coordinate_units``, ``spacing``), else as the request gave them."""
    given = result if isinstance(result, dict) else {}
    units = given.get("coordinate_units")
    if "coordinate_units" not in given and payload.input.type in _COORDINATE_INPUTS:
        units = payload.input.units
    spacing = given.get("spacing") if "spacing" in given else getattr(payload.task, "spacing", None)
    if payload.input.type not in _COORDINATE_INPUTS and units is None and spacing is None:
        return None
    return {"units": units or "no unit given", "spacing": spacing}
