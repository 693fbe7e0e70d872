"""The HTML page of a job (``GET /v1/jobs/{id}`` with ``Accept: text/html``): one
self-contained document, pictures inlined as data: URIs, no script and no external asset."""

import base64
import json
import threading
from typing import Any

from flask import Request, render_template

from service.errors import NotReady, RequestInvalid, ServerBusy
from service.extension import ServiceState
from service.pictures import draw
from service.queue import Job
from workers.spec import JobState
from workers.spec.plots import PlotQuery

__all__ = ["job_page", "wants_html"]

_PICTURES = (
    ("diagram", "Persistence diagram"),
    ("barcode", "Barcode"),
    ("image", "Persistence image"),
)


def wants_html(request: Request) -> bool:
    """Does the client prefer HTML to JSON (a browser's Accept header)?"""
    accept = request.accept_mimetypes
    return accept.best_match(["application/json", "text/html"]) == "text/html"


def job_page(state: ServiceState, job: Job, owner: str, waiters: threading.BoundedSemaphore) -> str:
    """The page of ``job``; its pictures are drawn through ``waiters`` (see ``draw``)."""
    status = state.queue.status(job)
    payload = state.queue.payload_of(job)
    result = state.queue.result(job) if status.status is JobState.succeeded else None
    pictures: list[dict[str, Any]] = []
    plot_links: list[dict[str, str]] = []
    note = ""
    if result is not None:
        direction = 0 if result.get("per_direction") else None
        if direction is not None:
            note = "Pictures of the first direction; ?direction=k on the plot links picks another."
        for kind, caption in _PICTURES:
            query = PlotQuery(kind=kind, direction=direction)
            try:
                picture, _ = draw(state, job, query, owner, waiters)
            except RequestInvalid:  # nothing of this kind in the result
                continue
            except (NotReady, ServerBusy) as error:
                note = f"Some pictures were not drawn: {error.detail}"
                break
            pictures.append(
                {
                    "id": f"plot-{kind}",
                    "caption": caption,
                    "base64": base64.b64encode(picture).decode("ascii"),
                    "width": query.width,
                    "height": query.height,
                }
            )
            link = f"/v1/jobs/{job.id}/plot?kind={kind}"
            if direction is not None:
                link += f"&direction={direction}"
            plot_links += [
                {"href": link, "text": f"{caption.lower()} (SVG)"},
                {"href": link + "&format=png", "text": f"{caption.lower()} (PNG)"},
            ]
    return render_template(
        "job.html",
        status=status,
        payload=payload,
        description=job.description or "",
        task_json=json.dumps(payload.task.model_dump(mode="json", exclude_none=True), indent=1),
        result=result,
        pictures=pictures,
        note=note,
        plot_links=plot_links,
        links={"result": f"/v1/jobs/{job.id}/result"},
    )
