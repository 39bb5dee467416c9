"""Turning figures and tables into one self-contained HTML page.

:class:`FigureStore` writes each figure as PNG and SVG into the page's figure
folder (``<page>_figures/``) and keeps the PNG as a base64 data URI for the page.
:func:`render_page` fills a Jinja2 template (autoescaping on, so every condition,
channel and subject name is escaped) and writes the page atomically.
"""

from __future__ import annotations

import base64
import datetime as _dt
import io
import json
import math
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import jinja2
import numpy as np
import pandas as pd

__all__ = [
    "CAUTION",
    "FigureStore",
    "template_environment",
    "render_page",
    "format_number",
    "format_p",
    "table_rows",
    "figure_folder_swap",
    "finish_page",
    "PNG_DPI",
]

#: The research-use caution printed on every page.
CAUTION = (
    "fstats is a research tool, not a diagnostic device: its output supports research "
    "questions only, and any clinical use follows local regulation and licensed practice."
)

#: PNG resolution for embedded figures (dots per inch); sharp on screen, small on disk.
PNG_DPI = 96


@dataclass
class FigureStore:
    """Collects a page's figures: PNG + SVG files on disk and PNG data URIs for embedding.

    Parameters
    ----------
    folder : Path
        Where the PNG and SVG files go (created on first use).
    href_prefix : str
        Relative link from the page to ``folder`` (``"<page>_figures"``).
    dpi : int
        PNG resolution.
    """

    folder: Path
    href_prefix: str
    dpi: int = PNG_DPI
    figures: dict = field(default_factory=dict)

    def add(self, key: str, fig, caption: str) -> dict:
        """Save ``fig`` as ``<key>.png`` and ``<key>.svg``; return the template entry.

        ``key`` must be a fixed, fstats-chosen file stem (never a user string).
        """
        if not key.replace("_", "").replace("-", "").isalnum():
            raise ValueError(f"figure key must be a plain file stem, got {key!r}")
        self.folder.mkdir(parents=True, exist_ok=True)
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=self.dpi, pil_kwargs={"compress_level": 3})
        png = buffer.getvalue()
        (self.folder / f"{key}.png").write_bytes(png)
        # The layout is solved once, for the PNG; the SVG reuses the same positions.
        fig.set_layout_engine("none")
        fig.savefig(self.folder / f"{key}.svg", format="svg")
        entry = {
            "key": key,
            "caption": caption,
            "data_uri": "data:image/png;base64," + base64.b64encode(png).decode("ascii"),
            "png_href": f"{self.href_prefix}/{key}.png",
            "svg_href": f"{self.href_prefix}/{key}.svg",
            "png_bytes": len(png),
        }
        self.figures[key] = entry
        return entry


def format_number(value, digits: int = 3) -> str:
    """A number for a table cell: ``digits`` significant digits, "–" for missing."""
    if value is None:
        return "–"
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(x):
        return "–"
    if x == 0:
        return "0"
    if abs(x) >= 1e6 or abs(x) < 1e-3:
        return f"{x:.{max(digits - 1, 0)}e}"
    if abs(x) >= 10**digits:
        return f"{x:.0f}"
    return f"{x:.{digits}g}"


def format_p(value) -> str:
    """A p-value for a table cell: 3 significant digits, "< 1e-4" (non-breaking) below 1e-4."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        return "–"
    if not math.isfinite(x):
        return "–"
    if x < 1e-4:
        return "<\u00a01e-4"
    return f"{x:.3g}"


def _json_default(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    return str(obj)


def _pretty_json(value) -> str:
    return json.dumps(value, indent=2, sort_keys=True, default=_json_default, ensure_ascii=False)


def template_environment() -> jinja2.Environment:
    """The Jinja2 environment of the report templates (autoescape on for every template)."""
    env = jinja2.Environment(
        loader=jinja2.PackageLoader("fstats.report", "templates"),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["num"] = format_number
    env.filters["pval"] = format_p
    env.filters["pretty_json"] = _pretty_json
    return env


def table_rows(frame: pd.DataFrame, columns: list[tuple[str, str, str]]) -> dict:
    """Header and formatted cells of a table for a template.

    Parameters
    ----------
    frame : DataFrame
    columns : list of (column, header, kind)
        ``kind`` is ``"text"``, ``"num"``, ``"int"`` or ``"p"``; missing columns are skipped.

    Returns
    -------
    dict
        ``{"header": [str], "rows": [[{"text": str, "kind": str}]]}``, plain strings
        for the template to escape.
    """
    present = [c for c in columns if c[0] in frame.columns]
    rows = []
    for record in frame.to_dict("records"):
        cells = []
        for column, _, kind in present:
            value = record[column]
            if kind == "num":
                text = format_number(value)
            elif kind == "p":
                text = format_p(value)
            elif kind == "int":
                text = (
                    "–"
                    if value is None or (isinstance(value, float) and not math.isfinite(value))
                    else str(int(round(float(value))))
                )
            else:
                text = (
                    ""
                    if value is None or (isinstance(value, float) and math.isnan(value))
                    else str(value)
                )
            cells.append({"text": text, "kind": kind})
        rows.append(cells)
    return {"header": [c[1] for c in present], "rows": rows}


def render_page(template_name: str, out_path: Path, context: dict) -> Path:
    """Render a template to ``out_path`` atomically (temporary file, then rename).

    Parameters
    ----------
    template_name : str
        File name in ``fstats/report/templates/``.
    out_path : Path
        The HTML file to write.
    context : dict
        Template variables; strings in it are escaped by the template engine.

    Returns
    -------
    Path
        ``out_path``.
    """
    out_path = Path(out_path)
    out_path.parent.mkdir(parents=True, exist_ok=True)
    html = template_environment().get_template(template_name).render(**context)
    fd, tmp = tempfile.mkstemp(prefix=f".{out_path.name}.", suffix=".tmp", dir=out_path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(html)
        os.replace(tmp, out_path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return out_path


def figure_folder_swap(tmp_folder: Path, final_folder: Path) -> None:
    """Replace ``final_folder`` by ``tmp_folder`` (old figures removed first)."""
    if final_folder.exists():
        shutil.rmtree(final_folder)
    if tmp_folder.exists():
        os.replace(tmp_folder, final_folder)


def finish_page(
    template_name: str,
    out_path: Path,
    context: dict,
    *,
    store: FigureStore,
    tmp_dir: Path,
    sections,
    provenance: dict,
) -> Path:
    """Add what every page shows (caution, provenance, date), move the figures into place
    and write the page atomically.

    Parameters
    ----------
    template_name : str
        Template file in ``fstats/report/templates/``.
    out_path : Path
        The HTML file; its figures go to ``<stem>_figures/`` beside it.
    context : dict
        The page's own template variables (updated in place with the common ones).
    store : FigureStore
        The figures drawn for this page, saved so far under ``tmp_dir``.
    tmp_dir : Path
        Temporary figure folder, renamed into place before the page is written.
    sections : sequence
        The page's section list (for the navigation bar).
    provenance : dict
        Options, input hashes and settings shown in the footer.

    Returns
    -------
    Path
        ``out_path``.
    """
    from fstats import __version__

    context.update(
        provenance={"fstats_version": __version__, **provenance},
        created=_dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        caution=CAUTION,
        fstats_version=__version__,
        sections=sections,
        figures=store.figures,
    )
    figure_folder_swap(tmp_dir, out_path.parent / f"{out_path.stem}_figures")
    return render_page(template_name, out_path, context)
