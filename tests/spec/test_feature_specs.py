"""Feature spec ids: the SHA-256 of a documented canonical JSON, stable across releases."""

import hashlib
import json

from pydantic import TypeAdapter

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


def test_spec_id_is_sha256_of_the_documented_canonical_json() -> None:
    # A client can compute the id itself: sorted keys, no spaces, UTF-8 (as documented).
    spec = SPEC.validate_python(IMAGE)
    canonical = dict(IMAGE, infinite="drop", cap=None, spec_version=FEATURE_SPEC_VERSION)
    canonical["birth_range"] = [0.0, 1.0]
    canonical["persistence_range"] = [0.0, 0.5]
    text = json.dumps(canonical, sort_keys=True, separators=(",", ":"))
    assert spec_id_of(spec) == hashlib.sha256(text.encode("utf-8")).hexdigest()


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


PINNED_IMAGE_ID = "445c2e7213b6bf564342702e87496be66913b01f5d8bcd5663242afab1aef8c1"
PINNED_LANDSCAPE_ID = "a8f9ea3c2af056e6f2e846f58b467ce00ab15f913d50b5394b4206ae703b6a33"
