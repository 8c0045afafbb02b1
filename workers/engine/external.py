"""The external two-port: the amplifier as its input and output ports see it, probe ports open.

Z_ext = (Y⁻¹)[ext, ext] of the unterminated port data, converted to S referenced to the
external ports' reference impedances, then Rollett/Edwards–Sinsky factors (``twoport``).
"""

from __future__ import annotations

from typing import Any, cast

import numpy as np

from workers.engine import twoport
from workers.engine.conversions import batched_inv, batched_solve, termination_admittances
from workers.engine.request import CheckRequest
from workers.engine.verdict import Diagnostic, TwoPortReport


def external_s(request: CheckRequest, y_data: np.ndarray, z_on: np.ndarray | None = None
               ) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """S (F, 2, 2) of the external two-port, its singular-point mask and the two port indices.

    With ``z_on`` (the inverse of the terminated Y_on = Y_data + E·T·Eᵀ, T the termination
    admittances of the external ports E) the external block of Y_data⁻¹ follows without a second
    inverse: Eᵀ (Y_on − E T Eᵀ)⁻¹ E = Q (I − T Q)⁻¹ with Q = Eᵀ Z_on E (Woodbury identity;
    Golub & Van Loan, *Matrix Computations*, 4th ed., sec. 2.1.4).
    """
    ext = [k for k, p in enumerate(request.ports) if p.role == "external"]
    if z_on is None:
        z = batched_inv(y_data)
        z_ext = z.values[:, ext][:, :, ext]
        singular = z.singular | ~np.isfinite(z_ext).all(axis=(1, 2))
    else:
        q = z_on[:, ext][:, :, ext]
        t = termination_admittances(request)[ext]
        solved = batched_solve(np.eye(len(ext)) - t[None, :, None] * q,
                               np.eye(len(ext), dtype=complex))
        # Z_ext = Q (I − T Q)⁻¹
        z_ext = q @ solved.values
        singular = solved.singular | ~np.isfinite(z_ext).all(axis=(1, 2))
    z_ext = np.where(singular[:, None, None], 0, z_ext)
    s = twoport.z_to_s(z_ext, np.asarray(request.network.z0_ohm)[ext])
    return s, singular, ext


def two_port_report(request: CheckRequest, y_data: np.ndarray,
                    diagnostics: list[Diagnostic], z_on: np.ndarray | None = None
                    ) -> tuple[TwoPortReport | None, Any]:
    """The two-port summary for the verdict (None unless exactly two external ports)."""
    ext = [p.name for p in request.ports if p.role == "external"]
    if len(ext) != 2:
        diagnostics.append(Diagnostic(
            "two_port_unavailable", "info",
            f"two-port factors need exactly two external ports; this circuit has {len(ext)}",
        ))
        return None, None
    s, singular, _ = external_s(request, y_data, z_on)
    keep = ~singular
    if keep.sum() < 2:
        diagnostics.append(Diagnostic(
            "two_port_unavailable", "info", "Z of the external ports is singular over the band"))
        return None, None
    f = request.frequency_hz[keep]
    factors = twoport.two_port_factors(s[keep])
    summary = twoport.summarise_two_port(f, factors)
    return cast(TwoPortReport, {"ports": ext, **summary.to_dict()}), (f, s[keep], factors)
