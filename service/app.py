"""The WSGI application: ``create_app(config)``; gunicorn runs ``service.app:create_app()``."""

# ruff: noqa: E402 (the host's metrics folder is set before prometheus_client's first import)

from __future__ import annotations

import logging
import os
from collections.abc import Callable
from typing import Any

from flask import Flask

from workers.metrics_dir import use_metrics_dir

use_metrics_dir(os.environ)  # before prometheus_client is first imported (workers.metrics)

from service.api import ProblemApi, batches, callbacks, checks, health, report_data, request_id
from service.api.body_gate import BodyGateMiddleware
from service.api.path_ids import CONVERTERS, parameter_schema
from service.api.security_headers import SecurityHeadersMiddleware
from service.config import app_config
from service.problems import PROBLEM_CONTENT_TYPE
from service.schemas.verdict import verdict_components
from workers.store import Stores

log = logging.getLogger("ballast.api")

API_TITLE = "ballast"
API_VERSION = "1"
BLUEPRINTS = (health.blp, checks.blp, batches.blp, callbacks.blp, report_data.blp)

_SPEC_OPTIONS = {
    "info": {
        "description": "Stability verdicts for RF/microwave amplifiers from multi-port data. "
                       "Errors are RFC 9457 problem details (" + PROBLEM_CONTENT_TYPE + ").",
        "license": {"name": "MIT", "identifier": "MIT"},
    },
    "components": {"securitySchemes": {
        "bearer": {"type": "http", "scheme": "bearer",
                   "description": "an API token (blst_…) made with `ballast token create`"},
    }},
    "security": [{"bearer": []}],
}


def _open_stores(config: dict[str, Any]) -> Stores:
    from workers.store import open_stores

    url = config.get("BALLAST_STORE_URL")
    if not url:
        from workers.runtime_config import load_config

        url = load_config().store_url
    return open_stores(url, retention_s=float(config["BALLAST_RETENTION_S"]),
                       prefix=config["BALLAST_STORE_PREFIX"])


def _queue_functions(config: dict[str, Any]) -> dict[str, Callable[..., Any]]:
    functions = {
        "enqueue": config.get("BALLAST_ENQUEUE"),
        "workers_alive": config.get("BALLAST_WORKERS_ALIVE"),
        "queue_reachable": config.get("BALLAST_QUEUE_REACHABLE"),
        "withdraw": config.get("BALLAST_WITHDRAW"),
        "queue_size": config.get("BALLAST_QUEUE_SIZE"),
    }
    if any(f is None for f in functions.values()):
        from workers import queue

        if functions["enqueue"] is None:
            queue.load_publisher()
            functions["enqueue"] = queue.enqueue
        functions["workers_alive"] = functions["workers_alive"] or queue.workers_alive
        functions["withdraw"] = functions["withdraw"] or queue.withdraw
        functions["queue_size"] = functions["queue_size"] or queue.queue_size
        # a queue module without its own broker probe: a live worker implies a reachable broker
        functions["queue_reachable"] = functions["queue_reachable"] or getattr(
            queue, "broker_reachable", functions["workers_alive"])
    return functions  # type: ignore[return-value]


def _safe_enqueue(enqueue: Callable[..., None]) -> Callable[..., None]:
    def publish(check_ids: list[str], **route: Any) -> None:
        try:
            enqueue(check_ids, **route)
        except Exception as exc:  # stored as queued already: the reconciler will publish them
            log.warning("enqueue of %d check(s) failed: %s", len(check_ids), exc)

    return publish


def create_app(config: dict[str, Any] | None = None) -> Flask:
    """The API with its store and queue; ``config`` overrides ``service.config`` defaults."""
    app = Flask("ballast")
    app.config.update(app_config(config))
    app.config.update({
        "API_TITLE": API_TITLE,
        "API_VERSION": API_VERSION,
        "OPENAPI_VERSION": "3.1.0",
        "OPENAPI_URL_PREFIX": "/",
        "OPENAPI_JSON_PATH": "openapi.json",
        "API_SPEC_OPTIONS": _SPEC_OPTIONS,
        "MAX_CONTENT_LENGTH": app.config["BALLAST_MAX_BODY_BYTES"],
        "MAX_FORM_MEMORY_SIZE": app.config["BALLAST_MAX_BODY_BYTES"],
        "MAX_FORM_PARTS": int(app.config["BALLAST_MAX_VARIANTS"]) + 16,
    })
    app.json.sort_keys = False  # the verdict goes out exactly as the engine ordered it
    stores = app.config["BALLAST_STORES"] or _open_stores(app.config)
    functions = _queue_functions(app.config)
    app.extensions["ballast"] = {
        "stores": stores,
        "enqueue": _safe_enqueue(functions["enqueue"]),
        "workers_alive": functions["workers_alive"],
        "queue_reachable": functions["queue_reachable"],
        "withdraw": functions["withdraw"],
        "queue_size": functions["queue_size"],
    }
    app.url_map.converters.update(CONVERTERS)
    api = ProblemApi(app)
    for name, component in verdict_components().items():  # the verdict, typed (engine records)
        api.spec.components.schema(name, component=component)
    for converter in CONVERTERS.values():
        api.register_converter(converter, parameter_schema)
    for blueprint in BLUEPRINTS:
        api.register_blueprint(blueprint)
    # report pages and plots (service.api.reports: images and HTML; matplotlib loads on first use)
    from service.api.reports import blp as reports_blueprint

    api.register_blueprint(reports_blueprint)
    # ---
    from service.api.metrics import blp as metrics_blueprint
    from workers.logs import configure_json_logging

    app.register_blueprint(metrics_blueprint)
    request_id.install(app)
    configure_json_logging()
    app.wsgi_app = SecurityHeadersMiddleware(BodyGateMiddleware(  # type: ignore[method-assign]
        app.wsgi_app, int(app.config["BALLAST_MAX_BODY_BYTES"]), stores.access))
    return app
