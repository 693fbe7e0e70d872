"""A Python client of the lacuna API: numpy arrays in, numpy arrays out.

    from lacuna_client import Client

    lacuna = Client("http://lab-server:8000")
    job = lacuna.submit_points(points, filtration={"type": "rips", "max_dim": 1})
    h0, h1 = lacuna.diagrams(job)          # (k, 2) float64 arrays, np.inf for "never dies"

On a shared server, pass the API key an operator made for you (``lacuna keys create``):
``Client(url, api_key=...)``, or set LACUNA_API_KEY; it is sent as
``Authorization: Bearer <key>`` (RFC 6750).

Every call retries timeouts, dropped connections, 503 and 429 answers (rate or quota used
up) with exponential backoff (honouring Retry-After), never another 4xx; a server that
refuses the connection (or a host that does not resolve) is retried only briefly
(``connect_retries``), so a wrong URL fails within seconds. A submission carries an
Idempotency-Key, so a retried submission never makes a second job. Every error the service or
the network gives surfaces as one exception type, ``LacunaError``, carrying the RFC 9457
problem object (type ``unreachable``, status 0, when the server could not be reached).
"""

import json
import os
import socket
import time
import uuid
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import requests

from lacuna_client.arrays import result_array, result_diagrams, to_npy_bytes

__all__ = ["Client", "Distances", "LacunaError"]

Json = dict[str, Any]

_RETRIED_STATUSES = frozenset({429, 503})  # RFC 6585 section 4, RFC 9110 15.6.4
API_KEY_VARIABLE = "LACUNA_API_KEY"
_ENDED = {"succeeded", "failed", "cancelled"}
_MAX_RETRY_AFTER_S = 60.0
UNREACHABLE = "unreachable"
"""Problem type of a server that could not be reached (no answer at all: status 0)."""


class LacunaError(Exception):
    """Anything that went wrong, with the problem object (RFC 9457) that says what.

    ``problem`` is the service's answer when it gave one, else one made here (status 0 and
    type ``unreachable`` for a service that could not be reached). ``pointers`` lists the JSON
    Pointers of the fields a 422 names. When waiting for a job ended without its result,
    ``job_id`` names the job and ``job_status`` says how it ended ("failed" or "cancelled";
    "timeout" when the wait ran out first); both are None otherwise.
    """

    def __init__(
        self, problem: Json, *, job_id: str | None = None, job_status: str | None = None
    ) -> None:
        self.problem = problem
        self.job_id = job_id
        self.job_status = job_status
        self.type: str = problem.get("type", "about:blank")
        self.title: str = problem.get("title", "")
        self.status: int = int(problem.get("status") or 0)
        self.detail: str = problem.get("detail") or ""
        self.errors: list[Json] = problem.get("errors") or []
        super().__init__(f"{self.status} {self.title}: {self.detail}".strip())

    @property
    def pointers(self) -> list[str]:
        return [error["pointer"] for error in self.errors]

    @property
    def unreachable(self) -> bool:
        """True when no answer came at all: refused, unresolvable host, timed out."""
        return self.type == UNREACHABLE


@dataclass(frozen=True)
class Distances:
    """A distance matrix and why some of its entries are missing.

    ``matrix`` is N x N float64 in the order sent: inf where classes that never die cannot
    be matched, NaN where a cosine distance is undefined. ``nulls`` lists each such entry
    above the diagonal as the service explains it, ``{"row": i, "column": j, "reason":
    "..."}``. ``result`` is the whole JSON answer (metric, order, provenance, ...)."""

    matrix: np.ndarray
    nulls: list[Json] = field(default_factory=list)
    result: Json = field(default_factory=dict)


