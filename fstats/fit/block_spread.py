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

Cost.  A piece is zero outside its block's window, so it is filtered on that window
alone (all pieces together cost one series, and no (n, N) array is formed); the main
fit's whitened design can be handed in instead of whitening the design again; the
pieces' Gram matrix comes from their overlaps and the partialled pieces' one by
Frisch-Waugh-Lovell (``V'WV - (X̃'WV)' P``); and the sandwich (the formula of
:func:`fstats.fit.covariance.spectral_sandwich`, covariance only) takes the partialled
pieces as rows, time along the last axis and zero-padded to the FFT length.  What is
left is mostly the 2N + 1 FFTs per condition (pieces, weighted pieces, influence
series) and one N × k × n product.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from scipy import fft

from fstats.fit.autoregressive import whiten, whitened_rows
from fstats.fit.components import VarianceComponent
from fstats.fit.covariance import sandwich_cov_rows

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


def _block_index(times_s: np.ndarray, onsets: np.ndarray) -> np.ndarray:
    """Block of every sample: its last onset (block 0 before the first onset)."""
    index = np.searchsorted(onsets, np.asarray(times_s, dtype=float), side="right") - 1
    return np.clip(index, 0, onsets.size - 1)


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
    index = _block_index(times_s, onsets)
    pieces = np.zeros((column.size, onsets.size))
    pieces[np.arange(column.size), index] = column
    return pieces


def _block_windows(
    column: np.ndarray, times_s: np.ndarray, onsets: np.ndarray
) -> list[tuple[int, np.ndarray]]:
    """Each block's piece as (its first sample, its values up to its last sample).

    The same pieces as :func:`block_pieces` (``onsets`` sorted and unique) without the
    (n, N) array: with sorted times a block's samples are one window of the column,
    from the first sample at or after its onset to the next block's; otherwise the
    window runs from the block's first to its last sample and is zero where another
    block is.
    """
    times = np.asarray(times_s, dtype=float)
    n = times.size
    if np.all(times[1:] >= times[:-1]):
        bounds = np.concatenate([[0], np.searchsorted(times, onsets[1:], side="left"), [n]])
        return [(int(lo), column[lo:hi]) for lo, hi in zip(bounds[:-1], bounds[1:], strict=True)]
    index = _block_index(times, onsets)
    windows = []
    for j in range(onsets.size):
        at = np.flatnonzero(index == j)
        lo, hi = (int(at[0]), int(at[-1]) + 1) if at.size else (n, n)
        windows.append((lo, np.where(index[lo:hi] == j, column[lo:hi], 0.0)))
    return windows


def _filter_support(
    values: np.ndarray, taps: np.ndarray, offset: int, n: int
) -> tuple[int, np.ndarray]:
    """Causal FIR filter of a series that is zero outside ``values`` (from sample ``offset``).

    The output is zero before the first non-zero value and from ``taps.size - 1``
    samples after the last one, so only that stretch is computed: returns its first
    sample and its values (cut at sample ``n``).
    """
    nonzero = np.flatnonzero(values)
    if nonzero.size == 0:
        return offset, np.zeros(0)
    lo, hi = int(nonzero[0]), int(nonzero[-1]) + 1
    stop = min(offset + hi + taps.size - 1, n)
    return offset + lo, np.convolve(values[lo:hi], taps)[: stop - offset - lo]


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


def _finite_rows(x: np.ndarray) -> np.ndarray:
    """Rows of ``x`` (n, k) without NaN or inf (one sum settles the common all-finite case)."""
    if np.isfinite(x.sum()):
        return np.ones(x.shape[0], dtype=bool)
    return np.isfinite(x).all(axis=1)


