"""Writing a group result: tidy TSV tables and a JSON sidecar, atomically."""

from __future__ import annotations

import json
import math
import os
import tempfile
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["GROUP_FILES", "write_group_results", "read_group_table"]

#: Files written by :func:`write_group_results`, by role (``{stem}`` = file prefix).
GROUP_FILES: dict[str, str] = {
    "table": "{stem}_table.tsv",
    "sidecar": "{stem}_table.json",
    "subjects": "{stem}_subject_estimates.tsv",
    "influence": "{stem}_influence.tsv",
    "exclusions": "{stem}_exclusions.tsv",
}


def _packages() -> dict[str, str]:
    import scipy
    import statsmodels

    from fstats import __version__

    return {
        "fstats": __version__,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
        "pandas": pd.__version__,
    }


def _json_ready(value):
    if isinstance(value, dict):
        return {str(k): _json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Path):
        return str(value)
    return value


def _tsv_text(frame: pd.DataFrame) -> str:
    return frame.to_csv(
        sep="\t", index=False, na_rep="n/a", float_format="%.10g", lineterminator="\n"
    )


def write_group_results(
    result, out_dir: str | os.PathLike, *, provenance: dict | None = None, stem: str = "group"
) -> tuple[Path, Path]:
    """Write a GroupResult as TSV tables plus a JSON sidecar.

    Parameters
    ----------
    result : GroupResult
    out_dir : path-like
        Created if missing.
    provenance : dict, optional
        Extra facts to store (e.g. ``{"inputs": {path: sha256}}``), merged into the sidecar.
    stem : str, default="group"
        File-name prefix (see :data:`GROUP_FILES`).

    Returns
    -------
    (tsv_path, json_path) : tuple of Path
        The group table and its sidecar; the subject estimates, influence and
        exclusions tables are written beside them and listed in the sidecar.

    Notes
    -----
    Every file is first written under a temporary name in ``out_dir`` and renamed only
    when all were written, so a failure leaves no half-written outputs.  Missing
    values are written as ``n/a``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {role: out / name.format(stem=stem) for role, name in GROUP_FILES.items()}
    exclusions = pd.DataFrame(
        result.exclusions, columns=["participant_id", "reason", "channel", "term", "session"]
    )
    sidecar = {
        "fstats_version": _packages()["fstats"],
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "model": result.settings,
        "formula": result.model.describe(),
        "info": result.info,
        "exclusions": [
            {k: e[k] for k in ("participant_id", "reason", "channel", "term", "session")}
            for e in result.exclusions
        ],
        "columns": list(result.rows.columns),
        "files": {role: p.name for role, p in paths.items()},
        "packages": _packages(),
    }
    for key, value in (provenance or {}).items():
        sidecar.setdefault(key, value)
    texts = {
        "table": _tsv_text(result.rows),
        "subjects": _tsv_text(result.subject_estimates),
        "influence": _tsv_text(result.influence),
        "exclusions": _tsv_text(exclusions),
        "sidecar": json.dumps(_json_ready(sidecar), indent=2, allow_nan=False) + "\n",
    }
    temporary = {}
    try:
        for role, text in texts.items():
            handle, name = tempfile.mkstemp(dir=out, prefix=f".{paths[role].name}.", suffix=".tmp")
            with os.fdopen(handle, "w", encoding="utf-8", newline="") as stream:
                stream.write(text)
            temporary[role] = name
        for role, name in temporary.items():
            os.replace(name, paths[role])
    finally:
        for name in temporary.values():
            if os.path.exists(name):
                os.unlink(name)
    return paths["table"], paths["sidecar"]


def read_group_table(path: str | os.PathLike) -> pd.DataFrame:
    """Read a group table TSV written by :func:`write_group_results` ('n/a' = missing)."""
    return pd.read_csv(path, sep="\t", na_values=["n/a"], keep_default_na=False)
