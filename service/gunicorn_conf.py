"""gunicorn settings for the API.

    gunicorn -c python:service.gunicorn_conf 'service.app:create_app()'

Each value can be overridden on the command line or by the ``GUNICORN_CMD_ARGS`` environment
variable. The worker class is ballast's front (``service.front.FrontWorker``): tornado's HTTP
server receives every request whole on an event loop (headers within BALLAST_HEADER_TIMEOUT_S,
bodies within BALLAST_BODY_TIMEOUT_S, refused before they are read when the token or the size is
wrong), then one of ``threads`` threads runs the application; a stalled client holds no thread.
Why this and not gthread: deploy/README.md. A request either parses and stores a batch (CPU,
short) or reads the store (I/O, short).
"""

from __future__ import annotations

import multiprocessing
import os

bind = os.environ.get("BALLAST_BIND", "127.0.0.1:8000")
workers = int(os.environ.get("BALLAST_API_PROCESSES") or min(4, 2 * multiprocessing.cpu_count()))
threads = int(os.environ.get("BALLAST_API_THREADS") or 4)
worker_class = "service.front.FrontWorker"
# The event loop tells the arbiter it is alive every second, whatever the threads are doing:
# ``timeout`` only catches a process whose loop is stuck.
timeout = 300
graceful_timeout = 30
keepalive = 5  # > 0: connections are kept alive (for BALLAST_HEADER_TIMEOUT_S when idle)
# Body size and time are enforced by the front and the app (BALLAST_MAX_BODY_BYTES,
# BALLAST_BODY_TIMEOUT_S); the front reads at most 64 KiB of request line and headers.
accesslog = os.environ.get("BALLAST_ACCESS_LOG") or None
errorlog = "-"
loglevel = os.environ.get("BALLAST_LOG_LEVEL", "info").lower()
# Each worker opens its own store and broker connections after the fork.
preload_app = False
# No runtime control socket (gunicorn >= 25): ballast does not use it, and several API processes
# on one host would otherwise share the default path.
control_socket_disable = True
