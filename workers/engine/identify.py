"""Identification: unstable natural frequencies from the NDF model, where they show, what drives
them.

* Modes: the right-half-plane zeros of the validated NDF model are the unstable natural
  frequencies s = σ + jω (the all-off circuit is passive, so NDF has no right-half-plane poles).
  Only zeros inside the band are trusted (|s| up to the top sample); a complex pair counts 2.
* Residues: every entry of Z = Y_on⁻¹ has the circuit's natural frequencies as poles, so with the
  model's zeros as known poles, Z_ij(s) ≈ Σ r_ij,p/(s − p) + c_ij + d_ij·s is linear in the
  residues; one least-squares solve fits many entries at once (the residue step of vector
  fitting: B. Gustavsen, A. Semlyen, "Rational approximation of frequency domain responses by
  vector fitting", IEEE Trans. Power Delivery 14(3), 1999). At a simple natural frequency s₀ with
  Y_on(s₀)v = 0 and wᵀY_on(s₀) = 0 the residue matrix is rank one, R = v·wᵀ / (wᵀY_on′(s₀)v)
  (common practice for a simple zero of det Y), so:
  - the mode's voltage shape is a column of R: |v_k| ∝ |R_ka|; nodes are ranked by it;
  - the diagonal residue R_kk ∝ v_k·w_k is the node's leverage: how far a shunt there moves s₀;
  - a device's participation is |gm_k ∂s₀/∂gm_k| = |gm_k·v_kᵀ R u_k| (first-order perturbation
    of a zero of det(Y_off + Σ gm_k u_k v_kᵀ): ∂s₀/∂gm_k = −(wᵀu_k)(v_kᵀv)/(wᵀY′v); e.g.
    J. H. Wilkinson, The Algebraic Eigenvalue Problem, 1965, ch. 2, for the linear case), so a
    mode carried equally by two devices (the odd mode of a pair) names both.
* Hint: at the node of largest leverage, the shunt conductance G = −Re Y_k(jω_mode) lifts the
  node's driving-point conductance to zero at the mode frequency — a first-order starting point
  (Kurokawa's condition read backwards), to be re-checked with the part in the circuit.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from workers.engine.models import MAX_FIT_SAMPLES, RationalModel, evenly_spread
from workers.engine.verdict import Mode, StabilisationHint

NODE_FIT_LIMIT = 1e-3  # largest relative error of the partial-fraction fit of a node's Z_kk
REAL_ZERO = 1e-9       # |Im z| below this × |z|: a real zero (counts 1)
NEAR_BAND = 100.0      # factor beyond a band edge within which a model zero denies closure


def _rhp_upper(model: RationalModel) -> np.ndarray:
    z = model.zeros_rad_s
    return z[(z.real > 0) & (z.imag >= -REAL_ZERO * np.abs(z))]


def band_rhp_zeros(model: RationalModel, low_hz: float, top_hz: float) -> np.ndarray:
    """Right-half-plane zeros (Im ≥ 0) with |s| inside the band [2π·low, 2π·top], by frequency."""
    z = _rhp_upper(model)
    size = np.abs(z)
    chosen = z[(size >= 2 * np.pi * low_hz) & (size <= 2 * np.pi * top_hz)]
    return chosen[np.argsort(chosen.imag)]


def near_band_rhp_zeros(model: RationalModel, low_hz: float, top_hz: float
                        ) -> tuple[np.ndarray, np.ndarray]:
    """Right-half-plane zeros just outside the band (within NEAR_BAND of an edge): below, above.

    The model is not trusted beyond the band, so these never count; they only deny that the band
    closes at that edge (the conservative direction).
    """
    z = _rhp_upper(model)
    size = np.abs(z)
    below = z[(size < 2 * np.pi * low_hz) & (size >= 2 * np.pi * low_hz / NEAR_BAND)]
    above = z[(size > 2 * np.pi * top_hz) & (size <= 2 * np.pi * top_hz * NEAR_BAND)]
    return below, above


def zero_count(zeros: np.ndarray) -> int:
    """Right-half-plane natural frequencies represented by ``zeros`` (Im ≥ 0): pairs count 2."""
    real = np.abs(zeros.imag) <= REAL_ZERO * np.abs(zeros)
    return int(real.sum() + 2 * (~real).sum())


@dataclass(frozen=True)
class NodeFit:
    """Partial-fraction fits of every Z_kk with the model's natural frequencies as poles."""

    poles_rad_s: np.ndarray   # (P,)
    residues: np.ndarray      # (P, N) ohm·rad/s
    constant: np.ndarray      # (N,)
    slope: np.ndarray         # (N,) per scaled s
    scale_rad_s: float
    error: np.ndarray         # (N,) relative to max |Z_kk|
    solver: FitSolver | None = field(default=None, compare=False, repr=False)

    def impedance(self, s_rad_s: np.ndarray) -> np.ndarray:
        """Z_kk at complex frequencies s, (len(s), N)."""
        x = np.asarray(s_rad_s, dtype=complex)[:, None] / self.scale_rad_s
        with np.errstate(divide="ignore", invalid="ignore"):
            basis = 1.0 / (x - self.poles_rad_s[None, :] / self.scale_rad_s)
        return (basis @ (self.residues / self.scale_rad_s) + self.constant[None, :]
                + x * self.slope[None, :])


    def impedance_at(self, frequency_hz: float, node: int) -> complex:
        """Z_kk of one node at one frequency on the jω axis (scalar path for root finding; the
        caller sets numpy's error state, as a pole on the axis divides by zero)."""
        x = 2j * np.pi * frequency_hz / self.scale_rad_s
        terms = self.residues[:, node] / (x * self.scale_rad_s - self.poles_rad_s)
        return complex(terms.sum() + self.constant[node] + x * self.slope[node])


