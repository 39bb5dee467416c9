"""FIR prewhitening of long series by block-Toeplitz matrix products.

The AR whitening filter ``e_t = x_t - Σ_i a_i x_{t-i}`` is a finite impulse response
filter with p + 1 taps.  Evaluated sample by sample it is a scalar loop; by FFT it
costs a forward and an inverse transform of every series.  Here the output is cut
into blocks of B samples: block m is the banded (B + p) × B Toeplitz matrix of the
taps times the B + p input samples that block needs, so the whole filter, for one
series or for all regressors at once, is one matrix product at BLAS speed (the same
sums, rounding aside).  Rows are the samples from p on: the first p outputs need
samples before the record and are dropped, the Cochrane-Orcutt convention of
:func:`fstats.fit.autoregressive.whiten` for gap-free data.

:class:`FilteredRows` uses the filter to give the products an IRLS step needs with
the whitened design, ``X̃ δ`` and ``X̃' v``, from one filtered series each, so the
AR-IRLS rounds need not whiten every regressor.
"""

from __future__ import annotations

import numpy as np

from fstats.fit.robust import NormalEquations
from fstats.fit.rows_irls import RowsOperator

__all__ = ["BLOCK", "PRECONDITIONER_MAX_CONDITION", "BlockFilter", "FilteredRows"]

#: Output samples per block (a few tens: the product's work grows with B + p per sample).
BLOCK: int = 32

#: Largest condition number (1-norm, column-scaled) of a single-precision Gram used as
#: a preconditioner: float32 rounding (about 1e-7 per entry) times 1e4 keeps its steps
#: within about 1e-3 of the exact ones.
PRECONDITIONER_MAX_CONDITION: float = 1e4

#: Below this many taps numpy's direct convolution is faster than the block product.
_DIRECT_BELOW: int = 10


