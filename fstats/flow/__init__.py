"""Flow stage: g2 curves -> BFi, quality masks, motion handling, relative flow."""

from fstats.flow.forward import (
    ADULT_HEAD_DEFAULTS,
    effective_reflection,
    g1_from_g2,
    g1_semi_infinite,
    g2_from_g1,
)

__all__ = [
    "ADULT_HEAD_DEFAULTS",
    "effective_reflection",
    "g1_from_g2",
    "g1_semi_infinite",
    "g2_from_g1",
]
