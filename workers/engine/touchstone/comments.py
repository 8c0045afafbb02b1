"""Per-port reference impedances that only comment lines name.

The Touchstone specification gives the reference on the option line (R) or with [Reference];
comments carry no data, so the reader keeps to that. Some field solvers write each port's
impedance only in comment lines, one block per frequency, in the form

    ! Port Impedance <re_1> <im_1> <re_2> <im_2> ...
    ! <more numbers, continued on comment lines that hold only numbers>

(one complex value per port, or the full N x N matrix whose diagonal is per port; the same form
scikit-rf 2.2's reader recognises). When such values differ from the reference in force the
reader adds a ``touchstone_comment_references`` warning saying which reference it used; with
``take`` (``options.reference_from_comments``) it uses them instead, when they are real,
positive and the same at every frequency, and says so in an ``info`` note. Only S data depend
on the reference this way; Y and Z files are left alone.
"""

from __future__ import annotations

import dataclasses
import re

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.numbers import NUMBER
from workers.engine.touchstone.records import TouchstoneData, TouchstoneNote

_MARKER = re.compile(r"^[ \t]*![ \t]*port[ \t]+impedance\b([^\n]*)", re.IGNORECASE | re.MULTILINE)
_CONTINUATION = re.compile(r"[ \t]*!([^\n]*)")
_OPTION = "options.reference_from_comments"
_SAME = 1e-9  # relative: comment values within this of the reference agree with it


def apply_comment_references(text: str, comments: str, data: TouchstoneData, *, take: bool
                             ) -> TouchstoneData:
    """``data`` with a note about comment references, or (``take``) with them as ``z0_ohm``;
    ``comments`` is every comment of ``text`` (searched first: far shorter than the text)."""
    if data.parameter != "S":
        if take:
            raise TouchstoneError(0, f"{_OPTION} applies to S data only (this file holds "
                                     f"{data.parameter} data)", field=_OPTION)
        return data
    blocks = _blocks(text) if "impedance" in comments.lower() else []
    readable = [(line, z) for line, values in blocks
                if (z := _per_port(values, data.nports)) is not None]
    in_force = data.z0_ohm
    if not readable:
        if take:
            return _with_note(data, "info", f"{_OPTION} is set but no comment line names "
                              "per-port reference impedances ('! Port Impedance ...'); the "
                              f"reference in force was used: {_ohms(in_force)}", {})
        return data
    first_line = readable[0][0]
    values = np.array([z for _, z in readable])  # (blocks, N) complex
    details = {"first_line": first_line, "blocks": len(readable),
               "comment_reference_ohm": {"re": values[0].real.tolist(),
                                         "im": values[0].imag.tolist()},
               "reference_in_force_ohm": in_force.tolist()}
    constant_real = bool(np.all(np.abs(values.imag) <= _SAME * np.abs(values.real))
                         and np.all(np.abs(values - values[0]) <= _SAME * np.abs(values[0])))
    if take:
        if not (constant_real and np.all(values[0].real > 0)):
            raise TouchstoneError(
                first_line,
                f"{_OPTION}: the impedances named in comment lines are complex or change with "
                "frequency; only constant, real, positive per-port references can be taken. "
                "Renormalise the data to one real reference per port instead",
                field=_OPTION)
        z0 = np.ascontiguousarray(values[0].real)
        z0.setflags(write=False)
        message = (f"the data were taken as referenced to the per-port impedances named in "
                   f"comment lines (from line {first_line}): {_ohms(z0)}, instead of "
                   f"{_ohms(in_force)} from the option line or [Reference] ({_OPTION})")
        return _with_note(dataclasses.replace(data, z0_ohm=z0), "info", message,
                          {**details, "reference_used_ohm": z0.tolist(), "taken": True})
    if np.all(np.abs(values - in_force) <= _SAME * in_force):
        return data
    described = _ohms(values[0].real) if constant_real else (
        f"complex or frequency-dependent values, first {', '.join(f'{z:.6g}' for z in values[0])}"
        " ohm")
    message = (f"comment lines (from line {first_line}) name per-port reference impedances "
               f"({described}) that differ from the reference in force; the data were read as "
               f"referenced to {_ohms(in_force)} (option line R or [Reference]), as the "
               "Touchstone specification says. If the data really are referenced to the "
               f"comments' impedances, set {_OPTION} to true")
    return _with_note(data, "warning", message,
                      {**details, "reference_used_ohm": in_force.tolist(), "taken": False})


def _with_note(data: TouchstoneData, severity: str, message: str, details: dict) -> TouchstoneData:
    note = TouchstoneNote("touchstone_comment_references", severity, message,  # type: ignore[arg-type]
                          details)
    return dataclasses.replace(data, notes=(*data.notes, note))


def _ohms(values: np.ndarray) -> str:
    unique = np.unique(values)
    text = f"{unique[0]:g} ohm on every port" if unique.size == 1 else \
        ", ".join(f"{v:g}" for v in values) + " ohm (port by port)"
    return text


def _blocks(text: str) -> list[tuple[int, list[float]]]:
    """(1-based line, numbers) of every '! Port Impedance' block with its continuation lines."""
    blocks = []
    line, counted = 1, 0
    for match in _MARKER.finditer(text):
        values = _numbers(match.group(1))
        if values is None:
            continue
        line += text.count("\n", counted, match.start())
        counted = match.start()
        position = match.end() + 1
        while position < len(text):
            more = _CONTINUATION.match(text, position)
            numbers = _numbers(more.group(1)) if more is not None else None
            if not numbers:
                break
            values.extend(numbers)
            position = more.end() + 1  # type: ignore[union-attr]
        blocks.append((line, values))
    return blocks


def _numbers(text: str) -> list[float] | None:
    words = text.split()
    if not all(NUMBER.fullmatch(word) for word in words):
        return None
    return [float(word) for word in words]


def _per_port(values: list[float], nports: int) -> np.ndarray | None:
    """One complex impedance per port from N or N x N (diagonal) complex values, else None."""
    pairs = np.array(values[0::2]) + 1j * np.array(values[1::2]) if len(values) % 2 == 0 else None
    if pairs is None:
        return None
    if pairs.size == nports:
        return pairs
    if pairs.size == nports * nports and nports > 1:
        return np.diagonal(pairs.reshape(nports, nports)).copy()
    return None
