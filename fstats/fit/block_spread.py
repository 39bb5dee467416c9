"""Variation of the response amplitude from block to block, as a variance component.

A condition's regressor assumes the same response to every block.  Real responses
vary from block to block (attention, arousal, fatigue), and a recording's estimate
is the mean of its blocks' amplitudes.  That variation sits exactly at the
frequencies of the task regressor, which the fit removes from the residuals, so the
spectral sandwich sees little of it; the interval then covers the recording's own
mean response but not the response the same subject would give in another run.

This module estimates the between-block variance as a random effect:

1. the condition's column is split into one piece per block (from each onset to
   the next onset of the same condition; the pieces add up to the column);
2. the pieces are whitened with the main fit's AR filter, the whole design is
   partialled out of them, and the main fit's whitened residuals are regressed on
   the result with its robust weights: by Frisch-Waugh-Lovell these are the split
   model's block amplitudes ``b`` (as deviations from the main estimate), with their
   noise covariance ``C`` from the spectral sandwich, as in the main fit;
3. with ``κ`` each block's share of the main estimate (``c̃' W P̃_j / c̃' W c̃``)
   and the centring ``M = I - 1 κ'``, the method-of-moments estimate
   ``τ² = max(0, (‖M b‖² - tr(M C M')) / tr(M M'))`` is the amplitude variance
   beyond noise (the random-effects moment estimator of DerSimonian & Laird 1986,
   with a full noise covariance because 1/f noise correlates neighbouring blocks);
4. the main estimate ``Σ κ_j b_j`` then carries ``τ² Σ κ_j²`` more variance, with
   ``N - 1`` degrees of freedom for N blocks.

Under the null (no response) the amplitudes vary only by noise and τ² is mostly 0.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from scipy import fft

from fstats.fit.autoregressive import whiten, whitened_rows
from fstats.fit.components import VarianceComponent
from fstats.fit.covariance import spectral_sandwich

__all__ = [
    "MIN_BLOCKS",
    "BlockSpread",
    "block_pieces",
    "between_block_variance",
    "block_spreads",
    "block_spread",
]

logger = logging.getLogger(__name__)

#: Fewest blocks of a condition for a between-block variance.
MIN_BLOCKS: int = 4


@dataclass(frozen=True, eq=False)
class BlockSpread:
    """Block amplitudes of one condition's column and their between-block variance.

    Parameters
    ----------
    column : int
        Index of the condition's column in the fitted design.
    amplitudes : ndarray, shape (N,)
        Amplitude of each block (flow unit per regressor unit).
    shares : ndarray, shape (N,)
        κ: each block's share of the main estimate (sums to 1).
    tau2 : float
        Between-block variance of the amplitude, (flow unit per regressor unit)².
    dof : float
        N - 1.
    """

    column: int
    amplitudes: np.ndarray
    shares: np.ndarray
    tau2: float
    dof: float

    def component(self, name: str, k: int) -> VarianceComponent:
        """The variance component ``τ² Σκ²`` on this column (``k`` columns in all)."""
        loading = np.zeros(k)
        loading[self.column] = np.sqrt(np.sum(self.shares**2))
        return VarianceComponent(name, loading, self.tau2, self.dof)


def block_pieces(column: np.ndarray, times_s: np.ndarray, onsets_s: np.ndarray) -> np.ndarray:
    """Split a regressor into one piece per block.

    Piece j is the column from onset j to onset j+1 (the first piece also takes
    everything before the first onset, the last everything after the last onset), so
    the pieces add up to the column exactly.

    Parameters
    ----------
    column : ndarray, shape (n,)
    times_s : ndarray, shape (n,)
        Sample times, s.
    onsets_s : ndarray, shape (N,)
        Block onsets, s.

    Returns
    -------
    ndarray, shape (n, N)
    """
    onsets = np.sort(np.asarray(onsets_s, dtype=float))
    index = np.clip(np.searchsorted(onsets, times_s, side="right") - 1, 0, onsets.size - 1)
    pieces = np.zeros((column.size, onsets.size))
    pieces[np.arange(column.size), index] = column
    return pieces


def _whiten_pieces(pieces: np.ndarray, coefs: np.ndarray, kept: np.ndarray) -> np.ndarray:
    """AR-whiten block pieces on their own support (each is zero outside one window).

    Same result as :func:`fstats.fit.autoregressive.whiten` on the pieces (rows
    ``kept``), at the cost of one series: piece j is filtered only from its first
    non-zero sample to p samples after its last.
    """
    b = np.concatenate([[1.0], -np.asarray(coefs, dtype=float)])
    n = pieces.shape[0]
    out = np.zeros_like(pieces)
    for j in range(pieces.shape[1]):
        nonzero = np.flatnonzero(pieces[:, j])
        if nonzero.size == 0:
            continue
        lo, hi = int(nonzero[0]), int(nonzero[-1]) + 1
        stop = min(hi + b.size - 1, n)
        out[lo:stop, j] = np.convolve(pieces[lo:hi, j], b)[: stop - lo]
    return out[kept]


def between_block_variance(
    amplitudes: np.ndarray, covariance: np.ndarray, shares: np.ndarray
) -> float:
    """Moment estimate of the between-block variance of amplitudes with correlated noise.

    ``τ² = max(0, (‖M b‖² - tr(M C M')) / tr(M M'))``, ``M = I - 1 κ'``: the spread of
    the amplitudes around their κ-weighted mean beyond what their noise covariance
    ``C`` explains (DerSimonian & Laird 1986 moment idea, full covariance).

    Parameters
    ----------
    amplitudes : ndarray, shape (N,)
    covariance : ndarray, shape (N, N)
        Noise covariance of the amplitudes.
    shares : ndarray, shape (N,)
        κ, summing to 1.
    """
    b = np.asarray(amplitudes, dtype=float)
    n = b.size
    m = np.eye(n) - np.outer(np.ones(n), shares)
    centred = m @ b
    noise = float(np.trace(m @ covariance @ m.T))
    return float(max(0.0, (centred @ centred - noise) / np.trace(m @ m.T)))


def block_spreads(
    flow: np.ndarray,
    design: np.ndarray,
    conditions: dict[str, tuple[int, np.ndarray, float]],
    times_s: np.ndarray,
    ar_coefs: np.ndarray,
    weights: np.ndarray,
    whitened_residuals: np.ndarray,
    sfreq_hz: float,
    *,
    smoothing_hz: float = 0.005,
    covariance: str = "spectral",
    min_blocks: int = MIN_BLOCKS,
) -> dict[str, BlockSpread]:
    """Between-block variance of several conditions' amplitudes on one channel.

    The block pieces of every condition are whitened with the main fit's AR filter
    (together with the design, in one pass); for each condition, every design column
    is partialled out of its pieces (Frisch-Waugh-Lovell, robust weights kept) and the
    main fit's whitened residuals are regressed on what is left: the coefficients are
    the split model's block amplitudes (as deviations from the condition's main
    estimate) without refitting it, and the spectral sandwich of that regression gives
    their noise covariance.

    Parameters
    ----------
    flow : ndarray, shape (n,)
        The channel's flow (NaN where missing).
    design : ndarray, shape (n, k)
        The fitted design.
    conditions : dict of str to (int, ndarray, float)
        Condition → (its main column, its onsets in s, the main fit's coefficient).
    times_s : ndarray, shape (n,)
        Sample times, s.
    ar_coefs : ndarray, shape (p,)
        The main fit's AR filter.
    weights : ndarray, shape (n,)
        The main fit's robust weights (NaN where a row was not used).
    whitened_residuals : ndarray, shape (n,)
        The main fit's whitened residuals (NaN on rows dropped by whitening).
    sfreq_hz : float
        Sampling rate, Hz.
    smoothing_hz : float
        Periodogram smoothing of the spectral covariance, Hz.
    covariance : {"spectral", "model"}
        Noise covariance of the block amplitudes.
    min_blocks : int
        Conditions with fewer blocks (with a non-zero piece) are left out.

    Returns
    -------
    dict of str to BlockSpread
        Conditions left out (too few blocks) are missing; empty when the pieces are
        rank deficient.
    """
    y = np.asarray(flow, dtype=float)
    x = np.asarray(design, dtype=float)
    groups, blocks = [], []
    for name, (column, onsets_s, estimate) in conditions.items():
        onsets = np.unique(np.asarray(onsets_s, dtype=float))
        if onsets.size == 0:
            continue
        pieces = block_pieces(x[:, column], times_s, onsets)
        energy = np.sum(pieces**2, axis=0)
        pieces = pieces[:, energy > 1e-9 * max(float(energy.max(initial=0.0)), 1e-300)]
        if pieces.shape[1] >= min_blocks:
            groups.append((name, int(column), float(estimate), pieces.shape[1]))
            blocks.append(pieces)
    if not groups:
        return {}
    pieces = np.column_stack(blocks)
    n_pieces = pieces.shape[1]
    coefs = np.asarray(ar_coefs, dtype=float)
    valid = np.isfinite(y) & np.isfinite(x).all(axis=1)
    kept = whitened_rows(valid, coefs.size)
    resid_main = np.asarray(whitened_residuals, dtype=float)[kept]
    w_kept = np.asarray(weights, dtype=float)[kept]
    use = np.isfinite(resid_main) & np.isfinite(w_kept) & (w_kept > 0)
    xd = whiten(np.where(valid[:, None], x, 0.0), coefs, valid)[use]
    xw = _whiten_pieces(np.where(valid[:, None], pieces, 0.0), coefs, kept)[use]
    e, w = resid_main[use], w_kept[use]
    own = np.linalg.eigvalsh(xw.T @ (w[:, None] * xw))
    if xw.shape[0] <= n_pieces + xd.shape[1] or own[0] <= 1e-10 * own[-1]:
        logger.info("no block spread: block pieces are rank deficient")
        return {}
    # each condition's pieces with every design column partialled out (Frisch-Waugh-
    # Lovell); what is left is its block-to-block pattern, orthogonal to its own column.
    # Conditions are taken one at a time (the others keep one amplitude for all blocks).
    wx = w[:, None] * xd
    projection = np.linalg.lstsq(xd.T @ wx, wx.T @ xw, rcond=None)[0]
    bins = max(1, int(round(smoothing_hz * fft.next_fast_len(e.size, real=True) / sfreq_hz)))
    out, start = {}, 0
    for name, column, estimate, n_blocks in groups:
        sl = slice(start, start + n_blocks)
        start += n_blocks
        partial = xw[:, sl] - xd @ projection[:, sl]
        gram = partial.T @ (w[:, None] * partial)
        inv = np.linalg.pinv(gram, rcond=1e-10, hermitian=True)
        deviations = inv @ (partial.T @ (w * e))
        resid = e - partial @ deviations
        if covariance == "spectral":
            cov = spectral_sandwich(partial, resid, w, inv, smoothing_bins=bins).cov
        else:
            dof = w.sum() - n_blocks - xd.shape[1] + 1
            cov = inv * np.sum(w * resid**2) / dof
        whole = xw[:, sl].sum(axis=1)
        shares = (w * whole) @ xw[:, sl] / float((w * whole) @ whole)
        deviations = deviations - shares @ deviations
        out[name] = BlockSpread(
            column=column,
            amplitudes=estimate + deviations,
            shares=shares,
            tau2=between_block_variance(deviations, cov, shares),
            dof=float(n_blocks - 1),
        )
    return out


def block_spread(
    flow: np.ndarray,
    design: np.ndarray,
    column: int,
    times_s: np.ndarray,
    onsets_s: np.ndarray,
    ar_coefs: np.ndarray,
    weights: np.ndarray,
    whitened_residuals: np.ndarray,
    estimate: float,
    sfreq_hz: float,
    *,
    smoothing_hz: float = 0.005,
    covariance: str = "spectral",
    min_blocks: int = MIN_BLOCKS,
) -> BlockSpread | None:
    """:func:`block_spreads` for one condition (None when it has too few blocks)."""
    found = block_spreads(
        flow,
        design,
        {"condition": (column, onsets_s, estimate)},
        times_s,
        ar_coefs,
        weights,
        whitened_residuals,
        sfreq_hz,
        smoothing_hz=smoothing_hz,
        covariance=covariance,
        min_blocks=min_blocks,
    )
    return found.get("condition")
