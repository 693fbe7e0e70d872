"""Tunables of job execution, each with its meaning, in one place.

These shape how a worker runs jobs, not what they compute or accept: results are the same
whatever they are. What a deployment sets (limits, time limits, Redis) is in the typed
settings: ``service.settings.Settings`` for the API, ``workers.settings.WorkerSettings``
for workers.
"""

# Jobs small enough to run in the worker process itself: the compute child's round trip
# (JSON and .npy over a pipe) would cost more than the job.

INLINE_MAX_POINTS = 150
"""Rips jobs up to this many points (H0/H1, no subsample): at most ~20 ms."""

INLINE_MAX_PAIRS = 5000
"""Jobs on given diagrams up to this many pairs (features of 5000 pairs take a few ms) ..."""

INLINE_MAX_VALUES = 10_000
"""... when their feature vectors have at most this many values together."""

INLINE_MAX_PIXELS = 4096
"""Image and mask jobs (and masks to skeletonize) up to this many pixels: a few ms."""

INLINE_MAX_GRAPH_ROWS = 20_000
"""Graph jobs up to this many nodes and edges together: a few ms (a height filtration with
many directions multiplies that, still far below any time limit)."""

INLINE_MAX_DISTANCE_ITEMS = 8
"""Distance matrices between at most this many items ..."""

INLINE_MAX_DISTANCE_ROWS = 2000
"""... holding at most this many stored rows (pairs or vector rows) together."""

# The compute child and the distance processes.

PROGRESS_INTERVAL_S = 0.25
"""Least time between two progress messages from the compute child (the last one is always
sent)."""

POLL_INTERVAL_S = 0.05
"""How often a worker waiting on its compute child looks for a cancel request; the result
itself wakes it at once."""

CHUNK_PAIRS = 256
"""Most diagram pairs per chunk of a distance matrix: small enough for steady progress,
large enough to amortise a send."""

FORK_FROM_PAIRS = 64
"""Distance matrices with fewer pairs than this are computed in one process: forking would
cost more."""
