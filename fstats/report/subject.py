"""The per-subject page: one self-contained HTML file with its figures beside it.

:func:`subject_report` takes a recording, its design matrix and the subject fit,
draws the figures (embedded as PNG data URIs and also written as PNG and SVG to
``<page>_figures/``) and renders ``templates/subject.html.j2``.
"""

from __future__ import annotations

import logging
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.ndimage import uniform_filter1d

from fstats.report import _access
from fstats.report.courses import response_curves
from fstats.report.figures_model import acf_figure, design_figure, fitted_figure, responses_figure
from fstats.report.figures_quality import flow_traces_figure, spectra_figure, weights_figure
from fstats.report.plotdata import (
    autocorrelation,
    flow_spectrum,
    ljung_box,
    low_weight_segments,
    spectral_peak_hz,
    task_spans,
)
from fstats.report.render import (
    PNG_DPI,
    FigureStore,
    finish_page,
    format_number,
    table_rows,
)

__all__ = ["subject_report", "SUBJECT_SECTIONS", "CARDIAC_BAND_HZ", "RESPIRATORY_BAND_HZ"]

logger = logging.getLogger(__name__)

#: Page sections (anchor, heading), in page order; the names are ours.
SUBJECT_SECTIONS: tuple[tuple[str, str], ...] = (
    ("session-facts", "Session facts"),
    ("signal-check", "Signal check"),
    ("model-layout", "Model layout"),
    ("model-vs-data", "Model against data"),
    ("responses", "Responses by condition"),
    ("estimates", "Estimates and contrasts"),
    ("residual-checks", "Residual checks"),
    ("provenance-footer", "How this page was made"),
)

#: Search bands for spectral peaks (Hz): adult heart rate 42-180 bpm, breathing 6-36 /min.
CARDIAC_BAND_HZ = (0.7, 3.0)
RESPIRATORY_BAND_HZ = (0.1, 0.6)

_WEIGHT_THRESHOLD = 0.5
#: Variance inflation above this is flagged (common practice: VIF > 10 is serious).
_VIF_HIGH = 10.0
#: Robust weights are averaged over this window (s) before looking for motion spans, so
#: single down-weighted samples (ordinary outliers) do not count as motion.
_MOTION_WINDOW_S = 1.0
#: Block-average sources drawn in preference to others.
_PREFERRED_SOURCES = ("model", "fir")
#: Display names of block-average sources.
_SOURCE_NAMES = {"model": "model-based, FIR", "epochs": "epoch average", "epoch": "epoch average"}
_RESULT_COLUMNS = [
    ("channel", "channel", "text"),
    ("separation_cm", "separation (cm)", "num"),
    ("term", "term", "text"),
    ("condition", "condition", "text"),
    ("estimate_pct", "estimate (%)", "num"),
    ("se_pct", "SE (%)", "num"),
    ("stat", "t / F", "num"),
    ("df", "df", "num"),
    ("p", "p", "p"),
    ("ci_low_pct", "CI low (%)", "num"),
    ("ci_high_pct", "CI high (%)", "num"),
    ("ar_order", "AR order", "int"),
    ("status", "status", "text"),
]


def _unit_label(flow_unit: str) -> str:
    return "BFi (cm²/s)" if flow_unit == "cm2/s" else "relative flow (baseline = 1)"


def _psd_label(flow_unit: str) -> str:
    return "PSD ((cm²/s)²/Hz)" if flow_unit == "cm2/s" else "PSD (1/Hz)"


def _events_table(events) -> dict:
    if events is None or len(events) == 0:
        return {"header": [], "rows": []}
    records = []
    for condition in events.condition_names:
        sel = events.select(condition)
        records.append(
            {
                "condition": condition,
                "n": len(sel),
                "mean_duration_s": float(np.mean(sel.durations_s)),
                "total_s": float(np.sum(sel.durations_s)),
                "first_s": float(np.min(sel.onsets_s)),
            }
        )
    return table_rows(
        pd.DataFrame(records),
        [
            ("condition", "condition", "text"),
            ("n", "events", "int"),
            ("mean_duration_s", "mean duration (s)", "num"),
            ("total_s", "total time (s)", "num"),
            ("first_s", "first onset (s)", "num"),
        ],
    )


