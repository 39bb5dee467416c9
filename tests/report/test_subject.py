"""The subject page: sections, figures, escaping, provenance, caution, atomic output."""

import html.parser
import re

import pytest

from fstats.report import CAUTION, SUBJECT_SECTIONS, subject_report

XSS = "<script>alert(1)</script>"  # also in conftest


class _Collector(html.parser.HTMLParser):
    """Tags, ids and img sources of a page, from the standard-library HTML parser."""

    def __init__(self):
        super().__init__()
        self.tags, self.ids, self.images, self.links = [], set(), [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append(tag)
        if "id" in attrs:
            self.ids.add(attrs["id"])
        if tag == "img":
            self.images.append(attrs.get("src", ""))
        if tag == "a":
            self.links.append(attrs.get("href", ""))


def _parse(text):
    collector = _Collector()
    collector.feed(text)
    return collector


@pytest.fixture(scope="module")
def page(subject_page):
    return subject_page


def test_page_has_every_section_and_figure(page):
    """Source: issue 6 (report contents) - every named part is on the page."""
    text = page.read_text(encoding="utf-8")
    parsed = _parse(text)
    for anchor, heading in SUBJECT_SECTIONS:
        assert anchor in parsed.ids, anchor
        assert heading in text
    for fig in ("traces", "spectra", "weights", "design", "fitted", "responses", "acf"):
        assert f"fig-{fig}" in parsed.ids, fig
    assert all(src.startswith("data:image/png;base64,") for src in parsed.images)
    assert len(parsed.images) == 7
    for table in (
        "channel-table",
        "event-table",
        "vif-table",
        "regressor-table",
        "contrast-table",
        "residual-table",
        "provenance",
    ):
        assert table in parsed.ids, table


def test_page_is_self_contained(page):
    """Source: issue 6 - one file that opens offline: no external scripts, styles or images."""
    text = page.read_text(encoding="utf-8")
    parsed = _parse(text)
    assert "script" not in parsed.tags
    assert not re.search(r"""(src|href)=["']https?://""", text)
    assert "<link" not in text


def test_figures_saved_as_png_and_svg_beside_page(page):
    """Source: PNG signature (ISO/IEC 15948) and SVG root element - files readable by tools."""
    folder = page.parent / f"{page.stem}_figures"
    for key in ("traces", "spectra", "design", "fitted", "responses", "acf", "weights"):
        png = (folder / f"{key}.png").read_bytes()
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
        svg = (folder / f"{key}.svg").read_text(encoding="utf-8")
        assert "<svg" in svg[:2000]
    assert not [p for p in page.parent.iterdir() if p.name.startswith(".")]  # no temp left


def test_results_numbers_match_the_fit_table(case, page):
    """Source: the fit's own table (CONTRACTS §5) - the page prints its percent estimates."""
    _, _, fit = case
    table = fit.table()
    row = table[(table["channel"] == "frontal_a") & (table["term"] == "subtract")].iloc[0]
    text = page.read_text(encoding="utf-8")
    assert f"{row['estimate_pct']:.3g}" in text
    assert "broken" in text and "all samples missing" in text  # failed channel listed


def test_detected_heart_rate_and_spectral_peak_shown(page):
    """Source: conftest signal - a 1.15 Hz pulse is 69.0 bpm (design info, printed as is);
    the Welch peak lies within one frequency bin (60/50 s * 60 = 1.2 bpm) of it."""
    text = page.read_text(encoding="utf-8")
    assert "69.0 bpm" in text
    found = re.search(r"cardiac peak \(spectrum\)</span><span class=\"value\">([\d.]+) bpm", text)
    assert found is not None
    assert abs(float(found.group(1)) - 69.0) <= 1.2


def test_provenance_footer_and_caution(page):
    """Source: issue 6 - version, options, input hashes, date and the research-use caution."""
    text = page.read_text(encoding="utf-8")
    assert CAUTION in text
    assert "not a diagnostic device" in text
    footer = text[text.index('id="provenance-footer"') :]
    assert "0.1.0" in footer
    assert "ab" * 32 in footer
    assert "sub-01_task-subtract_flow.tsv" in footer
    assert "method" in footer
    assert re.search(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2} UTC", footer)


def test_condition_and_channel_names_are_escaped(hostile_page):
    """Source: OWASP XSS prevention (HTML entity encoding of untrusted data) - a
    condition named <script>alert(1)</script> shows as text, never as a tag."""
    text = hostile_page.read_text(encoding="utf-8")
    assert XSS not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "&lt;img src=x onerror=" in text and " &amp; co" in text
    parsed = _parse(text)
    assert "script" not in parsed.tags
    assert all(src.startswith("data:image/png;base64,") for src in parsed.images)


def test_figure_folder_swap_replaces_old_figures(tmp_path):
    """Source: common practice - a re-run leaves exactly one current figure folder."""
    from fstats.report.render import figure_folder_swap

    final = tmp_path / "page_figures"
    final.mkdir()
    (final / "stale.png").write_bytes(b"old")
    fresh = tmp_path / ".page_figures.tmp"
    fresh.mkdir()
    (fresh / "traces.png").write_bytes(b"new")
    figure_folder_swap(fresh, final)
    assert sorted(p.name for p in final.iterdir()) == ["traces.png"]
    assert not fresh.exists()


def test_page_without_events_or_fitted_channels(case, tmp_path):
    """Source: common practice - a recording without events whose channels all failed
    still gets a page that says so, instead of an error."""
    import dataclasses
    from types import SimpleNamespace

    import pandas as pd

    recording, design, _ = case
    bare = dataclasses.replace(recording, events=None, subject=None)
    fit = SimpleNamespace(
        subject=None,
        session=None,
        channel_fits={"frontal_a": SimpleNamespace(reason="design rank deficient")},
        table=lambda: pd.DataFrame(),
        block_averages=None,
    )
    path = subject_report(bare, design, fit, tmp_path / "bare.html")
    text = path.read_text(encoding="utf-8")
    assert "design rank deficient" in text
    assert "No responses to show" in text
    assert 'id="fig-fitted"' not in text and 'id="fig-traces"' in text
