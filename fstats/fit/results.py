"""The tidy subject results table and its files (TSV + JSON sidecar, written atomically)."""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = [
    "RESULT_COLUMNS",
    "results_table",
    "write_subject_results",
    "read_subject_results",
    "file_sha256",
]

#: Columns of the subject results table, in order (CONTRACTS §5).
RESULT_COLUMNS: tuple[str, ...] = (
    "subject",
    "session",
    "channel",
    "separation_cm",
    "is_short",
    "term",
    "term_kind",
    "condition",
    "estimate",
    "se",
    "estimate_pct",
    "se_pct",
    "stat",
    "df",
    "p",
    "ci_low",
    "ci_high",
    "ci_low_pct",
    "ci_high_pct",
    "ar_order",
    "method",
    "status",
)

_NUMERIC = (
    "estimate",
    "se",
    "estimate_pct",
    "se_pct",
    "stat",
    "df",
    "p",
    "ci_low",
    "ci_high",
    "ci_low_pct",
    "ci_high_pct",
)


def _condition_of(design) -> dict[str, str]:
    owner = {}
    for condition, cols in design.conditions.items():
        for col in cols:
            owner[col] = condition
    return owner


def _row(fit, channel, term, kind, condition, test=None, *, ar_order=np.nan, status="ok"):
    row = {
        "subject": fit.subject,
        "session": fit.session,
        "channel": channel.channel,
        "separation_cm": channel.separation_cm,
        "is_short": channel.is_short,
        "term": term,
        "term_kind": kind,
        "condition": condition,
        "ar_order": ar_order,
        "method": fit.model.method,
        "status": status,
    }
    for name in _NUMERIC:
        row[name] = np.nan
    if test is not None:
        row.update(
            estimate=test.estimate,
            se=test.se,
            stat=test.stat,
            df=test.df,
            p=test.p,
            ci_low=test.ci_low,
            ci_high=test.ci_high,
        )
        base = getattr(channel, "baseline_flow", np.nan)
        if np.isfinite(base) and base > 0 and kind != "F":
            for raw, pct in (
                ("estimate", "estimate_pct"),
                ("se", "se_pct"),
                ("ci_low", "ci_low_pct"),
                ("ci_high", "ci_high_pct"),
            ):
                row[pct] = 100.0 * row[raw] / base
    return row


def results_table(fit) -> pd.DataFrame:
    """Tidy results of a :class:`~fstats.fit.subject_fit.SubjectFit`, one row per channel × term.

    Rows: every fitted regressor (task columns carry their condition, nuisance columns
    the condition ``""``), then every design contrast (``term_kind`` ``"contrast"``
    for t, ``"F"`` for F).  A failed channel gets a row per task regressor and
    contrast with NaN numbers and the reason in ``status``.  Percent columns are
    ``100 × value / baseline flow`` (see :class:`~fstats.fit.subject_fit.ChannelFit`).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`RESULT_COLUMNS`.
    """
    design = fit.design
    owner = _condition_of(design)
    rows = []
    for channel in fit.channel_fits.values():
        if not hasattr(channel, "estimate"):
            for name, kind in zip(design.names, design.kinds, strict=False):
                if kind == "task":
                    rows.append(
                        _row(
                            fit,
                            channel,
                            name,
                            "regressor",
                            owner.get(name, ""),
                            status=channel.reason,
                        )
                    )
            for contrast in design.contrasts:
                kind = "F" if contrast.kind == "F" else "contrast"
                rows.append(_row(fit, channel, contrast.name, kind, "", status=channel.reason))
            continue
        k = len(channel.names)
        eye = np.eye(k)
        order = channel.ar_order
        for j, name in enumerate(channel.names):
            test = channel.test(eye[j], alpha=fit.model.alpha)
            rows.append(
                _row(fit, channel, name, "regressor", owner.get(name, ""), test, ar_order=order)
            )
        index = [design.names.index(n) for n in channel.names]
        for contrast in design.contrasts:
            weights = np.atleast_2d(np.asarray(contrast.weights, dtype=float))
            kind = "F" if contrast.kind == "F" else "contrast"
            dropped = np.delete(weights, index, axis=1)
            if np.any(dropped != 0):
                rows.append(
                    _row(
                        fit,
                        channel,
                        contrast.name,
                        kind,
                        "",
                        ar_order=order,
                        status="contrast uses columns not fitted on this channel",
                    )
                )
                continue
            w = weights[:, index]
            test = channel.test(
                w if kind == "F" else w[0], "F" if kind == "F" else "t", alpha=fit.model.alpha
            )
            rows.append(_row(fit, channel, contrast.name, kind, "", test, ar_order=order))
    table = pd.DataFrame(rows, columns=list(RESULT_COLUMNS))
    table["ar_order"] = table["ar_order"].astype("Int64")
    return table


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _jsonable(value):
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    return str(value)


