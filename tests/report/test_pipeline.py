"""A real pipeline run: simulate -> design -> fit -> subject page, checked in the browser."""

import re
import warnings
from pathlib import Path

import numpy as np
import pytest

from fstats.report import SUBJECT_SECTIONS, subject_report

ROOT = Path(__file__).resolve().parents[2]


def _subject_glm():
    try:
        from fstats.fit import SubjectGLM
    except ImportError:
        from fstats.fit.glm import SubjectGLM
    return SubjectGLM


@pytest.fixture(scope="module")
def pipeline(tmp_path_factory):
    from fstats.design import build_design, load_design
    from fstats.simulate import SimulationSettings, simulate_recording

    sim = simulate_recording(SimulationSettings(duration_s=180.0), np.random.default_rng(7))
    recording = sim.recording
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        design = build_design(load_design(ROOT / "designs" / "subtract_blocks.yaml"), recording)
        fit = _subject_glm()().fit(recording, design)
    out = tmp_path_factory.mktemp("pipeline") / "sub-01_task-subtract.html"
    page = subject_report(
        recording, design, fit, out, provenance={"options": {"method": "ar-irls"}}
    )
    return sim, recording, design, fit, page


def test_real_pipeline_page_contents(pipeline):
    """Source: CONTRACTS §5 (fit table) and issue 6 - the page shows every part, the fit's
    percent estimates and the simulated heart rate within 3 bpm of the truth."""
    sim, recording, design, fit, page = pipeline
    text = page.read_text(encoding="utf-8")
    for anchor, _ in SUBJECT_SECTIONS:
        assert f'id="{anchor}"' in text
    for fig in ("traces", "spectra", "weights", "design", "fitted", "responses", "acf"):
        assert f'id="fig-{fig}"' in text, fig
    table = fit.table()
    row = table[(table["channel"] == "frontal_a") & (table["term"] == "subtract")].iloc[0]
    assert f"{row['estimate_pct']:.3g}" in text
    shown = re.search(r"cardiac peak \(spectrum\)</span><span class=\"value\">([\d.]+) bpm", text)
    assert abs(float(shown.group(1)) - float(sim.truth["heart_rate_bpm"])) < 3.0


@pytest.mark.slow
def test_real_pipeline_page_in_browser(pipeline, chromium, artifacts_dir):
    """Source: issue 6 acceptance - headless Chromium loads the page with no console
    errors, sections and figures present; screenshot kept as an artefact."""
    *_, page = pipeline
    shown = chromium(page, "--dump-dom")
    assert not shown.problems, shown.problems
    for anchor, heading in SUBJECT_SECTIONS:
        assert f'id="{anchor}"' in shown.dom and heading in shown.dom
    assert len(re.findall(r'<img src="data:image/png;base64,', shown.dom)) >= 7
    shot = artifacts_dir / "subject_page_pipeline.png"
    shot.unlink(missing_ok=True)
    assert not chromium(page, f"--screenshot={shot}", "--window-size=1280,5200").problems
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
