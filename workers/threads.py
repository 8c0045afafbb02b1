"""The engine's BLAS thread count, set before numpy is first imported (imports nothing heavy).

The engine's matrices are small (N <= 64) and the service already runs one worker process per
core; measured on 2 cores with other load, 2 BLAS threads made a 401-point 5-port check 4x slower
(420 vs 100 ms), and idle BLAS threads spinning inflate the CPU time of every check.
"""

from __future__ import annotations

from collections.abc import MutableMapping

BLAS_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def pin_engine_threads(env: MutableMapping[str, str]) -> None:
    """Give every BLAS thread variable that ``env`` does not set the value of
    ``BALLAST_ENGINE_THREADS`` (default 1); only effective before numpy's first import."""
    threads = env.get("BALLAST_ENGINE_THREADS", "1")
    for name in BLAS_THREAD_VARIABLES:
        env.setdefault(name, threads)
