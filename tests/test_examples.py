"""The shipped examples stay consistent with each other and valid."""
import json

from schemas.job import JobSpecSchema
from tests.conftest import example_path


def test_the_demo_job_embeds_the_shipped_tarnwhistle_model():
    job = json.loads(example_path("jobs", "tarnwhistle_demo.json").read_text())
    model = json.loads(example_path("models", "tarnwhistle_hydrogenation.json").read_text())
    assert job["model"] == model
    assert "Invented" in model["title"] and "nvented" in job["label"]


def test_every_example_job_is_a_valid_spec():
    for path in example_path("jobs").glob("*.json"):
        JobSpecSchema().load(json.loads(path.read_text()))
