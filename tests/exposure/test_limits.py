"""Limits against values computed by hand from the formulas as printed in each standard.

Sources and their state here:
- ICNIRP 2020, Health Phys. 118(5):483-524, Table 5 (whole body, 30 min): from memory; the
  local Table 6 and the notes were read in a textbook reproduction. The two tables are consistent
  with each other at 30 MHz (300/30^0.7 = 27.7 V/m), which supports the recalled formulas.
- ICNIRP 1998, Health Phys. 74(4):494-522, Tables 6 and 7: from memory.
- 47 CFR 1.1310(e) Table 1: read in reproductions of the CFR.
Tolerance: 1e-9 relative (the same formula evaluated by hand), 0.2 % where the standard's own
rounding is compared across an edge.
"""

import numpy as np
import pytest

from nfmap.exposure import limits as L


def lim(std, exp, f):
    r = L.limits(std, exp, f)
    return float(r.e_v_per_m[0]), float(r.h_a_per_m[0]), float(r.s_w_per_m2[0])


HAND = [
    # (standard, exposure, f MHz, E, H, S or nan, where)
    ("icnirp-2020", "public", 0.1, 300 / 0.1**0.7, 2.2 / 0.1, np.nan, "Table 5 row 0.1-30, lower end"),
    ("icnirp-2020", "public", 7.1, 300 / 7.1**0.7, 2.2 / 7.1, np.nan, "Table 5 row 0.1-30"),
    ("icnirp-2020", "public", 30.0, 300 / 30**0.7, 2.2 / 30, np.nan, "edge 30 belongs to 0.1-30 ('>30' above)"),
    ("icnirp-2020", "public", 30.0001, 27.7, 0.073, 2.0, "Table 5 row >30-400"),
    ("icnirp-2020", "public", 400.0, 27.7, 0.073, 2.0, "edge 400 belongs to >30-400"),
    ("icnirp-2020", "public", 900.0, 1.375 * 30, 0.0037 * 30, 900 / 200, "Table 5 row >400-2000"),
    ("icnirp-2020", "public", 2400.0, np.nan, np.nan, 10.0, "Table 5 row >2-300 GHz"),
    ("icnirp-2020", "occupational", 14.2, 660 / 14.2**0.7, 4.9 / 14.2, np.nan, "Table 5 occupational 0.1-30"),
    ("icnirp-2020", "occupational", 50.0, 61.0, 0.16, 10.0, "Table 5 occupational >30-400"),
    ("icnirp-1998", "public", 0.137, 87.0, 5.0, np.nan, "Table 7 row 3-150 kHz"),
    ("icnirp-1998", "public", 0.5, 87.0, 0.73 / 0.5, np.nan, "Table 7 row 0.15-1 MHz"),
    ("icnirp-1998", "public", 3.6, 87 / 3.6**0.5, 0.73 / 3.6, np.nan, "Table 7 row 1-10 MHz"),
    ("icnirp-1998", "public", 10.0, 87 / 10**0.5, 0.073, 2.0, "edge 10: stricter of both rows per quantity"),
    ("icnirp-1998", "public", 144.0, 28.0, 0.073, 2.0, "Table 7 row 10-400 MHz"),
    ("icnirp-1998", "public", 2400.0, 61.0, 0.16, 10.0, "Table 7 row 2-300 GHz"),
    ("icnirp-1998", "occupational", 3.6, 610 / 3.6, 1.6 / 3.6, np.nan, "Table 6 row 1-10 MHz"),
    ("fcc-1310", "public", 1.0, 614.0, 1.63, np.nan, "Table 1(B) row 0.3-1.34"),
    ("fcc-1310", "public", 14.2, 824 / 14.2, 2.19 / 14.2, np.nan, "Table 1(B) row 1.34-30"),
    ("fcc-1310", "public", 146.0, 27.5, 0.073, 2.0, "Table 1(B) row 30-300: 0.2 mW/cm^2"),
    ("fcc-1310", "public", 440.0, np.nan, np.nan, 440 / 1500 * 10, "Table 1(B) row 300-1500: f/1500 mW/cm^2"),
    ("fcc-1310", "public", 2400.0, np.nan, np.nan, 10.0, "Table 1(B) row 1500-100000: 1.0 mW/cm^2"),
    ("fcc-1310", "occupational", 14.2, 1842 / 14.2, 4.89 / 14.2, np.nan, "Table 1(A) row 3.0-30"),
    ("fcc-1310", "occupational", 3.0, 614.0, 1.63, np.nan, "edge 3.0: 614 vs 1842/3 = 614"),
    ("fcc-1310", "occupational", 50.0, 61.4, 0.163, 10.0, "Table 1(A) row 30-300: 1.0 mW/cm^2"),
]


