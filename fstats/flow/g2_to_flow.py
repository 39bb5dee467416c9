"""A recording's g2 curves -> BFi series with per-sample quality masks, then flow QC.

:func:`flow_from_g2` fits every curve of every channel (:func:`fstats.flow.fit_g2`),
turns the per-curve screening and fit-quality flags into masks, and hands the
series to :func:`fstats.flow.clean_flow`.  Curves that could not be fitted become
NaN samples (short runs are interpolated and stay masked); nothing about a bad
curve stops the recording.
"""

from __future__ import annotations

import dataclasses
import logging
import warnings
from collections.abc import Mapping

import numpy as np

from fstats.errors import InputError, QualityWarning
from fstats.flow.cleaning import clean_flow
from fstats.flow.fitting import fit_g2
from fstats.flow.forward import ADULT_HEAD_DEFAULTS
from fstats.inputs.recording import Recording

__all__ = ["flow_from_g2"]

logger = logging.getLogger(__name__)


def _per_channel(value, name: str, what: str) -> float:
    if isinstance(value, Mapping):
        if name not in value:
            raise ValueError(f"{what} has no value for channel {name!r}")
        return float(value[name])
    return float(value)


def _wavelength(option: float | None, channel_nm: float | None) -> float:
    for value in (option, channel_nm):
        if value is not None and np.isfinite(value) and value > 0:
            return float(value)
    return float(ADULT_HEAD_DEFAULTS["wavelength_nm"])