class BlockFilter:
    """The FIR filter ``numpy.convolve(z, taps, mode="valid")`` as a block-Toeplitz product.

    Parameters
    ----------
    taps : ndarray, shape (p + 1,)
        Filter taps (for AR whitening ``[1, -a_1, ..., -a_p]``).
    """

    def __init__(self, taps: np.ndarray) -> None:
        taps = np.asarray(taps, dtype=float)
        self.taps = taps
        self.order = taps.size - 1
        # toeplitz[r, j] = taps[order + j - r] where 0 <= order + j - r <= order
        lag = self.order + np.arange(BLOCK)[None, :] - np.arange(BLOCK + self.order)[:, None]
        inside = (lag >= 0) & (lag <= self.order)
        self.toeplitz = np.where(inside, taps[np.clip(lag, 0, self.order)], 0.0)
        self._single = None

    def _toeplitz32(self) -> np.ndarray:
        """The block matrix in single precision (made once)."""
        if self._single is None:
            self._single = self.toeplitz.astype(np.float32)
        return self._single

    def __call__(self, series: np.ndarray) -> np.ndarray:
        """Filter one series, shape (n,) → (n - p,)."""
        p = self.order
        if p + 1 < _DIRECT_BELOW or series.shape[0] < BLOCK + p:
            return np.convolve(series, self.taps, mode="valid")
        if series.strides[0] != series.itemsize:
            series = np.ascontiguousarray(series)
        n_out = series.shape[0] - p
        whole = n_out // BLOCK  # blocks whose input window lies inside the series
        out = np.empty(n_out)
        step = series.strides[0]
        windows = np.lib.stride_tricks.as_strided(
            series, shape=(whole, BLOCK + p), strides=(BLOCK * step, step), writeable=False
        )
        np.matmul(windows, self.toeplitz, out=out[: whole * BLOCK].reshape(whole, BLOCK))
        if whole * BLOCK < n_out:
            out[whole * BLOCK :] = np.convolve(series[whole * BLOCK :], self.taps, mode="valid")
        return out

    def full(self, series: np.ndarray) -> np.ndarray:
        """``numpy.convolve(series, taps)`` (mode "full"), shape (m,) → (m + p,)."""
        p, m = self.order, series.shape[0]
        if p + 1 < _DIRECT_BELOW or m < 2 * p + BLOCK:
            return np.convolve(series, self.taps)
        out = np.empty(m + p)
        out[p:m] = self(series)  # the outputs whose taps all fall inside the series
        out[:p] = np.convolve(series[:p], self.taps)[:p]
        out[m:] = np.convolve(series[m - p :], self.taps)[p:]
        return out

    def columns(self, design: np.ndarray, width: int | None = None) -> np.ndarray:
        """Filter every column of ``design`` (n, k) into a zero-padded row buffer (k, width).

        Each block's input window is a contiguous stretch of a C-ordered (n, k) array,
        so the regressors are filtered straight from the design matrix's own layout,
        without a transposed copy, into the row layout the FFTs want.

        Parameters
        ----------
        design : ndarray, shape (n, k)
            Series, one per column; float32 series are filtered in single precision
            (twice as fast, for preconditioners), anything else in double precision.
        width : int, optional
            Width of the returned buffer (at least n - p; default n - p).  Columns from
            n - p on are zero, so the buffer can go to an FFT of that length as it is.

        Returns
        -------
        ndarray, shape (k, width)
            The filtered series, one per row, in columns ``[:n - p]`` (float32 for a
            float32 design, else float64).
        """
        values = np.ascontiguousarray(design)
        single = values.dtype == np.float32
        toeplitz = self._toeplitz32() if single else self.toeplitz
        if not single:
            values = values.astype(float, copy=False)
        n, k = values.shape
        p = self.order
        n_out = n - p
        width = n_out if width is None else int(width)
        if width < n_out:
            raise ValueError(f"width {width} is shorter than the {n_out} filtered samples")
        n_blocks = -(-n_out // BLOCK)
        n_room = max(n_blocks, -(-width // BLOCK))  # whole blocks covering the buffer
        out = np.empty((k, n_room, BLOCK), dtype=values.dtype)
        whole = n_out // BLOCK  # blocks whose input window lies inside the series
        if whole:
            along, across = values.strides
            # block m's window: samples m B .. m B + B + p - 1 of every series, (k, B + p)
            windows = np.lib.stride_tricks.as_strided(
                values,
                shape=(whole, k, BLOCK + p),
                strides=(BLOCK * along, across, along),
                writeable=False,
            )
            np.matmul(windows, toeplitz, out=out[:, :whole].transpose(1, 0, 2))
        if whole < n_blocks:  # the last, partial block: its window runs past the end
            tail = np.zeros((k, BLOCK + p), dtype=values.dtype)
            tail[:, : n - whole * BLOCK] = values[whole * BLOCK :].T
            out[:, whole] = tail @ toeplitz
        flat = out.reshape(k, n_room * BLOCK)
        flat[:, n_out:] = 0.0
        return flat[:, :width]


class FilteredRows(RowsOperator):
    """The AR-whitened design of a gap-free recording as an operator, without forming it.

    ``X̃ δ`` is the whitening filter applied to the one series ``X δ`` and ``X̃' v`` is
    ``X'`` times the adjoint filter (a correlation with the taps) applied to ``v``.
    :meth:`materialize` whitens the regressors (once) when a Gram matrix is needed.

    Parameters
    ----------
    design : ndarray, shape (n, k)
        The regressors as columns (a design matrix).
    coefs : ndarray, shape (p,)
        AR coefficients ``a_1..a_p``.
    design_rows : ndarray, shape (k, n), optional
        The same (unwhitened) regressors as C-contiguous rows, if the caller has them:
        the products behind ``X̃ δ`` and ``X̃' v`` then read that layout, in which BLAS's
        matrix-vector products with few columns are faster (the filtering still reads
        ``design``).
    """

    def __init__(
        self, design: np.ndarray, coefs: np.ndarray, design_rows: np.ndarray | None = None
    ) -> None:
        self.design = design
        self.design_rows = design.T if design_rows is None else design_rows
        self.n_times = design.shape[0]
        self.coefs = np.asarray(coefs, dtype=float)
        taps = np.concatenate([[1.0], -self.coefs])
        self.order = taps.size - 1
        self.forward = BlockFilter(taps)
        self._adjoint = BlockFilter(taps[::-1])
        self._white = None

    def filter(self, series: np.ndarray) -> np.ndarray:
        """The whitened series ``(B z)_t`` for t = p..n-1, shape (n - p,)."""
        return self.forward(series)

    def matvec(self, delta: np.ndarray) -> np.ndarray:
        if self._white is not None:  # formed already: the direct product is cheaper
            return self.materialize().T @ delta
        return self.forward(self.design_rows.T @ delta)

    def rmatvec(self, values: np.ndarray) -> np.ndarray:
        if self._white is not None:
            return self.materialize() @ values
        return self.design_rows @ self._adjoint.full(values)

    def materialize(self, width: int | None = None) -> np.ndarray:
        """The whitened regressors as rows, shape (k, n - p) (a view of a buffer ``width`` wide)."""
        if self._white is None or (width is not None and self._white.shape[1] < width):
            self._white = self.forward.columns(self.design, width)
        return self._white[:, : self.n_times - self.order]

    def preconditioner(self, weights: np.ndarray) -> NormalEquations | None:
        """``X̃'WX̃`` whitened, weighted and summed in single precision, factored in double.

        About half the cost of the exact factor, and it leaves the double-precision
        whitened rows unformed (the steps keep using the filtered products).  Its
        relative error is about single-precision rounding times the condition number,
        so for a column-scaled Gram conditioned worse than
        :data:`PRECONDITIONER_MAX_CONDITION` (or not positive definite) it is None.
        """
        if self.design.shape[0] < BLOCK + self.order:
            return None
        single = self.forward.columns(self.design.astype(np.float32))
        single *= np.sqrt(weights).astype(np.float32)
        try:
            normal = NormalEquations((single @ single.T).astype(float))
        except np.linalg.LinAlgError:
            return None
        return normal if normal.condition <= PRECONDITIONER_MAX_CONDITION else None

    def buffer(self) -> np.ndarray:
        """The buffer behind :meth:`materialize` (zero beyond the whitened samples)."""
        return self._white
