"""The drawing is pinned to DRAWING_VERSION: a picture's ETag and cache key name the version,
so a change of the drawing that keeps the version would have clients and the cache answer
the old picture as if it were the new one. The SVG of one small fixed diagram is hashed and
compared with the hash recorded beside the version (SVG output is deterministic: see
workers.pictures.drawing)."""

import hashlib

import numpy as np
import pytest

from workers.pictures import drawing
from workers.pictures.drawing import barcode_plot, diagram_plot, matrix_plot
from workers.spec.plots import DRAWING_SAMPLE_SHA256, DRAWING_VERSION

SAMPLE = [
    (0, np.array([[0.0, 0.4], [0.0, 1.0], [0.0, np.inf]])),
    (1, np.array([[0.5, 1.5], [0.7, 0.9]])),
]
"""Hand-made: both dimensions, a class that never dies, pairs near and far from the diagonal."""


def sample_sha256() -> str:
    """SHA-256 of the sample drawn as every pair kind and a matrix, at a small size."""
    digest = hashlib.sha256()
    for drawn in (
        diagram_plot(SAMPLE, units="um", width=320, height=240),
        barcode_plot(SAMPLE, units="um", width=320, height=240),
        matrix_plot(
            np.array([[0.0, 1.0, np.inf], [1.0, 0.0, 2.0], [np.inf, 2.0, 0.0]]),
            value_name="bottleneck distance",
            units="um",
            null_meaning="infinite",
            width=320,
            height=240,
        ),
    ):
        digest.update(hashlib.sha256(drawn).digest())
    return digest.hexdigest()


def test_the_drawing_is_the_one_its_version_names() -> None:
    found = sample_sha256()
    assert found == DRAWING_SAMPLE_SHA256, (
        "the pictures' drawing changed: raise DRAWING_VERSION in workers/spec/plots.py (now "
        f"{DRAWING_VERSION!r}) and set DRAWING_SAMPLE_SHA256 beside it to {found!r}, so no "
        "cache or client keeps the old picture under the new one's ETag"
    )


def test_a_change_of_the_look_changes_the_hash(monkeypatch: pytest.MonkeyPatch) -> None:
    # Meta-test: the sample is sensitive to the drawing (here, H1's colour).
    pinned = sample_sha256()
    monkeypatch.setattr(drawing, "COLOURS", ("#4d2886", "#157c67", *drawing.COLOURS[2:]))
    assert sample_sha256() != pinned
