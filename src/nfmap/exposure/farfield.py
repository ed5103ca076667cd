"""Far-field estimate of power density, for comparison with the model (never for the verdict).

References
----------
[1] FCC OET Bulletin 65, Edition 97-01 (1997), Eq. 3: S = P G / (4 pi R^2), and Eq. 7 with the
    EPA ground-reflection factor 1.6^2 = 2.56: S = 2.56 EIRP / (4 pi R^2) (read in secondary
    quotations).
"""

from __future__ import annotations

import math

import numpy as np

from .limits import Limits
from .ratios import ETA0_OHM

GROUND_REFLECTION = 1.6**2  # EPA factor for a fully reflected wave adding in phase [1]


def power_density_w_per_m2(eirp_w, distance_m, ground_reflection: bool = True):
    """Far-field power density at ``distance_m`` [W/m^2] (Eq. 7 of [1], or Eq. 3 without ground)."""
    r = np.asarray(distance_m, float)
    if np.any(r <= 0):
        raise ValueError("distance must be > 0 m")
    factor = GROUND_REFLECTION if ground_reflection else 1.0
    return factor * np.asarray(eirp_w, float) / (4 * math.pi * r**2)


def limit_power_density_w_per_m2(lim: Limits) -> float:
    """The S limit to hold the estimate against: S_L where given, else the stricter of the
    E- and H-equivalents E_L^2/eta0 and eta0 H_L^2 [W/m^2]."""
    candidates = [float(lim.s_w_per_m2[0])]
    if np.isfinite(lim.e_v_per_m[0]):
        candidates.append(float(lim.e_v_per_m[0]) ** 2 / ETA0_OHM)
    if np.isfinite(lim.h_a_per_m[0]):
        candidates.append(ETA0_OHM * float(lim.h_a_per_m[0]) ** 2)
    finite = [c for c in candidates if math.isfinite(c)]
    return min(finite)


def distance_to_limit_m(average_power_w: float, gain: float, lim: Limits, ground_reflection: bool = True) -> float:
    """Distance at which the far-field estimate meets the limit [m].

    R = sqrt(k G P_avg / (4 pi S_L)), k = 2.56 with ground reflection [1].

    Parameters
    ----------
    gain : float
        Numeric gain over isotropic (not dB).
    """
    if average_power_w < 0 or gain <= 0:
        raise ValueError("average power must be >= 0 W and gain > 0")
    factor = GROUND_REFLECTION if ground_reflection else 1.0
    return math.sqrt(factor * gain * average_power_w / (4 * math.pi * limit_power_density_w_per_m2(lim)))
