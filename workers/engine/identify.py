"""Identification: unstable natural frequencies from the NDF model, where they live, what drives
them.

* Modes: the right-half-plane zeros of the validated NDF model are the unstable natural
  frequencies s = σ + jω (the all-off circuit is passive, so NDF has no right-half-plane poles).
  Only zeros inside the band are trusted (|ω| up to the top sample); a complex pair counts 2.
* Participation: every driving-point impedance Z_kk = (Y⁻¹)_kk has the circuit's natural
  frequencies as poles, so with the model's zeros as known poles, Z_kk(s) ≈ Σ r_ki/(s − p_i) +
  c_k + d_k·s is linear in the residues. One least-squares solve fits every node at once (the
  residue step of vector fitting: B. Gustavsen, A. Semlyen, "Rational approximation of frequency
  domain responses by vector fitting", IEEE Trans. Power Delivery 14(3), 1999). Nodes are ranked
  by |r_k| at the mode (the mode's voltage shows most where the residue is largest).
* Devices: the successive return differences multiply to NDF (NDF = Π F_k); the device whose F_k
  model carries the right-half-plane zero is the one whose switching-on creates the mode.
* Hint: at the strongest node, the shunt conductance G = −Re Y_k(jω_mode) lifts the node's
  driving-point conductance to zero at the mode frequency — a first-order starting point
  (Kurokawa's condition read backwards), to be re-checked with the part in the circuit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine.models import MAX_FIT_SAMPLES, RationalModel, evenly_spread, fit_single
from workers.engine.verdict import Mode, StabilisationHint

NODE_FIT_LIMIT = 1e-3  # largest relative error of the partial-fraction fit of a node's Z_kk
REAL_ZERO = 1e-9       # |Im z| below this × |z|: a real zero (counts 1)
NEAR_BAND = 100.0      # factor beyond a band edge within which a model zero denies closure
CARRY_SPAN = 0.25      # a partial circuit's mode within this fraction of |s| is the same mode
LOCAL_SAMPLES = 30     # samples around a mode used to fit the return differences there


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


def fit_nodes(frequency_hz: np.ndarray, impedance: np.ndarray, poles_rad_s: np.ndarray,
              scale_rad_s: float) -> NodeFit:
    """All nodes' partial-fraction fits in one least-squares solve (module docstring), on at most
    MAX_FIT_SAMPLES evenly spread samples."""
    rows = np.nonzero(np.all(np.isfinite(impedance), axis=1))[0]
    if rows.size > MAX_FIT_SAMPLES:
        rows = rows[evenly_spread(rows.size, MAX_FIT_SAMPLES)]
    f = np.asarray(frequency_hz, dtype=float)[rows]
    z = impedance[rows]
    x = 2j * np.pi * f / scale_rad_s
    x_all = np.concatenate([x, -x])
    z_all = np.concatenate([z, np.conj(z)])
    p = np.asarray(poles_rad_s, dtype=complex) / scale_rad_s
    # poles that are not NaN and not exactly on a sample (min |x − p| > 0)
    p = p[~np.isnan(p) & ~(x_all[:, None] == p[None, :]).any(axis=0)]
    basis = np.concatenate([1.0 / (x_all[:, None] - p[None, :]), np.ones((x_all.size, 1)),
                            x_all[:, None]], axis=1)
    norms = np.sqrt(np.add.reduce((basis.conj() * basis).real, axis=0))  # np.linalg.norm's
    norms[norms == 0] = 1.0
    coefficients, *_ = np.linalg.lstsq(basis / norms, z_all, rcond=None)
    coefficients = coefficients / norms[:, None]
    fitted = basis @ coefficients
    with np.errstate(divide="ignore", invalid="ignore"):
        error = np.max(np.abs(fitted - z_all), axis=0) / np.max(np.abs(z_all), axis=0)
    n = p.size
    return NodeFit(p * scale_rad_s, coefficients[:n] * scale_rad_s,
                   coefficients[n], coefficients[n + 1], scale_rad_s, error)


def _near(candidates: np.ndarray, target: complex, span: float) -> bool:
    """Some candidate within ``span`` × |target| of ``target``."""
    return bool(candidates.size and np.any(np.abs(candidates - target) <= span * abs(target)))


def carrying_devices(frequency_hz: np.ndarray, return_difference: np.ndarray,
                     zeros_rad_s: np.ndarray, noise_floor: float) -> list[list[int]]:
    """For each unstable zero, the device whose switching-on brings it into the right half-plane.

    With D_k = F_1·…·F_k (NDF with devices 1..k on), the right-half-plane zeros of D_k are the
    unstable natural frequencies of that partial circuit, and F_k = D_k / D_(k−1). The device
    that carries a mode is the first k whose D_k has a right-half-plane zero near it (within
    CARRY_SPAN of |s|: switching devices on moves a mode); D_D = NDF has it by definition, so
    only D_1 … D_(D−1) are fitted, locally, on the LOCAL_SAMPLES samples nearest the mode.
    """
    n_devices = return_difference.shape[1]
    if n_devices <= 1:  # nothing to attribute: the only device (if any) carries every mode
        return [[n_devices - 1] if n_devices else [] for _ in zeros_rad_s]
    carriers: list[list[int]] = []
    f = np.asarray(frequency_hz, dtype=float)
    partial = np.cumprod(return_difference, axis=1)
    for z in zeros_rad_s:
        f_mode = abs(z.imag) / (2 * np.pi)
        window = np.sort(np.argsort(np.abs(f - f_mode), kind="stable")[:LOCAL_SAMPLES])
        carrier = n_devices - 1
        for k in range(n_devices - 1):
            dk = partial[window, k]
            ok = np.isfinite(dk)
            if ok.sum() < 8:
                continue
            fit, _ = fit_single(f[window][ok], dk[ok], noise_floor)
            roots = fit.roots() * (2 * np.pi * f[window][ok][-1])
            if _near(roots[roots.real > 0], z, CARRY_SPAN):
                carrier = k
                break
        carriers.append([carrier] if n_devices else [])
    return carriers


def stabilisation_hint(node_name: str, frequency_hz: float, admittance: complex
                       ) -> StabilisationHint | None:
    """Shunt G = −Re Y_k at the mode frequency (None when Re Y_k is not negative there)."""
    re = float(np.real(admittance))
    if not np.isfinite(re) or re >= 0:
        return None
    return StabilisationHint(node_name, float(frequency_hz), -re, -1.0 / re)


def identify_modes(zeros_rad_s: np.ndarray, node_fit: NodeFit, port_names: list[str],
                   device_names: list[str], carriers: list[list[int]]) -> list[Mode]:
    """One Mode per unstable zero (a pair once), nodes ranked by |residue of Z_kk|."""
    modes = []
    for i, z in enumerate(zeros_rad_s):
        if node_fit.poles_rad_s.size:
            j = int(np.argmin(np.abs(node_fit.poles_rad_s - z)))
            weights = np.abs(node_fit.residues[j])
        else:
            weights = np.zeros(len(port_names))
        weights = np.where(np.isfinite(weights), weights, 0.0)
        top = weights.max() if weights.size and weights.max() > 0 else 1.0
        weights = weights / top
        order = np.argsort(-weights, kind="stable")
        f_mode = float(abs(z.imag) / (2 * np.pi))
        z_node = node_fit.impedance(np.array([1j * abs(z.imag)]))[0, order[0]]
        with np.errstate(divide="ignore", invalid="ignore"):
            y_node = 1.0 / z_node
        modes.append(Mode(
            frequency_hz=f_mode,
            growth_rate_per_s=float(z.real),
            nodes=[port_names[k] for k in order],
            devices=[device_names[k] for k in carriers[i]] if carriers[i] else list(device_names),
            node_participation=[float(weights[k]) for k in order],
            estimated_by="rational_model",
            hint=stabilisation_hint(port_names[int(order[0])], f_mode, complex(y_node)),
        ))
    return modes