def flow_from_g2(
    recording: Recording,
    *,
    beta="fit",
    fit_range_s: tuple[float, float] | None = None,
    decay_floor: float | None = None,
    weighting: str = "auto",
    mua_per_cm: float | Mapping[str, float] = ADULT_HEAD_DEFAULTS["mua_per_cm"],
    musp_per_cm: float | Mapping[str, float] = ADULT_HEAD_DEFAULTS["musp_per_cm"],
    n: float = ADULT_HEAD_DEFAULTS["n"],
    wavelength_nm: float | None = None,
    reff: float | None = None,
    observable: str = "fluence",
    integration_time_s: float | None = None,
    min_count_rate_hz: float = 2000.0,
    max_misfit_ratio: float = 4.0,
    max_bad_fraction: float = 0.2,
    chunk_size: int = 512,
    **cleaning,
) -> Recording:
    """Fit BFi (cm²/s) to every g2 curve of a recording and clean the resulting flow.

    Parameters
    ----------
    recording : Recording
        With ``g2`` (n_times, n_channels, n_lags) and ``lags_s``; ``count_rate_hz``
        (n_times, n_channels) is used when present.
    beta : "fit" or float, default="fit"
        Fit β per curve, or fix it.
    fit_range_s : (float, float), optional
        Lag range (s) used in the fit.
    decay_floor : float, optional
        Fit each curve until g2 - 1 falls below this fraction of β.
    weighting : {"auto", "uniform", "noise-model"}, default="auto"
        ``"noise-model"`` needs count rates (see :func:`fstats.flow.fit_g2`); ``"auto"``
        uses it when the recording has count rates, else uniform weights.
    mua_per_cm, musp_per_cm : float or mapping of channel name to float
        Optical properties in 1/cm (defaults: adult head, :data:`ADULT_HEAD_DEFAULTS`).
    n : float, default=1.4
        Tissue refractive index.
    wavelength_nm : float, optional
        Laser wavelength in nm; default each channel's ``wavelength_nm``, else 785.
    reff : float, optional
        Effective reflection coefficient; default from ``n`` (exact Fresnel integral).
    observable : {"fluence", "flux"}, default="fluence"
    integration_time_s : float, optional
        Averaging time of one curve in s; default one sample period.
    min_count_rate_hz : float, default=2000.0
        Curves below this count rate are marked "low count rate".
    max_misfit_ratio : float, default=4.0
        Curves above this misfit ratio are marked "poor fit".
    max_bad_fraction : float, default=0.2
        A :class:`~fstats.errors.QualityWarning` names channels where more than this
        fraction of curves could not be fitted or was marked.
    chunk_size : int, default=512
        Curves fitted together.
    **cleaning
        Options of :func:`fstats.flow.clean_flow` (``motion``, ``baseline_window_s``,
        ``lowpass_hz``, ``resample_hz``, ``max_gap_s``, ...).

    Returns
    -------
    Recording
        Flow filled from the fits (cm²/s, or relative with ``baseline_window_s``).
        ``provenance["flow"]`` holds the fit settings, per-channel curve counts and
        reasons, ``beta`` (n_times, n_channels), and masks (n_times, n_channels):
        ``bad_curve`` (not fitted), ``poor_fit`` (poor fit, β out of range or not
        converged), ``low_count_rate``, ``motion``,
        ``filled`` and their union ``exclude`` (for the GLM's robust weights).

    Raises
    ------
    InputError
        If the recording has no g2 curves or lags.
    """
    if recording.g2 is None or recording.lags_s is None:
        raise InputError(
            recording.source or "recording",
            "g2",
            "raw g2 curves with lag times (SNIRF dataType 401)",
            "no g2 data",
            hint="a flow table already holds BFi; use it directly",
        )
    g2 = np.asarray(recording.g2, dtype=float)
    n_times, n_channels, n_lags = g2.shape
    if g2.shape[:2] != recording.flow.shape:
        raise InputError(
            recording.source or "recording",
            "g2",
            f"g2 of shape (n_times, n_channels, n_lags) = ({recording.flow.shape[0]}, "
            f"{recording.flow.shape[1]}, n_lags)",
            g2.shape,
        )
    names = recording.channel_names
    if weighting == "auto":
        weighting = "uniform" if recording.count_rate_hz is None else "noise-model"
    elif weighting == "noise-model" and recording.count_rate_hz is None:
        raise InputError(
            recording.source or "recording",
            "count_rate_hz",
            "photon count rates for the noise-model weighting",
            "none",
            hint="use weighting='uniform'",
        )
    t_int = float(integration_time_s) if integration_time_s else 1.0 / recording.sfreq_hz
    bfi = np.full((n_times, n_channels), np.nan)
    beta_out = np.full((n_times, n_channels), np.nan)
    masks = {k: np.zeros((n_times, n_channels), dtype=bool) for k in ("bad_curve", "poor_fit")}
    masks["low_count_rate"] = np.zeros((n_times, n_channels), dtype=bool)
    curves: dict[str, dict] = {}
    settings = None
    for c, channel in enumerate(recording.channels):
        rate = None if recording.count_rate_hz is None else recording.count_rate_hz[:, c]
        wl = _wavelength(wavelength_nm, channel.wavelength_nm)
        result = fit_g2(
            g2[:, c, :],
            recording.lags_s,
            separation_cm=channel.separation_cm,
            mua_per_cm=_per_channel(mua_per_cm, channel.name, "mua_per_cm"),
            musp_per_cm=_per_channel(musp_per_cm, channel.name, "musp_per_cm"),
            n=n,
            wavelength_nm=wl,
            reff=reff,
            observable=observable,
            beta=beta,
            fit_range_s=fit_range_s,
            decay_floor=decay_floor,
            weighting=weighting,
            count_rate_hz=rate,
            integration_time_s=t_int,
            min_count_rate_hz=min_count_rate_hz,
            max_misfit_ratio=max_misfit_ratio,
            chunk_size=chunk_size,
        )
        settings = result.settings
        bfi[:, c] = result.bfi_cm2_s
        beta_out[:, c] = result.beta
        masks["bad_curve"][:, c] = ~result.fitted
        status = result.status.astype(str)
        # fitted but not trusted: poor fit, β at a bound, or no convergence
        masks["poor_fit"][:, c] = result.fitted & (
            (np.char.find(status, "poor fit") >= 0)
            | (np.char.find(status, "beta out of range") >= 0)
            | ~result.converged
        )
        masks["low_count_rate"][:, c] = np.char.find(status, "low count") >= 0
        curves[channel.name] = {
            "n_curves": int(n_times),
            "fitted": int(result.fitted.sum()),
            "good": int(result.good.sum()),
            "reasons": result.reason_counts(),
            "median_beta": float(np.nanmedian(result.beta)) if result.fitted.any() else None,
            "median_bfi_cm2_s": float(np.nanmedian(result.bfi_cm2_s))
            if result.fitted.any()
            else None,
            "median_n_iter": float(np.median(result.n_iter[result.fitted]))
            if result.fitted.any()
            else None,
            "wavelength_nm": float(wl),
        }
    bad_fraction = {name: 1.0 - curves[name]["good"] / max(n_times, 1) for name in names}
    heavy = [name for name, f in bad_fraction.items() if f > max_bad_fraction]
    if heavy:
        warnings.warn(
            f"{recording.source}: more than {max_bad_fraction:.0%} of g2 curves failed or were "
            f"marked in channel(s) {heavy}",
            QualityWarning,
            stacklevel=2,
        )
    prov = {
        "source": "g2 fit",
        "fit": {
            **(settings or {}),
            "mua_per_cm": mua_per_cm if not isinstance(mua_per_cm, Mapping) else dict(mua_per_cm),
            "musp_per_cm": musp_per_cm
            if not isinstance(musp_per_cm, Mapping)
            else dict(musp_per_cm),
            "integration_time_s": t_int,
            "weighting": weighting,
            "n_lags": int(n_lags),
        },
        "curves": curves,
        "beta": beta_out,
        "masks": masks,
        "steps": ["g2 fit"],
    }
    fitted = dataclasses.replace(
        recording,
        flow=bfi,
        flow_unit="cm2/s",
        provenance={**recording.provenance, "flow_missing": False, "flow": prov},
    )
    logger.info("%s: fitted g2 of %d channel(s) x %d curves", recording.source, n_channels, n_times)
    return clean_flow(fitted, **cleaning)
