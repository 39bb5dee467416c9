"""Per-thread scratch buffers reused from one channel fit to the next.

A subject-level fit allocates several design-sized temporaries (tens of megabytes for
a 30-minute recording) per channel.  Allocated afresh each time, their pages are
mapped and zeroed by the operating system on first touch at every fit, which costs
about a tenth of the fit.  :func:`scratch` hands out views of buffers kept per
thread instead.  A scratch array is valid only until the next :func:`scratch` call
with the same name in the same thread: it must never reach a caller (results are
fresh arrays).
"""

from __future__ import annotations

import threading
from math import prod

import numpy as np

__all__ = ["release_scratch", "scratch"]

_local = threading.local()


def scratch(name: str, shape: tuple[int, ...], dtype: type | np.dtype = np.float64) -> np.ndarray:
    """An uninitialised C-contiguous array of ``shape`` and ``dtype`` backed by buffer ``name``.

    Parameters
    ----------
    name : str
        Buffer name (one buffer per name and thread; it grows when a larger array is
        asked for and is kept at its largest size).
    shape : tuple of int
        Array shape.
    dtype : dtype, default=float64
        Array type.

    Returns
    -------
    ndarray
        A view of the buffer, overwritten by the next call with the same name.
    """
    dtype = np.dtype(dtype)
    size = prod(shape) * dtype.itemsize
    buffers = _local.__dict__.setdefault("buffers", {})
    buffer = buffers.get(name)
    if buffer is None or buffer.size < size:
        buffer = np.empty(max(size, 1), dtype=np.uint8)
        buffers[name] = buffer
    return buffer[:size].view(dtype).reshape(shape)


def release_scratch() -> None:
    """Free this thread's scratch buffers (they are made again when next needed)."""
    _local.__dict__.pop("buffers", None)
