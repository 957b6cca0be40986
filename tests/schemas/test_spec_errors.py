"""Spec errors name the root cause once, in plain words, with a did-you-mean where one fits;
batch specs answer like job specs: every problem in one answer."""
import pytest
from marshmallow import ValidationError

from schemas.batch import BatchSpecSchema
from schemas.job import JobSpecSchema
from schemas.problem import pointers

MODEL = {"states": {"y": 1.0}, "parameters": {"k": 1.0}, "ddt": {"y": "-k*y"}}
JOB = {"model": MODEL, "span": [0, 1]}
SUMMARY = [{"kind": "final", "of": "y"}]


def problems(schema, spec) -> dict:
    with pytest.raises(ValidationError) as info:
        schema.load(spec)
    found = {}
    for p in pointers(info.value.messages):
        found.setdefault(p["pointer"], []).append(p["detail"])
    return found


def test_a_reversed_span_is_reported_once_not_also_at_output_first():
    found = problems(JobSpecSchema(), dict(JOB, span=[5, 1], output={"count": 10, "spacing": "log", "first": 0.1}))
    assert found == {"/span": ["t_end must be greater than t_start"]}


def test_an_unknown_field_close_to_a_known_one_suggests_it_and_the_missing_field_is_not_repeated():
    found = problems(JobSpecSchema(), {"model": MODEL, "tspan": [0, 1]})
    assert found == {"/tspan": ["unknown field 'tspan'; did you mean 'span'?"]}


def test_unknown_fields_in_nested_parts_suggest_too_or_list_the_fields():
    found = problems(JobSpecSchema(), dict(JOB, tolerance={"rtl": 1e-6}, methd="auto", colour="red"))
    assert "did you mean 'rtol'" in found["/tolerance/rtl"][0]
    assert found["/methd"] == ["unknown field 'methd'; did you mean 'method'?"]
    assert "'span'" in found["/colour"][0] and "did you mean" not in found["/colour"][0]


def test_a_near_miss_of_a_choice_and_of_a_name_gets_a_suggestion():
    found = problems(JobSpecSchema(), dict(JOB, method="radau", initial={"yy": 2.0}, parameters={"K": 2.0}))
    assert found["/method"][0].endswith("did you mean 'radau_iia_5'?")
    assert found["/initial/yy"] == ["'yy' is not a state of the model; did you mean 'y'?"]
    assert found["/parameters/K"] == ["'K' is not a parameter of the model; did you mean 'k'?"]


def test_a_bare_model_gets_one_line_that_says_how_to_wrap_it():
    found = problems(JobSpecSchema(), dict(MODEL, title="decay"))
    assert list(found) == ["/"] and len(found["/"]) == 1
    assert 'put it under "model"' in found["/"][0] and '"span"' in found["/"][0]


def test_batch_errors_come_in_one_layer_with_suggestions():
    """A field error in the base, a misspelt grid name and a misspelt summary quantity: all three
    in the first answer (they used to come one layer at a time, without suggestions)."""
    spec = {"base": dict(JOB, outptu={"count": 5}), "grid": {"parameters": {"kk": [1, 2]}},
            "summaries": [{"kind": "final", "of": "yy"}, {"kind": "finl", "of": "y"}]}
    found = problems(BatchSpecSchema(), spec)
    assert found == {
        "/base/outptu": ["unknown field 'outptu'; did you mean 'output'?"],
        "/grid/parameters/kk": ["'kk' is not a parameter of the base model; did you mean 'k'?"],
        "/summaries/0/of": ["'yy' is not a state or derived quantity of the base model; did you mean 'y'?"],
        "/summaries/1/kind": ["must be one of 'final', 'at', 'max', 'min', 'crossing', 'event', 'integral'; "
                              "did you mean 'final'?"]}


def test_a_misspelt_design_is_one_error_not_also_a_missing_design():
    found = problems(BatchSpecSchema(), {"base": JOB, "grids": {"parameters": {"k": [1]}}, "summaries": SUMMARY})
    assert found == {"/grids": ["unknown field 'grids'; did you mean 'grid'?"]}


def test_batch_size_and_name_problems_come_with_field_problems():
    spec = {"base": JOB, "members": [{"parameters": {"k": 1.0}}] * 4 + [{"initial": {"Y": 1.0}}],
            "summaries": SUMMARY + [{"kind": "at", "of": "y", "time": "late"}]}
    found = problems(BatchSpecSchema(max_members=3), spec)
    assert found["/members"] == ["5 members; at most 3 allowed"]
    assert found["/members/4/initial/Y"] == ["'Y' is not a state of the base model; did you mean 'y'?"]
    assert "/summaries/1/time" in found
