"""Per-thread scratch buffers for the number scanner's big temporaries."""

from __future__ import annotations

import threading

import numpy as np

_SCRATCH_LIMIT_BYTES = 256 * 1024 * 1024
_scratch_buffers = threading.local()


def scratch_buffer(name: str, size: int) -> np.ndarray:
    """A per-thread uint8 buffer of ``size`` bytes, kept between calls.

    Fresh memory is paid for in page faults on first touch, which dominated the scanner's time;
    reusing the same buffers avoids that. Contents are garbage on entry.
    """
    buffers = _scratch_buffers.__dict__
    buffer = buffers.get(name)
    if buffer is None or buffer.size < size:
        buffer = np.empty(max(size, 1), dtype=np.uint8)
        if size <= _SCRATCH_LIMIT_BYTES:
            buffers[name] = buffer
    return buffer[:size]


def scratch_array(name: str, shape: int | tuple[int, ...], dtype: type) -> np.ndarray:
    """A scratch buffer viewed as an array of ``shape`` and ``dtype`` (garbage on entry)."""
    shape = (shape,) if isinstance(shape, int) else shape
    item = np.dtype(dtype).itemsize
    return scratch_buffer(name, item * int(np.prod(shape))).view(dtype).reshape(shape)
