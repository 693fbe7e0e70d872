"""Feature spec ids: the SHA-256 of a documented canonical JSON, stable across releases."""

import hashlib

import numpy as np
import pytest
import rfc8785
from pydantic import TypeAdapter

from workers.spec.arrays import canonical_json
from workers.spec.features import FEATURE_SPEC_VERSION, FeatureSpec, canonical_spec, spec_id_of

SPEC = TypeAdapter(FeatureSpec)

IMAGE = {
    "type": "persistence_image",
    "dim": 1,
    "birth_range": [0, 1],
    "persistence_range": [0, 0.5],
    "resolution": [20, 10],
    "sigma": 0.05,
    "weight": {"type": "linear", "max_persistence": 0.5},
}


def test_spec_id_is_sha256_of_the_rfc8785_canonical_json() -> None:
    # A client can compute the id itself with any JSON Canonicalization Scheme library;
    # rfc8785 (PyPI) is the reference implementation checked against here.
    spec = SPEC.validate_python(IMAGE)
    canonical = dict(IMAGE, infinite="drop", cap=None, spec_version=FEATURE_SPEC_VERSION)
    assert spec_id_of(spec) == hashlib.sha256(rfc8785.dumps(canonical)).hexdigest()


@pytest.mark.parametrize(
    "value",
    # Number forms of RFC 8785 section 3.2.2.3 (ECMAScript Number::toString), from memory:
    # integers lose ".0", exponents from 1e21 up and below 1e-6, "-0" is "0".
    [1.0, 100.0, 1e21, 1e20, 1e-7, 1e-6, 0.00001, 4.5, 0.002, -0.0, 333333333.3333333, 5e-324],
)
def test_numbers_are_written_as_rfc8785_writes_them(value: float) -> None:
    assert canonical_json(value) == rfc8785.dumps(value).decode()


def test_random_documents_match_the_rfc8785_reference() -> None:
    rng = np.random.default_rng(0)
    for _ in range(200):
        values = (rng.standard_normal(8) * 10.0 ** rng.integers(-30, 30, 8)).tolist()
        document = {"z": values, "a": {"é\n": values[:2], "b": [1, None, True, "x"]}}
        assert canonical_json(document) == rfc8785.dumps(document).decode()


def test_defaults_are_part_of_the_canonical_form() -> None:
    canonical = canonical_spec(SPEC.validate_python({"type": "summary", "dim": 0}))
    assert canonical == {
        "type": "summary",
        "dim": 0,
        "infinite": "drop",
        "cap": None,
        "order": 1.0,
        "quantiles": [0.1, 0.25, 0.5, 0.75, 0.9],
        "spec_version": FEATURE_SPEC_VERSION,
    }


def test_spelling_does_not_change_the_id() -> None:
    # 1 and 1.0, key order and an echoed spec_id name the same spec.
    reordered = dict(reversed(list(IMAGE.items())))
    as_floats = dict(IMAGE, birth_range=[0.0, 1.0], resolution=[20, 10])
    first = spec_id_of(SPEC.validate_python(IMAGE))
    echoed = dict(IMAGE, spec_id=first)
    for variant in (reordered, as_floats, echoed):
        assert spec_id_of(SPEC.validate_python(variant)) == first


def test_any_parameter_changes_the_id() -> None:
    first = spec_id_of(SPEC.validate_python(IMAGE))
    for change in (
        {"sigma": 0.06},
        {"dim": 0},
        {"resolution": [10, 20]},
        {"infinite": "cap", "cap": 2},
    ):
        assert spec_id_of(SPEC.validate_python(dict(IMAGE, **change))) != first


def test_ids_stay_the_same_across_releases() -> None:
    # Pinned on purpose: a pipeline that stored these ids months ago must still match them.
    # If a computation changes, bump FEATURE_SPEC_VERSION (and these ids change with it).
    assert FEATURE_SPEC_VERSION == "1"
    assert spec_id_of(SPEC.validate_python(IMAGE)) == PINNED_IMAGE_ID
    landscape = {"type": "landscape", "dim": 1, "levels": 3, "t_range": [0, 2], "samples": 50}
    assert spec_id_of(SPEC.validate_python(landscape)) == PINNED_LANDSCAPE_ID


PINNED_IMAGE_ID = "a776c33fbefdbcf78166eb1c550ae2abeea67e63c3d63176d12dd5a7276a5587"
PINNED_LANDSCAPE_ID = "192cc61333fa29f4a0f34f6ae79e224753c77bcdd5ed5fcc32a7fff83e4c1ad5"
