"""Pages rendered in headless Chromium: load cleanly, show their parts, never run names.

Skipped, with the reason, where Chromium is not installed (CI installs Debian's
``chromium``).  Screenshots go to ``tests/artifacts/`` (git-ignored).
"""

import re

import pytest

from fstats.report import SUBJECT_SECTIONS, subject_report

XSS = "<script>alert(1)</script>"
#: A second hostile name that would leave a visible mark in the DOM if it ever ran.
XSS_MARK = "<img src=x onerror=\"document.body.setAttribute('data-owned','1')\">"


@pytest.mark.slow
def test_subject_page_renders_without_console_errors(case, chromium, artifacts_dir, tmp_path):
    """Source: issue 6 acceptance - the page loads in headless Chromium with no console
    errors, and its sections and figures are in the rendered DOM."""
    recording, design, fit = case
    page = subject_report(recording, design, fit, tmp_path / "sub-01_task-subtract.html")
    shown = chromium(page, "--dump-dom")
    assert not shown.problems, shown.problems
    dom = shown.dom
    for anchor, heading in SUBJECT_SECTIONS:
        assert f'id="{anchor}"' in dom
        assert heading in dom
    images = re.findall(r'<img src="data:image/png;base64,', dom)
    assert len(images) >= 6
    shot = artifacts_dir / "subject_page.png"
    shot.unlink(missing_ok=True)
    assert not chromium(page, f"--screenshot={shot}", "--window-size=1280,4000").problems
    assert shot.exists() and shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.slow
def test_hostile_condition_names_are_shown_not_run(case_factory, chromium, tmp_path):
    """Source: OWASP XSS prevention - a condition named <script>alert(1)</script> (and one
    with an onerror handler) appears as text in the browser and executes nothing."""
    recording, design, fit = case_factory(conditions=(XSS, XSS_MARK), duration_s=120.0)
    page = subject_report(recording, design, fit, tmp_path / "hostile.html")
    shown = chromium(page, "--dump-dom")
    assert not shown.problems
    dom = shown.dom
    assert "<script" not in dom  # no script element in the live DOM
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in dom  # shown as text
    assert "data-owned" not in dom.split("<body", 1)[1].split(">", 1)[0]  # handler never ran
    assert '<img src="x"' not in dom and "<img src=x" not in dom


@pytest.mark.slow
def test_browser_checks_can_fail(chromium, tmp_path):
    """Source: common practice (control) - the console check and the DOM mark do fire on a
    page that has a script error and an unescaped onerror handler."""
    page = tmp_path / "control.html"
    page.write_text(
        "<!DOCTYPE html><html><body><p>x</p>"
        + XSS_MARK.replace("src=x", "src=missing.png")
        + "<script>undefined_function_call();</script></body></html>",
        encoding="utf-8",
    )
    shown = chromium(page, "--dump-dom")
    assert shown.problems, "console errors were not detected"
    assert "data-owned" in shown.dom
