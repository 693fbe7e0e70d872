"""Settings of the API process: one typed object, read from ``LACUNA_*`` environment variables."""

from pathlib import Path
from typing import Literal

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

from workers.spec.jobs import DEFAULT_MAX_DOWKER_SIMPLICES, DEFAULT_MAX_RESULT_PAIRS, DEFAULT_QUEUE

__all__ = ["MIN_REQUESTS_PER_S", "Settings"]

MIN_REQUESTS_PER_S = 0.001
"""Slowest request rate a tenant may be given (one request per 1000 s): the token bucket's
Redis key lives burst / rate seconds, and a far smaller rate overflows EXPIRE."""


class Settings(BaseSettings):
    """Every tunable of the HTTP service, each with its meaning and default."""

    model_config = SettingsConfigDict(env_prefix="LACUNA_", extra="ignore")

    redis_url: str | None = Field(
        None,
        description="Redis URL holding the queue. Unset: `lacuna serve` starts an embedded "
        "Redis; the app alone falls back to redis://127.0.0.1:6379/0.",
    )
    queue: str = Field(DEFAULT_QUEUE, description="RQ queue the API submits to.")
    host: str = Field("127.0.0.1", description="Address `lacuna serve` listens on.")
    port: int = Field(8000, ge=1, le=65535, description="Port `lacuna serve` listens on.")
    max_points: int = Field(5000, ge=1, description="Most points a Rips filtration runs on.")
    max_input_points: int = Field(
        1_000_000, ge=1, description="Most points accepted in one request (before subsample)."
    )
    max_body_bytes: int = Field(64 * 1024 * 1024, ge=1024, description="Largest request body.")
    max_dim: int = Field(2, ge=0, le=2, description="Highest homology dimension allowed.")
    max_features: int = Field(64, ge=1, description="Most feature specs one job may ask for.")
    max_vector_length: int = Field(
        250_000, ge=1, description="Most values in one job's concatenated feature vector."
    )
    max_distance_count: int = Field(
        2000, ge=2, description="Most diagrams or vectors in one distance matrix."
    )
    # Upper bounds: the cubical engine indexes the array padded by one pixel on every side
    # with 32-bit integers, and padding at most triples (2D) or multiplies by nine (3D) a size.
    max_image_pixels: int = Field(
        4096 * 4096, ge=2, le=2**31 // 3 - 16, description="Most pixels in one 2D image or mask."
    )
    max_volume_voxels: int = Field(
        512**3,
        ge=2,
        le=2**31 // 9 - 16,
        description="Most voxels in one 3D volume or mask. The engine takes about 25-50 bytes "
        "per voxel on smooth data, about 120 on noise and several hundred on data with many "
        "ties (binary noise), plus 8 for the values; the job time limit bounds the rest.",
    )
    max_graph_nodes: int = Field(
        2_000_000, ge=1, le=2**31 - 1, description="Most nodes in one graph (JSON or GraphML)."
    )
    max_graph_edges: int = Field(
        2_000_000, ge=0, le=2**31 - 1, description="Most edges in one graph (JSON or GraphML)."
    )
    max_label_classes: int = Field(
        64, ge=1, le=4096, description="Most classes (distinct labels) of labelled points."
    )
    max_dowker_simplices: int = Field(
        DEFAULT_MAX_DOWKER_SIMPLICES,
        ge=1,
        description="Most candidate simplices (the sum over witnesses of the subsets of their "
        "neighbours a Dowker filtration builds, repeats included) one Dowker job may build; "
        "above it the worker refuses the job at max_radius before building. The default "
        "passes 20,000 vertices and 5,000 witnesses at three spacings (about 12 million).",
    )
    max_upload_bytes: int = Field(
        512 * 1024 * 1024,
        ge=1024,
        description="Largest multipart request (an array uploaded as a file); JSON bodies keep "
        "max_body_bytes.",
    )
    max_result_pairs: int = Field(
        DEFAULT_MAX_RESULT_PAIRS,
        ge=1,
        le=DEFAULT_MAX_RESULT_PAIRS,
        description="Most diagram pairs in one result (all dimensions and directions); a job "
        "above it fails with a problem. The cap keeps a result under Redis's 512 MB value limit.",
    )
    inline_distance_pairs: int = Field(
        2000,
        ge=0,
        description="Distance matrices with at most this many pairs are waited for (up to "
        "max_wait_s) and answered with 200; larger ones answer 202 at once unless the client "
        "sends Prefer: wait.",
    )
    job_time_limit_s: float = Field(300.0, gt=0, description="Wall-time limit of one job.")
    rq_timeout_margin_s: int = Field(
        60,
        ge=1,
        description="RQ's own job timeout is job_time_limit_s plus this: a backstop behind "
        "the worker's SIGKILL of a job over its limit.",
    )
    result_ttl_s: int = Field(86_400, ge=1, description="How long results are kept.")
    queued_ttl_s: int = Field(
        86_400, ge=1, description="How long a job (and its input) may wait in the queue."
    )
    idempotency_ttl_s: int = Field(
        86_400,
        ge=1,
        description="How long an Idempotency-Key names its job: the same key with the same "
        "request within it answers that job again instead of queueing another.",
    )
    idempotency_claim_wait_s: float = Field(
        5.0,
        gt=0,
        description="A key claimed this recently whose job cannot be found yet is still being "
        "enqueued by the request that claimed it, and a retry waits for it; an older one names "
        "a job that has expired.",
    )
    max_wait_s: int = Field(30, ge=0, description="Cap on the `Prefer: wait=N` header.")
    redis_timeout_s: float = Field(
        2.0, gt=0, description="Socket timeout of Redis calls; beyond it the API answers 503."
    )
    retry_after_s: int = Field(5, ge=1, description="Retry-After sent with 503 answers.")
    http_workers: int = Field(2, ge=1, description="gunicorn worker processes of `lacuna serve`.")
    http_threads: int = Field(
        16,
        ge=1,
        description="Threads per gunicorn worker; each `Prefer: wait` holds one while it waits.",
    )
    local_workers: int = Field(
        2, ge=0, description="Job workers `lacuna serve` starts on its own machine (0: API only)."
    )

    # Observability (logs; /metrics has no settings of its own)
    log_format: Literal["json", "text"] = Field(
        "json",
        description="Log lines of the API under gunicorn, on stderr: one JSON object per line "
        "(for a log collector; gunicorn's access log too), or gunicorn's own text.",
    )

    # Tenants and quotas: API keys, the access mode, per-tenant quotas (service/auth.py,
    # service/keys.py, service/quotas.py)
    auth: Literal["keys", "open"] | None = Field(
        None,
        description='"keys": every request but the health routes (/healthz, /readyz), the '
        "OpenAPI document and /metrics needs an API key (Authorization: Bearer, RFC 6750); "
        '"open": no keys, every request acts for the one owner "public". Unset: keys (the '
        "app cannot see the address it is bound to); `lacuna serve` always sets it, open on a "
        "loopback address.",
    )
    open_access: bool = Field(
        False,
        description="Let `lacuna serve` listen on a non-loopback address in open mode (no "
        "keys): anyone who can reach the port reads and cancels every job.",
    )
    max_unfinished_jobs: int = Field(
        500, ge=1, description="Most queued plus running jobs of one tenant at a time."
    )
    # Generous enough for one user's batch (`make bench` sends 400 requests in about 2 s),
    # tight enough that a runaway loop of one tenant cannot crowd out the others.
    requests_per_s: float = Field(
        100.0,
        ge=MIN_REQUESTS_PER_S,
        description="Requests per second one tenant may sustain (token bucket).",
    )
    request_burst: int = Field(
        1000, ge=1, description="Requests one tenant may send at once above the sustained rate."
    )
    max_feature_specs: int = Field(
        1000, ge=1, description="Most feature specs one tenant keeps registered at a time."
    )
    feature_spec_ttl_s: int = Field(
        30 * 86_400,
        ge=1,
        description="A registered feature spec expires this long after it was last registered "
        "or used (by id in a job, or read).",
    )

    # Pictures: each drawn once per job and query, then answered from Redis
    picture_cache_max_bytes: int = Field(
        4_000_000,
        ge=0,
        description="Largest picture kept in Redis (bytes) for the rest of its job's result "
        "TTL; a larger one is drawn again on every request. 0: no picture is kept.",
    )
    picture_cache_bytes_per_job: int = Field(
        16_000_000,
        ge=0,
        description="Most bytes of one job's pictures kept in Redis at a time (counted until "
        "the job expires); past it, further pictures of the job are drawn on every request. "
        "Bounds what the many distinct queries of a job can store.",
    )

    # Memory and cost of jobs: the memory limit, and the refusal up front of what cannot fit
    job_memory_limit_mb: int | None = Field(
        4096,
        ge=1,
        description="How far one job may grow its compute process (MiB of address space, "
        "beyond what the idle process maps); a job above it fails with a memory-limit problem "
        "and the worker carries on. Unset (null): no limit.",
    )
    refuse_costly_jobs: bool = Field(
        True,
        description="Refuse before queueing (422 too-costly) a job whose estimated peak "
        "memory is above job_memory_limit_mb times cost_memory_margin, or whose estimated time "
        "is above job_time_limit_s times cost_time_margin (workers.spec.costs).",
    )
    cost_memory_margin: float = Field(
        2.0,
        ge=1,
        description="How far above the memory limit an estimate must be before a job is "
        "refused: the cost model errs (up to 2.4 times on its own grid, see "
        "workers/spec/costs.py), and the runtime cap stops what gets through.",
    )
    cost_time_margin: float = Field(
        4.0,
        ge=1,
        description="How far above the time limit an estimate must be before a job is "
        "refused (estimates assume one core and the machine the model was fitted on).",
    )

    # Bounds on the API process's own memory and threads.
    max_large_parses: int = Field(
        2,
        ge=1,
        description="Request bodies over large_body_bytes one API process parses at once "
        "(uploads and large JSON: the decoded arrays and parser state cost several times the "
        "body); one more is answered 503 with Retry-After at once.",
    )
    large_body_bytes: int = Field(
        8 * 1024 * 1024,
        ge=0,
        description="Bodies above this many bytes count as large parses for "
        "max_large_parses: a JSON body by the bytes read, an upload by its data part's size "
        "(a chunked body, of unknown length, counts once read).",
    )
    max_waiters: int = Field(
        8,
        ge=0,
        description="Requests of one API process that may block on `Prefer: wait` at once; "
        "past it a request answers at once (202 for a submission), so threads stay free for "
        "other requests and health checks. A picture (/plot, the job page) waits on its plot "
        "job as one of them: past it, 503 with Retry-After. Keep it below http_threads.",
    )

    # Worker liveness (what /readyz counts; workers/settings.py has the worker's side)
    dead_after_s: int = Field(
        30,
        ge=2,
        description="/readyz counts a registered worker as live only if its last heartbeat is "
        "at most this old. The workers read the same variable (LACUNA_DEAD_AFTER_S): a worker "
        "silent this long is dead to them too, and its running job is requeued or failed.",
    )

    # Durability of `lacuna serve`
    data_dir: Path | None = Field(
        None,
        description="Folder of the embedded Redis's append-only file (`lacuna serve` without a "
        "Redis URL): jobs, results, feature specs and Idempotency-Keys survive restarts there. "
        "Unset: $XDG_STATE_HOME/lacuna, else ~/.local/state/lacuna.",
    )
