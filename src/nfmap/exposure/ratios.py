"""Exposure ratios (power terms) against a standard, and summation over simultaneous transmissions.

ratio = max over the quantities the standard gives for the band of (E/E_L)^2, (H/H_L)^2 and
S/S_L, with S the plane-wave equivalent of the field where only S is given (the larger of
E^2/eta0 and eta0 H^2, conservative). Below 30 MHz ICNIRP requires E and H to be judged
separately whatever the field region; the tables give both there, so both count.

Several transmitters at once (thermal effects): the ratios add (ICNIRP 2020 and 1998 summation
rules, from memory; FCC OET 65 (1997) likewise sums fractions of the limits).
"""

from __future__ import annotations

import numpy as np
from scipy import constants

from .limits import Limits

ETA0_OHM = constants.mu_0 * constants.c
GOVERNING = ("E", "H", "S")


def exposure_ratio(e_v_per_m, h_a_per_m, lim: Limits):
    """Exposure ratio and the governing quantity at each point.

    Parameters
    ----------
    e_v_per_m, h_a_per_m : array
        rms field magnitudes [V/m], [A/m] (NaN = masked).
    lim : Limits
        At one frequency (scalar limits).

    Returns
    -------
    ratio : array
        Power-term ratio; 1 = at the limit; NaN where masked.
    governing : array of int
        Index into ``GOVERNING`` ("E", "H", "S") of the quantity giving the ratio; -1 where masked.
    """
    e = np.asarray(e_v_per_m, float)
    h = np.asarray(h_a_per_m, float)
    e_l, h_l, s_l = float(lim.e_v_per_m[0]), float(lim.h_a_per_m[0]), float(lim.s_w_per_m2[0])
    terms = np.full((3, *e.shape), -np.inf)
    if np.isfinite(e_l):
        terms[0] = (e / e_l) ** 2
    if np.isfinite(h_l):
        terms[1] = (h / h_l) ** 2
    if np.isfinite(s_l) and not (np.isfinite(e_l) or np.isfinite(h_l)):
        terms[2] = np.maximum(e**2 / ETA0_OHM, ETA0_OHM * h**2) / s_l
    masked = np.isnan(e) | np.isnan(h)
    terms = np.where(np.isnan(terms), -np.inf, terms)
    governing = np.argmax(terms, axis=0)
    ratio = np.take_along_axis(terms, governing[None], axis=0)[0]
    ratio = np.where(masked, np.nan, ratio)
    return ratio, np.where(masked, -1, governing)


def sum_ratios(ratios) -> np.ndarray:
    """Sum of the ratios of transmissions that run at the same time (one group)."""
    r = np.asarray(ratios, float)
    return np.sum(r, axis=0)


def combine_groups(group_sums) -> np.ndarray:
    """Combined map: the largest group sum at each point (groups do not run together)."""
    return np.max(np.asarray(group_sums, float), axis=0)


def plane_wave_s_w_per_m2(e_v_per_m=None, h_a_per_m=None):
    """Equivalent plane-wave power density E^2/eta0 or eta0 H^2 [W/m^2]."""
    if e_v_per_m is not None:
        return np.asarray(e_v_per_m, float) ** 2 / ETA0_OHM
    return ETA0_OHM * np.asarray(h_a_per_m, float) ** 2
