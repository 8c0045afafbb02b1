"""The service's Prometheus metrics, shared by the API and the workers (metric names are a
contract of issue 10).

* ``ballast_checks_submitted_total{priority}``: checks accepted by the API;
* ``ballast_checks_finished_total{verdict}``: checks done, by verdict;
* ``ballast_checks_failed_total``: checks that ended ``failed`` (engine error, time limit,
  attempts used up on a worker that records it);
* ``ballast_checks_redelivered_total``: claims of a check that had been claimed before;
* ``ballast_engine_seconds``: histogram of the engine's time per check;
* ``ballast_queue_depth{tenant}`` and ``ballast_checks_unfinished{tenant}``: read when scraped
  (messages waiting in each tenant's queue; its queued + running checks).

In multiprocess mode (``workers.metrics_dir``) :func:`exposition` adds up the files of every
process of the host, the way prometheus_client's documentation describes
(``MultiProcessCollector`` on a fresh ``CollectorRegistry``).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator

from prometheus_client import (
    CONTENT_TYPE_LATEST,
    REGISTRY,
    CollectorRegistry,
    Counter,
    Histogram,
    generate_latest,
)
from prometheus_client.core import GaugeMetricFamily
from prometheus_client.multiprocess import MultiProcessCollector
from prometheus_client.registry import Collector

from workers.metrics_dir import MULTIPROC_VARIABLE

SUBMITTED = Counter("ballast_checks_submitted", "Checks accepted by the API", ["priority"])
FINISHED = Counter("ballast_checks_finished", "Checks done, by verdict", ["verdict"])
FAILED = Counter("ballast_checks_failed", "Checks that ended failed")
REDELIVERED = Counter("ballast_checks_redelivered",
                      "Claims of a check that had been claimed before (redeliveries)")
ENGINE_SECONDS = Histogram(
    "ballast_engine_seconds", "Engine time per check (seconds)",
    buckets=(0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0, 300.0))

CONTENT_TYPE = CONTENT_TYPE_LATEST


class TenantGauges(Collector):
    """Queue depth and unfinished checks per tenant, read when scraped."""

    def __init__(self, tenants: Callable[[], list[str]], queue_size: Callable[[str], int],
                 unfinished: Callable[[str], int]) -> None:
        self.tenants = tenants
        self.queue_size = queue_size
        self.unfinished = unfinished

    def collect(self) -> Iterator[GaugeMetricFamily]:
        depth = GaugeMetricFamily("ballast_queue_depth",
                                  "Messages waiting in the tenant's queue", labels=["tenant"])
        open_ = GaugeMetricFamily("ballast_checks_unfinished",
                                  "Queued and running checks of the tenant", labels=["tenant"])
        for tenant in self.tenants():
            depth.add_metric([tenant], float(self.queue_size(tenant)))
            open_.add_metric([tenant], float(self.unfinished(tenant)))
        yield depth
        yield open_


def exposition(extra: Collector | None = None) -> bytes:
    """The text exposition of every process of this host (or of this process alone)."""
    if os.environ.get(MULTIPROC_VARIABLE):
        registry = CollectorRegistry()
        MultiProcessCollector(registry)
    else:
        registry = CollectorRegistry()
        for collector in (FINISHED, FAILED, REDELIVERED, SUBMITTED, ENGINE_SECONDS):
            registry.register(collector)
    if extra is not None:
        registry.register(extra)
    return generate_latest(registry)


__all__ = ["CONTENT_TYPE", "ENGINE_SECONDS", "FAILED", "FINISHED", "REDELIVERED", "REGISTRY",
           "SUBMITTED", "TenantGauges", "exposition"]