@dataclass(frozen=True)
class FitSolver:
    """The least-squares solver of one pole set on one set of samples: the SVD of the column-
    normalised partial-fraction basis, kept so that several fits with the same poles (the
    nodes' Z_kk, a mode's row and column of Z, the stabilisers' placements) factor it once.
    Solutions as ``numpy.linalg.lstsq`` (minimum norm, singular values below
    eps·max(rows, columns)·s_max dropped)."""

    frequency_hz: np.ndarray   # (R,) the samples used
    rows: np.ndarray           # their indices in the caller's frequency grid
    poles: np.ndarray          # (P,) scaled poles kept (not NaN, not on a sample)
    basis: np.ndarray          # (2R, P + 2) unnormalised basis at ±jω
    norms: np.ndarray          # (P + 2,)
    left: np.ndarray           # (2R, K) Uᴴ's kept columns
    right: np.ndarray          # (P + 2, K) V / s over the kept singular values

    @classmethod
    def build(cls, frequency_hz: np.ndarray, rows: np.ndarray, poles_rad_s: np.ndarray,
              scale_rad_s: float) -> FitSolver:
        f = np.asarray(frequency_hz, dtype=float)[rows]
        x = 2j * np.pi * f / scale_rad_s
        x_all = np.concatenate([x, -x])
        p = np.asarray(poles_rad_s, dtype=complex) / scale_rad_s
        # poles that are not NaN and not exactly on a sample (min |x − p| > 0)
        p = p[~np.isnan(p) & ~(x_all[:, None] == p[None, :]).any(axis=0)]
        basis = np.concatenate([1.0 / (x_all[:, None] - p[None, :]), np.ones((x_all.size, 1)),
                                x_all[:, None]], axis=1)
        norms = np.sqrt(np.add.reduce((basis.conj() * basis).real, axis=0))  # np.linalg.norm's
        norms[norms == 0] = 1.0
        u, sigma, vh = np.linalg.svd(basis / norms, full_matrices=False)
        keep = sigma > np.finfo(float).eps * max(basis.shape) * (sigma[0] if sigma.size else 0)
        return cls(f, rows, p, basis, norms, u[:, keep],
                   vh[keep].conj().T / sigma[keep][None, :])

    def solve(self, z_all: np.ndarray) -> np.ndarray:
        """Coefficients (P + 2, M) of the unnormalised basis for the columns of ``z_all``."""
        return (self.right @ (self.left.conj().T @ z_all)) / self.norms[:, None]


