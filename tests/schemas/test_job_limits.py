"""Job specs that could only end badly are refused at submission with the field and the reason."""
import pytest
from marshmallow import ValidationError

from schemas.job import MIN_ATOL, JobSpecSchema

BASE = {"model": {"states": {"a": 1.0}, "ddt": {"a": "-a"}}, "span": [0.0, 1.0]}


def errors(**changes):
    with pytest.raises(ValidationError) as e:
        JobSpecSchema().load(BASE | changes)
    return e.value.messages


def test_a_span_whose_length_overflows_is_refused():
    assert "overflows float64" in errors(span=[-1e308, 1e308])["span"][0]


def test_an_absolute_tolerance_below_the_floor_is_refused():
    assert "at least 1e-60" in str(errors(tolerance={"atol": 1e-300}))
    assert "at least" in str(errors(tolerance={"atol": {"a": 1e-70}}))
    JobSpecSchema().load(BASE | {"tolerance": {"atol": MIN_ATOL}})


def test_a_constant_that_overflows_is_refused_not_clamped():
    model = {"states": {"a": 1.0}, "ddt": {"a": "exp(1000)*a"}}
    assert "exp(1000) overflows float64" in str(errors(model=model))
