"""New frequency samples merged into a check request: the union of the two frequency sets.

A flow that was told to sweep more (a verdict's ``next_sweep``) sends the network data at the new
frequencies; the merged request is the old one on the union of both sets. Where a frequency is
given twice, the two data must agree within ``options.consistency_tolerance`` (relative, in the
Frobenius norm of the port matrices), and the old value is kept. When both are S with the same
reference impedances (or both Y) the values are joined as they are; otherwise both are turned
into port Y (``conversions.port_admittance``, Pozar, Microwave Engineering, 4th ed., sec. 4.3),
where they can be compared and joined. Each device keeps its transconductance; one that varies
with frequency needs its values at the new frequencies.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace

import numpy as np

from workers.engine.conversions import port_admittance
from workers.engine.errors import InputError
from workers.engine.request import MAX_POINTS, CheckRequest, Device, Network
from workers.engine.verdict import Diagnostic

SAME_FREQUENCY = 1e-12  # relative gap below which two frequencies are the same one


@dataclass(frozen=True)
class AddedSamples:
    """Network data at new frequencies (validated at the boundary): ``gm_s`` by device name for
    devices whose transconductance varies with frequency; ``notes`` from a Touchstone reader."""

    frequency_hz: np.ndarray
    network: Network
    gain_off: Network | None = None
    gm_s: Mapping[str, np.ndarray] = field(default_factory=dict)
    notes: tuple[Diagnostic, ...] = ()


def _same_form(a: Network, b: Network) -> bool:
    return a.parameter == b.parameter and (
        a.parameter != "S" or bool(np.array_equal(a.z0_ohm, b.z0_ohm)))


def _as_y(network: Network, where: str) -> np.ndarray:
    converted = port_admittance(network)
    if converted.singular.any():
        raise InputError(where, "cannot be turned into Y at some frequencies (singular), so it "
                                "cannot be merged with data given in another form")
    return converted.values


def _joined(old: Network, new: Network, where: str) -> tuple[Network, np.ndarray, np.ndarray]:
    """Both networks in one form: (the form for the merged data, old values, new values)."""
    if new.values.shape[1:] != old.values.shape[1:]:
        raise InputError(where, f"has {new.values.shape[1]} ports; the check has "
                                f"{old.values.shape[1]}")
    if _same_form(old, new):
        return old, old.values, new.values
    return Network("Y", old.values, np.full(old.values.shape[1], 50.0)), \
        _as_y(old, where), _as_y(new, where)


def _duplicates(f_old: np.ndarray, f_new: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices (into old, into new) of frequencies given in both sets."""
    j = np.clip(np.searchsorted(f_old, f_new), 1, max(f_old.size - 1, 1))
    candidates = np.stack([j - 1, j]) if f_old.size > 1 else np.zeros((1, f_new.size), int)
    gaps = np.abs(f_old[candidates] - f_new[None, :])
    best = candidates[np.argmin(gaps, axis=0), np.arange(f_new.size)]
    same = np.abs(f_old[best] - f_new) <= SAME_FREQUENCY * np.maximum(np.abs(f_new), 1.0)
    return best[same], np.nonzero(same)[0]


def _check_agreement(old: np.ndarray, new: np.ndarray, at_hz: np.ndarray, tolerance: float,
                     where: str) -> None:
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.maximum(np.linalg.norm(old, axis=(1, 2)), np.linalg.norm(new, axis=(1, 2)))
        mismatch = np.linalg.norm(old - new, axis=(1, 2)) / np.where(scale > 0, scale, 1.0)
    bad = np.nonzero(~(mismatch <= tolerance))[0]
    if bad.size:
        i = int(bad[0])
        raise InputError(where, f"{at_hz[i]:.12g} Hz is given again with data that differ from "
                                f"the check's by {mismatch[i]:.3g} (relative; "
                                f"options.consistency_tolerance is {tolerance:g})")


def _device_gain(device: Device, added: AddedSamples, n_new: int) -> np.ndarray:
    gm = np.asarray(device.gm_s)
    if device.name in added.gm_s:
        given = np.asarray(added.gm_s[device.name], dtype=complex)
        if given.shape != (n_new,):
            raise InputError(f"gm_s.{device.name}", f"has {given.size} values; expected one per "
                                                    f"new frequency ({n_new})")
        return given
    if gm.size and np.all(gm == gm[0]):
        return np.full(n_new, gm[0], dtype=complex)
    raise InputError(f"gm_s.{device.name}", "this device's transconductance varies with "
                                            "frequency: give its values at the new frequencies")


def merge_samples(old: CheckRequest, added: AddedSamples) -> CheckRequest:
    """``old`` on the union of its frequencies and ``added``'s (module docstring); raises
    InputError naming the field when a repeated frequency disagrees or a part is missing."""
    if (old.gain_off is None) != (added.gain_off is None):
        raise InputError("gain_off", "the check has gain_off data, so the new samples need it "
                         "too" if old.gain_off is not None else
                         "the check has no gain_off data, so the new samples must not have it")
    f_old, f_new = old.frequency_hz, np.asarray(added.frequency_hz, dtype=float)
    form, y_old, y_new = _joined(old.network, added.network, "data")
    at_old, at_new = _duplicates(f_old, f_new)
    tolerance = old.options.consistency_tolerance
    _check_agreement(y_old[at_old], y_new[at_new], f_new[at_new], tolerance, "frequency_hz")
    fresh = np.setdiff1d(np.arange(f_new.size), at_new)
    if f_old.size + fresh.size > MAX_POINTS:
        raise InputError("frequency_hz", f"the merged check would have {f_old.size + fresh.size} "
                                         f"points; the limit is {MAX_POINTS}")
    f = np.concatenate([f_old, f_new[fresh]])
    order = np.argsort(f, kind="stable")
    merged_network = Network(form.parameter, np.concatenate([y_old, y_new[fresh]])[order],
                             form.z0_ohm)
    gain_off = None
    if old.gain_off is not None and added.gain_off is not None:
        off_form, off_old, off_new = _joined(old.gain_off, added.gain_off, "gain_off.data")
        _check_agreement(off_old[at_old], off_new[at_new], f_new[at_new], tolerance,
                         "gain_off.data")
        gain_off = Network(off_form.parameter,
                           np.concatenate([off_old, off_new[fresh]])[order], off_form.z0_ohm)
    devices = tuple(
        replace(d, gm_s=np.concatenate([np.asarray(d.gm_s, dtype=complex),
                                        _device_gain(d, added, f_new.size)[fresh]])[order])
        for d in old.devices)
    seen = {(d.code, d.message) for d in old.input_diagnostics}
    notes = (*old.input_diagnostics,
             *(d for d in added.notes if (d.code, d.message) not in seen))
    return replace(old, frequency_hz=f[order], network=merged_network, devices=devices,
                   gain_off=gain_off, input_diagnostics=notes)