def _results_tables(fit) -> tuple[dict, dict]:
    table = fit.table() if hasattr(fit, "table") else None
    if not isinstance(table, pd.DataFrame) or table.empty:
        return {"header": [], "rows": []}, {"header": [], "rows": []}
    kind = table.get("term_kind", pd.Series("regressor", index=table.index))
    condition = table.get("condition", pd.Series("", index=table.index)).fillna("")
    task = table[(kind == "regressor") & (condition.astype(str) != "")]
    contrasts = table[kind.isin(["contrast", "F"])]
    return table_rows(task, _RESULT_COLUMNS), table_rows(contrasts, _RESULT_COLUMNS)


def _diagnostic(diag: dict, *names):
    for name in names:
        if name in diag and diag[name] is not None:
            return diag[name]
    return None


def _spread_cells(diag: dict, baseline) -> dict:
    """Text cells for the two variance components of a channel (empty when absent).

    Coupling: the between-band sd of the short-channel coupling in percent of the
    fitted coupling; block: the between-block sd of each condition's amplitude in
    percent of the channel's baseline flow.
    """
    coupling = []
    for name, info in (diag.get("short_coupling") or {}).items():
        fitted = info.get("fitted")
        if fitted:
            coupling.append(f"{name}: ±{100.0 * info['tau'] / abs(fitted):.0f} %")
    blocks = []
    base = float(baseline) if baseline is not None and np.isfinite(baseline) else np.nan
    for cond, info in (diag.get("block_spread") or {}).items():
        if np.isfinite(base) and base > 0:
            blocks.append(f"{cond}: {100.0 * info['tau'] / base:.2f} % ({info['n_blocks']} blocks)")
    return {"coupling_spread": "; ".join(coupling), "block_spread": "; ".join(blocks)}


