"""The standards' other rules in the assessment: stimulation governs below 10 MHz, Table 6 under a wire
end, group ceilings, the 6-minute transmit fraction.

The sites are invented test geometries (not check values); every expected figure is worked from the
engine's own fields and the published levels named in tests/exposure/test_checks.py.
"""

import math
import warnings

import numpy as np
import pytest

from nfmap import assess, engine, site
from nfmap.exposure import checks, ratios


def _site(doc):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return site.parse(doc, "t.toml")


def inverted_v(standard="icnirp-2020", power_w=400.0, **tx):
    """A 3.6 MHz inverted V, apex 9 m, ends about 2 m up, 400 W PEP SSB, transmit fraction 0.5; the body line
    is one point at 1 m, on a strip under the east end."""
    return _site({
        "format": 1,
        "site": {"title": "80 m inverted V", "standard": standard},
        "ground": {"kind": "average"},
        "grid": {"spacing_m": 1.0, "margin_m": 0.0, "body_points": 1, "body_from_m": 1.0, "body_to_m": 1.0},
        "area": [{"name": "strip", "polygon": [[14, -1], [20, -1], [20, 1], [14, 1]]}],
        "antenna": [{"name": "iv", "kind": "dipole", "position_m": [0, 0], "resonant_mhz": 3.6, "height_m": 9,
                     "apex_deg": 131, "heading_deg": 90}],
        "transmission": [{"name": "80 m phone", "antenna": "iv", "frequency_mhz": 3.6, "power_w": power_w,
                          "mode": "ssb", "transmit_fraction": 0.5, **tx}],
    })


def test_stimulation_governs_a_low_80_m_inverted_v_and_sets_the_ceiling():
    s = inverted_v()
    a = assess.assess(s)
    t = a.transmissions[0]
    strip = next(x for x in t.areas if x.name == "strip")
    each = dict(strip.by_check)
    assert strip.check == "stimulation" and t.governing_check == "stimulation"
    # by hand from the engine's field at the worst point: E at PEP against ICNIRP 2010's 83 V/m (public);
    # Table 5 on the 30-minute average (SSB 0.2 x 0.5) against 300/f^0.7 V/m
    x, y = strip.where_m
    nf = engine.near_fields(assess.model_for(s, t.name), np.array([[x, y, 1.0]]), 400.0)
    e_pep = float(engine.rms_magnitude(nf.e_v_per_m)[0])
    h_pep = float(engine.rms_magnitude(nf.h_a_per_m)[0])
    stim = max((e_pep / 83) ** 2, (h_pep / 21.4859) ** 2)
    whole = 0.2 * 0.5 * max((e_pep / (300 / 3.6**0.7)) ** 2, (h_pep / (2.2 / 3.6)) ** 2)
    assert strip.max_ratio == pytest.approx(stim, rel=1e-6)
    assert each["whole-body"] == pytest.approx(whole, rel=1e-6)
    assert each["whole-body"] < 0.5 < 1 < each["stimulation"]  # within Table 5, over the stimulation level
    # the ceiling follows the stimulation check: 400 W / ratio, far below what Table 5 alone would allow
    assert t.power_ceiling_w == pytest.approx(400 / stim, rel=1e-9)
    assert t.power_ceiling_w < 0.1 * 400 / each["whole-body"]
    # and at that power the worst point sits at the stimulation level
    b = assess.assess(inverted_v(power_w=t.power_ceiling_w))
    assert max(x.max_ratio for x in b.transmissions[0].areas if x.max_ratio) == pytest.approx(1.0, rel=1e-6)


def test_stimulation_ignores_duty_and_fraction_but_not_feedline_loss():
    base = dict(next(x for x in assess.assess(inverted_v()).transmissions[0].areas if x.name == "strip").by_check)
    busy = dict(next(x for x in assess.assess(inverted_v(transmit_fraction=1.0)).transmissions[0].areas
                     if x.name == "strip").by_check)
    lossy = dict(next(x for x in assess.assess(inverted_v(feedline_loss_db=3.0)).transmissions[0].areas
                      if x.name == "strip").by_check)
    assert busy["stimulation"] == pytest.approx(base["stimulation"], rel=1e-9)
    assert busy["whole-body"] == pytest.approx(2 * base["whole-body"], rel=1e-6)
    assert lossy["stimulation"] == pytest.approx(base["stimulation"] * 10**-0.3, rel=1e-6)


