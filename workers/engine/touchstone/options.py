"""The option line (TS2 "Option Line") and the port count checks shared by both versions."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Literal

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.numbers import NUMBER

Parameter = Literal["S", "Y", "Z"]
DataFormat = Literal["RI", "MA", "DB"]

MAX_PORTS = 64

_UNITS_HZ = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_FORMATS: dict[str, DataFormat] = {"ri": "RI", "ma": "MA", "db": "DB"}
_PARAMETERS: dict[str, Parameter] = {"s": "S", "y": "Y", "z": "Z"}
_SNP_EXTENSION = re.compile(r"\.s(\d+)p\Z", re.IGNORECASE)


@dataclass(frozen=True)
class Options:
    unit_hz: float = 1e9
    parameter: Parameter = "S"
    data_format: DataFormat = "MA"
    resistance: tuple[float, ...] = (50.0,)


def ports_from_filename(filename: str | None) -> int | None:
    if filename is None:
        return None
    match = _SNP_EXTENSION.search(filename)
    if match is None:
        return None
    nports = int(match.group(1))
    check_ports(nports, 0)
    return nports


def check_ports(nports: int, line: int) -> None:
    if not 1 <= nports <= MAX_PORTS:
        raise TouchstoneError(line, f"{nports} ports; 1 to {MAX_PORTS} are accepted")


def parse_option_line(line: str, number: int) -> Options:
    """TS2 "Option Line": ``# [unit] [parameter] [format] [R n]``, any order; GHz S MA 50."""
    words = line[1:].lower().split()
    found: dict[str, object] = {}
    index = 0
    while index < len(words):
        word = words[index]
        index += 1
        if word in _UNITS_HZ:
            key, value = "unit", _UNITS_HZ[word]
        elif word in _PARAMETERS:
            key, value = "parameter", _PARAMETERS[word]
        elif word in ("h", "g"):
            raise TouchstoneError(
                number, f"{word.upper()}-parameters are not supported; use S, Y or Z data"
            )
        elif word in _FORMATS:
            key, value = "format", _FORMATS[word]
        elif word == "r":
            resistances = []
            while index < len(words) and NUMBER.fullmatch(words[index]):
                resistances.append(float(words[index]))
                index += 1
            if not resistances or not all(r > 0.0 for r in resistances):
                raise TouchstoneError(number, "R must be followed by a positive resistance in ohms")
            if not all(math.isfinite(r) for r in resistances):
                raise TouchstoneError(number, "R must be a finite resistance in ohms (a value "
                                              "overflows to infinity)")
            key, value = "resistance", tuple(resistances)
        else:
            raise TouchstoneError(number, f"unknown option {word!r} on the option line")
        if key in found:
            raise TouchstoneError(number, f"the option line gives the {key} twice")
        found[key] = value
    return Options(**{_OPTION_FIELDS[k]: v for k, v in found.items()})  # type: ignore[arg-type]


_OPTION_FIELDS = {
    "unit": "unit_hz",
    "parameter": "parameter",
    "format": "data_format",
    "resistance": "resistance",
}


def port_references(resistance: tuple[float, ...], nports: int, line: int) -> np.ndarray:
    if len(resistance) == 1:
        return np.full(nports, resistance[0])
    if len(resistance) != nports:
        raise TouchstoneError(line, f"R gives {len(resistance)} resistances for {nports} ports")
    return np.array(resistance)

