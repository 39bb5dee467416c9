"""The channel sidecar ``<stem>_channels.tsv``: names, separations, roles, units.

Columns (tab-separated, one row per flow column, any order):

================  ========  ===============================================================
column            required  meaning
================  ========  ===============================================================
``name``          yes       channel name, exactly as in the flow table header
``separation_cm`` yes       source-detector separation in cm (0 < s <= 10)
``role``          no        ``short`` or ``long``; ``n/a`` or absent: decided by separation
``wavelength_nm`` no        laser wavelength in nm
``units``         no        ``cm2/s`` (BFi) or ``relative`` (baseline 1); the same for all rows
================  ========  ===============================================================

A channel without a ``role`` is a short-separation channel when ``separation_cm <=
short_threshold_cm`` (default :data:`~fstats.inputs.recording.SHORT_SEPARATION_THRESHOLD_CM`,
1.5 cm).  An explicit ``role`` always wins over the threshold.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np

from fstats.errors import InputError, suggest
from fstats.inputs._tabular import (
    float_column,
    format_number,
    read_delimited,
    require_columns,
    text_column,
    write_text_atomic,
)
from fstats.inputs.recording import FLOW_UNITS, SHORT_SEPARATION_THRESHOLD_CM, Channel

__all__ = [
    "CHANNEL_ROLES",
    "MAX_SEPARATION_CM",
    "read_channels",
    "read_channel_table",
    "write_channels",
]

logger = logging.getLogger(__name__)

#: Values of the optional ``role`` column.
CHANNEL_ROLES: tuple[str, ...] = ("short", "long")

#: Larger separations are refused as a unit mistake: DCS detects too few photons beyond a
#: few cm (brain-sensitive channels sit at 2.5-4 cm), while 10-40 looks like millimetres.
MAX_SEPARATION_CM: float = 10.0

_KNOWN_COLUMNS = ("name", "separation_cm", "role", "wavelength_nm", "units")


def read_channel_table(
    path: str | Path, *, short_threshold_cm: float = SHORT_SEPARATION_THRESHOLD_CM
) -> tuple[tuple[Channel, ...], str | None]:
    """Channels and their declared flow unit from a ``channels.tsv`` sidecar.

    Parameters
    ----------
    path : str or Path
        The sidecar (tab-separated).
    short_threshold_cm : float, default=1.5
        Channels without a ``role`` at or below this separation (cm) are short.

    Returns
    -------
    channels : tuple of Channel
        In the order of the file.
    flow_unit : str or None
        The ``units`` column's value (shared by all rows), or None when absent.

    Raises
    ------
    InputError
        Missing columns, duplicated names, a separation that is not a number > 0, an
        unknown role or unit, or different units on different rows.
    """
    table = read_delimited(path, what="a channel table")
    require_columns(table, ("name", "separation_cm"), what="a channel table")
    for name in table.header:
        if name not in _KNOWN_COLUMNS:
            logger.info("%s: ignoring column %r", path, name)
    names = text_column(table, "name")
    separations = float_column(table, "separation_cm")
    roles = text_column(table, "role") if "role" in table.header else [""] * len(names)
    wavelengths = (
        float_column(table, "wavelength_nm")
        if "wavelength_nm" in table.header
        else np.full(len(names), np.nan)
    )
    units = text_column(table, "units") if "units" in table.header else [""] * len(names)
    channels = []
    seen: dict[str, int] = {}
    for row, name in enumerate(names):
        line = table.lines[row]
        if not name:
            raise InputError(path, f"line {line}, column 'name'", "a channel name", name)
        if name in seen:
            raise InputError(
                path,
                f"line {line}, column 'name'",
                f"unique channel names (already on line {seen[name]})",
                name,
            )
        seen[name] = int(line)
        separation = float(separations[row])
        if not (np.isfinite(separation) and 0 < separation <= MAX_SEPARATION_CM):
            raise InputError(
                path,
                f"line {line}, column 'separation_cm'",
                f"a source-detector separation in cm, > 0 and <= {MAX_SEPARATION_CM:g}",
                table.rows[row][table.index("separation_cm")],
                hint="separations look like mm; give them in cm"
                if separation > MAX_SEPARATION_CM
                else None,
            )
        role = roles[row].lower()
        if role and role not in CHANNEL_ROLES:
            raise InputError(
                path,
                f"line {line}, column 'role'",
                f"one of {list(CHANNEL_ROLES)} or 'n/a'",
                roles[row],
                hint=suggest(role, CHANNEL_ROLES),
            )
        is_short = role == "short" if role else separation <= short_threshold_cm
        wavelength = float(wavelengths[row])
        if np.isfinite(wavelength) and wavelength <= 0:
            raise InputError(
                path, f"line {line}, column 'wavelength_nm'", "a wavelength in nm > 0", wavelength
            )
        channels.append(
            Channel(
                name=name,
                separation_cm=separation,
                is_short=bool(is_short),
                wavelength_nm=wavelength if np.isfinite(wavelength) else None,
            )
        )
    declared = {u for u in units if u}
    for row, unit in enumerate(units):
        if unit and unit not in FLOW_UNITS:
            raise InputError(
                path,
                f"line {table.lines[row]}, column 'units'",
                f"one of {list(FLOW_UNITS)}",
                unit,
                hint=suggest(unit, FLOW_UNITS),
            )
    if len(declared) > 1:
        raise InputError(
            path,
            "column 'units'",
            "the same flow unit on every row",
            sorted(declared),
            hint="convert all channels to one unit",
        )
    return tuple(channels), (declared.pop() if declared else None)


def read_channels(
    path: str | Path, *, short_threshold_cm: float = SHORT_SEPARATION_THRESHOLD_CM
) -> tuple[Channel, ...]:
    """Channels from a ``channels.tsv`` sidecar (see the module notes for the columns).

    Parameters
    ----------
    path : str or Path
        The sidecar (tab-separated).
    short_threshold_cm : float, default=1.5
        Channels without a ``role`` whose separation is at or below this value (cm)
        are short-separation channels.

    Returns
    -------
    tuple of Channel
        In the order of the file.
    """
    return read_channel_table(path, short_threshold_cm=short_threshold_cm)[0]


def write_channels(
    channels: tuple[Channel, ...], path: str | Path, *, flow_unit: str = "cm2/s"
) -> Path:
    """Write a ``channels.tsv`` sidecar (with explicit ``role`` and ``units`` columns).

    Parameters
    ----------
    channels : tuple of Channel
        Channels in flow-column order.
    path : str or Path
        Destination; written under a temporary name, then renamed.
    flow_unit : {"cm2/s", "relative"}
        Unit written in the ``units`` column.
    """
    lines = ["name\tseparation_cm\trole\twavelength_nm\tunits"]
    for channel in channels:
        wavelength = np.nan if channel.wavelength_nm is None else channel.wavelength_nm
        lines.append(
            "\t".join(
                [
                    channel.name,
                    format_number(channel.separation_cm),
                    "short" if channel.is_short else "long",
                    format_number(wavelength),
                    flow_unit,
                ]
            )
        )
    return write_text_atomic(path, "\n".join(lines) + "\n")