def test_icnirp_1998_stimulation_and_fcc_none():
    t98 = assess.assess(inverted_v("icnirp-1998")).transmissions[0]
    assert t98.checks == ("whole-body", "stimulation") and t98.governing_check == "stimulation"
    tfcc = assess.assess(inverted_v("fcc-1310")).transmissions[0]
    assert tfcc.checks == ("whole-body",) and tfcc.governing_check == "whole-body"


def low_20m_end(frac6=None):
    """A 14.2 MHz inverted V, apex 5.8 m, ends 2.27 m up: the body line (0.2-2 m) ends just below a wire end."""
    tx = {"transmit_fraction": 0.5} | ({"transmit_fraction_6min": frac6} if frac6 else {})
    return _site({
        "format": 1,
        "site": {"title": "low 20 m wire end", "standard": "icnirp-2020"},
        "ground": {"kind": "average"},
        "grid": {"spacing_m": 0.5, "margin_m": 0.0},
        "area": [{"name": "yard", "polygon": [[-6, -3], [6, -3], [6, 3], [-6, 3]]}],
        "antenna": [{"name": "iv", "kind": "dipole", "position_m": [0, 0], "resonant_mhz": 14.2, "height_m": 5.8,
                     "apex_deg": 70, "heading_deg": 90}],
        "transmission": [{"name": "t", "antenna": "iv", "frequency_mhz": 14.2, "power_w": 100, "mode": "carrier",
                          **tx}],
    })


def test_table_6_governs_under_a_wire_end_and_table_5_elsewhere():
    s = low_20m_end()
    a = assess.assess(s)
    lv = a.transmissions[0].levels[0]
    j = lv.judged
    assert j.checks == ("whole-body", "local")
    local_pts = np.argwhere(j.check == 1)
    whole_pts = np.argwhere(j.check == 0)
    assert len(local_pts) >= 1 and len(whole_pts) >= 100
    # ICNIRP 2020 Table 5 / Table 6 (public, 14.2 MHz) by hand, at one point of each kind, from the level's own
    # body-averaged and peak fields (both at the envelope power; carrier, fraction 0.5 in both windows)
    el5, hl5 = 300 / 14.2**0.7, 2.2 / 14.2
    el6, hl6 = 671 / 14.2**0.7, 4.9 / 14.2
    for iy, ix in (local_pts[0], whole_pts[0]):
        wb = 0.5 * max((lv.e_v_per_m[iy, ix] / el5) ** 2, (lv.h_a_per_m[iy, ix] / hl5) ** 2)
        loc = 0.5 * max((lv.e_peak_v_per_m[iy, ix] / el6) ** 2, (lv.h_peak_a_per_m[iy, ix] / hl6) ** 2)
        assert j.by_check["whole-body"][iy, ix] == pytest.approx(wb, rel=1e-9)
        assert j.by_check["local"][iy, ix] == pytest.approx(loc, rel=1e-9)
        assert j.ratio[iy, ix] == pytest.approx(max(wb, loc), rel=1e-12)
    iy, ix = local_pts[0]
    # Table 6 binds where the spatial peak^2 over the body mean^2 exceeds (671/300)^2 = 5.0
    peak2_mean2 = max(lv.e_peak_v_per_m[iy, ix] ** 2 / lv.e_v_per_m[iy, ix] ** 2,
                      lv.h_peak_a_per_m[iy, ix] ** 2 / lv.h_a_per_m[iy, ix] ** 2)
    assert peak2_mean2 > (671 / 300) ** 2
    # a busier worst 6 minutes raises only the 6-minute check
    b = assess.assess(low_20m_end(frac6=1.0)).transmissions[0].levels[0].judged
    np.testing.assert_allclose(b.by_check["local"], 2 * j.by_check["local"], rtol=1e-9)
    np.testing.assert_allclose(b.by_check["whole-body"], j.by_check["whole-body"], rtol=1e-9)


