"""Subject-level GLM: fit a design matrix to every channel of a recording.

:class:`SubjectGLM` holds the settings, :meth:`SubjectGLM.fit` returns a
:class:`SubjectFit` with one :class:`ChannelFit` (or :class:`ChannelFailure`) per
channel, the tidy results table and the block-averaged time courses.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import asdict, dataclass, replace

import numpy as np
import pandas as pd

from fstats.design.matrix import DesignMatrix
from fstats.errors import FitWarning, InputError, suggest
from fstats.fit.autoregressive import default_max_ar_order
from fstats.fit.block_spread import block_spreads
from fstats.fit.coupling import coupling_spread
from fstats.fit.diagnostics import acf, durbin_watson, ljung_box, r_squared, variance_share
from fstats.fit.estimation import METHODS, ChannelFitError, estimate_channel
from fstats.fit.robust import TUKEY_C
from fstats.fit.subject_fit import ChannelFailure, ChannelFit, SubjectFit
from fstats.inputs.recording import Recording

__all__ = [
    "COVARIANCES",
    "SHORT_COUPLINGS",
    "SubjectGLM",
    "ChannelFit",
    "ChannelFailure",
    "SubjectFit",
]

logger = logging.getLogger(__name__)

#: Coefficient covariance estimators: the frequency-domain sandwich on the
#: prewhitened data (default) or the model-based ``s² (X̃'WX̃)^-1``.
COVARIANCES: tuple[str, ...] = ("spectral", "model")

#: How the short-channel coefficient's uncertainty enters the covariance: ``banded``
#: adds the between-band spread of the coupling (:mod:`fstats.fit.coupling`);
#: ``single`` trusts the one fitted coefficient for every frequency.
SHORT_COUPLINGS: tuple[str, ...] = ("banded", "single")


@dataclass(frozen=True, eq=False)
class SubjectGLM:
    """How to fit a subject's channels (settings only).

    Parameters
    ----------
    method : {"ar-irls", "ar", "ols"}, default="ar-irls"
        AR(p) prewhitening with Tukey-bisquare IRLS (Barker, Aarabi & Huppert 2013);
        AR(p) prewhitening alone; ordinary least squares (reference only: its
        p-values are far too small for serially correlated flow).
    max_ar_order : int or None, default=None
        Largest AR order of the BIC search; None = 4 s of samples (80 at 20 Hz).
    ar_order : int or None, default=None
        Fix the AR order instead of searching.
    covariance : {"spectral", "model"}, default="spectral"
        Frequency-domain sandwich with Satterthwaite df (see
        :mod:`fstats.fit.covariance`), or the model-based ``s² (X̃'WX̃)^-1``.
    smoothing_hz : float, default=0.005
        Half-width of the periodogram smoother of the spectral covariance, in Hz.
    short_coupling : {"banded", "single"}, default="banded"
        ``banded``: the short-channel coupling is also estimated per frequency band
        and its between-band spread is added to the covariance of the task terms
        (:mod:`fstats.fit.coupling`; matters when the short channel follows the
        task); ``single``: the one fitted coefficient is trusted.  Not used by OLS.
    block_variation : bool, default=True
        Add the block-to-block variation of each condition's response amplitude
        (a random effect over blocks, :mod:`fstats.fit.block_spread`) to the
        covariance, so that intervals cover the response the subject gives on
        average, not only in these blocks.  Needs at least 4 blocks; not used by
        OLS or for FIR conditions.
    max_iter : int, default=10
        Largest number of AR re-estimation rounds.
    tol : float, default=1e-5
        Convergence tolerance (relative change of the fitted values).
    tukey_c : float, default=4.685
        Bisquare tuning constant.
    alpha : float, default=0.05
        Confidence intervals are ``1 - alpha``.
    block_averages : bool, default=True
        Compute block-averaged time courses (model FIR and epochs).
    fir_bin_s : float, default=1.0
        FIR bin width (s) of the internal FIR refit.
    post_s : float, default=15.0
        Time after the end of the longest event covered by the time courses (s).
    pre_s : float, default=5.0
        Pre-onset baseline of the epoch averages (s).
    """

    method: str = "ar-irls"
    max_ar_order: int | None = None
    ar_order: int | None = None
    covariance: str = "spectral"
    smoothing_hz: float = 0.005
    short_coupling: str = "banded"
    block_variation: bool = True
    max_iter: int = 10
    tol: float = 1e-5
    tukey_c: float = TUKEY_C
    alpha: float = 0.05
    block_averages: bool = True
    fir_bin_s: float = 1.0
    post_s: float = 15.0
    pre_s: float = 5.0

    def __post_init__(self) -> None:
        if self.method not in METHODS:
            raise InputError(
                "fit options",
                "method",
                f"one of {', '.join(METHODS)}",
                self.method,
                hint=suggest(self.method, METHODS),
            )
        if self.covariance not in COVARIANCES:
            raise InputError(
                "fit options",
                "covariance",
                f"one of {', '.join(COVARIANCES)}",
                self.covariance,
                hint=suggest(self.covariance, COVARIANCES),
            )
        if self.short_coupling not in SHORT_COUPLINGS:
            raise InputError(
                "fit options",
                "short_coupling",
                f"one of {', '.join(SHORT_COUPLINGS)}",
                self.short_coupling,
                hint=suggest(self.short_coupling, SHORT_COUPLINGS),
            )
        for name in ("max_ar_order", "ar_order"):
            value = getattr(self, name)
            if value is not None and (int(value) != value or value < 0):
                raise InputError("fit options", name, "a whole number >= 0", value)

    def options(self) -> dict:
        """The settings as a plain dict (for provenance)."""
        return asdict(self)

    def fit(
        self,
        recording: Recording,
        design: DesignMatrix,
        *,
        channels: tuple[str, ...] | list[str] | None = None,
    ) -> SubjectFit:
        """Fit the design to each channel.

        Parameters
        ----------
        recording : Recording
            Flow (n_times, n_channels) in cm²/s or relative units.
        design : DesignMatrix
            On the recording's time base (same n_times).
        channels : sequence of str, optional
            Channels to fit (default: all, in recording order).

        Returns
        -------
        SubjectFit

        Raises
        ------
        InputError
            Design and recording lengths differ, or an unknown channel is requested.
        """
        source = recording.source or "recording"
        if design.values.shape[0] != recording.n_times:
            raise InputError(
                source,
                "design matrix rows",
                f"{recording.n_times} rows (one per sample)",
                design.values.shape[0],
                hint="build the design on this recording's time base",
            )
        names = recording.channel_names
        wanted = tuple(channels) if channels is not None else names
        for name in wanted:
            if name not in names:
                raise InputError(
                    source,
                    "channels",
                    f"one of {', '.join(names)}",
                    name,
                    hint=suggest(name, names),
                )
        sfreq = recording.sfreq_hz
        max_order = self.max_ar_order
        if max_order is None:
            max_order = default_max_ar_order(sfreq)
        fits: dict[str, ChannelFit | ChannelFailure] = {}
        for name in wanted:
            channel = recording.channels[recording.channel_index(name)]
            try:
                fits[name] = self._fit_channel(recording, design, channel, max_order, sfreq)
            except ChannelFitError as exc:
                reason = str(exc)
                warnings.warn(f"channel {name!r} not fitted: {reason}", FitWarning, stacklevel=2)
                fits[name] = ChannelFailure(name, channel.separation_cm, channel.is_short, reason)
        logger.info(
            "fitted %d of %d channels (%s)",
            sum(isinstance(f, ChannelFit) for f in fits.values()),
            len(fits),
            self.method,
        )
        averages = pd.DataFrame(
            columns=[
                "condition",
                "channel",
                "source",
                "time_s",
                "mean_pct",
                "ci_low_pct",
                "ci_high_pct",
            ]
        )
        if self.block_averages and recording.events is not None or design.conditions:
            if self.block_averages:
                from fstats.fit.block_average import block_averages

                averages = block_averages(self, recording, design, fits)
        return SubjectFit(
            model=self,
            recording_source=recording.source,
            subject=recording.subject,
            session=recording.session,
            design=design,
            flow_unit=recording.flow_unit,
            channel_fits=fits,
            block_averages=averages,
        )

    def _fit_channel(self, recording, design, channel, max_order, sfreq) -> ChannelFit:
        values = design.for_channel(channel.name)
        keep = [
            i for i, kind in enumerate(design.kinds) if not (channel.is_short and kind == "short")
        ]
        x = values if len(keep) == values.shape[1] else values[:, keep]
        col_names = tuple(design.names[i] for i in keep)
        col_kinds = tuple(design.kinds[i] for i in keep)
        flow = recording.channel_flow(channel.name)
        est = estimate_channel(
            flow,
            x,
            method=self.method,
            max_ar_order=max_order,
            ar_order=self.ar_order,
            max_iter=self.max_iter,
            tol=self.tol,
            tukey_c=self.tukey_c,
            covariance=self.covariance if self.method != "ols" else "model",
            smoothing_hz=self.smoothing_hz,
            sfreq_hz=sfreq,
        )
        if not est.converged:
            warnings.warn(
                f"channel {channel.name!r}: {self.method} fit did not settle in "
                f"{est.n_iter} iterations",
                FitWarning,
                stacklevel=3,
            )
        task = np.array([k == "task" for k in col_kinds])
        valid = np.isfinite(est.fitted)
        task_free = x @ np.where(task, 0.0, est.betas)  # the model's task-free prediction
        baseline = float(np.mean(task_free[valid])) if valid.any() else np.nan
        short = np.array([k == "short" for k in col_kinds])
        short_part = x[:, short] @ est.betas[short] if short.any() else None
        spreads, blocks = (), {}
        try:
            if short.any() and self.short_coupling == "banded" and self.method != "ols":
                spreads = coupling_spread(flow, x, list(np.flatnonzero(short)), est.weights, sfreq)
            if self.block_variation and self.method != "ols":
                blocks = self._block_spreads(recording, design, x, col_names, flow, est, sfreq)
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise ChannelFitError(f"variance components could not be estimated ({exc})") from exc
        est = replace(est, whitened_design=None)  # as large as the design: not kept
        components = tuple(
            s.component(f"short coupling: {col_names[s.column]}") for s in spreads
        ) + tuple(
            b.component(f"block amplitude: {cond}", len(col_names)) for cond, b in blocks.items()
        )
        max_lag = int(min(round(2.0 * sfreq), max(1, valid.sum() // 4)))
        white = est.whitened_residuals
        diagnostics = {
            "r2": r_squared(flow, est.fitted),
            "durbin_watson_before": durbin_watson(est.residuals),
            "durbin_watson": durbin_watson(white),
            "ljung_box_p": ljung_box(white, min(20, max_lag), n_params=0)[1],
            "acf_lags_s": np.arange(max_lag + 1) / sfreq,
            "acf_before": acf(est.residuals, max_lag),
            "acf_after": acf(white, max_lag),
            "short_share": variance_share(flow, short_part) if short_part is not None else np.nan,
            "converged": est.converged,
            "n_iter": est.n_iter,
            "n_used": est.n_used,
            "downweighted_fraction": float(np.nanmean(est.weights < 0.5)),
        }
        if spreads:
            diagnostics["short_coupling"] = {
                col_names[s.column]: {
                    "band_edges_hz": s.band_edges_hz.tolist(),
                    "coupling": s.couplings.tolist(),
                    "coupling_sd": np.sqrt(s.variances).tolist(),
                    "tau": float(np.sqrt(s.tau2)),
                    "q": s.q,
                    "fitted": float(est.betas[s.column]),
                }
                for s in spreads
            }
        if blocks:
            diagnostics["block_spread"] = {
                cond: {
                    "column": col_names[b.column],
                    "amplitudes": b.amplitudes.tolist(),
                    "tau": float(np.sqrt(b.tau2)),
                    "n_blocks": int(b.amplitudes.size),
                }
                for cond, b in blocks.items()
            }
        conditions = {
            cond: tuple(c for c in cols if c in col_names)
            for cond, cols in design.conditions.items()
        }
        return ChannelFit(
            channel=channel.name,
            separation_cm=float(channel.separation_cm),
            is_short=bool(channel.is_short),
            names=col_names,
            kinds=col_kinds,
            conditions=conditions,
            estimate=est,
            baseline_flow=baseline,
            diagnostics=diagnostics,
            components=components,
        )

    def _block_spreads(self, recording, design, x, col_names, flow, est, sfreq) -> dict:
        """Between-block amplitude spread of every non-FIR task condition (by condition)."""
        events = design.info.get("events") if isinstance(design.info, dict) else None
        if events is None:
            events = recording.events
        if events is None or not hasattr(events, "select"):
            return {}
        wanted = {}
        for cond, cols in design.conditions.items():
            if cond in design.fir_times_s or not cols or cols[0] not in col_names:
                continue
            j = col_names.index(cols[0])
            wanted[cond] = (j, events.select(cond).onsets_s, float(est.betas[j]))
        if not wanted:
            return {}
        return block_spreads(
            flow,
            x,
            wanted,
            recording.times_s,
            est.ar_coefs,
            est.weights,
            est.whitened_residuals,
            sfreq,
            smoothing_hz=self.smoothing_hz,
            covariance=self.covariance,
            whitened_design=None if est.whitened_design is None else est.whitened_design.T,
            whitened_gram=est.whitened_gram,
        )
