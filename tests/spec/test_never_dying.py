"""One rule for classes that never die, in the feature specs' and the distances' formats."""

from collections.abc import Callable
from typing import Any

import pytest
from pydantic import ValidationError

from workers.spec.distances import NeverDying
from workers.spec.features import BettiCurveSpec

CURVE = {"type": "betti_curve", "dim": 0, "t_range": [0, 1], "samples": 3}


def feature(infinite: str, cap: float | None) -> Any:
    return BettiCurveSpec.model_validate({**CURVE, "infinite": infinite, "cap": cap})


def distance(mode: str, cap: float | None) -> Any:
    return NeverDying.model_validate({"mode": mode, "cap": cap})


@pytest.mark.parametrize(("make", "mode_field"), [(feature, "infinite"), (distance, "mode")])
def test_cap_goes_with_cap_in_both_formats(
    make: Callable[[str, float | None], Any], mode_field: str
) -> None:
    assert make("cap", 2.5).cap == 2.5
    assert make("drop", None).cap is None
    with pytest.raises(ValidationError, match=f'{mode_field} "cap" needs a cap value'):
        make("cap", None)
    with pytest.raises(ValidationError, match=f'cap is only used with {mode_field} "cap"'):
        make("drop", 1.0)


def test_both_formats_state_the_same_rule_in_their_schemas() -> None:
    feature_rule = {k: BettiCurveSpec.model_json_schema()[k] for k in ("if", "then", "else")}
    distance_rule = {k: NeverDying.model_json_schema()[k] for k in ("if", "then", "else")}
    assert (
        feature_rule["then"]
        == distance_rule["then"]
        == {
            "required": ["cap"],
            "properties": {"cap": {"type": "number"}},
        }
    )
    assert feature_rule["if"]["properties"] == {"infinite": {"const": "cap"}}
    assert distance_rule["if"]["properties"] == {"mode": {"const": "cap"}}
    feature_cap = BettiCurveSpec.model_json_schema()["properties"]["cap"]
    assert feature_cap == NeverDying.model_json_schema()["properties"]["cap"]
