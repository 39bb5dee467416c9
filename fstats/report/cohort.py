"""The cohort page: participants, exclusions, forest plots, group effects and subject links.

:func:`cohort_report` takes a group result (CONTRACTS.md §7), links to the subject
pages, the subjects whose analysis failed, and optionally participants.tsv and
group-averaged time courses (:func:`fstats.report.courses.average_time_courses`).
"""

from __future__ import annotations

import logging
import shutil
import tempfile
from pathlib import Path
from urllib.parse import urlsplit

import pandas as pd

from fstats.report import _access
from fstats.report.figures_cohort import (
    MAX_FOREST_PANELS,
    courses_figure,
    effects_figure,
    forest_figure,
)
from fstats.report.render import (
    PNG_DPI,
    FigureStore,
    finish_page,
    table_rows,
)

__all__ = ["cohort_report", "COHORT_SECTIONS", "safe_href"]

logger = logging.getLogger(__name__)

#: Page sections (anchor, heading), in page order; the names are ours.
COHORT_SECTIONS: tuple[tuple[str, str], ...] = (
    ("who-took-part", "Who took part"),
    ("subject-by-subject", "Subject by subject"),
    ("cohort-effects", "Cohort effects"),
    ("average-responses", "Average responses"),
    ("between-groups", "Between groups and covariates"),
    ("subject-pages", "Subject pages"),
    ("provenance-footer", "How this page was made"),
)

_EFFECT_COLUMNS = [
    ("channel", "channel", "text"),
    ("term", "term", "text"),
    ("comparison", "comparison", "text"),
    ("estimate", "estimate", "num"),
    ("se", "SE", "num"),
    ("stat", "t / z", "num"),
    ("df", "df", "num"),
    ("p", "p", "p"),
    ("p_adjusted", "p (adjusted)", "p"),
    ("ci_low", "CI low", "num"),
    ("ci_high", "CI high", "num"),
    ("effect_size", "effect size", "num"),
    ("n_subjects", "subjects", "int"),
]

#: Comparison labels of a plain cohort mean (everything else is a group comparison
#: or a covariate coefficient).
_MEAN_LABELS = {"", "mean", "intercept", "Intercept", "(Intercept)"}


def safe_href(href: str) -> str | None:
    """A link target fit for the page: relative paths and http(s) URLs only, else None."""
    text = str(href).strip()
    scheme = urlsplit(text).scheme.lower()
    return text if scheme in ("", "http", "https") and text else None


