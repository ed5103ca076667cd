"""The standards' other checks: local (ICNIRP 2020 Table 6), stimulation (ICNIRP 2010 levels, ICNIRP 1998
summation and peak rule), their time bases and their summation over simultaneous transmissions.

Values are worked by hand from the published tables; each names where it was read. Tolerances are
rounding only (1e-9) unless said.
"""

import math

import numpy as np
import pytest
from scipy import constants

from nfmap.exposure import checks, limits


def ids(standard, f):
    return [c.id for c in checks.checks_for(standard, f)]


def lim(standard, check_id, exposure, f):
    c = next(c for c in checks.checks_for(standard, f) if c.id == check_id)
    got = checks.check_limits(c, exposure, f)
    return float(got.e_v_per_m[0]), float(got.h_a_per_m[0]), float(got.s_w_per_m2[0])


def test_which_checks_each_standard_applies():
    # ICNIRP 2020: Table 5 and Table 6 at every frequency; ICNIRP 2010 stimulation levels "must be met as
    # well" from 100 kHz to 10 MHz (ICNIRP 2020 text, read in the textbook reproduction's notes).
    assert ids("icnirp-2020", 3.6) == ["whole-body", "local", "stimulation"]
    assert ids("icnirp-2020", 10.0) == ["whole-body", "local", "stimulation"]
    assert ids("icnirp-2020", 10.1) == ["whole-body", "local"]
    assert ids("icnirp-1998", 7.1) == ["whole-body", "stimulation"]
    assert ids("icnirp-1998", 14.2) == ["whole-body", "peak"]
    # 47 CFR 1.1310 has only Table 1
    assert ids("fcc-1310", 1.9) == ["whole-body"] and ids("fcc-1310", 144) == ["whole-body"]


@pytest.mark.parametrize(
    ("exposure", "f", "e", "h", "s"),
    [
        # ICNIRP 2020 Table 6 (local, 6 min), read in a bioelectromagnetism textbook's reproduction
        # (its Table 7.8): public 0.1-30 MHz 671/f^0.7 V/m, 4.9/f A/m; >30-400 MHz 62 V/m, 0.163 A/m,
        # 10 W/m^2; >400-2000 MHz 4.72 f^0.43, 0.0123 f^0.43, 0.058 f^0.86; occupational 1504/f^0.7,
        # 10.8/f; 139, 0.36, 50.
        ("public", 0.5, 671 / 0.5**0.7, 4.9 / 0.5, None),
        ("public", 3.6, 671 / 3.6**0.7, 4.9 / 3.6, None),
        ("public", 14.2, 671 / 14.2**0.7, 4.9 / 14.2, None),
        ("public", 30.0, 671 / 30**0.7, 4.9 / 30, None),  # ">30": 30 MHz belongs to the band below
        ("public", 144.0, 62, 0.163, 10),
        ("public", 1000.0, 4.72 * 1000**0.43, 0.0123 * 1000**0.43, 0.058 * 1000**0.86),
        ("occupational", 7.1, 1504 / 7.1**0.7, 10.8 / 7.1, None),
        ("occupational", 50.0, 139, 0.36, 50),
    ],
)
def test_icnirp_2020_table_6_hand_computed(exposure, f, e, h, s):
    got_e, got_h, got_s = lim("icnirp-2020", "local", exposure, f)
    assert got_e == pytest.approx(e, rel=1e-9) and got_h == pytest.approx(h, rel=1e-9)
    assert (math.isnan(got_s) if s is None else got_s == pytest.approx(s, rel=1e-9))


def test_icnirp_2020_table_6_above_2_ghz():
    # Table 6: >2-6 GHz S 40 W/m^2 public, 200 occupational; >6-300 GHz 55 / f_GHz^0.177 and 275 / f_GHz^0.177
    assert lim("icnirp-2020", "local", "public", 3000)[2] == pytest.approx(40)
    assert lim("icnirp-2020", "local", "occupational", 3000)[2] == pytest.approx(200)
    assert lim("icnirp-2020", "local", "public", 10000)[2] == pytest.approx(55 / 10**0.177, rel=1e-9)
    assert lim("icnirp-2020", "local", "occupational", 60000)[2] == pytest.approx(275 / 60**0.177, rel=1e-9)


@pytest.mark.parametrize("f", [0.1, 0.475, 1.9, 3.6, 7.1, 10.0])
def test_icnirp_2010_stimulation_levels(f):
    # ICNIRP 2010 Tables 3/4, 3 kHz - 10 MHz, read in the textbook reproduction (its Table 7.3):
    # occupational E 1.7e-1 kV/m, B 1e-4 T; public E 0.83e-1 kV/m, B 0.27e-4 T. H = B / mu0.
    e, h, _ = lim("icnirp-2020", "stimulation", "public", f)
    assert e == pytest.approx(83) and h == pytest.approx(27e-6 / constants.mu_0, rel=1e-9)
    e, h, _ = lim("icnirp-2020", "stimulation", "occupational", f)
    assert e == pytest.approx(170) and h == pytest.approx(100e-6 / constants.mu_0, rel=1e-9)
    assert h == pytest.approx(79.577, rel=1e-4)


