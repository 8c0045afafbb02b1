"""ballast's numerical engine: pure numpy/scipy, arrays frequency first.

``run_check(request)`` turns a validated :class:`~workers.engine.request.CheckRequest` into a
:class:`~workers.engine.verdict.CheckVerdict`; ``verdict.to_dict()`` is the JSON the service returns.
"""

from __future__ import annotations

from workers.engine.check import Analysis, analyse
from workers.engine.decide import decide
from workers.engine.errors import InputError, TouchstoneError
from workers.engine.external import two_port_report
from workers.engine.request import CheckOptions, CheckRequest, Device, Network, Port
from workers.engine.verdict import VERDICT_FORMAT, CheckVerdict


def run_check(request: CheckRequest) -> CheckVerdict:
    """Every indicator of one check, and the verdict."""
    analysis = analyse(request)
    diagnostics: list = []
    two_port, _ = two_port_report(request, analysis.state.y_data, diagnostics)
    return decide(analysis, two_port, extra=diagnostics)


__all__ = [
    "VERDICT_FORMAT", "Analysis", "CheckOptions", "CheckRequest", "CheckVerdict", "Device",
    "InputError", "Network", "Port", "TouchstoneError", "analyse", "run_check",
]