def _split_effects(table: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    if table.empty:
        return table, table
    comparison = table.get("comparison", pd.Series("", index=table.index)).fillna("").astype(str)
    model = table.get("model", pd.Series("", index=table.index)).fillna("").astype(str)
    is_mean = comparison.isin(_MEAN_LABELS) | (model == "one-sample")
    return table[is_mean], table[~is_mean]


def _unit_label(table: pd.DataFrame) -> str:
    units = set(table.get("units", pd.Series(dtype=str)).dropna().astype(str))
    if units & {"raw", "cm2/s", "cm²/s"}:
        return "estimate (cm²/s per unit regressor)"
    return "flow change (%)"


def cohort_report(
    group_result,
    subject_pages: dict[str, str],
    out_path,
    *,
    failures: list[dict] | None = None,
    participants: pd.DataFrame | None = None,
    provenance: dict | None = None,
    group_time_courses: pd.DataFrame | None = None,
    title: str = "cohort",
    dpi: int = PNG_DPI,
) -> Path:
    """Write the cohort HTML page.

    Parameters
    ----------
    group_result : GroupResult or sequence of GroupResult
        ``table()``, ``subject_estimates``, ``exclusions``, ``influence``, ``settings``.
        With several results (e.g. a one-sample model, a two-group comparison and a
        mixed model with covariates) their tables are shown together; the forest plot
        uses the first result's subject estimates.
    subject_pages : dict of participant id to str
        Relative link from the cohort page to each subject page (links with other
        schemes than http(s) are dropped).
    out_path : str or Path
        HTML file to write; figures go to ``<stem>_figures/`` beside it (PNG and SVG).
    failures : list of dict, optional
        Subjects whose analysis failed: ``{"participant_id", "error"}`` (one line each).
    participants : DataFrame, optional
        participants.tsv as read by ``fstats.inputs.read_participants``.
    provenance : dict, optional
        ``fstats_version``, ``created``, ``options``/``settings``, ``packages``, ``inputs``.
    group_time_courses : DataFrame, optional
        ``group, condition, channel, time_s, mean, ci_low, ci_high`` (see
        :func:`fstats.report.courses.average_time_courses`).
    title : str, default="cohort"
        Page heading (study name).
    dpi : int

    Returns
    -------
    Path
        The HTML file, written atomically.
    """

    out_path = Path(out_path)
    out_path.parent.mkdir(parents=True, exist_ok=True)
    stem = out_path.stem
    tmp_dir = Path(tempfile.mkdtemp(prefix=f".{stem}_figures.", dir=out_path.parent))
    store = FigureStore(tmp_dir, f"{stem}_figures", dpi=dpi)
    try:
        results = list(group_result) if isinstance(group_result, list | tuple) else [group_result]
        group_result = results[0]
        tables = [r.table() for r in results if hasattr(r, "table")]
        table = pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()
        effects, comparisons = _split_effects(table)
        unit = _unit_label(table)
        estimates = _access.field_of(group_result, "subject_estimates", default=pd.DataFrame())
        if isinstance(estimates, pd.DataFrame) and not estimates.empty:
            panels = list(
                dict.fromkeys(
                    zip(
                        estimates["channel"].astype(str), estimates["term"].astype(str), strict=True
                    )
                )
            )
            pooled = effects if {"ci_low", "ci_high"} <= set(effects.columns) else None
            shown = (
                ""
                if len(panels) <= MAX_FOREST_PANELS
                else (
                    f" First {MAX_FOREST_PANELS} of {len(panels)} channel × term pairs; "
                    "all are in the table below the figure."
                )
            )
            store.add(
                "forest",
                forest_figure(estimates, panels, pooled=pooled, unit_label=unit),
                "Per-subject estimates with 95 % intervals (estimate ± 1.96 SE); "
                "diamond: group estimate and its confidence interval." + shown,
            )
        if not table.empty and {"estimate", "ci_low", "ci_high"} <= set(table.columns):
            store.add(
                "effects",
                effects_figure(table, unit_label=unit),
                "Group estimates with confidence intervals, per channel, term and comparison.",
            )
        if isinstance(group_time_courses, pd.DataFrame) and not group_time_courses.empty:
            store.add(
                "courses",
                courses_figure(group_time_courses),
                "Group-averaged responses per condition and channel; band: confidence "
                "interval across subjects.",
            )
        context = _cohort_context(
            group_result, table, effects, comparisons, subject_pages, failures or [], participants
        )
        prov = dict(provenance or {})
        if "settings" not in prov and _access.field_of(group_result, "settings"):
            prov["settings"] = _access.field_of(group_result, "settings")
        context.update(title=title)
        finish_page(
            "cohort.html.j2",
            out_path,
            context,
            store=store,
            tmp_dir=tmp_dir,
            sections=COHORT_SECTIONS,
            provenance=prov,
        )
    finally:
        shutil.rmtree(tmp_dir, ignore_errors=True)
    logger.info("wrote cohort page %s (%d figures)", out_path, len(store.figures))
    return out_path


def _cohort_context(
    group_result, table, effects, comparisons, subject_pages, failures, participants
) -> dict:
    exclusions = list(_access.field_of(group_result, "exclusions", default=[]) or [])
    influence = _access.field_of(group_result, "influence")
    model = _access.field_of(group_result, "model")
    settings = dict(_access.field_of(group_result, "settings", default={}) or {})
    correction = settings.get("correction") or _access.field_of(model, "correction", default="")
    describe = getattr(model, "describe", None)
    subtitle = describe() if callable(describe) else str(settings.get("kind", ""))

    n_used = None
    estimates = _access.field_of(group_result, "subject_estimates")
    if isinstance(estimates, pd.DataFrame) and "participant_id" in estimates.columns:
        n_used = estimates["participant_id"].nunique()
    facts = [
        ("participants listed", str(len(participants)) if participants is not None else "–"),
        ("subjects in the model", str(n_used) if n_used is not None else "–"),
        ("exclusions", str(len(exclusions))),
        ("failed analyses", str(len(failures))),
        ("subject pages", str(len(subject_pages))),
    ]
    if participants is not None and "group" in participants.columns:
        for group, count in participants["group"].astype(str).value_counts(sort=False).items():
            facts.append((f"group {group}", str(count)))

    participants_table = {"header": [], "rows": []}
    if participants is not None and not participants.empty:
        cols = [(c, c, "text") for c in participants.columns]
        participants_table = table_rows(participants, cols)
    exclusion_frame = pd.DataFrame(exclusions)
    exclusions_table = (
        table_rows(
            exclusion_frame,
            [
                ("participant_id", "participant", "text"),
                ("channel", "channel", "text"),
                ("term", "term", "text"),
                ("session", "session", "text"),
                ("reason", "reason", "text"),
            ],
        )
        if exclusions
        else {"header": [], "rows": []}
    )
    failure_frame = pd.DataFrame(
        [
            {
                "participant_id": f.get("participant_id", ""),
                "error": " ".join(str(f.get("error", "")).split()),
            }
            for f in failures
        ]
    )
    failures_table = (
        table_rows(
            failure_frame,
            [
                ("participant_id", "participant", "text"),
                ("error", "error", "text"),
            ],
        )
        if failures
        else {"header": [], "rows": []}
    )

    influence_table = None
    if isinstance(influence, pd.DataFrame) and not influence.empty:
        cols = [
            (c, c, "num" if pd.api.types.is_float_dtype(influence[c]) else "text")
            for c in influence.columns
        ][:10]
        flagged = influence
        flag = next((c for c in ("flagged", "influential") if c in influence.columns), None)
        if flag is not None:
            flagged = influence[influence[flag].fillna(False).astype(bool)]
        influence_table = table_rows(flagged, cols) if not flagged.empty else None

    links = []
    for pid, href in sorted(subject_pages.items()):
        target = safe_href(href)
        if target is not None:
            links.append((pid, target))
    return {
        "subtitle": subtitle,
        "facts": facts,
        "participants_table": participants_table,
        "exclusions_table": exclusions_table,
        "failures_table": failures_table,
        "correction": correction or "as set in the group model",
        "effects_table": table_rows(effects, _EFFECT_COLUMNS),
        "comparisons_table": table_rows(comparisons, _EFFECT_COLUMNS),
        "influence_table": influence_table,
        "estimates_table": table_rows(
            estimates,
            [
                ("channel", "channel", "text"),
                ("term", "term", "text"),
                ("participant_id", "participant", "text"),
                ("group", "group", "text"),
                ("estimate", "estimate", "num"),
                ("se", "SE", "num"),
                ("weight", "weight", "num"),
                ("n_runs", "runs", "int"),
            ],
        )
        if isinstance(estimates, pd.DataFrame) and not estimates.empty
        else None,
        "subject_links": links,
    }
