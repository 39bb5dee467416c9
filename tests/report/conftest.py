"""Small stand-ins for the design and fit stages' results, built from the contracts.

Recording and DesignMatrix are the real data objects; the subject fit is a
SimpleNamespace with the fields CONTRACTS.md §5 names, estimated here by OLS so
the numbers on the page are genuine.
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from fstats.design.matrix import Contrast, DesignMatrix
from fstats.inputs.recording import Channel, Recording, TaskTiming

SFREQ_HZ = 20.0
HEART_HZ = 1.15
RESP_HZ = 0.25


def _boxcar_response(times_s, onsets_s, durations_s):
    box = np.zeros_like(times_s)
    for onset, duration in zip(onsets_s, durations_s, strict=False):
        box[(times_s >= onset) & (times_s < onset + duration)] = 1.0
    dt = times_s[1] - times_s[0]
    kernel_t = np.arange(0, 20, dt)
    kernel = kernel_t**5 * np.exp(-kernel_t)  # gamma-shaped smoothing, unit area below
    kernel /= kernel.sum()
    return np.convolve(box, kernel)[: times_s.size]


def make_case(conditions=("subtract", "recover"), duration_s=200.0, seed=0):
    """A recording, design matrix and OLS subject fit (fake SubjectFit) for report tests."""
    rng = np.random.default_rng(seed)
    times = np.arange(0.0, duration_s, 1.0 / SFREQ_HZ)
    onsets, durs, conds = [], [], []
    t = 20.0
    while t + 65 < duration_s:
        onsets += [t, t + 40.0]
        durs += [40.0, 25.0]
        conds += [conditions[0], conditions[1]]
        t += 85.0
    events = TaskTiming(
        np.array(onsets), np.array(durs), tuple(conds), np.ones(len(onsets)), "test"
    )
    regs = {}
    for c in conditions:
        picked = [(o, d) for o, d, k in zip(onsets, durs, conds, strict=True) if k == c]
        regs[c] = _boxcar_response(times, [o for o, _ in picked], [d for _, d in picked])
    cardiac = np.sin(2 * np.pi * HEART_HZ * times) + 0.4 * np.sin(4 * np.pi * HEART_HZ * times)
    resp = np.sin(2 * np.pi * RESP_HZ * times)
    scalp = 1e-8 * (
        1
        + 0.05 * regs[conditions[0]]
        + 0.03 * cardiac
        + 0.02 * resp
        + 0.01 * rng.standard_normal(times.size)
    )
    brain = 0.15 * regs[conditions[0]] - 0.03 * regs[conditions[1]]
    frontal_a = 5e-9 * (
        1
        + brain
        + 0.02 * cardiac
        + 0.01 * resp
        + 0.3 * (scalp / 1e-8 - 1)
        + 0.01 * rng.standard_normal(times.size)
    )
    frontal_b = 5e-9 * (
        1
        + 0.02 * cardiac
        + 0.01 * resp
        + 0.3 * (scalp / 1e-8 - 1)
        + 0.01 * rng.standard_normal(times.size)
    )
    motion = (times > 150) & (times < 153)
    frontal_a[motion] *= 1.4
    flow = np.column_stack([scalp, frontal_a, frontal_b])
    channels = (
        Channel("scalp", 1.0, True, 785.0),
        Channel("frontal_a", 3.0, False, 785.0),
        Channel("frontal_b", 3.0, False, 785.0),
    )
    recording = Recording(
        times, flow, channels, events=events, source="memory:test", subject="sub-01"
    )
    drift = np.column_stack(
        [np.cos(np.pi * k * (times + 0.5 / SFREQ_HZ) / duration_s) for k in range(1, 4)]
    )
    short = (scalp - scalp.mean()) / scalp.std()
    values = np.column_stack([regs[c] for c in conditions] + [np.ones(times.size), drift, short])
    names = tuple(conditions) + ("constant", "drift_01", "drift_02", "drift_03", "short:scalp")
    kinds = ("task",) * len(conditions) + ("constant", "drift", "drift", "drift", "short")
    w = np.zeros((1, len(names)))
    w[0, 0], w[0, 1] = 1.0, -1.0
    design = DesignMatrix(
        values=values,
        names=names,
        kinds=kinds,
        times_s=times,
        conditions={c: (c,) for c in conditions},
        contrasts=(Contrast(f"{conditions[0]}_vs_{conditions[1]}", w, "t"),),
        info={
            "cardiac": {
                "heart_rate_bpm": 60 * HEART_HZ,
                "n_beats": int(HEART_HZ * duration_s),
                "beat_quality": 0.93,
                "source_channel": "scalp",
            },
            "diagnostics": {
                "condition_number": float(np.linalg.cond(values)),
                "vif": {c: 1.3 for c in conditions},
                "warnings": [],
            },
        },
    )
    fit = _ols_fit(recording, design)
    return recording, design, fit


def _ols_fit(recording, design):
    from scipy import stats

    x = design.values
    channel_fits, rows = {}, []
    for ch in recording.channels:
        if ch.is_short:
            continue
        y = recording.channel_flow(ch.name)
        beta, *_ = np.linalg.lstsq(x, y, rcond=None)
        fitted = x @ beta
        resid = y - fitted
        dof = x.shape[0] - x.shape[1]
        cov = np.linalg.inv(x.T @ x) * (resid @ resid) / dof
        weights = np.ones_like(y)
        weights[np.abs(resid) > 4 * resid.std()] = 0.1
        whitened = resid[1:] - 0.9 * resid[:-1]
        channel_fits[ch.name] = SimpleNamespace(
            betas=beta,
            cov=cov,
            dof=dof,
            t=beta / np.sqrt(np.diag(cov)),
            p=None,
            ar_coefs=np.array([0.9]),
            fitted=fitted,
            residuals=resid,
            whitened_residuals=whitened,
            robust_weights=weights,
            diagnostics={"r2": 1 - resid.var() / y.var(), "short_share": 0.3},
        )
        base = beta[design.names.index("constant")]
        terms = [
            (n, "regressor", n if k == "task" else "", np.eye(len(beta))[i])
            for i, (n, k) in enumerate(zip(design.names, design.kinds, strict=False))
        ]
        terms += [(c.name, "contrast", "", c.weights[0]) for c in design.contrasts]
        for term, kind, cond, c in terms:
            est, se = float(c @ beta), float(np.sqrt(c @ cov @ c))
            q = stats.t.ppf(0.975, dof)
            rows.append(
                {
                    "subject": recording.subject,
                    "session": None,
                    "channel": ch.name,
                    "separation_cm": ch.separation_cm,
                    "is_short": ch.is_short,
                    "term": term,
                    "term_kind": kind,
                    "condition": cond,
                    "estimate": est,
                    "se": se,
                    "estimate_pct": 100 * est / base,
                    "se_pct": 100 * se / base,
                    "stat": est / se,
                    "df": float(dof),
                    "p": float(2 * stats.t.sf(abs(est / se), dof)),
                    "ci_low": est - q * se,
                    "ci_high": est + q * se,
                    "ci_low_pct": 100 * (est - q * se) / base,
                    "ci_high_pct": 100 * (est + q * se) / base,
                    "ar_order": 1,
                    "method": "ols",
                    "status": "ok",
                }
            )
    channel_fits["broken"] = SimpleNamespace(reason="all samples missing")
    table = pd.DataFrame(rows)
    return SimpleNamespace(
        recording_source=recording.source,
        subject=recording.subject,
        session=None,
        channel_fits=channel_fits,
        table=lambda: table.copy(),
        block_averages=None,
    )


@pytest.fixture(scope="session")
def case():
    """A 200 s, 20 Hz, three-channel recording with design and fit."""
    return make_case()


# --- headless Chromium ---------------------------------------------------------------

CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
)

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts"


def _chromium_path():
    for candidate in (
        "/usr/bin/chromium",
        shutil.which("chromium"),
        shutil.which("chromium-browser"),
    ):
        if candidate and Path(candidate).exists():
            return candidate
    return None


@pytest.fixture(scope="session")
def chromium(tmp_path_factory):
    """Run headless Chromium on a file: ``run(page, *extra_flags)`` gives ``.dom`` (stdout),
    ``.log`` (stderr) and ``.problems`` (console-error lines).

    Skips (with the reason) where Chromium is not installed.
    """
    exe = _chromium_path()
    if exe is None:
        pytest.skip(
            "headless Chromium not installed (Debian package 'chromium'); "
            "install it to run the browser rendering checks"
        )

    def run(page: Path, *flags: str, timeout_s: float = 120.0):
        profile = tmp_path_factory.mktemp("chromium-profile")
        cmd = [
            exe,
            *CHROMIUM_FLAGS,
            f"--user-data-dir={profile}",
            "--enable-logging=stderr",
            "--v=0",
            *flags,
            Path(page).resolve().as_uri(),
        ]
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s, check=False)
        return SimpleNamespace(
            dom=done.stdout, log=done.stderr, problems=console_problems(done.stderr)
        )

    return run


@pytest.fixture(scope="session")
def artifacts_dir():
    """tests/artifacts/ (git-ignored), created on demand."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    return ARTIFACTS