def test_transmit_fraction_6min_below_the_30_minute_share_is_refused():
    with pytest.raises(site.SiteError, match="transmit_fraction_6min"):
        inverted_v(transmit_fraction_6min=0.2)


def group_site(p1=1000.0, p2=600.0):
    return _site({
        "format": 1,
        "site": {"title": "two at once", "standard": "icnirp-2020"},
        "ground": {"kind": "average"},
        "grid": {"spacing_m": 1.0, "margin_m": 0.0, "body_points": 2, "body_from_m": 0.5, "body_to_m": 1.7},
        "area": [{"name": "yard", "polygon": [[-8, -8], [8, -8], [8, 8], [-8, 8]]}],
        "antenna": [
            {"name": "lo", "kind": "dipole", "position_m": [0, -3], "resonant_mhz": 7.1, "height_m": 6,
             "heading_deg": 90},
            {"name": "hi", "kind": "dipole", "position_m": [0, 4], "resonant_mhz": 14.2, "height_m": 5,
             "heading_deg": 90},
        ],
        "transmission": [
            {"name": "a", "antenna": "lo", "frequency_mhz": 7.1, "power_w": p1, "mode": "carrier", "group": "g"},
            {"name": "b", "antenna": "hi", "frequency_mhz": 14.2, "power_w": p2, "mode": "carrier", "group": "g"},
        ],
    })


def test_group_ceiling_puts_the_worst_combined_point_at_the_limit():
    a = assess.assess(group_site())
    (g,) = a.combined.group_results
    assert g.members == ("a", "b") and g.name == "g" and g.worst_check in ("whole-body", "local")
    singles = [t.power_ceiling_w for t in a.transmissions]
    # each member alone at its own ceiling is not allowed together: the group factor is smaller than each one's
    assert g.power_scale < min(singles[0] / 1000, singles[1] / 600)
    b = assess.assess(group_site(1000 * g.power_scale, 600 * g.power_scale))
    worst = max(x.max_ratio for x in b.combined.areas if x.max_ratio is not None)
    assert worst == pytest.approx(1.0, rel=1e-6)
    assert b.combined.group_results[0].power_scale == pytest.approx(1.0, rel=1e-6)


def test_a_groups_worst_combined_point_is_computed_in_every_member():
    # each member's maps are settled alone; their sum is settled too: where the group reads its worst, every
    # member's E and H were computed, not interpolated (nor H read at the top of its bound)
    a = assess.assess(group_site())
    pl = a.plan
    by_name = {t.name: t for t in a.transmissions}
    (judged,) = assess._group_levels(a.site, pl, by_name, ("a", "b"))
    r = np.where(pl.levels[0].place, judged.ratio, np.nan)
    iy, ix = np.unravel_index(np.nanargmax(r), r.shape)
    assert all(t.levels[0].final is not None and t.levels[0].final[iy, ix] for t in a.transmissions)
    assert max(x.max_ratio for x in a.combined.areas if x.max_ratio is not None) == pytest.approx(r[iy, ix], rel=1e-12)


def test_group_sum_follows_each_checks_rule():
    a = assess.assess(group_site())
    k = 0
    ja, jb = (t.levels[k].judged for t in a.transmissions)
    comb = a.combined
    (g,) = comb.group_results
    # stimulation applies to the 7.1 MHz member only; whole-body and local add as power ratios
    assert "stimulation" in ja.checks and "stimulation" not in jb.checks
    wb = ja.by_check["whole-body"] + jb.by_check["whole-body"]
    loc = ja.by_check["local"] + jb.by_check["local"]
    expected = np.fmax(np.fmax(wb, loc), ja.by_check["stimulation"])
    np.testing.assert_allclose(comb.ratio, expected, rtol=1e-9)
    c = next(c for c in checks.checks_for("icnirp-2020", 7.1) if c.id == "stimulation")
    np.testing.assert_allclose(checks.group_sum(c, [ja.by_check["stimulation"]]), ja.by_check["stimulation"])
    assert math.isfinite(g.power_scale) and ratios.GOVERNING