def _design_summary(design) -> dict:
    return {
        "names": list(design.names),
        "kinds": list(design.kinds),
        "conditions": {k: list(v) for k, v in design.conditions.items()},
        "contrasts": [
            {"name": c.name, "kind": c.kind, "weights": np.asarray(c.weights).tolist()}
            for c in design.contrasts
        ],
        "info": {k: v for k, v in design.info.items() if k != "events"},
    }


def _packages() -> dict:
    out = {}
    for name in ("fstats", "numpy", "scipy", "statsmodels", "pandas"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def _channel_summary(fit) -> dict:
    out = {}
    for name, channel in fit.channel_fits.items():
        if not hasattr(channel, "estimate"):
            out[name] = {"status": channel.reason}
            continue
        d = channel.diagnostics
        out[name] = {
            "status": "ok",
            "ar_order": channel.ar_order,
            "baseline_flow": channel.baseline_flow,
            **{
                k: d[k]
                for k in (
                    "r2",
                    "durbin_watson_before",
                    "durbin_watson",
                    "ljung_box_p",
                    "short_share",
                    "converged",
                    "n_iter",
                    "n_used",
                    "downweighted_fraction",
                )
            },
        }
    return out


def _atomic_write(path: Path, text: str) -> None:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_subject_results(
    fit, out_dir: str | os.PathLike, stem: str, *, provenance: dict | None = None
) -> tuple[Path, Path]:
    """Write ``<stem>_glm.tsv`` (tidy table), ``<stem>_glm.json`` and ``<stem>_timecourses.tsv``.

    Parameters
    ----------
    fit : SubjectFit
    out_dir : path
        Created if missing.
    stem : str
        File name stem (the recording's stem).
    provenance : dict, optional
        ``"inputs"``: list of input paths (hashed here) or ``{path: sha256}``;
        ``"design"``: the design as declared (YAML content); other keys are kept
        under ``"provenance"``.

    Returns
    -------
    (tsv_path, json_path) : tuple of Path

    Notes
    -----
    Each file is written under a temporary name in ``out_dir`` and renamed, so a
    failure leaves no half-written file.  Missing values are written as ``n/a``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    provenance = dict(provenance or {})
    inputs = provenance.pop("inputs", None) or (
        [fit.recording_source] if fit.recording_source else []
    )
    if isinstance(inputs, dict):
        hashes = dict(inputs)
    else:
        hashes = {str(p): (file_sha256(p) if Path(p).is_file() else None) for p in inputs}
    design = provenance.pop("design", None)
    tsv = out / f"{stem}_glm.tsv"
    sidecar = out / f"{stem}_glm.json"
    courses = out / f"{stem}_timecourses.tsv"
    meta = {
        "fstats_version": _packages()["fstats"],
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "design": _jsonable(design if design is not None else _design_summary(fit.design)),
        "design_matrix": _jsonable(_design_summary(fit.design)),
        "options": _jsonable(fit.model.options()),
        "packages": _packages(),
        "inputs": hashes,
        "subject": fit.subject,
        "session": fit.session,
        "flow_unit": fit.flow_unit,
        "channels": _jsonable(_channel_summary(fit)),
        "files": {"table": tsv.name, "timecourses": courses.name},
        "provenance": _jsonable(provenance),
    }
    table = fit.table()
    _atomic_write(courses, fit.block_averages.to_csv(sep="\t", index=False, na_rep="n/a"))
    _atomic_write(tsv, table.to_csv(sep="\t", index=False, na_rep="n/a"))
    _atomic_write(sidecar, json.dumps(meta, indent=2, allow_nan=False) + "\n")
    return tsv, sidecar


def read_subject_results(tsv_path: str | os.PathLike) -> pd.DataFrame:
    """Read a subject results table written by :func:`write_subject_results`.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`RESULT_COLUMNS`; ``n/a`` → NaN (``session`` → None),
        ``condition`` keeps ``""``.
    """
    from fstats.errors import InputError

    path = Path(tsv_path)
    table = pd.read_csv(
        path,
        sep="\t",
        na_values=["n/a"],
        keep_default_na=False,
        dtype={
            "subject": str,
            "session": object,
            "channel": str,
            "term": str,
            "term_kind": str,
            "condition": str,
            "method": str,
            "status": str,
        },
    )
    missing = [c for c in RESULT_COLUMNS if c not in table.columns]
    if missing:
        raise InputError(
            path, "header", f"columns {', '.join(RESULT_COLUMNS)}", ", ".join(missing) + " missing"
        )
    table = table[list(RESULT_COLUMNS)]
    table["session"] = table["session"].astype(object).where(table["session"].notna(), None)
    table["is_short"] = (
        table["is_short"].astype(str).str.lower().map({"true": True, "false": False})
    )
    table["ar_order"] = table["ar_order"].astype("Int64")
    table["condition"] = table["condition"].fillna("")
    return table
