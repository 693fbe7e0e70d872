"""The client's readers of results (lacuna_client.arrays) on tiny hand-made results, and
against the server's own readers (workers.spec.arrays), which they must keep agreeing with."""

import io
from typing import Any

import numpy as np
import pytest

from lacuna_client import arrays
from workers.spec import arrays as server

RESULT = {
    "diagrams": [
        {"dim": 0, "pairs": [[0.0, 0.5], [0.0, None]]},
        {"dim": 2, "pairs": [[0.25, 1.0]]},
    ],
    "vectors": [{"values": [1.0, 2.0]}, {"values": [3.0]}],
}
SWEEP = {
    "diagrams": None,
    "per_direction": [
        {"direction": [0, 1], "diagrams": [{"dim": 0, "pairs": [[1.0, None]]}]},
        {"direction": [1, 0], "diagrams": [{"dim": 0, "pairs": []}]},
    ],
    "vectors": [],
}


def matrix(metric: str) -> dict[str, Any]:
    return {"metric": metric, "count": 2, "matrix": [[0.0, None], [None, 0.0]]}


def test_diagrams_by_hand() -> None:
    h0, h1, h2 = arrays.result_diagrams(RESULT)
    # A null death is a class that never dies; H1 has no pairs but lies below H2.
    np.testing.assert_array_equal(h0, [[0.0, 0.5], [0.0, np.inf]])
    assert h1.shape == (0, 2) and h1.dtype == np.float64
    np.testing.assert_array_equal(h2, [[0.25, 1.0]])
    assert arrays.result_diagrams({"diagrams": []}) == []


def test_a_sweep_needs_its_direction() -> None:
    with pytest.raises(ValueError, match="pick a direction"):
        arrays.result_diagrams(SWEEP)
    (first,) = arrays.result_diagrams(SWEEP, direction=0)
    np.testing.assert_array_equal(first, [[1.0, np.inf]])
    assert arrays.result_diagrams(SWEEP, direction=1)[0].shape == (0, 2)


def test_arrays_by_hand() -> None:
    np.testing.assert_array_equal(arrays.result_array(RESULT), [1.0, 2.0, 3.0])
    assert arrays.result_array(SWEEP) is None
    # A null distance: inf for diagrams that cannot be matched, NaN for an undefined cosine.
    bottleneck = arrays.result_array(matrix("bottleneck"))
    np.testing.assert_array_equal(bottleneck, [[0, np.inf], [np.inf, 0]])
    cosine = arrays.result_array(matrix("cosine"))
    assert cosine is not None and np.isnan(cosine[0, 1]) and cosine[0, 0] == 0


def test_npy_bytes_round_trip_without_pickle() -> None:
    values = np.arange(12, dtype=np.uint16).reshape(3, 4)[:, ::2]  # not contiguous
    back = np.load(io.BytesIO(arrays.to_npy_bytes(values)), allow_pickle=False)
    assert back.dtype == np.uint16
    np.testing.assert_array_equal(back, values)
    with pytest.raises(ValueError):
        arrays.to_npy_bytes(np.array([{}], dtype=object))


@pytest.mark.parametrize("result", [RESULT, SWEEP, matrix("wasserstein"), matrix("cosine")])
def test_the_client_reads_results_as_the_server_does(result: dict[str, Any]) -> None:
    ours, theirs = arrays.result_array(result), server.result_array(result)
    assert (ours is None) == (theirs is None)
    if ours is not None:
        np.testing.assert_array_equal(ours, theirs)
    for direction in [None] if "per_direction" not in result else [0, 1]:
        for mine, reference in zip(
            arrays.result_diagrams(result, direction),
            server.result_diagrams(result, direction),
            strict=True,
        ):
            np.testing.assert_array_equal(mine, reference)
    assert arrays.to_npy_bytes(np.eye(2)) == server.to_npy_bytes(np.eye(2))
