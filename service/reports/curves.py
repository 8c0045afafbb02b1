"""A check's curves to take away (``GET /v1/checks/{id}/curves.csv``, ``ballast results ID
--curves DIR``): NDF, each return difference F_k and each node's driving-point admittance, at
the samples and at the points the refinement added between them, recomputed from the stored
request like the plots (``data``). No matplotlib here.

Columns, one row per frequency (increasing); RFC 4180 CSV, numbers as Python's repr (exact):

    frequency_hz               the frequency
    source                     "sample" (the data) or "model" (between samples, refined contour)
    ndf_re, ndf_im             NDF = det Y_on / det Y_off
    F_<device>_re, _im         the device's return difference, devices in switch-on order
    Y_<node>_re_s, _im_s       the node's driving-point admittance 1/Z_kk, siemens

At "model" rows NDF is the validated NDF model (the refinement's contour), F_k its own
validated model (as its plot draws it) and Y_k = 1/Z_kk of the partial-fraction fit of Z_kk with
the NDF model's zeros as poles (``identify.fit_nodes``; nodes whose fit is within
``identify.NODE_FIT_LIMIT``). A cell is empty where the value is undefined (a singular sample)
or has no validated model.
"""

from __future__ import annotations

import csv
import io
from typing import Any

import numpy as np

from service.intake import load_request
from service.reports.contours import refined_response
from workers.engine import analyse, refine_analysis
from workers.engine.external import two_port_report
from workers.engine.identify import NODE_FIT_LIMIT
from workers.engine.margin import node_model
from workers.store import StoredRequest


def curve_columns(devices: list[str], nodes: list[str]) -> list[str]:
    """The header row (module docstring)."""
    return (["frequency_hz", "source", "ndf_re", "ndf_im"]
            + [f"F_{d}_{part}" for d in devices for part in ("re", "im")]
            + [f"Y_{n}_{part}_s" for n in nodes for part in ("re", "im")])


def _cell(value: complex) -> tuple[str, str]:
    if not np.isfinite(value):
        return "", ""
    return repr(float(value.real)), repr(float(value.imag))


def curves_csv(payload: dict[str, Any] | StoredRequest) -> str:
    """The CSV of the module docstring for a JSON check request or a stored one."""
    request = load_request(payload)
    analysis = analyse(request)
    _, factors = two_port_report(request, analysis.state.y_data, [], analysis.z_on)
    refined = refine_analysis(analysis, None if factors is None else (factors[0], factors[2]))
    f = request.frequency_hz
    valid = analysis.valid
    refinement = refined.refinement
    extra = np.zeros(0)
    extra_ndf = np.zeros(0, dtype=complex)
    if refinement is not None:
        added = ~np.isin(refinement.frequency_hz, f)
        extra, extra_ndf = refinement.frequency_hz[added], refinement.ndf[added]
    frequency = np.concatenate([f, extra])
    ndf = np.concatenate([np.where(valid, analysis.loops.ndf, np.nan), extra_ndf])
    devices = []
    fk = analysis.loops.return_difference
    for k in range(fk.shape[1]):
        column = np.full(extra.size, np.nan + 0j)
        ok = valid & np.isfinite(fk[:, k]) & (np.abs(fk[:, k]) > 0)
        if extra.size:
            model, _ = refined_response(f[ok], fk[ok, k], request.options.phase_step_limit_deg)
            if model is not None and model.validated:
                column = model(extra)
        devices.append(np.concatenate([np.where(ok, fk[:, k], np.nan), column]))
    admittance = analysis.nodes.admittance
    node_extra = np.full((extra.size, request.n_ports), np.nan + 0j)
    fit = node_model(analysis, refined) if extra.size else None
    if fit is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            modelled = 1.0 / fit.impedance(2j * np.pi * extra)
        good = fit.error <= NODE_FIT_LIMIT
        node_extra[:, good] = modelled[:, good]
    nodes = np.concatenate([admittance, node_extra])
    source = np.array(["sample"] * f.size + ["model"] * extra.size)
    order = np.argsort(frequency, kind="stable")
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(curve_columns([d.name for d in request.devices],
                                  [p.name for p in request.ports]))
    for i in order:
        row = [repr(float(frequency[i])), source[i], *_cell(ndf[i])]
        for column in devices:
            row += _cell(column[i])
        for k in range(request.n_ports):
            row += _cell(nodes[i, k])
        writer.writerow(row)
    return buffer.getvalue()
