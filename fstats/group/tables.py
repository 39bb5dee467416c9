"""Checking and shaping the group stage's inputs.

The group stage reads the concatenated subject results tables (CONTRACTS §5: one
row per subject × session × channel × term) and the participants table.  This
module checks their columns, picks the estimate scale (% change or raw cm²/s),
records why a subject or a row is left out, and averages runs within subjects.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fstats.errors import InputError, suggest
from fstats.fit.results import RESULT_COLUMNS

__all__ = [
    "SUBJECT_COLUMNS",
    "UNITS",
    "check_subject_tables",
    "check_participants",
    "default_terms",
    "select_rows",
    "average_runs",
]

#: Columns of a subject results table, in order (CONTRACTS §5): the fit stage's own list.
SUBJECT_COLUMNS: tuple[str, ...] = RESULT_COLUMNS

#: Scales the group stage can pool: percent change from baseline, or the raw flow unit.
UNITS: tuple[str, ...] = ("percent", "raw")

_NEEDED = (
    "subject",
    "session",
    "channel",
    "is_short",
    "term",
    "term_kind",
    "condition",
    "estimate",
    "se",
    "estimate_pct",
    "se_pct",
    "status",
)


def _truthy(value) -> bool:
    if isinstance(value, str):
        return value.strip().lower() in {"true", "1", "yes", "short"}
    return bool(value) if pd.notna(value) else False


def check_subject_tables(tables: pd.DataFrame, *, source: str = "subject results") -> pd.DataFrame:
    """A checked copy of concatenated subject results tables.

    Parameters
    ----------
    tables : pandas.DataFrame
        Rows of one or more subject results tables (CONTRACTS §5 columns).
    source : str, default="subject results"
        Name used in error messages (a file or folder).

    Returns
    -------
    pandas.DataFrame
        Copy with ``subject``/``channel``/``term`` as str, ``session`` as str ("" when
        missing), ``is_short`` as bool, numeric columns as float, ``status`` as str.

    Raises
    ------
    InputError
        Missing columns, no rows, or a subject/session/channel/term appearing twice.
    """
    if not isinstance(tables, pd.DataFrame) or tables.empty:
        raise InputError(source, "rows", "at least one subject results row", "an empty table")
    missing = [c for c in _NEEDED if c not in tables.columns]
    if missing:
        hint = suggest(missing[0], [str(c) for c in tables.columns])
        raise InputError(
            source,
            "columns",
            f"the subject results columns {list(_NEEDED)}",
            f"no column(s) {missing}",
            hint=hint,
        )
    out = tables.copy()
    for col in ("subject", "channel", "term", "term_kind", "condition"):
        out[col] = out[col].fillna("").astype(str)
    out["session"] = out["session"].map(lambda s: "" if pd.isna(s) else str(s))
    out["status"] = out["status"].map(lambda s: "missing status" if pd.isna(s) else str(s))
    out["is_short"] = out["is_short"].map(_truthy)
    for col in ("estimate", "se", "estimate_pct", "se_pct"):
        out[col] = pd.to_numeric(out[col], errors="coerce").astype(float)
    key = ["subject", "session", "channel", "term", "term_kind"]
    dup = out.duplicated(key, keep=False)
    if dup.any():
        first = out.loc[dup, key].iloc[0].tolist()
        raise InputError(
            source,
            "subject/session/channel/term",
            "each combination once",
            f"{first} more than once",
            hint="give each run its own session label or drop the duplicate table",
        )
    return out.reset_index(drop=True)


def check_participants(participants: pd.DataFrame, *, source: str = "participants.tsv"):
    """A checked copy of a participants table (``participant_id`` plus covariates).

    'n/a' and empty strings become missing values; numeric-looking columns become float.

    Raises
    ------
    InputError
        No ``participant_id`` column, or a participant listed twice.
    """
    if "participant_id" not in participants.columns:
        hint = suggest("participant_id", [str(c) for c in participants.columns])
        raise InputError(
            source,
            "columns",
            "a 'participant_id' column",
            list(map(str, participants.columns)),
            hint=hint,
        )
    out = participants.copy().replace({"n/a": np.nan, "": np.nan})
    out["participant_id"] = out["participant_id"].astype(str)
    dup = out["participant_id"].duplicated()
    if dup.any():
        raise InputError(
            source,
            "column 'participant_id'",
            "each participant once",
            out.loc[dup, "participant_id"].iloc[0],
        )
    for col in out.columns:
        if col != "participant_id" and out[col].dtype == object:
            converted = pd.to_numeric(out[col], errors="coerce")
            if converted.notna().sum() == out[col].notna().sum():
                out[col] = converted
    return out.reset_index(drop=True)


def default_terms(tables: pd.DataFrame) -> tuple[str, ...]:
    """Terms pooled when none are named: task regressors (with a condition) and t contrasts.

    Nuisance regressors (condition "") and F rows are left out.
    """
    pick = ((tables["term_kind"] == "regressor") & (tables["condition"] != "")) | (
        tables["term_kind"] == "contrast"
    )
    return tuple(dict.fromkeys(tables.loc[pick, "term"]))


def select_rows(
    tables: pd.DataFrame,
    *,
    terms: tuple[str, ...] | None,
    channels: tuple[str, ...] | None,
    include_short: bool,
    source: str = "subject results",
) -> tuple[pd.DataFrame, tuple[str, ...], tuple[str, ...]]:
    """Rows for the chosen terms and channels, and the chosen names in table order.

    Raises
    ------
    InputError
        A named term or channel is absent from every table, or nothing is left.
    """
    known_terms = tuple(dict.fromkeys(tables["term"]))
    known_channels = tuple(dict.fromkeys(tables["channel"]))
    if terms is None:
        terms = default_terms(tables)
    for term in terms:
        if term not in known_terms:
            raise InputError(
                source,
                "column 'term'",
                f"term {term!r} in some table",
                "no such term",
                hint=suggest(term, known_terms),
            )
    if channels is None:
        short = set(tables.loc[tables["is_short"], "channel"])
        channels = tuple(c for c in known_channels if include_short or c not in short)
    for channel in channels:
        if channel not in known_channels:
            raise InputError(
                source,
                "column 'channel'",
                f"channel {channel!r} in some table",
                "no such channel",
                hint=suggest(channel, known_channels),
            )
    if not terms or not channels:
        raise InputError(
            source,
            "rows",
            "at least one task term on one channel",
            f"terms {list(terms)}, channels {list(channels)}",
            hint="name terms explicitly or include short channels",
        )
    rows = tables[tables["term"].isin(terms) & tables["channel"].isin(channels)]
    f_only = set(rows.loc[rows["term_kind"] == "F", "term"]) - set(
        rows.loc[rows["term_kind"] != "F", "term"]
    )
    if f_only:
        raise InputError(
            source,
            "column 'term'",
            "a regressor or t contrast (F tests are not pooled across subjects)",
            sorted(f_only)[0],
        )
    rows = rows[rows["term_kind"] != "F"]
    # A name used for a regressor and a contrast (e.g. contrast 'subtract' = regressor
    # 'subtract'): one row per subject/session/channel/term, the contrast row preferred.
    preference = rows["term_kind"].map({"contrast": 0, "regressor": 1}).fillna(2)
    rows = rows.assign(_order=preference).sort_values("_order", kind="mergesort")
    rows = rows.drop_duplicates(["subject", "session", "channel", "term"]).drop(columns="_order")
    return rows.sort_index().reset_index(drop=True), tuple(terms), tuple(channels)


def average_runs(rows: pd.DataFrame, *, weighted: bool) -> pd.DataFrame:
    """One estimate per subject × channel × term, averaging runs/sessions.

    Parameters
    ----------
    rows : pandas.DataFrame
        Valid rows with columns ``subject, channel, term, value, value_se`` (value in the
        chosen unit, se > 0 for weighted models).
    weighted : bool
        False: plain mean, ``se = sqrt(Σ se²) / n_runs`` (NaN if any run lacks an se).
        True: inverse-variance (fixed-effect) mean, ``se = 1 / sqrt(Σ 1/se²)``.

    Returns
    -------
    pandas.DataFrame
        Columns ``subject, channel, term, value, value_se, n_runs``.
    """

    keys = ["subject", "channel", "term"]
    if rows.empty:
        return pd.DataFrame(columns=keys + ["value", "value_se", "n_runs"])
    y = rows["value"].to_numpy(float)
    s2 = rows["value_se"].to_numpy(float) ** 2
    parts = {"y": y, "s2": s2, "one": np.ones(y.size)}
    if weighted:
        parts.update(w=1.0 / s2, wy=y / s2)
    parts["bad_se"] = (~np.isfinite(s2)).astype(float)
    frame = pd.DataFrame(parts, index=rows.index)
    frame[keys] = rows[keys]
    sums = frame.groupby(keys, sort=False).sum().reset_index()  # NaN se: flagged by bad_se
    n = sums["one"].to_numpy()
    if weighted:
        value = sums["wy"].to_numpy() / sums["w"].to_numpy()
        se = 1.0 / np.sqrt(sums["w"].to_numpy())
    else:
        value = sums["y"].to_numpy() / n
        se = np.sqrt(sums["s2"].to_numpy()) / n
    se = np.where(sums["bad_se"].to_numpy() > 0, np.nan, se)  # a missing se stays missing
    out = sums[keys].copy()
    out["value"], out["value_se"], out["n_runs"] = value, se, n.astype(int)
    return out