def _take_rows(values: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """``values[rows]`` for a boolean ``rows``, copied in ``values``' own memory order.

    A transposed view of row-major series keeps that layout: the kept stretches between
    dropped rows are copied as slices along time.
    """
    if not values.T.flags.c_contiguous:
        return np.compress(rows, values, axis=0)
    series = values.T
    dropped = np.flatnonzero(~rows)
    starts = np.concatenate([[0], dropped + 1])
    stops = np.concatenate([dropped, [rows.size]])
    return np.concatenate(
        [series[:, a:z] for a, z in zip(starts, stops, strict=True) if z > a], axis=1
    ).T


def _segment_gram(segments: list[tuple[int, np.ndarray]], weighted: list[np.ndarray]) -> np.ndarray:
    """Gram matrix ``Σ_t w_t v_i,t v_j,t`` of series that are zero outside one stretch each."""
    starts = np.array([s for s, _ in segments])
    stops = starts + np.array([v.size for _, v in segments])
    lo = np.maximum.outer(starts, starts)
    hi = np.minimum.outer(stops, stops)
    gram = np.zeros((starts.size, starts.size))
    for i, j in zip(*np.nonzero(np.triu(lo < hi)), strict=True):
        a, z = lo[i, j], hi[i, j]
        gram[i, j] = gram[j, i] = (
            weighted[i][a - starts[i] : z - starts[i]]
            @ segments[j][1][a - starts[j] : z - starts[j]]
        )
    return gram


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
    whitened_design: np.ndarray | None = None,
    whitened_gram: np.ndarray | None = None,
) -> dict[str, BlockSpread]:
    """Between-block variance of several conditions' amplitudes on one channel.

    The block pieces of every condition are whitened with the main fit's AR filter
    (each on its own window); for each condition, every design column is partialled
    out of its pieces (Frisch-Waugh-Lovell, robust weights kept) and the main fit's
    whitened residuals are regressed on what is left: the coefficients are the split
    model's block amplitudes (as deviations from the condition's main estimate)
    without refitting it, and the spectral sandwich of that regression gives their
    noise covariance.

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
    whitened_design : ndarray, shape (n_kept, k), optional
        The main fit's whitened design on the rows kept by whitening
        (:func:`fstats.fit.autoregressive.whitened_rows` of the rows where the flow
        and the design are finite), in either memory order; saves whitening the
        design again.  Default: whiten it here.
    whitened_gram : ndarray, shape (k, k), optional
        ``X̃'WX̃`` of that whitened design with these weights (the main fit's normal
        matrix); saves forming it again.  Default: form it here.

    Returns
    -------
    dict of str to BlockSpread
        Conditions left out (too few blocks) are missing; empty when the pieces are
        rank deficient.
    """
    y = np.asarray(flow, dtype=float)
    x = np.asarray(design, dtype=float)
    n, k = x.shape
    coefs = np.asarray(ar_coefs, dtype=float)
    taps = np.concatenate([[1.0], -coefs])
    valid = np.isfinite(y) & _finite_rows(x)
    kept = whitened_rows(valid, coefs.size)
    resid_all = np.asarray(whitened_residuals, dtype=float)
    w_all = np.asarray(weights, dtype=float)
    used = kept & np.isfinite(resid_all) & np.isfinite(w_all) & (w_all > 0)
    groups = []
    for name, (column, onsets_s, estimate) in conditions.items():
        onsets = np.unique(np.asarray(onsets_s, dtype=float))
        if onsets.size == 0:
            continue
        col = np.ascontiguousarray(x[:, column])
        windows = _block_windows(col, times_s, onsets)
        energy = np.array([values @ values for _, values in windows])
        floor = 1e-9 * max(float(energy.max(initial=0.0)), 1e-300)
        windows = [win for win, e in zip(windows, energy, strict=True) if e > floor]
        if len(windows) >= min_blocks:
            groups.append((name, int(column), float(estimate), windows))
    if not groups:
        return {}
    # whitened pieces as (first used row, values on the used rows from there): the used
    # rows of a window are consecutive once the others are closed up
    position = np.concatenate([[0], np.cumsum(used)])
    segments = []
    for *_, windows in groups:
        for lo, values in windows:
            masked = np.where(valid[lo : lo + values.size], values, 0.0)
            start, white = _filter_support(masked, taps, lo, n)
            on = used[start : start + white.size]
            segments.append((int(position[start]), white if on.all() else white[on]))
    n_used, n_pieces = int(position[-1]), len(segments)
    if n_used <= n_pieces + k:
        logger.info("no block spread: block pieces are rank deficient")
        return {}
    e, w = resid_all[used], w_all[used]
    weighted = [w[s : s + v.size] * v for s, v in segments]
    piece_gram = _segment_gram(segments, weighted)
    own = np.linalg.eigvalsh(piece_gram)
    if own[0] <= 1e-10 * own[-1]:
        logger.info("no block spread: block pieces are rank deficient")
        return {}
    if whitened_design is None:
        xd = whiten(x, coefs, valid)
    else:
        xd = np.asarray(whitened_design, dtype=float)
        if xd.shape != (int(kept.sum()), k):
            raise ValueError(f"whitened_design has shape {xd.shape}, not {(int(kept.sum()), k)}")
    use = used[kept]
    if not use.all():
        xd = _take_rows(xd, use)
    # each condition's pieces with every design column partialled out (Frisch-Waugh-
    # Lovell); what is left is its block-to-block pattern, orthogonal to its own column.
    # Conditions are taken one at a time (the others keep one amplitude for all blocks).
    cross = np.column_stack(
        [xd[s : s + v.size].T @ wv for (s, v), wv in zip(segments, weighted, strict=True)]
    )
    root = np.sqrt(w)
    if whitened_gram is None:
        xdw = xd * root[:, None]
        whitened_gram = xdw.T @ xdw
    elif np.shape(whitened_gram) != (k, k):
        raise ValueError(f"whitened_gram has shape {np.shape(whitened_gram)}, not {(k, k)}")
    projection = np.linalg.lstsq(whitened_gram, cross, rcond=None)[0]
    n_fft = fft.next_fast_len(n_used, real=True)
    bins = max(1, int(round(smoothing_hz * n_fft / sfreq_hz)))
    unit = bool(np.all(w == 1.0))
    we = w * e
    # every condition's partialled pieces as rows (n_pieces, n_fft), zero beyond the used
    # rows: one product for all, and the FFT length without a padded copy
    rows = np.empty((n_pieces, n_fft))
    rows[:, n_used:] = 0.0
    body = rows[:, :n_used]
    np.matmul(-projection.T, xd.T, out=body)
    for i, (s, v) in enumerate(segments):
        rows[i, s : s + v.size] += v
    wrows = rows
    if covariance == "spectral" and not unit:  # √W times the rows, for the leverage
        wrows = np.empty_like(rows)
        wrows[:, n_used:] = 0.0
        np.multiply(body, root, out=wrows[:, :n_used])
    out, first = {}, 0
    for name, column, estimate, windows in groups:
        sl = slice(first, first + len(windows))
        n_blocks, first = len(windows), first + len(windows)
        pieces = segments[sl]
        partial = rows[sl, :n_used]
        # partial' W partial = V'WV - (X̃'WV)' P by Frisch-Waugh-Lovell, from the pieces
        gram = piece_gram[sl, sl] - cross[:, sl].T @ projection[:, sl]
        inv = np.linalg.pinv(0.5 * (gram + gram.T), rcond=1e-10, hermitian=True)
        deviations = inv @ (partial @ we)
        resid = e - deviations @ partial
        if covariance == "spectral":
            cov = sandwich_cov_rows(
                rows[sl],
                None if unit else wrows[sl],
                w * resid,
                inv,
                smoothing_bins=bins,
                n_samples=n_used,
            )
        else:
            dof = w.sum() - n_blocks - k + 1
            cov = inv * np.sum(w * resid**2) / dof
        whole = np.zeros(n_used)
        for s, v in pieces:
            whole[s : s + v.size] += v
        ww = w * whole
        shares = np.array([ww[s : s + v.size] @ v for s, v in pieces]) / float(ww @ whole)
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
    whitened_design: np.ndarray | None = None,
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
        whitened_design=whitened_design,
    )
    return found.get("condition")
