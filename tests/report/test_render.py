"""Page rendering pieces: number formatting, table cells, escaping, figure files."""

import numpy as np
import pandas as pd
import pytest

from fstats.inputs.recording import Channel, Recording
from fstats.report.render import (
    FigureStore,
    format_number,
    format_p,
    table_rows,
    template_environment,
)
from fstats.report.style import new_figure
from fstats.report.subject import _flagged_motion_spans, _merge_spans


def test_format_number_and_p():
    """Source: common practice - 3 significant digits, dashes for missing, small p as a bound."""
    assert format_number(12.3456) == "12.3"
    assert format_number(-0.0881234) == "-0.0881"
    assert format_number(float("nan")) == "–"
    assert format_number(None) == "–"
    assert format_number(2.5e-9) == "2.50e-09"
    assert format_number(5990.4) == "5990"
    assert format_number(0) == "0"
    assert format_p(0.04679) == "0.0468"
    assert format_p(3e-7) == "<\u00a01e-4"
    assert format_p(np.nan) == "–"


def test_table_rows_skips_missing_columns_and_formats():
    """Source: worked by hand."""
    frame = pd.DataFrame({"channel": ["a"], "p": [0.5], "ar_order": [3.0]})
    out = table_rows(
        frame,
        [
            ("channel", "channel", "text"),
            ("estimate", "est", "num"),
            ("p", "p", "p"),
            ("ar_order", "AR", "int"),
        ],
    )
    assert out["header"] == ["channel", "p", "AR"]
    assert [c["text"] for c in out["rows"][0]] == ["a", "0.5", "3"]


def test_macros_escape_user_strings():
    """Source: Jinja2 autoescaping (OWASP XSS prevention) - names in tables, facts and
    captions come out as entities."""
    env = template_environment()
    blocks = env.get_template("_blocks.html.j2").module
    hostile = "<script>alert(1)</script>"
    html = str(blocks.grid({"header": [hostile], "rows": [[{"text": hostile, "kind": "text"}]]}))
    html += str(blocks.facts([(hostile, hostile)]))
    assert "<script>" not in html
    assert html.count("&lt;script&gt;") == 4


def test_figure_store_writes_png_svg_and_rejects_path_keys(tmp_path):
    """Source: PNG signature (ISO/IEC 15948) - files are real PNG/SVG; keys are fixed stems."""
    fig, ax = new_figure(3, 2)
    ax.plot([0, 1], [1, 0])
    store = FigureStore(tmp_path / "f", "f")
    entry = store.add("demo", fig, "caption")
    assert (tmp_path / "f" / "demo.png").read_bytes()[:4] == b"\x89PNG"
    assert (tmp_path / "f" / "demo.svg").read_text().lstrip().startswith("<?xml")
    assert entry["data_uri"].startswith("data:image/png;base64,")
    with pytest.raises(ValueError):
        store.add("../evil", fig, "x")


def test_motion_spans_from_flow_stage_mask_and_merging():
    """Source: worked by hand - masked samples 2-4 (channel 1) and 4-5 (channel 0) form
    one span from 0.2 s to 0.5 s."""
    times = np.arange(10) * 0.1
    mask = np.zeros((10, 2), dtype=bool)
    mask[2:5, 1] = True
    mask[4:6, 0] = True
    rec = Recording(
        times,
        np.ones((10, 2)),
        (Channel("a", 1.0, True), Channel("b", 3.0, False)),
        provenance={"flow": {"masks": {"motion": mask}}},
    )
    spans = _flagged_motion_spans(rec)
    assert spans == [(pytest.approx(0.2), pytest.approx(0.5))]
    assert _merge_spans([(5, 6), (1, 3), (2, 4)]) == [(1.0, 4.0), (5.0, 6.0)]
