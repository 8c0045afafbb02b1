"""ballast's numerical engine: pure numpy/scipy, arrays frequency first.

``run_check(request)`` turns a validated :class:`~workers.engine.request.CheckRequest` into a
:class:`~workers.engine.verdict.CheckVerdict`; ``verdict.to_dict()`` is the JSON the service
returns.
"""

from __future__ import annotations

from workers.engine.advice import advise
from workers.engine.check import Analysis, analyse
from workers.engine.decide import decide
from workers.engine.errors import InputError, TouchstoneError
from workers.engine.external import two_port_report
from workers.engine.refined_check import RefinedCheck, refine_analysis
from workers.engine.request import CheckOptions, CheckRequest, Device, Network, Port
from workers.engine.verdict import VERDICT_FORMAT, CheckVerdict, Diagnostic


def run_check(request: CheckRequest) -> CheckVerdict:
    """Every indicator of one check, the model refinement (``options.refine``), the verdict, and
    what a designer acts on (margin, stabilisers: ``advice``)."""
    analysis = analyse(request)
    diagnostics: list[Diagnostic] = []
    two_port, factors = two_port_report(request, analysis.state.y_data, diagnostics,
                                         analysis.z_on)
    if not request.options.refine:
        return advise(decide(analysis, two_port, extra=diagnostics), analysis, None)
    refined = refine_analysis(analysis, None if factors is None else (factors[0], factors[2]))
    return advise(decide(analysis, two_port, refined, extra=diagnostics), analysis, refined)


__all__ = [
    "VERDICT_FORMAT", "Analysis", "CheckOptions", "CheckRequest", "CheckVerdict", "Device",
    "InputError", "Network", "Port", "RefinedCheck", "TouchstoneError", "analyse",
    "refine_analysis", "run_check",
]
