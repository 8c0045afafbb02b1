"""``ballast serve [--port N] [--demo]`` and ``ballast worker``."""

from __future__ import annotations

import argparse
import os
from typing import Any

SERVE_EXIT_CODES_HELP = """exit codes:
  0  stopped by Ctrl-C (SIGINT) or SIGTERM
  3  the API did not come up (port in use?), a process kept dying, or bad usage"""
WORKER_EXIT_CODES_HELP = """exit codes:
  those of the Celery worker this command becomes (0 after a warm shutdown on
  SIGTERM); 3 for bad usage."""


def _positive(text: str) -> int:
    value = int(text)
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 or more")
    return value


def register(subparsers: Any) -> None:
    serve = subparsers.add_parser(
        "serve",
        help="run the API and workers on this machine (embedded SQLite store and broker "
             "unless BALLAST_REDIS_URL is set)",
        description="Start the HTTP API (gunicorn) and a worker as child processes, print the "
                    "base URL and an API token, and run until Ctrl-C. Data lives in "
                    "BALLAST_DATA_DIR (default ./var); BALLAST_REDIS_URL switches to Redis. "
                    "Ctrl-C (SIGINT) or SIGTERM stops it within 5 s; a check still running "
                    "then runs again at the next start.",
        epilog=SERVE_EXIT_CODES_HELP,
    )
    serve.add_argument("--host", default="127.0.0.1", help="address to listen on")
    serve.add_argument("--port", type=int, default=int(os.environ.get("BALLAST_PORT") or 8000),
                       help="port to listen on (default: BALLAST_PORT or 8000)")
    serve.add_argument("--workers", type=_positive, default=min(2, os.cpu_count() or 1),
                       help="worker processes running checks (0: accept only)")
    serve.add_argument("--api-processes", type=_positive, default=2,
                       help="gunicorn processes answering HTTP")
    serve.add_argument("--demo", action="store_true",
                       help="submit the demo batches of invented variants and print verdicts")
    serve.set_defaults(func=_serve)

    worker = subparsers.add_parser(
        "worker",
        help="run a worker on its own (distributed deployments)",
        description="Run checks from the queue named by BALLAST_REDIS_URL (or the embedded "
                    "broker in BALLAST_DATA_DIR). Also runs the heartbeat and the reconciler.",
        epilog=WORKER_EXIT_CODES_HELP,
    )
    worker.add_argument("--concurrency", type=_positive, default=os.cpu_count() or 1,
                        help="checks run at once (processes)")
    worker.add_argument("--name", default=None, help="worker name (default: Celery's)")
    worker.add_argument("--loglevel", default="INFO",
                        help="Celery's log level: DEBUG, INFO, WARNING, ERROR (default: INFO)")
    worker.set_defaults(func=_worker)


def _serve(args: argparse.Namespace) -> int:
    from service.embedded import ServeOptions, serve

    options = ServeOptions(host=args.host, port=args.port, worker_processes=args.workers,
                           api_processes=max(1, args.api_processes), demo=args.demo)
    return serve(options, out=lambda line: print(line, flush=True))


def _worker(args: argparse.Namespace) -> int:
    from workers.worker_process import worker_argv

    argv = worker_argv(max(1, args.concurrency), args.name, args.loglevel)
    os.execv(argv[0], argv)  # the worker replaces this process: signals reach Celery directly
    return 0  # pragma: no cover
