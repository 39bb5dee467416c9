"""The cohort page with the real group stage: parts, numbers, links, failures, escaping."""

import re

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from fstats.group import GroupModel
from fstats.report import (
    CAUTION,
    COHORT_SECTIONS,
    average_time_courses,
    cohort_report,
    subject_time_courses,
)
from fstats.report.cohort import safe_href

HOSTILE_GROUP = "<b>older</b>"


@pytest.fixture(scope="module")
def cohort(case_factory):
    tables, courses = [], []
    ids = [f"sub-{i:02d}" for i in range(1, 7)]
    for i, pid in enumerate(ids):
        recording, _, fit = case_factory(duration_s=120.0, seed=10 + i)
        table = fit.table()
        table["subject"] = pid
        tables.append(table)
        courses.append(subject_time_courses(fit, recording, participant_id=pid))
    participants = pd.DataFrame(
        {
            "participant_id": ids,
            "group": ["younger", HOSTILE_GROUP] * 3,
            "age": [24, 71, 29, 66, 31, 69],
        }
    )
    return pd.concat(tables, ignore_index=True), pd.concat(courses), participants


@pytest.fixture(scope="module")
def page(cohort, tmp_path_factory):
    tables, courses, participants = cohort
    one = GroupModel().fit(tables, participants)
    two = GroupModel(kind="two-sample", groups=("younger", HOSTILE_GROUP)).fit(tables, participants)
    out = tmp_path_factory.mktemp("cohort") / "index.html"
    links = {
        pid: f"subjects/{pid}/{pid}_task-subtract.html" for pid in participants["participant_id"]
    }
    links["sub-99"] = "javascript:alert(1)"
    path = cohort_report(
        [one, two],
        links,
        out,
        failures=[{"participant_id": "sub-07", "error": "flow table missing\n(second line)"}],
        participants=participants,
        provenance={"inputs": {"participants.tsv": "cd" * 32}},
        group_time_courses=average_time_courses(courses, participants),
        title="subtract demo",
    )
    return path, one, two


def test_cohort_page_has_every_section_and_figure(page):
    """Source: issue 6 (cohort report contents) - every named part is on the page."""
    path, _, _ = page
    text = path.read_text(encoding="utf-8")
    for anchor, heading in COHORT_SECTIONS:
        assert f'id="{anchor}"' in text
        assert heading in text
    for fig in ("forest", "effects", "courses"):
        assert f'id="fig-{fig}"' in text
        assert (path.parent / "index_figures" / f"{fig}.svg").exists()
    assert CAUTION in text
    assert "cd" * 32 in text


def test_group_numbers_and_comparison_rows(page):
    """Source: the group stage's own table (CONTRACTS §7) - one-sample rows under cohort
    effects with adjusted p, two-group rows under comparisons."""
    path, one, two = page
    text = path.read_text(encoding="utf-8")
    effects = text[text.index('id="effects-table"') : text.index('id="average-responses"')]
    row = one.table().iloc[0]
    assert f"{row['estimate']:.3g}" in effects
    comparisons = text[text.index('id="between-groups"') : text.index('id="subject-pages"')]
    assert "younger - &lt;b&gt;older&lt;/b&gt;" in comparisons
    diff = two.table().iloc[0]
    assert f"{diff['estimate']:.3g}" in comparisons


def test_links_failures_and_escaping(page):
    """Source: OWASP XSS prevention - names are escaped and javascript: links dropped;
    failures keep a one-line error."""
    path, _, _ = page
    text = path.read_text(encoding="utf-8")
    hrefs = re.findall(r'href="([^"]+)"', text)
    assert "subjects/sub-01/sub-01_task-subtract.html" in hrefs
    assert not any(h.startswith("javascript") for h in hrefs)
    assert "<b>older</b>" not in text and "&lt;b&gt;older&lt;/b&gt;" in text
    assert "flow table missing (second line)" in text


def test_safe_href():
    """Source: WHATWG URL scheme rules - only relative and http(s) targets are kept."""
    assert safe_href("subjects/a.html") == "subjects/a.html"
    assert safe_href("https://example.org/x") == "https://example.org/x"
    assert safe_href(" JavaScript:alert(1)") is None
    assert safe_href("data:text/html,hi") is None


def test_average_time_courses_band_matches_scipy():
    """Source: scipy.stats.t.interval - per time point, the band across subjects is the t
    interval of the mean; groups come from participants.tsv."""
    rng = np.random.default_rng(5)
    values = rng.normal(10, 2, size=(5, 4))
    frame = pd.DataFrame(
        [
            {
                "participant_id": f"s{i}",
                "condition": "c",
                "channel": "a",
                "is_short": False,
                "method": "epoch",
                "time_s": float(k),
                "value": values[i, k],
            }
            for i in range(5)
            for k in range(4)
        ]
    )
    parts = pd.DataFrame({"participant_id": [f"s{i}" for i in range(5)], "group": ["g"] * 5})
    out = average_time_courses(frame, parts)
    assert list(out["group"].unique()) == ["g"]
    assert_allclose(out["mean"], values.mean(axis=0))
    lo, hi = stats.t.interval(
        0.95, 4, loc=values.mean(axis=0), scale=values.std(axis=0, ddof=1) / np.sqrt(5)
    )
    assert_allclose(out["ci_low"], lo)
    assert_allclose(out["ci_high"], hi)
    assert (out["n_subjects"] == 5).all()
