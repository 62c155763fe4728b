"""Parameter constraints (models.constraints): membership follows the interval
notation of mathematics (ISO 80000-2, 2-7: [a, b] closed, (a, b) open), and
every refusal names the parameter, the range and the value."""

from __future__ import annotations

import math

import pytest

from models.constraints import OPEN_UNIT, Interval, StrOptions, validate_params
from models.errors import InputError
from models.metrics import check_coverage


@pytest.mark.parametrize(
    ("closed", "inside"),
    [
        # ISO 80000-2: which ends of [0, 1] belong, for 0, 0.5 and 1.
        ("both", (True, True, True)),
        ("left", (True, True, False)),
        ("right", (False, True, True)),
        ("neither", (False, True, False)),
    ],
)
def test_ends_belong_as_the_notation_says(closed: str, inside: tuple[bool, bool, bool]) -> None:
    iv = Interval(float, 0.0, 1.0, closed=closed)  # type: ignore[arg-type]
    assert tuple(v in iv for v in (0.0, 0.5, 1.0)) == inside


def test_nan_text_and_booleans_never_belong() -> None:
    iv = Interval(float, None, None)
    assert 3.5 in iv
    assert math.nan not in iv
    assert "0.5" not in iv
    assert True not in Interval(int, 0, 5)
    assert 1.5 not in Interval(int, 0, 5)


def test_messages_name_the_parameter_range_and_value() -> None:
    with pytest.raises(InputError, match=r"k must be between 1 and 8, got 0") as exc:
        Interval(int, 1, 8).check(0, "k")
    assert exc.value.field == "k"
    with pytest.raises(InputError, match=r"alpha must be in \(0, 1\), got 1\.0"):
        OPEN_UNIT.check(1.0, "alpha")
    with pytest.raises(InputError, match=r"n must be at least 1, got -2"):
        Interval(int, 1, None).check(-2, "n")


def test_a_nan_coverage_is_called_not_a_number() -> None:
    # NaN compares false with everything, so "should be <= 0.95" would be wrong.
    with pytest.raises(InputError, match=r"coverage must be a number between 0\.5 and 0\.95, got nan"):
        check_coverage(math.nan)
    assert check_coverage(0.8) == 0.8


def test_options_and_estimator_constraints() -> None:
    with pytest.raises(InputError, match="fmt must be one of png, svg, got 'gif'"):
        StrOptions(frozenset({"png", "svg"})).check("gif", "fmt")
    validate_params({"alpha": 0.1}, {"alpha": OPEN_UNIT})
    with pytest.raises(InputError, match="alpha"):
        validate_params({"alpha": 0.0}, {"alpha": OPEN_UNIT})