class Client:
    """One lacuna service. ``timeout`` bounds each HTTP call (seconds); ``retries`` and
    ``backoff`` (seconds, doubled per attempt) govern the retries; ``connect_retries`` the
    retries of a connection that could not be opened at all (refused, or the host not
    found), which a server restarting on its address needs only briefly. ``api_key`` is sent
    as ``Authorization: Bearer <key>`` for deployments behind an authenticating proxy."""

    def __init__(
        self,
        base_url: str,
        api_key: str | None = None,
        timeout: float = 60.0,
        *,
        retries: int = 5,
        backoff: float = 0.5,
        connect_retries: int = 2,
    ) -> None:
        self.base_url = base_url.rstrip("/")
        self.timeout = timeout
        self.retries = retries
        self.backoff = backoff
        self.connect_retries = connect_retries
        self._session = requests.Session()
        api_key = api_key if api_key is not None else os.environ.get(API_KEY_VARIABLE)
        if api_key:
            self._session.headers["Authorization"] = f"Bearer {api_key}"

    # --- submitting ---------------------------------------------------------------------------

    def submit(self, request: Json, data: bytes | None = None, filename: str = "data") -> str:
        """Submit a job request (the JSON body of ``POST /v1/jobs``); with ``data``, as
        multipart with ``data`` as the uploaded file (.npy, TIFF, PNG, GraphML, CSV or GeoJSON
        bytes).
        Returns the job id."""
        headers = {"Idempotency-Key": str(uuid.uuid4())}
        if data is None:
            headers["Content-Type"] = "application/json"
            answer = self._call("POST", "/v1/jobs", data=_json_text(request), headers=headers)
        else:
            files = {
                "request": (None, _json_text(request), "application/json"),
                "data": (filename, data, "application/octet-stream"),
            }
            answer = self._call("POST", "/v1/jobs", files=files, headers=headers)
        job_id: str = answer.json()["job_id"]
        return job_id

    def submit_points(
        self,
        points: np.ndarray,
        filtration: Json | None = None,
        features: Sequence[Json] = (),
        *,
        units: str | None = None,
        **request: Any,
    ) -> str:
        """A point set, (n, d) coordinates; extra keywords go into the request."""
        array = np.asarray(points, dtype=np.float64)
        body = _request(
            {"type": "points", "points": array.tolist(), "units": units},
            filtration,
            features,
            request,
        )
        return self.submit(body)

    def submit_labelled_points(
        self,
        points: np.ndarray,
        labels: Sequence[str],
        filtration: Json | None = None,
        features: Sequence[Json] = (),
        *,
        units: str | None = None,
        **request: Any,
    ) -> str:
        """Points of several classes: (n, 2|3) coordinates and one class name per point; a
        ``"population"`` in the filtration computes on that class alone."""
        array = np.asarray(points, dtype=np.float64)
        given = {
            "type": "labelled_points",
            "points": array.tolist(),
            "labels": [str(label) for label in labels],
            "units": units,
        }
        return self.submit(_request(given, filtration, features, request))

    def submit_labelled_table(
        self,
        data: bytes,
        format: str,
        filtration: Json | None = None,
        features: Sequence[Json] = (),
        *,
        columns: Sequence[str] | None = None,
        label_column: str | None = None,
        label_property: str | None = None,
        units: str | None = None,
        **request: Any,
    ) -> str:
        """Labelled points in a file, uploaded as it is: ``format`` "csv" (a header row; the
        coordinate ``columns``, default x, y; the class in ``label_column``, default class)
        or "geojson" (a FeatureCollection; the class in ``label_property``, default class)."""
        given: Json = {"type": "labelled_points", "format": format, "units": units}
        for name, value in (
            ("columns", None if columns is None else list(columns)),
            ("label_column", label_column),
            ("label_property", label_property),
        ):
            if value is not None:
                given[name] = value
        body = _request(given, filtration, features, request)
        return self.submit(body, data, f"points.{format}")

    def submit_diagrams(
        self,
        diagrams: Sequence[np.ndarray],
        features: Sequence[Json] = (),
        *,
        units: str | None = None,
        **request: Any,
    ) -> str:
        """Diagrams computed elsewhere (item k: the (n, 2) pairs of dimension k, inf deaths),
        for feature vectors."""
        given = [
            {"dim": k, "pairs": _pairs_json(np.asarray(pairs, dtype=np.float64))}
            for k, pairs in enumerate(diagrams)
        ]
        body = _request(
            {"type": "diagrams", "diagrams": given, "units": units}, None, features, request
        )
        return self.submit(body)

    def submit_image(
        self,
        values: np.ndarray,
        filtration: Json | None = None,
        features: Sequence[Json] = (),
        *,
        spacing: Sequence[float] | None = None,
        units: str | None = None,
        **request: Any,
    ) -> str:
        """A 2D image or 3D volume of values, uploaded as .npy."""
        return self._submit_array("image", values, filtration, features, spacing, units, request)

    def submit_mask(
        self,
        mask: np.ndarray,
        filtration: Json | None = None,
        features: Sequence[Json] = (),
        *,
        spacing: Sequence[float] | None = None,
        units: str | None = None,
        skeletonize: bool = False,
        **request: Any,
    ) -> str:
        """A 2D or 3D binary mask (nonzero = foreground), uploaded as .npy; ``skeletonize``
        works on its skeleton graph."""
        extra = {"skeletonize": True} if skeletonize else {}
        return self._submit_array(
            "mask", mask, filtration, features, spacing, units, request, extra
        )

    def submit_graph(
        self,
        nodes: np.ndarray,
        edges: np.ndarray,
        filtration: Json | None = None,
        features: Sequence[Json] = (),
        *,
        radius: np.ndarray | None = None,
        length: np.ndarray | None = None,
        units: str | None = None,
        **request: Any,
    ) -> str:
        """A graph: (n, 2|3) node coordinates, (m, 2) node index pairs, optional per-node
        radius and per-edge length."""
        graph: Json = {
            "type": "graph",
            "nodes": np.asarray(nodes, dtype=np.float64).tolist(),
            "edges": np.asarray(edges, dtype=np.int64).reshape(-1, 2).tolist(),
            "units": units,
        }
        if radius is not None:
            graph["radius"] = np.asarray(radius, dtype=np.float64).tolist()
        if length is not None:
            graph["length"] = np.asarray(length, dtype=np.float64).tolist()
        return self.submit(_request(graph, filtration, features, request))

    def _submit_array(
        self,
        kind: str,
        values: np.ndarray,
        filtration: Json | None,
        features: Sequence[Json],
        spacing: Sequence[float] | None,
        units: str | None,
        request: Json,
        extra: Json | None = None,
    ) -> str:
        given: Json = {"type": kind, "units": units, **(extra or {})}
        if spacing is not None:
            given["spacing"] = [float(s) for s in spacing]
        body = _request(given, filtration, features, request)
        return self.submit(body, to_npy_bytes(np.asarray(values)), f"{kind}.npy")

    def check_reachable(self) -> None:
        """Return if the service answers ``GET /healthz``; LacunaError (``unreachable``)
        when nothing answers at ``base_url``, or the problem of any other error."""
        self._call("GET", "/healthz")

    # --- following a job ------------------------------------------------------------------------

    def status(self, job_id: str) -> Json:
        """The job's status object (state, timestamps, progress, problem)."""
        answer: Json = self._call("GET", f"/v1/jobs/{job_id}").json()
        return answer

    def wait(
        self,
        job_id: str,
        timeout: float | None = None,
        *,
        poll: float = 1.0,
        progress: Callable[[Json], None] | None = None,
    ) -> Json:
        """Block until the job succeeds; its final status. ``progress`` gets every status seen
        on the way. LacunaError with the job's problem if it failed or was cancelled
        (``job_status`` "failed" or "cancelled"), or a ``timeout`` problem (status 0,
        ``job_status`` "timeout") when ``timeout`` seconds pass first."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while True:
            remaining = poll if deadline is None else min(poll, deadline - time.monotonic())
            # Prefer: wait ends the poll early when the job ends (RFC 7240).
            wait = max(0, int(np.ceil(remaining)))
            status: Json = self._call(
                "GET", f"/v1/jobs/{job_id}", headers={"Prefer": f"wait={wait}"}
            ).json()
            if progress is not None:
                progress(status)
            if status["status"] == "succeeded":
                return status
            if status["status"] in _ENDED:
                raise LacunaError(
                    status.get("problem")
                    or {
                        "title": f"Job {status['status']}",
                        "detail": f"job {job_id} was {status['status']}",
                    },
                    job_id=job_id,
                    job_status=status["status"],
                )
            if deadline is not None and time.monotonic() >= deadline:
                raise LacunaError(
                    {
                        "type": "timeout",
                        "title": "Timed out",
                        "detail": f"job {job_id} is still {status['status']} after {timeout} s",
                    },
                    job_id=job_id,
                    job_status="timeout",
                )
            if wait == 0:
                time.sleep(max(0.0, remaining))

    def result(self, job_id: str, timeout: float | None = None) -> Json:
        """The result of the job (waiting for it to succeed first)."""
        self.wait(job_id, timeout)
        answer: Json = self._call("GET", f"/v1/jobs/{job_id}/result").json()
        return answer

    def diagrams(self, job: str | Json, direction: int | None = None) -> list[np.ndarray]:
        """The persistence diagrams of a job (its id or its result): item k holds the (n, 2)
        float64 pairs of dimension k, ``np.inf`` where a class never dies. ``direction``
        picks one set of a job with one set per direction."""
        return result_diagrams(self._result_of(job), direction)

    def vectors(self, job: str | Json) -> np.ndarray:
        """The job's concatenated feature vector (float64, ``vector_length`` values, in the
        order of its ``layout``)."""
        array = result_array(self._result_of(job))
        if array is None:
            raise LacunaError(
                {"title": "No feature vector", "detail": "the job computed no feature vectors"}
            )
        return array

    def distances(
        self,
        metric: str,
        *,
        diagrams: Sequence[np.ndarray] | None = None,
        vectors: np.ndarray | None = None,
        job_ids: Sequence[str] | None = None,
        timeout: float | None = None,
        **request: Any,
    ) -> Distances:
        """The distances between diagrams ((n, 2) arrays of one dimension, inf deaths),
        vectors ((N, L) array) or finished jobs, with ``metric`` (bottleneck, wasserstein,
        sliced_wasserstein, euclidean, cosine): ``.matrix`` N x N (inf where classes that
        never die cannot be matched, NaN where a cosine distance is undefined) and
        ``.nulls``, the reason for each of those entries."""
        body: Json = {"metric": metric, **request}
        if diagrams is not None:
            body["diagrams"] = [_pairs_json(np.asarray(d, dtype=np.float64)) for d in diagrams]
        if vectors is not None:
            body["vectors"] = np.asarray(vectors, dtype=np.float64).tolist()
        if job_ids is not None:
            body["job_ids"] = list(job_ids)
        headers = {"Content-Type": "application/json"}
        answer = self._call("POST", "/v1/distances", data=_json_text(body), headers=headers)
        found: Json = answer.json()
        if answer.status_code == 202:
            found = self.result(found["job_id"], timeout)
        matrix = result_array(found)
        assert matrix is not None  # a distance result always has its matrix
        return Distances(matrix, list(found.get("nulls") or []), found)

    def cancel(self, job_id: str) -> Json:
        """Cancel a queued or running job; its status afterwards."""
        answer: Json = self._call("DELETE", f"/v1/jobs/{job_id}").json()
        return answer

    def capabilities(self) -> Json:
        """What the service accepts, and under ``caller`` your tenant, its quotas and usage."""
        answer: Json = self._call("GET", "/v1/capabilities").json()
        return answer

    def _result_of(self, job: str | Json) -> Json:
        return self.result(job) if isinstance(job, str) else job

    # --- HTTP -----------------------------------------------------------------------------------

    def _call(self, method: str, path: str, **kwargs: Any) -> requests.Response:
        """One request with retries; LacunaError for any answer that is not 2xx."""
        attempt = 0
        while True:
            last = attempt >= self.retries
            try:
                answer = self._session.request(
                    method, self.base_url + path, timeout=self.timeout, **kwargs
                )
            except (requests.ConnectionError, requests.Timeout) as error:
                reason = _connect_failure(error)
                if last or (reason is not None and attempt >= self.connect_retries):
                    raise LacunaError(
                        {
                            "type": UNREACHABLE,
                            "title": "Service unreachable",
                            "detail": f"cannot reach the lacuna server at {self.base_url} "
                            f"({reason or _network_failure(error)}): {method} {path}",
                            "url": self.base_url,
                            "reason": reason or _network_failure(error),
                        }
                    ) from error
                time.sleep(self._backoff(attempt))
            else:
                if answer.status_code < 400:
                    return answer
                if last or not self._retried(answer):
                    raise LacunaError(_problem_of(answer))
                time.sleep(self._retry_after(answer, attempt))
            attempt += 1

    def _retried(self, answer: requests.Response) -> bool:
        """503, and 429 unless its Retry-After is longer than any wait here (a quota that
        frees only in hours is the caller's to handle)."""
        if answer.status_code not in _RETRIED_STATUSES:
            return False
        header = answer.headers.get("Retry-After", "")
        return (
            answer.status_code != 429
            or not header.isdigit()
            or (float(header) <= _MAX_RETRY_AFTER_S)
        )

    def _backoff(self, attempt: int) -> float:
        return self.backoff * (1 << attempt)

    def _retry_after(self, answer: requests.Response, attempt: int) -> float:
        """Seconds before the next try: Retry-After (RFC 9110 10.2.3, delay-seconds form)
        when the service sends it, else the backoff."""
        header = answer.headers.get("Retry-After", "")
        if header.isdigit():
            return min(float(header), _MAX_RETRY_AFTER_S)
        return self._backoff(attempt)


def _causes(error: BaseException) -> list[BaseException]:
    """``error`` and what it wraps: requests wraps urllib3, which wraps the socket's error."""
    found: list[BaseException] = []
    pending: list[BaseException] = [error]
    while pending and len(found) < 20:
        current = pending.pop()
        found.append(current)
        pending += [c for c in (current.__cause__, current.__context__) if c is not None]
        pending += [a for a in current.args if isinstance(a, BaseException)]
        reason = getattr(current, "reason", None)
        if isinstance(reason, BaseException):
            pending.append(reason)
    return found


def _connect_failure(error: BaseException) -> str | None:
    """Why no connection could be opened ("connection refused", "host not found"), or None
    when the failure came later (a dropped connection, a read timeout), which is retried
    in full."""
    if isinstance(error, requests.ConnectTimeout):
        return "connection timed out"
    for cause in _causes(error):
        if isinstance(cause, ConnectionRefusedError):
            return "connection refused"
        if isinstance(cause, socket.gaierror):
            return "host not found"
    return None


def _network_failure(error: BaseException) -> str:
    """A short name for a failure after the connection was opened."""
    if isinstance(error, requests.Timeout):
        return "no answer in time"
    return "connection lost"


def _request(given: Json, filtration: Json | None, features: Sequence[Json], rest: Json) -> Json:
    """A job request body: the input without unset fields, then the rest."""
    body: Json = {"input": {k: v for k, v in given.items() if v is not None}}
    if filtration is not None:
        body["filtration"] = filtration
    if features:
        body["features"] = list(features)
    return {**body, **rest}


def _json_text(document: Json) -> str:
    """``document`` as JSON; LacunaError naming the first NaN or infinity, which JSON cannot
    carry (so the service would never see them)."""
    try:
        return json.dumps(document, allow_nan=False)
    except ValueError:
        where = _non_finite(document)
        raise LacunaError(
            {
                "type": "invalid-request",
                "title": "Invalid request",
                "detail": f"{where}: not a finite number (JSON has no NaN or infinity)",
                "errors": [{"pointer": where, "message": "not a finite number"}],
            }
        ) from None


def _non_finite(document: Any, pointer: str = "") -> str | None:
    """JSON Pointer of the first NaN or infinity in ``document``, if any."""
    if isinstance(document, float) and not np.isfinite(document):
        return pointer or "/"
    items = (
        document.items()
        if isinstance(document, dict)
        else enumerate(document)
        if isinstance(document, list)
        else ()
    )
    for key, value in items:
        found = _non_finite(value, f"{pointer}/{key}")
        if found is not None:
            return found
    return None


def _pairs_json(pairs: np.ndarray) -> list[list[float | None]]:
    """(n, 2) pairs as JSON carries them: inf death -> null."""
    return [[float(b), None if np.isinf(d) else float(d)] for b, d in pairs.reshape(-1, 2)]


def _problem_of(answer: requests.Response) -> Json:
    """The problem object of an error answer (made up from the status if it sent none)."""
    try:
        problem = answer.json()
    except ValueError:
        problem = None
    if not isinstance(problem, dict) or "title" not in problem:
        problem = {"title": answer.reason or "Error", "detail": answer.text[:500]}
    problem.setdefault("status", answer.status_code)
    return problem
