"""Pages rendered in headless Chromium: load cleanly, show their parts, never run names.

Skipped, with the reason, where Chromium is not installed (CI installs Debian's
``chromium``).  Screenshots go to ``tests/artifacts/`` (git-ignored).
"""

import re

import pytest

from fstats.report import SUBJECT_SECTIONS

XSS = "<script>alert(1)</script>"
#: A second hostile name that would leave a visible mark in the DOM if it ever ran.
XSS_MARK = "<img src=x onerror=\"document.body.setAttribute('data-owned','1')\">"


@pytest.mark.slow
def test_subject_page_renders_without_console_errors(subject_page, chromium, artifacts_dir):
    """Source: issue 6 acceptance - the page loads in headless Chromium with no console
    errors, and its sections and figures are in the rendered DOM."""
    shown = chromium(subject_page, "--dump-dom")
    assert not shown.problems, shown.problems
    for anchor, heading in SUBJECT_SECTIONS:
        assert f'id="{anchor}"' in shown.dom
        assert heading in shown.dom
    assert len(re.findall(r'<img src="data:image/png;base64,', shown.dom)) == 7
    shot = artifacts_dir / "subject_page.png"
    shot.unlink(missing_ok=True)
    assert not chromium(subject_page, f"--screenshot={shot}", "--window-size=1280,4000").problems
    assert shot.exists() and shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.slow
def test_hostile_condition_names_are_shown_not_run(hostile_page, chromium):
    """Source: OWASP XSS prevention - a condition named <script>alert(1)</script> (and one
    with an onerror handler) appears as text in the browser and executes nothing."""
    shown = chromium(hostile_page, "--dump-dom")
    assert not shown.problems, shown.problems
    assert "<script" not in shown.dom  # no script element in the live DOM
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in shown.dom  # shown as text
    body_tag = shown.dom.split("<body", 1)[1].split(">", 1)[0]
    assert "data-owned" not in body_tag  # the handler never ran
    assert '<img src="x"' not in shown.dom


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
