"""Per-thread scratch buffers reused from one channel fit to the next.

A channel fit allocates several design-sized temporaries (8 MB each for a 30-minute,
20 Hz recording with 29 regressors).  Allocated afresh each time, their pages are mapped
and zeroed by the operating system on first touch at every fit (1500-3000 page faults,
about 4 % of the fit).  :func:`scratch` hands out views of buffers kept per thread
instead.  A scratch array is valid only until the next :func:`scratch` call with the
same name in the same thread: it must never reach a caller (results are fresh arrays).

A thread keeps at most :data:`SCRATCH_LIMIT_BYTES` of buffers; a request that would go
beyond gets a fresh array that is not kept, so very long recordings cost what they did
without the buffers instead of holding hundreds of megabytes between fits.
"""

from __future__ import annotations

import threading
from math import prod

import numpy as np

__all__ = ["SCRATCH_LIMIT_BYTES", "release_scratch", "scratch"]

#: Most bytes of scratch buffers one thread keeps between calls (128 MiB: the three
#: buffers of a fit of up to about two hours at 20 Hz with 29 regressors).
SCRATCH_LIMIT_BYTES: int = 128 * 2**20

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
        A view of the buffer, overwritten by the next call with the same name (a fresh
        array, not kept, when the buffer would take the thread past
        :data:`SCRATCH_LIMIT_BYTES`).
    """
    dtype = np.dtype(dtype)
    size = prod(shape) * dtype.itemsize
    buffers = _local.__dict__.setdefault("buffers", {})
    buffer = buffers.get(name)
    if buffer is None or buffer.size < size:
        others = sum(b.size for key, b in buffers.items() if key != name)
        if others + size > SCRATCH_LIMIT_BYTES:
            return np.empty(shape, dtype=dtype)
        buffer = np.empty(max(size, 1), dtype=np.uint8)
        buffers[name] = buffer
    return buffer[:size].view(dtype).reshape(shape)


def release_scratch() -> None:
    """Free this thread's scratch buffers (they are made again when next needed)."""
    _local.__dict__.pop("buffers", None)