def console_problems(stderr: str) -> list[str]:
    """Lines of Chromium's log that report page console errors or failed loads."""
    bad = []
    for line in stderr.splitlines():
        if "CONSOLE" in line or "Uncaught" in line or "Failed to load resource" in line:
            bad.append(line)
    return bad


@pytest.fixture(scope="session")
def case_factory():
    """``make_case`` itself, for tests that need their own condition names or seeds."""
    return make_case


XSS = "<script>alert(1)</script>"
#: A second hostile name that would leave a visible mark in the DOM if it ever ran.
XSS_MARK = "<img src=x onerror=\"document.body.setAttribute('data-owned','1')\">"


@pytest.fixture(scope="session")
def subject_page(case, tmp_path_factory):
    """The subject page of ``case``, written once per session, with provenance."""
    from fstats.report import subject_report

    recording, design, fit = case
    out = tmp_path_factory.mktemp("subject") / "sub-01_task-subtract.html"
    prov = {
        "fstats_version": "0.1.0",
        "created": "2026-01-01T00:00:00Z",
        "inputs": {"sub-01_task-subtract_flow.tsv": "ab" * 32},
        "options": {"method": "ols"},
    }
    flow_before = recording.flow.copy()
    path = subject_report(recording, design, fit, out, provenance=prov)
    assert np.array_equal(recording.flow, flow_before)  # inputs left alone
    return path


@pytest.fixture(scope="session")
def hostile_page(tmp_path_factory):
    """A subject page whose conditions are named like script injections."""
    from fstats.report import subject_report

    recording, design, fit = make_case(conditions=(XSS, XSS_MARK + " & co"), duration_s=120.0)
    return subject_report(recording, design, fit, tmp_path_factory.mktemp("hostile") / "x.html")
