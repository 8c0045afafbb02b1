"""gunicorn settings for the API.

    gunicorn -c python:service.gunicorn_conf 'service.app:create_app()'

Each value can be overridden on the command line or by the ``GUNICORN_CMD_ARGS`` environment
variable. Sync workers with a few threads: a request either parses and stores a batch (CPU, short)
or reads the store (I/O, short); large batch uploads need the long timeout.
"""

from __future__ import annotations

import multiprocessing
import os

bind = os.environ.get("BALLAST_BIND", "127.0.0.1:8000")
workers = int(os.environ.get("BALLAST_API_PROCESSES") or min(4, 2 * multiprocessing.cpu_count()))
threads = int(os.environ.get("BALLAST_API_THREADS") or 4)
worker_class = "gthread"
timeout = 300
graceful_timeout = 30
keepalive = 5
# Body size is enforced by the app (BALLAST_MAX_BODY_BYTES, 413/411 for chunked bodies);
# these only bound the request line and headers.
limit_request_line = 8190
limit_request_fields = 100
accesslog = os.environ.get("BALLAST_ACCESS_LOG") or None
errorlog = "-"
loglevel = os.environ.get("BALLAST_LOG_LEVEL", "info").lower()
# Each worker opens its own store and broker connections after the fork.
preload_app = False
# No runtime control socket (gunicorn >= 25): ballast does not use it, and several API processes
# on one host would otherwise share the default path.
control_socket_disable = True
