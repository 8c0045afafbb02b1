"""Where the processes of one host keep their Prometheus samples (imports nothing heavy).

prometheus_client's multiprocess mode: every process (each gunicorn worker, the Celery worker's
main and pool processes) writes its samples into files under ``PROMETHEUS_MULTIPROC_DIR``, and
``/metrics`` adds them up. The variable must be set before prometheus_client is first imported;
``BALLAST_METRICS_DIR`` sets it (``ballast serve``: ``<data dir>/metrics``, emptied at start).
"""

from __future__ import annotations

import os
from collections.abc import MutableMapping

MULTIPROC_VARIABLE = "PROMETHEUS_MULTIPROC_DIR"


def use_metrics_dir(env: MutableMapping[str, str]) -> str | None:
    """Point ``PROMETHEUS_MULTIPROC_DIR`` at ``BALLAST_METRICS_DIR`` (made if missing) unless it
    is set already; returns the folder in use (None: one process, its own registry)."""
    folder = env.get(MULTIPROC_VARIABLE) or env.get("BALLAST_METRICS_DIR")
    if not folder:
        return None
    os.makedirs(folder, exist_ok=True)
    env.setdefault(MULTIPROC_VARIABLE, folder)
    return folder
