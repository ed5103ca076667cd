"""Time averaging (mode duty factor, transmit fraction, feedline loss) and spatial averaging.

References
----------
[1] FCC OET Bulletin 65, Supplement B, Edition 97-01 (1997), table of operating duty factors
    and the source-based time averaging P_avg = PEP x duty x fraction x loss (read in secondary
    quotations).
[2] ICNIRP (2020), Health Phys. 118(5), notes to Tables 5 and 6: spatial averaging of the
    squared values of E and H over the projected body (read in a textbook reproduction).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Mode duty factors (fraction of PEP averaged over a transmission), FCC OET 65 Supplement B (1997).
# ssb 0.2: conversational SSB without speech processing; ssb-processed 0.5: heavy processing (one
# quotation says 40 %, another 50 %: the larger is used); cw 0.4: conversational CW; fm, rtty,
# digital (AFSK over SSB), carrier: 1.0. am: not found in the source, taken as 1.0 (conservative).
MODES: dict[str, float] = {
    "ssb": 0.2,
    "ssb-processed": 0.5,
    "cw": 0.4,
    "fm": 1.0,
    "am": 1.0,
    "digital": 1.0,
    "rtty": 1.0,
    "carrier": 1.0,
}


def duty_factor(mode: str) -> float:
    """Duty factor of a mode id; ``ValueError`` listing the valid ids."""
    if mode not in MODES:
        raise ValueError(f"unknown mode {mode!r}; valid: {', '.join(MODES)}")
    return MODES[mode]


def average_power_w(pep_w, duty_factor: float, transmit_fraction: float = 1.0, feedline_loss_db: float = 0.0):
    """Time-averaged power accepted by the antenna.

    P_avg = PEP * duty * fraction * 10^(-loss/10)  [1]

    Parameters
    ----------
    pep_w : float or array
        Peak envelope power at the transmitter output [W], >= 0.
    duty_factor : float
        Mode duty factor, 0 < duty <= 1.
    transmit_fraction : float
        Share of the averaging time spent transmitting, 0 < fraction <= 1.
    feedline_loss_db : float
        Matched loss from transmitter to antenna [dB], >= 0 (default 0: conservative).

    Returns
    -------
    float or array [W]
    """
    pep = np.asarray(pep_w, float)
    if np.any(~np.isfinite(pep)) or np.any(pep < 0):
        raise ValueError(f"power must be >= 0 W, got {pep_w}")
    if not 0 < duty_factor <= 1:
        raise ValueError(f"duty factor must be in (0, 1], got {duty_factor}")
    if not 0 < transmit_fraction <= 1:
        raise ValueError(f"transmit fraction must be in (0, 1], got {transmit_fraction}")
    if not feedline_loss_db >= 0:
        raise ValueError(f"feedline loss must be >= 0 dB, got {feedline_loss_db}")
    out = pep * duty_factor * transmit_fraction * 10 ** (-feedline_loss_db / 10)
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class BodyLine:
    """The vertical line of evaluation heights standing for a person [m above the floor]."""

    from_m: float = 0.2
    to_m: float = 2.0
    points: int = 10

    def heights_m(self, floor_m: float = 0.0) -> np.ndarray:
        if self.points < 1:
            raise ValueError("body line needs at least 1 point")
        if self.points == 1:
            return np.array([floor_m + (self.from_m + self.to_m) / 2])
        return floor_m + np.linspace(self.from_m, self.to_m, self.points)


def spatial_average(values, axis: int = 0):
    """Root of the mean of squares along the body line (``axis``): sqrt(mean(v^2)) [2].

    NaN (masked) heights make the result NaN: a masked height is never averaged away.
    """
    v = np.asarray(values, float)
    return np.sqrt(np.mean(v**2, axis=axis))


def spatial_peak(values, axis: int = 0):
    """Largest value along the body line; NaN if any height is masked."""
    v = np.asarray(values, float)
    return np.where(np.isnan(v).any(axis=axis), np.nan, np.nanmax(np.where(np.isnan(v), -np.inf, v), axis=axis))


def body_reduce(values, scheme: str, axis: int = 0):
    """``scheme`` = "average" (rms over heights) or "peak"."""
    if scheme == "average":
        return spatial_average(values, axis)
    if scheme == "peak":
        return spatial_peak(values, axis)
    raise ValueError(f"unknown spatial scheme {scheme!r}; valid: average, peak")
