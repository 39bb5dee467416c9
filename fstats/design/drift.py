"""Slow drift terms: a discrete cosine basis with a cutoff period, or polynomials."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["dct_order", "dct_drift", "polynomial_drift"]


def dct_order(n_times: int, step_s: float, cutoff_s: float) -> int:
    """Number of cosine drift terms for a cutoff period.

    Parameters
    ----------
    n_times : int
        Number of samples N.
    step_s : float
        Sample step Δt (s).
    cutoff_s : float
        Cutoff period T_c (s); slower fluctuations are modelled as drift.

    Returns
    -------
    int
        K = floor(2 N Δt / T_c): term k has frequency k / (2 N Δt) <= 1 / T_c.
    """
    return int(math.floor(2.0 * n_times * step_s / cutoff_s + 1e-9))


def dct_drift(n_times: int, step_s: float, cutoff_s: float) -> np.ndarray:
    """Discrete cosine drift regressors (DCT-II basis without the constant).

    Parameters
    ----------
    n_times : int
        Number of samples N.
    step_s : float
        Sample step (s).
    cutoff_s : float
        Cutoff period (s).

    Returns
    -------
    ndarray, shape (n_times, K)
        Column k-1 is cos(π k (2n + 1) / (2N)), n = 0..N-1, k = 1..K,
        K = :func:`dct_order`.  Unscaled (values in [-1, 1]).
    """
    n_terms = dct_order(n_times, step_s, cutoff_s)
    n = np.arange(n_times)[:, None]
    k = np.arange(1, n_terms + 1)[None, :]
    return np.cos(np.pi * k * (2 * n + 1) / (2.0 * n_times))


def polynomial_drift(n_times: int, order: int) -> np.ndarray:
    """Legendre polynomial drift regressors of order 1..order.

    Parameters
    ----------
    n_times : int
        Number of samples.
    order : int
        Highest polynomial order (>= 1).

    Returns
    -------
    ndarray, shape (n_times, order)
        Legendre polynomials P_1..P_order evaluated on an even grid over [-1, 1]
        (the constant P_0 is the design's intercept column).
    """
    x = np.linspace(-1.0, 1.0, n_times)
    return np.polynomial.legendre.legvander(x, order)[:, 1:]