def test_icnirp_1998_peak_factor():
    # ICNIRP 1998 peak rule (read in a quotation of Council Recommendation 1999/519/EC): 1.5 at 100 kHz,
    # 32 at 10 MHz, "interpolated" between; 32 above 10 MHz. Linear in f is the strictest reading.
    assert checks.peak_factor_1998(0.1) == pytest.approx(1.5)
    assert checks.peak_factor_1998(10.0) == pytest.approx(32)
    assert checks.peak_factor_1998(28.0) == pytest.approx(32)
    assert checks.peak_factor_1998(5.05) == pytest.approx((1.5 + 32) / 2)
    loglog = 1.5 * (3.6 / 0.1) ** (math.log(32 / 1.5) / math.log(100))
    assert checks.peak_factor_1998(3.6) < loglog  # linear gives the smaller factor: stricter


@pytest.mark.parametrize(
    ("exposure", "f", "e", "h"),
    [
        # eqs. 10-11 (a = 87 V/m, b = 5 A/m public; a = 610 V/m, b = 24.4 A/m occupational; from memory) capped by
        # the peak rule: k(f) x Table 7 (public: 87/f^0.5 V/m and 0.73/f A/m for 1-10 MHz) or Table 6
        # (occupational: 610/f V/m, 1.6/f A/m). Worked: k(3.6) = 1.5 + 30.5 x 3.5 / 9.9 = 12.2828.
        ("public", 3.6, 87.0, (1.5 + 30.5 * 3.5 / 9.9) * 0.73 / 3.6),
        ("public", 0.5, 87.0, 5.0),  # the peak rule caps H: k(0.5) = 2.732, x 0.73/0.5 = 3.99 A/m < 5
        ("occupational", 3.6, 610.0, (1.5 + 30.5 * 3.5 / 9.9) * 1.6 / 3.6),
        ("occupational", 0.2, 610.0, min(24.4, (1.5 + 30.5 * 0.1 / 9.9) * 1.6 / 0.2)),
    ],
)
def test_icnirp_1998_stimulation_levels(exposure, f, e, h):
    k = checks.peak_factor_1998(f)
    tab = limits.limits("icnirp-1998", exposure, f)
    e_exp = min(e, k * float(tab.e_v_per_m[0]))
    h_exp = min(h, k * float(tab.h_a_per_m[0]))
    got_e, got_h, _ = lim("icnirp-1998", "stimulation", exposure, f)
    assert got_e == pytest.approx(e_exp, rel=1e-9) and got_h == pytest.approx(h_exp, rel=1e-9)


def test_icnirp_1998_stimulation_worked_3_6_mhz():
    # By hand, public, 3.6 MHz: E = min(87, 12.2828 x 87/sqrt(3.6) = 563.2) = 87 V/m;
    # H = min(5, 12.2828 x 0.73/3.6 = 2.4907) = 2.4907 A/m: the peak rule binds for H.
    e, h, _ = lim("icnirp-1998", "stimulation", "public", 3.6)
    assert e == pytest.approx(87) and h == pytest.approx(2.4907, abs=1e-4)
    # above 10 MHz, 32 x Table 7: 28 MHz public 32 x 28 V/m, 32 x 0.073 A/m
    e, h, _ = lim("icnirp-1998", "peak", "public", 28.0)
    assert e == pytest.approx(896) and h == pytest.approx(2.336)


def test_time_base_of_each_check():
    dirs = {c.id: c for c in checks.checks_for("icnirp-2020", 3.6)}
    # envelope: PEP x loss, no duty, no fraction
    assert checks.power_factor(dirs["stimulation"], "public", 0.2, 0.5, 0.8) == 1.0
    # Table 5: 30-minute window -> transmit_fraction; Table 6: 6 minutes -> transmit_fraction_6min
    assert checks.power_factor(dirs["whole-body"], "public", 0.2, 0.5, 0.8) == pytest.approx(0.1)
    assert checks.power_factor(dirs["local"], "public", 0.2, 0.5, 0.8) == pytest.approx(0.16)
    # FCC Table 1: 30 min general population, 6 min occupational (47 CFR 1.1310, read in reproductions)
    (fcc,) = checks.checks_for("fcc-1310", 14.2)
    assert checks.power_factor(fcc, "public", 0.4, 0.5, 0.9) == pytest.approx(0.2)
    assert checks.power_factor(fcc, "occupational", 0.4, 0.5, 0.9) == pytest.approx(0.36)
    # ICNIRP 1998: 6 minutes for both tiers (from memory)
    (wb, _) = checks.checks_for("icnirp-1998", 14.2)
    assert checks.power_factor(wb, "public", 0.4, 0.5, 0.9) == pytest.approx(0.36)


def test_group_summation_rules():
    c = {x.id: x for x in checks.checks_for("icnirp-2020", 3.6)}
    # thermal checks: power ratios add (ICNIRP 2020 summation of squared ratios, from memory)
    np.testing.assert_allclose(checks.group_sum(c["whole-body"], [[0.25], [0.36]]), [0.61])
    # stimulation: field ratios add (ICNIRP 2010 multi-frequency rule, read in SINTEF's notes): 0.5 + 0.6 = 1.1,
    # as a power term 1.21; both scale linearly with a common power factor
    np.testing.assert_allclose(checks.group_sum(c["stimulation"], [[0.25], [0.36]]), [1.21])
    s = 0.7
    np.testing.assert_allclose(checks.group_sum(c["stimulation"], [[0.25 * s], [0.36 * s]]), [1.21 * s])
    assert np.isnan(checks.group_sum(c["stimulation"], [[np.nan], [0.36]])[0])