def fit_nodes(frequency_hz: np.ndarray, impedance: np.ndarray, poles_rad_s: np.ndarray,
              scale_rad_s: float, like: NodeFit | None = None) -> NodeFit:
    """Partial-fraction fits of every column of ``impedance`` (F, M) — the nodes' Z_kk, or any
    entries of Z — in one least-squares solve (module docstring), on at most MAX_FIT_SAMPLES
    evenly spread samples. ``like``: a fit with the same poles on the same grid, whose solver
    is reused when the usable samples are the same."""
    rows = np.nonzero(np.all(np.isfinite(impedance), axis=1))[0]
    if rows.size > MAX_FIT_SAMPLES:
        rows = rows[evenly_spread(rows.size, MAX_FIT_SAMPLES)]
    solver = like.solver if like is not None else None
    if solver is None or like is None or like.scale_rad_s != scale_rad_s \
            or not np.array_equal(solver.rows, rows) \
            or not np.array_equal(like.poles_rad_s, poles_rad_s):
        solver = FitSolver.build(frequency_hz, rows, poles_rad_s, scale_rad_s)
    z = impedance[rows]
    z_all = np.concatenate([z, np.conj(z)])
    coefficients = solver.solve(z_all)
    fitted = solver.basis @ coefficients
    with np.errstate(divide="ignore", invalid="ignore"):
        error = np.max(np.abs(fitted - z_all), axis=0) / np.max(np.abs(z_all), axis=0)
    n = solver.poles.size
    return NodeFit(solver.poles * scale_rad_s, coefficients[:n] * scale_rad_s,
                   coefficients[n], coefficients[n + 1], scale_rad_s, error, solver)


@dataclass(frozen=True)
class ModeShape:
    """Where one mode shows and what drives it (module docstring), all normalised to max 1."""

    voltage: np.ndarray          # (N,) |v_k|
    leverage: np.ndarray         # (N,) |R_kk|
    participation: np.ndarray    # (D,) |gm_k ∂s/∂gm_k|
    fit_error: float             # relative error of the column/row fit
    phasor: np.ndarray | None = None  # (N,) complex v_k, largest 1 (its phases: ``symmetry``)


DEVICE_SHARE = 0.1  # devices with at least this share of the largest participation are named


def _normalised(values: np.ndarray) -> np.ndarray:
    values = np.where(np.isfinite(values), np.abs(values), 0.0)
    top = float(values.max()) if values.size and values.max() > 0 else 1.0
    return values / top


def mode_shape(frequency_hz: np.ndarray, z_on: np.ndarray, node_fit: NodeFit, zero: complex,
               u: np.ndarray, v: np.ndarray, gains: np.ndarray) -> ModeShape:
    """The voltage shape, leverage and device participation of the mode at ``zero`` (rad/s).

    ``z_on`` (F, N, N): Z of the terminated circuit on; ``u``, ``v`` (N, D): the devices' output
    and control vectors; ``gains`` (F, D): their transconductances on the samples.
    """
    return mode_shapes(frequency_hz, z_on, node_fit, [zero], u, v, gains)[0]


