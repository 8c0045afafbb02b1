"""Read a check request's JSON (a body, a batch variant) member by member, its network data
straight into what the schema makes of it, to keep the memory of a parse near the body's size.

A whole request parsed in one piece holds every number of ``data.re`` and ``data.im`` as a
Python float in nested lists (32 bytes and more per number, against about 20 characters of
text) until the schema has turned them into arrays: a 44 MB single check took the API process
251 MiB. Here msgspec checks the whole text's syntax and cuts it into members (``msgspec.Raw``,
views of the text, nothing copied), and each member is read on its own:

- ``data`` (and ``gain_off.data``): ``re`` and ``im`` one after the other, each read a block of
  frequency points at a time straight into the float array that ``CheckRequestSchema`` makes of
  it (``numpy.asarray(.., float)``, the schema's own conversion), so that only one block's
  lists are alive at a time; a packed array's
  ``base64`` is decoded by msgspec while it reads (RFC 4648 §4, as strictly as
  ``base64.b64decode(validate=True)``), so its text never becomes a Python string;
- every other member as ``service.api.jsontext`` reads JSON.

Whatever this cannot read the same way (a member of another shape, lists the schema will
refuse, text msgspec refuses, such as NaN or a byte order mark) is left to the whole-text reader,
so the schema sees the same values and names the same problems.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import msgspec
import numpy as np

from service.api.jsontext import loads_json

Text = bytes | bytearray | memoryview
Reader = Callable[[Text], Any]
BLOCK = 512  # rows (frequency points) of a 3-D list read at a time


class _Packed(msgspec.Struct, forbid_unknown_fields=True):
    dtype: str
    shape: list[int]
    base64: bytes


def _float_array(member: Text, read: Reader) -> Any:
    """A three-dimensional list of numbers as ``numpy.asarray(.., float)`` makes of it, read
    ``BLOCK`` rows of its first dimension at a time (one block's lists alive at once); anything
    else as ``read`` gives it, for the schema to name."""
    try:
        rows = msgspec.json.decode(member, type=list[msgspec.Raw])
    except (msgspec.MsgspecError, RecursionError):  # not a list: the schema names it
        return read(member)
    out: np.ndarray | None = None
    try:
        for start in range(0, len(rows), BLOCK):
            block = np.asarray(read(b"[" + b",".join(rows[start:start + BLOCK]) + b"]"),
                               dtype=float)
            if out is None and block.ndim == 3:
                out = np.empty((len(rows), *block.shape[1:]))
            if out is None or block.shape[1:] != out.shape[1:]:
                return read(member)  # ragged, or not 3-D: the schema names it
            out[start:start + len(block)] = block
    except (TypeError, ValueError, OverflowError):  # the schema names the problem
        return read(member)
    return read(member) if out is None else out


def _plain(member: Text, read: Reader) -> Any:
    return read(member)


def _object(text: Text, read: Reader, special: dict[str, Callable[[Text, Reader], Any]]
            ) -> Any:
    """An object's members, each read by ``special[name]`` or :func:`_plain`."""
    try:
        members = msgspec.json.decode(text, type=dict[str, msgspec.Raw])
    except (msgspec.MsgspecError, RecursionError):  # not an object, or text msgspec refuses
        return read(text)
    return {name: special.get(name, _plain)(memoryview(member), read)
            for name, member in members.items()}


def _network_data(member: Text, read: Reader) -> Any:
    """``data``: ``{"re", "im"}`` with each part an array, or a packed array with its bytes."""
    try:
        packed = msgspec.json.decode(member, type=_Packed)
    except (msgspec.MsgspecError, RecursionError):  # not packed, or packed with a fault
        return _object(member, read, {"re": _float_array, "im": _float_array})
    return {"dtype": packed.dtype, "shape": packed.shape, "base64": packed.base64}


def _gain_off(member: Text, read: Reader) -> Any:
    return _object(member, read, {"data": _network_data})


def read_request(text: Text, read: Reader = loads_json) -> Any:
    """The request's value as ``read`` would give it whole, its network data as arrays;
    raises ValueError when it is not JSON."""
    return _object(text, read, {"data": _network_data, "gain_off": _gain_off})
