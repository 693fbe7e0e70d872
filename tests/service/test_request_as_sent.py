"""The request as sent, as the job page shows it: large arrays become their shape."""

import json
from typing import Any

from service.submissions import request_as_sent


def shown(body: Any) -> Any:
    return json.loads(request_as_sent(body, "application/json")["text"])


def test_small_arrays_show_whole_and_large_ones_as_their_shape() -> None:
    body = {
        "input": {"type": "graph", "nodes": [[0, 0], [1, 0], [1, 1]], "spacing": [0.5, 0.5]},
        "points": [[float(i), 0.0] for i in range(13)],  # 26 numbers: above the 24 shown
        "stack": [[[0] * 5] * 4] * 3,
        "diagrams": [[[0.0, 1.0], [0.5, None]], [[0.0, None]] * 20],
    }
    assert shown(body) == {
        "input": body["input"],
        "points": "<13 × 2 array; see Input SHA-256>",
        "stack": "<3 × 4 × 5 array; see Input SHA-256>",
        "diagrams": "<2-item array; see Input SHA-256>",  # ragged: diagrams of 2 and 20 pairs
    }


def test_lists_of_strings_or_objects_are_not_arrays() -> None:
    job_ids = [f"job-{i}" for i in range(40)]
    assert shown({"job_ids": job_ids})["job_ids"] == [*job_ids[:32], "<... 8 more items>"]
    features = [{"type": "summary", "dim": 0}] * 30
    assert shown({"features": features})["features"] == features


def test_the_numbers_of_a_large_array_are_never_each_read() -> None:
    # A value JSON cannot write, deep in the array: only row lengths are read, so it is never
    # touched (the placeholder points at the input's hash instead of hashing the array).
    rows: list[list[Any]] = [[0.0, 1.0]] * 100_000 + [[0.0, object()]]
    assert shown({"points": rows}) == {"points": "<100001 × 2 array; see Input SHA-256>"}
