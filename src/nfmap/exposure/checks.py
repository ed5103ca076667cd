"""The checks each standard asks for, beside its main (whole-body) table.

A check is a limit table, the time base it is applied at (time-averaged over the check's window,
or the field at the envelope peak), how the body line is reduced (the site's scheme, or the
spatial peak) and how simultaneous transmissions add.

=============  ============================================  ============  ===========  =========
standard       check                                         time          body line    summation
=============  ============================================  ============  ===========  =========
icnirp-2020    whole-body, Table 5                           30 min        site scheme  power
icnirp-2020    local, Table 6                                6 min         peak         power
icnirp-2020    stimulation, ICNIRP 2010 levels, 0.1-10 MHz   envelope      peak         field
icnirp-1998    whole-body, Tables 6/7                        6 min         site scheme  power
icnirp-1998    stimulation (eqs. 10-11 and peak rule), <=10  envelope      peak         field
icnirp-1998    peak (pulsed-field rule, 32 x), > 10 MHz      envelope      peak         field
fcc-1310       whole-body, Table 1                           30 / 6 min    site scheme  power
=============  ============================================  ============  ===========  =========

References
----------
[1] ICNIRP (2020), Health Phys. 118(5):483-524: Table 6 and its notes 3-4 (6-minute local levels,
    peak spatial E and H over the projected body below 30 MHz), and the statement that from 100 kHz
    to 10 MHz the ICNIRP (2010) low-frequency guidelines apply as well; read in a bioelectromagnetism
    textbook's reproduction of Table 6 (its Table 7.8).
[2] ICNIRP (2010), Health Phys. 99(6):818-836, Tables 3 and 4 (3 kHz - 10 MHz: E 170 / 83 V/m,
    B 100 / 27 uT, unperturbed rms values); read in the same textbook's reproduction (its Table 7.3).
    Several frequencies: sum of E_i / E_RL,i <= 1 and of B_i / B_RL,i <= 1 (field ratios, not
    squared), read in SINTEF's "EM safety: non-uniform fields" notes (2012).
[3] ICNIRP (1998), Health Phys. 74(4):494-522: summation for stimulation (eqs. 10-11: a = 87 / 610 V/m,
    b = 5 / 24.4 A/m; from memory) and the peak rule for pulsed fields: between 100 kHz and 10 MHz the
    peak field may reach a factor interpolated from 1.5 at 100 kHz to 32 at 10 MHz times the
    reference level, above 10 MHz 32 times (read in a quotation of Council Recommendation
    1999/519/EC, which reproduces the ICNIRP 1998 levels).

Notes
-----
Where the text read is unclear the conservative reading is taken, and the report says so:
the envelope checks use the spatial peak along the body line; the ICNIRP 1998 peak factor is
interpolated linearly in frequency (the smallest factor of the usual interpolations, so the
strictest); simultaneous transmissions add as field ratios for the envelope checks (a linear sum of
field ratios is never smaller than the root of the sum of their squares).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .limits import Limits, table, table_limits

CHECK_IDS = ("whole-body", "local", "stimulation", "peak")


@dataclass(frozen=True)
class Check:
    """One rule of a standard.

    ``table``: id of the limit table (the standard's own for whole-body); ``envelope``: applied to
    the field at the envelope peak (PEP x feedline loss, no duty factor, no transmit fraction)
    instead of the time average; ``spatial``: "body" (the site's body-line scheme) or "peak";
    ``summation``: "power" (ratios of E^2, H^2 add) or "field" (ratios of E, H add);
    ``peak_factor``: the table's levels times the ICNIRP 1998 pulsed-field factor.
    """

    id: str
    title: str
    table: str
    envelope: bool = False
    spatial: str = "body"
    summation: str = "power"
    peak_factor: str = ""  # "", "interpolated" (0.1-10 MHz) or "32"
    main_table: str = ""  # ICNIRP 1998 stimulation: the main table that the peak factor multiplies


STIMULATION_MHZ = (0.0, 10.0)  # the stimulation checks apply up to 10 MHz [1, 3]
LOCAL_FROM_MHZ = 0.1


def checks_for(standard: str, frequency_mhz: float) -> tuple[Check, ...]:
    """The checks of ``standard`` that apply at ``frequency_mhz``, whole-body first."""
    f = float(frequency_mhz)
    if standard == "icnirp-2020":
        out = [Check("whole-body", "whole-body average, Table 5 (30 min)", "icnirp-2020"),
               Check("local", "local, Table 6 (6 min, spatial peak)", "icnirp-2020-local", spatial="peak")]
        if f <= STIMULATION_MHZ[1]:
            out.append(Check("stimulation", "nerve stimulation, ICNIRP 2010 levels (envelope peak, spatial peak)",
                             "icnirp-2010-stimulation", envelope=True, spatial="peak", summation="field"))
        return tuple(out)
    if standard == "icnirp-1998":
        out = [Check("whole-body", "whole-body average, Tables 6/7 (6 min)", "icnirp-1998")]
        if f <= STIMULATION_MHZ[1]:
            out.append(Check("stimulation", "stimulation, eqs. 10-11 and the pulsed-field peak rule (envelope peak, "
                             "spatial peak)", "icnirp-1998-stimulation", envelope=True, spatial="peak",
                             summation="field", peak_factor="interpolated", main_table="icnirp-1998"))
        else:
            out.append(Check("peak", "pulsed-field peak rule, 32 x Tables 6/7 (envelope peak, spatial peak)",
                             "icnirp-1998", envelope=True, spatial="peak", summation="field", peak_factor="32"))
        return tuple(out)
    if standard == "fcc-1310":
        return (Check("whole-body", "Table 1 (30 min general population, 6 min occupational)", "fcc-1310"),)
    raise ValueError(f"unknown standard {standard!r}; valid: icnirp-2020, icnirp-1998, fcc-1310")


def peak_factor_1998(frequency_mhz: float) -> float:
    """ICNIRP 1998 peak-field factor for pulsed fields [3]: 1.5 at 100 kHz to 32 at 10 MHz, 32 above.

    Between the two the factor is interpolated linearly in frequency: the text read says only
    "interpolated", and the linear form gives the smallest factor (the strictest level) of the usual
    choices. Below 100 kHz: sqrt(2) (peak of a sinusoid, from memory; stricter than 1.5).
    """
    f = float(frequency_mhz)
    if f < 0.1:
        return float(np.sqrt(2.0))
    if f >= 10.0:
        return 32.0
    return 1.5 + (32.0 - 1.5) * (f - 0.1) / (10.0 - 0.1)


def check_limits(check: Check, exposure: str, frequency_mhz: float) -> Limits:
    """The levels a check holds the field against at one frequency (E [V/m], H [A/m], S [W/m^2])."""
    lim = table_limits(table(check.table, exposure), frequency_mhz)
    if not check.peak_factor:
        return lim
    k = peak_factor_1998(frequency_mhz) if check.peak_factor == "interpolated" else 32.0
    main = table_limits(table(check.main_table or check.table, exposure), frequency_mhz)
    if check.peak_factor == "32":
        return Limits(lim.frequency_mhz, k * main.e_v_per_m, k * main.h_a_per_m, k * k * main.s_w_per_m2,
                      k * k * main.s_equivalent_w_per_m2, 0.0)
    return Limits(lim.frequency_mhz, np.fmin(lim.e_v_per_m, k * main.e_v_per_m), np.fmin(lim.h_a_per_m, k * main.h_a_per_m),
                  lim.s_w_per_m2, lim.s_equivalent_w_per_m2, 0.0)


def window_min(check: Check, exposure: str) -> float | None:
    """Averaging time of a check for a tier [min]; 0 for the envelope checks."""
    if check.envelope:
        return 0.0
    return table(check.table, exposure).averaging_min


def power_factor(check: Check, exposure: str, duty_factor: float, fraction_30min: float, fraction_6min: float) -> float:
    """Power of the check relative to the envelope-peak power accepted (PEP x feedline loss).

    Envelope checks: 1. Time-averaged checks: duty x the transmit fraction of the check's window
    (the 6-minute fraction for windows of 6 minutes or less, the 30-minute one otherwise; where a
    standard gives no window, the larger of the two).
    """
    if check.envelope:
        return 1.0
    w = window_min(check, exposure)
    if w is None:
        return duty_factor * max(fraction_30min, fraction_6min)
    return duty_factor * (fraction_6min if w <= 6 else fraction_30min)


def group_sum(check: Check, ratios) -> np.ndarray:
    """Ratios (power terms) of transmissions that run together, added by the check's rule.

    "power": sum of (E/E_L)^2 terms; "field": (sum of E/E_L)^2, the field ratios added [2, 3].
    Either way the result is a power term: 1 at the limit, scaling with a common power factor.
    NaN (masked) stays NaN.
    """
    r = np.asarray(ratios, float)
    if check.summation == "power":
        return np.sum(r, axis=0)
    return np.sum(np.sqrt(r), axis=0) ** 2
