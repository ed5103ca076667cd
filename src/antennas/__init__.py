"""Antenna geometry for nfmap: parametric builders returning plain wires (no NEC engine here)."""

from .builders import BUILDERS, beam, beam_elements, dipole, end_fed, vertical, wires
from .geometry import (
    C0_M_PER_S,
    GeometryError,
    Load,
    ModelRuleWarning,
    Placement,
    Structure,
    Wire,
    check_apart,
    place,
    segment,
    segment_at,
    validate,
)

__all__ = [
    "BUILDERS",
    "C0_M_PER_S",
    "GeometryError",
    "Load",
    "ModelRuleWarning",
    "Placement",
    "Structure",
    "Wire",
    "beam",
    "beam_elements",
    "check_apart",
    "dipole",
    "end_fed",
    "place",
    "segment",
    "segment_at",
    "validate",
    "vertical",
    "wires",
]
