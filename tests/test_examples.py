"""The shipped examples stay consistent with each other and valid: every model under
examples/models has a runnable job spec under examples/jobs that embeds it unchanged."""
import json

import pytest

from cli import common
from cli.main import main
from schemas.job import JobSpecSchema
from tests.conftest import example_path

MODELS = sorted(example_path("models").glob("*.json"))
JOBS = sorted(example_path("jobs").glob("*.json"))
JOB_OF = {"tarnwhistle_hydrogenation": "tarnwhistle_demo"}  # the demo keeps its historical name


def test_the_demo_job_embeds_the_shipped_tarnwhistle_model():
    job = json.loads(example_path("jobs", "tarnwhistle_demo.json").read_text())
    model = json.loads(example_path("models", "tarnwhistle_hydrogenation.json").read_text())
    assert job["model"] == model
    assert "Invented" in model["title"] and "nvented" in job["label"]


def test_every_example_job_is_a_valid_spec():
    for path in JOBS:
        JobSpecSchema().load(json.loads(path.read_text()))


@pytest.mark.parametrize("model", MODELS, ids=lambda p: p.stem)
def test_every_example_model_has_a_job_spec_that_embeds_it(model):
    job = example_path("jobs", JOB_OF.get(model.stem, model.stem) + ".json")
    assert job.exists(), f"no job spec for {model.name} under examples/jobs/"
    assert json.loads(job.read_text())["model"] == json.loads(model.read_text())


@pytest.mark.parametrize("job", JOBS, ids=lambda p: p.stem)
def test_every_example_job_passes_stifflane_validate(job, capsys):
    assert main(["validate", str(job)]) == common.OK
    assert "valid" in capsys.readouterr().out


@pytest.mark.parametrize("model", MODELS, ids=lambda p: p.stem)
def test_validate_on_a_bare_model_says_how_to_wrap_it_in_one_answer(model, capsys):
    assert main(["validate", str(model)]) == common.INVALID_SPEC
    out = capsys.readouterr().out
    assert "this is a model, not a job spec" in out and '"model": <the contents of' in out and '"span": [0, 10]' in out
    assert "Unknown field" not in out and "unknown field" not in out
    assert f"examples/jobs/{JOB_OF.get(model.stem, model.stem)}.json is a complete job spec" in out
