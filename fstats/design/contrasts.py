"""Contrasts declared by name, expanded to weights over design-matrix columns."""

from __future__ import annotations

import numpy as np

from fstats.design.matrix import Contrast
from fstats.design.spec import DesignSpec

__all__ = ["expand_contrasts"]


def _expand(weights: dict, names: list, conditions: dict, fir: dict) -> np.ndarray:
    row = np.zeros(len(names))
    for key, w in weights.items():
        if key in conditions:
            cols = conditions[key]
            if key in fir:  # FIR: the mean over bins
                for c in cols:
                    row[names.index(c)] += w / len(cols)
            else:
                row[names.index(cols[0])] += w
        else:
            row[names.index(key)] += w
    return row


def expand_contrasts(
    spec: DesignSpec, names: list[str], conditions: dict, fir: dict
) -> tuple[Contrast, ...]:
    """Declared contrasts as weight rows over every design-matrix column.

    Parameters
    ----------
    spec : DesignSpec
        The design (its ``contrasts`` block, already checked against the conditions).
    names : list of str
        Design-matrix column names, in order.
    conditions : dict of str to tuple of str
        Task columns of each condition (main column first).
    fir : dict
        FIR-modelled conditions (keys used).

    Returns
    -------
    tuple of Contrast
        ``kind="t"`` with one row for ``weights``; ``kind="F"`` with one row per entry of
        ``rows`` (an FIR condition gives one row per bin).  A condition's weight goes to
        its main column, or is spread evenly over its FIR bins (the mean response).
    """
    out = []
    for name, con in spec.contrasts.items():
        if con.weights is not None:
            row = _expand(con.weights, names, conditions, fir)
            out.append(Contrast(name=name, weights=row[None, :], kind="t"))
            continue
        rows = []
        for item in con.rows:
            if isinstance(item, dict):
                rows.append(_expand(item, names, conditions, fir))
            elif item in spec.contrasts:
                rows.append(_expand(spec.contrasts[item].weights, names, conditions, fir))
            elif item in fir:  # every FIR bin: "any response"
                for c in conditions[item]:
                    rows.append(_expand({c: 1.0}, names, conditions, fir))
            else:
                rows.append(_expand({item: 1.0}, names, conditions, fir))
        out.append(Contrast(name=name, weights=np.vstack(rows), kind="F"))
    return tuple(out)
