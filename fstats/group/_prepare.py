"""From subject tables + participants to the per-test units of a group model.

Every subject or row that cannot enter a test is recorded with its reason; nothing
is dropped silently.  Problems that make the whole model meaningless (no matching
IDs, a covariate column that does not exist or does not vary, a group with one
subject) raise InputError.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from fstats.errors import InputError, suggest
from fstats.group.mixed import formula_variables, split_formula
from fstats.group.tables import average_runs, check_participants, check_subject_tables, select_rows

__all__ = ["Unit", "Prepared", "prepare_inputs"]

_SOURCE_TABLES = "subject results"
_SOURCE_PARTICIPANTS = "participants.tsv"


@dataclass(eq=False)
class Unit:
    """One test: a channel × term (× group split) with one value per subject."""

    channel: str
    term: str
    comparison: str
    subjects: np.ndarray
    values: np.ndarray
    ses: np.ndarray
    n_runs: np.ndarray
    in_first: np.ndarray | None = None
    labels: np.ndarray | None = None
    runs: pd.DataFrame | None = None
    unit_label: str = "%"

    def too_few(self, model) -> str:
        """A status text when the test cannot be run, else ""."""
        if self.in_first is None:
            return "" if self.values.size >= 2 else f"too few subjects ({self.values.size})"
        a = np.asarray(self.in_first, dtype=bool)
        for mask, name in ((a, "first"), (~a, "second")):
            if mask.sum() < 2:
                label = self.labels[mask][0] if mask.any() else name
                return f"group {label!r} has {int(mask.sum())} subject(s) here; need 2"
        return ""

    def subject_frame(self, model) -> pd.DataFrame:
        """Per-subject values of this test, for forest plots."""
        return pd.DataFrame(
            {
                "channel": self.channel,
                "term": self.term,
                "participant_id": self.subjects,
                "group": self.labels if self.labels is not None else "",
                "estimate": self.values,
                "se": self.ses,
                "n_runs": self.n_runs,
                "weight": math.nan,
                "units": self.unit_label,
            }
        )


@dataclass(eq=False)
class Prepared:
    """Checked inputs: the units to test and the exclusions met on the way."""

    units: list[Unit]
    exclusions: list[dict]
    unit_label: str
    groups: tuple[str, str] | None
    info: dict = field(default_factory=dict)

    def excluded_for(self, channel: str, term: str) -> list[str]:
        """Participant IDs left out of a channel × term (subject-wide ones included)."""
        ids = [
            e["participant_id"]
            for e in self.exclusions
            if e.get("has_results", True)
            and e.get("channel", "") in ("", channel)
            and e.get("term", "") in ("", term)
        ]
        return sorted(set(ids))


def _label(value) -> str:
    """A group label as text; whole numbers read as floats print without '.0'."""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


class _Log:
    def __init__(self):
        self.items: list[dict] = []

    def add(self, pid, reason, *, channel="", term="", session="", has_results=True):
        self.items.append(
            {
                "participant_id": str(pid),
                "reason": reason,
                "channel": channel,
                "term": term,
                "session": session,
                "has_results": has_results,
            }
        )

    def wide(self) -> set[str]:
        return {e["participant_id"] for e in self.items if not e["channel"] and not e["term"]}


def _needed_columns(model) -> list[str]:
    if model.two_groups:
        return [model.group_column]
    if model.kind == "mixed":
        return [v for v in formula_variables(model.formula or "effect ~ 1") if v != "session"]
    return []


def _check_covariates(model, part, kept, log):
    needed = _needed_columns(model)
    for col in needed:
        if col not in part.columns:
            raise InputError(
                _SOURCE_PARTICIPANTS,
                "columns",
                f"a column {col!r} (used by the group model)",
                [c for c in part.columns],
                hint=suggest(col, [str(c) for c in part.columns]),
            )
    rows = part.set_index("participant_id")
    for pid in kept:
        for col in needed:
            if pd.isna(rows.at[pid, col]):
                log.add(pid, f"missing value for {col!r} in participants.tsv")
    kept = [p for p in kept if p not in log.wide()]
    for col in needed:
        values = rows.loc[kept, col]
        if values.nunique() < 2:
            raise InputError(
                _SOURCE_PARTICIPANTS,
                f"column {col!r}",
                "at least two different values among the included subjects",
                sorted(map(str, values.unique())),
                hint="drop a constant covariate from the formula",
            )
        if values.dtype == object or model.two_groups:
            counts = values.map(_label).value_counts()
            if model.two_groups and model.groups is not None:
                counts = counts.reindex(list(model.groups), fill_value=0)
            small = counts[counts < 2]
            if len(small):
                raise InputError(
                    _SOURCE_PARTICIPANTS,
                    f"column {col!r}",
                    "at least 2 subjects in every group",
                    f"group {small.index[0]!r} with {int(small.iloc[0])} subject(s)",
                    hint="merge or drop that group",
                )
    return kept


def _two_groups(model, part, kept, log):
    labels = part.set_index("participant_id").loc[kept, model.group_column].map(_label)
    found = sorted(labels.unique())
    if model.groups is None:
        if len(found) != 2:
            raise InputError(
                _SOURCE_PARTICIPANTS,
                f"column {model.group_column!r}",
                "exactly two groups (or name the two to compare)",
                found,
            )
        groups = (found[0], found[1])
    else:
        groups = tuple(model.groups)
        for g in groups:
            if g not in found:
                raise InputError(
                    _SOURCE_PARTICIPANTS,
                    f"column {model.group_column!r}",
                    f"group {g!r}",
                    found,
                    hint=suggest(g, found),
                )
    for pid, label in labels.items():
        if label not in groups:
            log.add(pid, f"group {label!r} is not one of the compared groups {list(groups)}")
    return groups


def prepare_inputs(model, subject_tables: pd.DataFrame, participants) -> Prepared:
    """Check inputs and build the units of ``model`` (a GroupModel)."""
    tables = check_subject_tables(subject_tables, source=_SOURCE_TABLES)
    log = _Log()
    subjects = list(dict.fromkeys(tables["subject"]))
    part = None
    if participants is not None:
        part = check_participants(participants, source=_SOURCE_PARTICIPANTS)
    needed = _needed_columns(model)
    if needed and part is None:
        raise InputError(
            _SOURCE_PARTICIPANTS,
            "participants",
            f"a participants table with column(s) {needed} for a {model.kind} model",
            None,
        )
    kept = subjects
    if part is not None:
        known = list(part["participant_id"])
        if not set(known) & set(subjects):
            raise InputError(
                _SOURCE_PARTICIPANTS,
                "column 'participant_id'",
                f"the subject IDs of the results tables (e.g. {subjects[:2]})",
                known[:3],
                hint="IDs must match exactly, including 'sub-'",
            )
        for pid in subjects:
            if pid not in set(known):
                log.add(pid, "no row in participants.tsv")
        for pid in known:
            if pid not in set(subjects):
                log.add(pid, "in participants.tsv but no subject results", has_results=False)
        kept = [p for p in subjects if p not in log.wide()]
        kept = _check_covariates(model, part, kept, log) if needed else kept
    groups = _two_groups(model, part, kept, log) if model.two_groups else None
    kept = [p for p in kept if p not in log.wide()]

    terms = tuple(model.pair) if model.kind in ("paired", "interaction") else model.terms
    rows, terms, channels = select_rows(
        tables,
        terms=terms,
        channels=model.channels,
        include_short=model.include_short,
        source=_SOURCE_TABLES,
    )
    rows = rows[rows["subject"].isin(kept)].copy()
    value_col, se_col = (
        ("estimate_pct", "se_pct") if model.units == "percent" else ("estimate", "se")
    )
    rows["value"], rows["value_se"] = rows[value_col], rows[se_col]
    weighted = model.weighted
    bad = pd.Series("", index=rows.index)
    bad[~np.isfinite(rows["value"])] = f"{value_col} is missing"
    if weighted:
        bad[~(rows["value_se"] > 0)] = f"{se_col} missing or <= 0 (needed for weighting)"
    bad[rows["status"] != "ok"] = "subject fit: " + rows["status"]
    for idx in rows.index[bad != ""]:
        r = rows.loc[idx]
        log.add(r["subject"], bad[idx], channel=r["channel"], term=r["term"], session=r["session"])
    valid = rows[bad == ""]
    present = set(zip(rows["subject"], rows["channel"], rows["term"], strict=True))
    for pid in kept:
        for channel in channels:
            for term in terms:
                if (pid, channel, term) not in present:
                    log.add(
                        pid,
                        f"no row for channel {channel!r}, term {term!r}",
                        channel=channel,
                        term=term,
                    )
    unit_label = "%" if model.units == "percent" else "raw"
    label_of = {}
    if part is not None and model.two_groups:
        label_of = part.set_index("participant_id")[model.group_column].map(_label).to_dict()
    averaged = average_runs(valid, weighted=weighted)
    units: list[Unit] = []
    if model.kind in ("paired", "interaction"):
        units = _paired_units(model, averaged, channels, groups, label_of, log, unit_label)
    else:
        for channel in channels:
            for term in terms:
                sel = averaged[(averaged["channel"] == channel) & (averaged["term"] == term)]
                unit = _unit(
                    channel,
                    term,
                    sel,
                    groups,
                    label_of,
                    unit_label,
                    "mean" if groups is None else f"{groups[0]} - {groups[1]}",
                )
                if model.kind == "mixed":
                    unit.comparison = ""
                    unit.runs = _mixed_frame(model, valid, channel, term, part)
                units.append(unit)
    info = {
        "n_subjects_in_tables": len(subjects),
        "n_subjects_used": len(kept),
        "channels": list(channels),
        "terms": list(terms),
        "groups": list(groups) if groups else None,
        "runs_per_subject_max": int(averaged["n_runs"].max()) if len(averaged) else 0,
    }
    exclusions = log.items
    return Prepared(
        units=units, exclusions=exclusions, unit_label=unit_label, groups=groups, info=info
    )


def _unit(channel, term, sel, groups, label_of, unit_label, comparison) -> Unit:
    subjects = sel["subject"].to_numpy(str)
    labels = in_first = None
    if groups is not None:
        labels = np.array([label_of[s] for s in subjects], dtype=object)
        in_first = labels == groups[0]
    return Unit(
        channel=channel,
        term=term,
        comparison=comparison,
        subjects=subjects,
        values=sel["value"].to_numpy(float),
        ses=sel["value_se"].to_numpy(float),
        n_runs=sel["n_runs"].to_numpy(int),
        in_first=in_first,
        labels=labels,
        unit_label=unit_label,
    )


def _paired_units(model, averaged, channels, groups, label_of, log, unit_label):
    first, second = model.pair
    label = f"{first} - {second}"
    units = []
    for channel in channels:
        sel = averaged[averaged["channel"] == channel]
        a = sel[sel["term"] == first].set_index("subject")
        b = sel[sel["term"] == second].set_index("subject")
        for pid in sorted(set(a.index) ^ set(b.index)):
            missing = second if pid in a.index else first
            log.add(
                pid,
                f"no valid estimate of {missing!r} for the pair {label!r}",
                channel=channel,
                term=label,
            )
        both = [s for s in a.index if s in b.index]
        diff = pd.DataFrame(
            {
                "subject": both,
                "value": a.loc[both, "value"].to_numpy() - b.loc[both, "value"].to_numpy(),
                "value_se": np.sqrt(
                    a.loc[both, "value_se"].to_numpy() ** 2
                    + b.loc[both, "value_se"].to_numpy() ** 2
                ),
                "n_runs": np.minimum(
                    a.loc[both, "n_runs"].to_numpy(), b.loc[both, "n_runs"].to_numpy()
                ),
            }
        )
        comparison = "mean" if groups is None else f"{groups[0]} - {groups[1]}"
        units.append(_unit(channel, label, diff, groups, label_of, unit_label, comparison))
    return units


def _mixed_frame(model, valid, channel, term, part) -> pd.DataFrame:
    lhs, _ = split_formula(model.formula or "effect ~ 1")
    sel = valid[(valid["channel"] == channel) & (valid["term"] == term)]
    frame = pd.DataFrame(
        {
            "participant_id": sel["subject"].to_numpy(str),
            "session": sel["session"].to_numpy(str),
            lhs: sel["value"].to_numpy(float),
        }
    )
    needed = [v for v in formula_variables(model.formula or "effect ~ 1") if v != "session"]
    if needed:
        covariates = part.set_index("participant_id")[needed]
        frame = frame.join(covariates, on="participant_id")
    return frame.reset_index(drop=True)