@pytest.mark.parametrize("std,exp,f,e,h,s,where", HAND, ids=[f"{r[0]}-{r[1]}-{r[2]}" for r in HAND])
def test_limits_by_hand_from_the_printed_formula(std, exp, f, e, h, s, where):
    got = lim(std, exp, f)
    np.testing.assert_allclose(got, (e, h, s), rtol=1e-9, equal_nan=True, err_msg=where)


def test_fcc_public_continuity_at_30_mhz_and_1_34_mhz():
    # 47 CFR 1.1310 Table 1(B): 824/30 = 27.47 V/m below vs 27.5 above (the rule's rounding)
    e_below = 824 / 30
    assert lim("fcc-1310", "public", 30.0)[0] == pytest.approx(min(e_below, 27.5))
    assert lim("fcc-1310", "public", 30.5)[0] == 27.5
    assert e_below == pytest.approx(27.5, rel=2e-3)
    assert 824 / 1.34 == pytest.approx(614, rel=2e-3)


def test_icnirp_1998_public_discontinuity_at_2_ghz():
    # ICNIRP 1998 Table 7: 1.375 sqrt(2000) = 61.5 V/m below 2 GHz, 61 V/m above
    assert lim("icnirp-1998", "public", 1999.0)[0] == pytest.approx(1.375 * 1999**0.5)
    assert lim("icnirp-1998", "public", 2001.0)[0] == 61.0


def test_averaging_times():
    assert L.limits("icnirp-2020", "public", 14.0).averaging_min == 30
    assert L.limits("icnirp-1998", "public", 14.0).averaging_min == 6
    assert L.limits("fcc-1310", "public", 14.0).averaging_min == 30
    assert L.limits("fcc-1310", "occupational", 14.0).averaging_min == 6


def test_vectorised_over_frequency():
    r = L.limits("icnirp-2020", "public", [3.6, 7.1, 14.2, 28.4, 50.0])
    np.testing.assert_allclose(r.e_v_per_m[:4], 300 / np.array([3.6, 7.1, 14.2, 28.4]) ** 0.7)
    assert r.e_v_per_m[4] == 27.7


def test_fcc_plane_wave_equivalent_s_is_reported_but_not_applied():
    r = L.limits("fcc-1310", "public", 14.2)
    assert np.isnan(r.s_w_per_m2[0])
    assert r.s_equivalent_w_per_m2[0] == pytest.approx(1800 / 14.2**2)  # (180/f^2)* mW/cm^2


def test_unknown_ids_and_out_of_table_frequencies_are_refused():
    with pytest.raises(ValueError, match="valid: icnirp-2020, icnirp-1998, fcc-1310"):
        L.limits("ieee", "public", 14)
    with pytest.raises(ValueError, match="valid: public, occupational"):
        L.limits("fcc-1310", "controlled", 14)
    with pytest.raises(ValueError, match="outside the table"):
        L.limits("fcc-1310", "public", 0.137)  # 2200 m band is below the FCC table
    with pytest.raises(ValueError, match="never extrapolated"):
        L.limits("icnirp-2020", "public", 400000)
    with pytest.raises(ValueError, match="outside"):
        L.limits("icnirp-2020", "public", 0.0)


def test_every_table_names_its_source():
    for std in L.STANDARDS:
        for exp in L.EXPOSURES:
            t = L.table(std, exp)
            assert "Table" in t.source and t.bands and t.edge in ("lower", "stricter")
