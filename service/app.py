"""Application factory: ``create_app(settings=None)``."""
from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Optional

from flask import Flask

from jobs.queue import Publisher
from jobs.settings import Settings
from jobs.store import JobStore

VERSION = "0.1.0"


@dataclass
class ServiceContext:
    """Shared clients, kept in ``app.extensions['stifflane']``."""

    settings: Settings
    store: JobStore
    publisher: Publisher


def create_app(settings: Optional[Settings] = None, store: Optional[JobStore] = None,
               publisher: Optional[Publisher] = None) -> Flask:
    settings = settings or Settings.from_env()
    app = Flask(__name__)
    app.config["MAX_CONTENT_LENGTH"] = settings.max_body_bytes
    app.json.sort_keys = False
    app.extensions["stifflane"] = ServiceContext(
        settings=settings,
        store=store or JobStore.connect(settings),
        publisher=publisher or Publisher(settings),
    )
    from service import auth, dashboard, health, jobs_api, jsonbody, problems

    problems.install(app)
    auth.install(app)
    jsonbody.install(app)
    app.register_blueprint(jobs_api.bp)
    app.register_blueprint(health.bp)
    app.register_blueprint(dashboard.bp)
    from service import batches_api  # batch sweeps (docs/batches.md)

    app.register_blueprint(batches_api.bp)
    from service import calibrations_api  # parameter estimation (docs/calibration.md)

    app.register_blueprint(calibrations_api.bp)
    from service import metrics, openapi_doc  # /metrics; query parameters the document does not list are refused

    app.register_blueprint(metrics.bp)

    openapi_doc.install(app)
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(name)s %(levelname)s %(message)s")
    return app