def _residual_checks(fits: dict, sfreq_hz: float) -> tuple[dict, dict, dict]:
    """Residual table plus ACF before/after whitening per fitted channel."""
    max_lag = int(min(200, max(10, round(10 * sfreq_hz))))
    records, before, after = [], {}, {}
    for name, cf in fits.items():
        diag = dict(_access.field_of(cf, "diagnostics", default={}) or {})
        residuals = _access.field_of(cf, "residuals")
        whitened = _access.channel_whitened(cf)
        acf_b = _diagnostic(diag, "acf_before", "residual_acf", "acf_residuals", "acf_raw")
        acf_a = _diagnostic(diag, "acf_after", "whitened_acf", "acf_whitened")
        if acf_b is None and residuals is not None:
            acf_b = autocorrelation(residuals, max_lag)
        if acf_a is None and whitened is not None:
            acf_a = autocorrelation(whitened, max_lag)
        if acf_b is not None:
            before[name] = np.asarray(acf_b, dtype=float)[: max_lag + 1]
        if acf_a is not None:
            after[name] = np.asarray(acf_a, dtype=float)[: max_lag + 1]
        test_series = whitened if whitened is not None else residuals
        dw = _diagnostic(diag, "durbin_watson", "dw")
        lb = _diagnostic(diag, "ljung_box_p", "ljung_box_pvalue", "lb_p")
        if test_series is not None:
            clean = np.asarray(test_series, dtype=float)
            clean = clean[np.isfinite(clean)]
            if dw is None and clean.size > 2:
                dw = float(np.sum(np.diff(clean) ** 2) / np.sum(clean**2))
            if lb is None and clean.size > 30:
                lb = ljung_box(clean, int(min(20, clean.size // 5)))[1]
        ar = _access.field_of(cf, "ar_coefs")
        records.append(
            {
                "channel": name,
                "ar_order": None if ar is None else int(np.size(ar)),
                "r2": _diagnostic(diag, "r2", "r_squared"),
                "durbin_watson_before": _diagnostic(diag, "durbin_watson_before"),
                "durbin_watson": dw,
                "ljung_box_p": lb,
                "short_share": _diagnostic(diag, "short_share"),
                "downweighted": _diagnostic(diag, "downweighted_fraction"),
                **_spread_cells(diag, _access.field_of(cf, "baseline_flow")),
            }
        )
    table = (
        table_rows(
            pd.DataFrame(records),
            [
                ("channel", "channel", "text"),
                ("ar_order", "AR order", "int"),
                ("r2", "R²", "num"),
                ("durbin_watson_before", "Durbin–Watson (raw)", "num"),
                ("durbin_watson", "Durbin–Watson (whitened)", "num"),
                ("ljung_box_p", "Ljung–Box p (whitened)", "p"),
                ("short_share", "short-channel share", "num"),
                ("downweighted", "down-weighted fraction", "num"),
                ("coupling_spread", "coupling spread across bands", "text"),
                ("block_spread", "block-to-block amplitude spread", "text"),
            ],
        )
        if records
        else {"header": [], "rows": []}
    )
    return table, before, after


def subject_report(
    recording,
    design,
    fit,
    out_path,
    *,
    provenance: dict | None = None,
    max_points: int = 2000,
    dpi: int = PNG_DPI,
) -> Path:
    """Write the HTML page of one subject's recording, design and fit.

    Parameters
    ----------
    recording : fstats.Recording
        The recording that was fitted (flow in cm²/s or relative, events, channels).
    design : fstats.design.DesignMatrix
        Its design matrix (``info["cardiac"]`` and ``info["diagnostics"]`` are shown when present).
    fit : SubjectFit
        The subject fit: ``channel_fits``, ``table()``, ``block_averages``.
    out_path : str or Path
        HTML file to write; figures go to ``<stem>_figures/`` beside it as PNG and SVG.
    provenance : dict, optional
        ``fstats_version``, ``created``, ``options``, ``design``, ``packages``,
        ``inputs`` ({path: sha256}) as in the results JSON sidecar.
    max_points : int, default=2000
        Samples per trace after min/max thinning (keeps long recordings light).
    dpi : int
        PNG resolution.

    Returns
    -------
    Path
        The HTML file, written atomically (a failure leaves no half-written page).
    """

    out_path = Path(out_path)
    out_path.parent.mkdir(parents=True, exist_ok=True)
    stem = out_path.stem
    tmp_dir = Path(tempfile.mkdtemp(prefix=f".{stem}_figures.", dir=out_path.parent))
    store = FigureStore(tmp_dir, f"{stem}_figures", dpi=dpi)
    try:
        context = _subject_context(recording, design, fit, store, max_points)
        finish_page(
            "subject.html.j2",
            out_path,
            context,
            store=store,
            tmp_dir=tmp_dir,
            sections=SUBJECT_SECTIONS,
            provenance=dict(provenance or {}),
        )
    finally:
        if tmp_dir.exists():
            import shutil

            shutil.rmtree(tmp_dir, ignore_errors=True)
    logger.info("wrote subject page %s (%d figures)", out_path, len(store.figures))
    return out_path


def _subject_context(recording, design, fit, store: FigureStore, max_points: int) -> dict:
    times = np.asarray(recording.times_s, dtype=float)
    sfreq = recording.sfreq_hz
    is_short = {c.name: bool(c.is_short) for c in recording.channels}
    unit = _unit_label(recording.flow_unit)
    events = recording.events
    spans = task_spans(events.onsets_s, events.durations_s, events.conditions) if events else {}
    subject = recording.subject or _access.field_of(
        fit, "subject", default=store.href_prefix[: -len("_figures")]
    )
    session = recording.session or _access.field_of(fit, "session")
    label = f"{subject} · {session}" if session else str(subject)

    finite = np.isfinite(recording.flow)
    facts = [
        ("duration", f"{recording.duration_s / 60:.1f} min ({recording.duration_s:.0f} s)"),
        ("sampling rate", f"{sfreq:.3g} Hz"),
        ("samples", f"{recording.n_times:,}"),
        ("channels", f"{len(recording.channels)} ({len(recording.short_channels)} short)"),
        ("flow unit", recording.flow_unit),
        ("missing samples", f"{100 * (1 - finite.mean()):.2f} %"),
        ("events", str(len(events)) if events else "none"),
    ]
    channels_table = table_rows(
        pd.DataFrame(
            [
                {
                    "name": c.name,
                    "separation_cm": c.separation_cm,
                    "role": "short (scalp)" if c.is_short else "long",
                    "wavelength_nm": c.wavelength_nm,
                    "missing": f"{100 * (1 - finite[:, i].mean()):.2f} %",
                }
                for i, c in enumerate(recording.channels)
            ]
        ),
        [
            ("name", "channel", "text"),
            ("separation_cm", "separation (cm)", "num"),
            ("role", "role", "text"),
            ("wavelength_nm", "wavelength (nm)", "num"),
            ("missing", "missing", "text"),
        ],
    )

    # --- fit pieces -------------------------------------------------------
    channel_fits = dict(_access.field_of(fit, "channel_fits", default={}) or {})
    fitted = {k: v for k, v in channel_fits.items() if not _access.is_failure(v)}
    failures = [
        (k, _access.failure_reason(v)) for k, v in channel_fits.items() if _access.is_failure(v)
    ]
    weights = {}
    for name, cf in fitted.items():
        w = _access.channel_weights(cf)
        if w is not None and w.shape == times.shape and np.nanmin(w) < 1.0:
            weights[name] = w
    motion = []
    window = max(1, int(round(_MOTION_WINDOW_S * sfreq)))
    for w in weights.values():
        smooth = uniform_filter1d(np.nan_to_num(w, nan=1.0), window, mode="nearest")
        motion.extend(low_weight_segments(times, smooth, _WEIGHT_THRESHOLD, min_duration_s=0.0))
    motion.extend(_flagged_motion_spans(recording))
    motion = _merge_spans(motion)

    # --- signal check -------------------------------------------------------
    flows = {name: recording.channel_flow(name) for name in recording.channel_names}
    store.add(
        "traces",
        flow_traces_figure(
            times,
            flows,
            is_short,
            spans,
            unit_label=unit,
            motion_spans=motion,
            max_points=max_points,
        ),
        "Flow of every channel over the recording; hatched bands are task periods.",
    )
    segment_s = float(min(60.0, max(8.0, recording.duration_s / 4)))
    spectra = {n: flow_spectrum(v, sfreq, segment_s=segment_s) for n, v in flows.items()}
    cardiac = dict(design.info.get("cardiac", {}) or {}) if design is not None else {}
    reference = (recording.short_channels or recording.channel_names)[0]
    spectral_hr = spectral_peak_hz(*spectra[reference], CARDIAC_BAND_HZ)
    resp_hz = spectral_peak_hz(*spectra[reference], RESPIRATORY_BAND_HZ)
    hr_bpm = cardiac.get("heart_rate_bpm")
    hr_hz = float(hr_bpm) / 60.0 if hr_bpm is not None and np.isfinite(hr_bpm) else spectral_hr
    store.add(
        "spectra",
        spectra_figure(
            spectra,
            is_short,
            heart_rate_hz=hr_hz,
            resp_rate_hz=resp_hz,
            unit_label=_psd_label(recording.flow_unit),
        ),
        "Welch power spectra; dashed line: heart rate, dotted: its harmonic, "
        "dash-dot: respiratory peak.",
    )
    quality_facts = [
        (
            "heart rate (beat detection)",
            f"{float(hr_bpm):.1f} bpm" if hr_bpm is not None else "not detected",
        ),
        (
            "cardiac peak (spectrum)",
            f"{60 * spectral_hr:.1f} bpm" if np.isfinite(spectral_hr) else "–",
        ),
        (
            "respiratory peak (spectrum)",
            f"{60 * resp_hz:.1f} /min" if np.isfinite(resp_hz) else "–",
        ),
        ("beats", str(cardiac.get("n_beats", "–"))),
        ("beat quality", format_number(cardiac.get("beat_quality"))),
        ("cardiac source", str(cardiac.get("source_channel", "–"))),
        ("low-weight time", f"{sum(b - a for a, b in motion):.1f} s"),
    ]
    if weights:
        store.add(
            "weights",
            weights_figure(
                times,
                weights,
                threshold=_WEIGHT_THRESHOLD,
                motion_spans=motion,
                max_points=max_points,
            ),
            "Robust weights of the fitted channels (means over bins of at least 1 s); "
            f"shaded: spans where the 1 s mean weight falls below {_WEIGHT_THRESHOLD}.",
        )

    # --- model layout --------------------------------------------------------
    diag = dict(design.info.get("diagnostics", {}) or {}) if design is not None else {}
    design_facts = [
        ("regressors", str(design.n_regressors)),
        ("task regressors", str(len(design.columns_of_kind("task")))),
        ("condition number", format_number(diag.get("condition_number"))),
        ("contrasts", str(len(design.contrasts))),
    ]
    store.add(
        "design",
        design_figure(design.values, design.names, design.kinds, design.times_s),
        "Design matrix: one column per regressor, each scaled to its 99th-percentile "
        "magnitude (clipped at ±1); "
        "labels on top give the regressor kind.",
    )
    vif = diag.get("vif", {}) or {}
    task_names = set(design.names[i] for i in design.columns_of_kind("task"))
    vif_records = [
        {"regressor": k, "vif": v, "flag": "high" if v is not None and v > 5 else ""}
        for k, v in vif.items()
        if k in task_names or not task_names
    ]
    vif_table = (
        table_rows(
            pd.DataFrame(vif_records),
            [
                ("regressor", "regressor", "text"),
                ("vif", "VIF", "num"),
                ("flag", f"flag (> {_VIF_HIGH:g})", "text"),
            ],
        )
        if vif_records
        else {"header": [], "rows": []}
    )

    # --- model against data ------------------------------------------------
    fitted_series = {}
    measured = {}
    for name, cf in fitted.items():
        f = _access.field_of(cf, "fitted")
        if f is not None and np.shape(f) == times.shape and name in flows:
            fitted_series[name] = np.asarray(f, dtype=float)
            measured[name] = flows[name]
    if fitted_series:
        store.add(
            "fitted",
            fitted_figure(
                times, measured, fitted_series, spans, unit_label=unit, max_points=max_points
            ),
            "Measured flow (light) and the full model fit (dark) per fitted channel.",
        )

    # --- responses ------------------------------------------------------------
    curves, responses_note = response_curves(fit, recording)
    durations = (
        {c: float(np.median(events.select(c).durations_s)) for c in events.condition_names}
        if events
        else None
    )
    methods = list(dict.fromkeys(c["method"] for c in curves))
    # One figure: the model-based average when the fit has one (it accounts for the
    # nuisance regressors); other sources are named in the note and kept in the tables.
    methods = [
        m
        for _, m in sorted(
            enumerate(methods), key=lambda im: (im[1] not in _PREFERRED_SOURCES, im[0])
        )
    ]
    response_figures = []
    if methods:
        method = methods[0]
        chosen = [c for c in curves if c["method"] == method]
        what = f" ({_SOURCE_NAMES.get(method, method)})" if method else ""
        response_figures.append(
            store.add(
                "responses",
                responses_figure(chosen, durations_s=durations),
                f"Average response per condition{what}: short channels left, long right; "
                "shaded band: confidence interval, grey: task period.",
            )
        )
        if len(methods) > 1:
            others = ", ".join(_SOURCE_NAMES.get(m, m) for m in methods[1:])
            responses_note += (
                f" Shown: {_SOURCE_NAMES.get(method, method)}; also computed by the fit and "
                f"kept in its time-course table: {others}."
            )

    regressor_table, contrast_table = _results_tables(fit)
    residual_table, acf_before, acf_after = _residual_checks(fitted, sfreq)
    if acf_before:
        store.add(
            "acf",
            acf_figure(acf_before, acf_after, sfreq_hz=sfreq, n_times=times.size),
            "Residual autocorrelation before (solid) and after (dashed) prewhitening; "
            "grey band: approximate white-noise range.",
        )
    return {
        "subject_label": label,
        "source": recording.source or _access.field_of(fit, "recording_source", default=""),
        "facts": facts,
        "channels_table": channels_table,
        "events_table": _events_table(events),
        "quality_facts": quality_facts,
        "motion_spans": motion,
        "motion_total_s": sum(b - a for a, b in motion),
        "weight_threshold": _WEIGHT_THRESHOLD,
        "design_facts": design_facts,
        "design_warnings": [str(w) for w in diag.get("warnings", []) or []],
        "vif_table": vif_table,
        "failures": failures,
        "responses_note": responses_note,
        "response_figures": response_figures,
        "regressor_table": regressor_table,
        "contrast_table": contrast_table,
        "ci_label": "95 %",
        "residual_table": residual_table,
    }


def _flagged_motion_spans(recording) -> list[tuple[float, float]]:
    """Spans the flow stage marked as motion (``provenance["flow"]["masks"]["motion"]``)."""
    flow_prov = (
        recording.provenance.get("flow", {}) if isinstance(recording.provenance, dict) else {}
    )
    masks = flow_prov.get("masks", {}) if isinstance(flow_prov, dict) else {}
    mask = masks.get("motion") if isinstance(masks, dict) else None
    if mask is None:
        return []
    mask = np.asarray(mask, dtype=bool)
    if mask.ndim == 2:
        mask = mask.any(axis=1)
    if mask.shape != recording.times_s.shape:
        return []
    return low_weight_segments(recording.times_s, (~mask).astype(float), 0.5)


def _merge_spans(spans) -> list[tuple[float, float]]:
    """Union of overlapping (start, stop) spans, sorted."""
    merged: list[list[float]] = []
    for start, stop in sorted((float(a), float(b)) for a, b in spans):
        if merged and start <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], stop)
        else:
            merged.append([start, stop])
    return [(a, b) for a, b in merged]