def mode_shapes(frequency_hz: np.ndarray, z_on: np.ndarray, node_fit: NodeFit,
                zeros: list[complex], u: np.ndarray, v: np.ndarray, gains: np.ndarray
                ) -> list[ModeShape]:
    """``mode_shape`` of several modes, the columns and rows of Z at their anchor nodes (largest
    leverage) fitted in one least-squares solve."""
    n = z_on.shape[1]
    if not node_fit.poles_rad_s.size:
        empty = np.zeros(n)
        return [ModeShape(empty, empty, np.zeros(u.shape[1]), np.inf) for _ in zeros]
    poles = [int(np.argmin(np.abs(node_fit.poles_rad_s - zero))) for zero in zeros]
    leverages = [_normalised(node_fit.residues[j]) for j in poles]
    anchors = list(dict.fromkeys(int(np.argmax(lev)) for lev in leverages))
    entries = np.concatenate([block for a in anchors for block in (z_on[:, :, a], z_on[:, a, :])],
                             axis=1)                                   # (F, 2N per anchor)
    fit = fit_nodes(frequency_hz, entries, node_fit.poles_rad_s, node_fit.scale_rad_s,
                    like=node_fit)
    f = np.asarray(frequency_hz, dtype=float)
    shapes = []
    for zero, leverage in zip(zeros, leverages, strict=True):
        anchor = int(np.argmax(leverage))
        base = 2 * n * anchors.index(anchor)
        k = int(np.argmin(np.abs(fit.poles_rad_s - zero)))
        column, row = fit.residues[k, base:base + n], fit.residues[k, base + n:base + 2 * n]
        pivot = column[anchor] if column[anchor] != 0 else 1.0
        at = int(np.argmin(np.abs(f - abs(zero.imag) / (2 * np.pi))))
        with np.errstate(invalid="ignore", over="ignore"):
            sensitivity = (v.T @ column) * (row @ u) / pivot        # v_kᵀ R u_k per device
            participation = np.abs(gains[at]) * np.abs(sensitivity) if gains.size else \
                np.zeros(0)
        error = fit.error[base:base + 2 * n]
        finite_error = error[np.isfinite(error)]
        finite = np.where(np.isfinite(column), column, 0.0)
        top = finite[int(np.argmax(np.abs(finite)))] if finite.size else 0.0
        shapes.append(ModeShape(_normalised(column), leverage, _normalised(participation),
                                float(finite_error.max()) if finite_error.size else np.inf,
                                finite / top if top != 0 else finite))
    return shapes


def stabilisation_hint(node_name: str, frequency_hz: float, admittance: complex
                       ) -> StabilisationHint | None:
    """Shunt G = −Re Y_k at the mode frequency (None when Re Y_k is not negative there)."""
    re = float(np.real(admittance))
    if not np.isfinite(re) or re >= 0:
        return None
    return StabilisationHint(node_name, float(frequency_hz), -re, -1.0 / re)


def identify_mode(zero: complex, shape: ModeShape, node_fit: NodeFit, port_names: list[str],
                  device_names: list[str], pinned: bool) -> Mode:
    """One Mode (a pair once): nodes ranked by voltage shape, devices by participation, the
    hint at the node of largest leverage."""
    order = np.argsort(-shape.voltage, kind="stable")
    f_mode = float(abs(zero.imag) / (2 * np.pi))
    strongest = int(np.argmax(shape.leverage)) if shape.leverage.size else 0
    with np.errstate(divide="ignore", invalid="ignore"):
        y_node = 1.0 / node_fit.impedance(np.array([1j * abs(zero.imag)]))[0, strongest]
    carriers = np.argsort(-shape.participation, kind="stable")
    named = [int(k) for k in carriers if shape.participation[k] >= DEVICE_SHARE]
    if not named:
        named = [int(k) for k in carriers]
    return Mode(
        frequency_hz=f_mode,
        growth_rate_per_s=float(zero.real),
        nodes=[port_names[k] for k in order],
        devices=[device_names[k] for k in named],
        node_participation=[float(shape.voltage[k]) for k in order],
        estimated_by="rational_model",
        hint=stabilisation_hint(port_names[strongest], f_mode, complex(y_node)),
        pinned=pinned,
        node_leverage=[float(shape.leverage[k]) for k in order],
        device_participation=[float(shape.participation[k]) for k in named],
    )
