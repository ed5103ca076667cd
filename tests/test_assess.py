"""The assessment on sites with known answers."""

import math
import warnings

import numpy as np
import pytest

from nfmap import assess, engine, site
from nfmap.exposure import averaging, limits

from .engine.closed_form import dipole_fields

F = 14.2


def free_dipole_site(power_w=100.0, mode="cw", fraction=0.5, loss_db=1.0):
    lam = 299.792458 / F
    doc = {
        "format": 1,
        "site": {"title": "free-space dipole", "standard": "icnirp-2020"},
        "ground": {"kind": "free-space"},
        "grid": {"spacing_m": 1.0, "margin_m": 2.0, "body_points": 1, "body_from_m": 1.0, "body_to_m": 1.0},
        "area": [{"name": "field", "polygon": [[-8, -8], [8, -8], [8, 8], [-8, 8]], "exposure": "public"}],
        "line": [{"name": "fence", "points": [[3, -8], [3, 8]]}],
        "antenna": [{"name": "d", "kind": "wires", "position_m": [0, 0],
                     "wire": [{"from_m": [0, 0, 1 - lam / 4], "to_m": [0, 0, 1 + lam / 4], "diameter_mm": 2}],
                     "feed": {"wire": 1, "at": 0.5}}],
        "transmission": [{"name": "t", "antenna": "d", "frequency_mhz": F, "power_w": power_w, "mode": mode,
                          "transmit_fraction": fraction, "feedline_loss_db": loss_db}],
    }
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return site.parse(doc, "free.toml")


def test_probe_values_equal_closed_form_scaled_by_time_averaging():
    # Balanis, 3rd ed., ch. 8 closed form (tolerance 9 %, see the engine test), at the average
    # power worked by hand: 100 W x 0.4 (cw, OET 65 Supp. B) x 0.5 x 10^-0.1 = 15.89 W.
    s = free_dipole_site()
    p_avg = 100 * 0.4 * 0.5 * 10 ** (-0.1)
    assert s.transmission("t").average_power_w == pytest.approx(p_avg)
    m = assess.model_for(s, "t")
    pts = np.array([[3.0, 0.0, 1.0], [5.0, 2.0, 1.5]])
    nf = engine.near_fields(m, pts, p_avg)
    sol = nf.solution
    i0 = sol.feed_current_a * math.sqrt(p_avg / sol.input_power_w)
    lam = 299.792458 / F
    erho, ez, hphi = dipole_fields(pts - [0, 0, 1.0], lam / 4, lam, i0)
    e_ref = np.sqrt(np.abs(erho) ** 2 + np.abs(ez) ** 2) / math.sqrt(2)
    np.testing.assert_allclose(engine.rms_magnitude(nf.e_v_per_m), e_ref, rtol=0.09)
    # ratio equals (E / E_L)^2 or (H / H_L)^2 with the published ICNIRP 2020 Table 5 level
    lim = limits.limits("icnirp-2020", "public", F)
    e = engine.rms_magnitude(nf.e_v_per_m)
    h = engine.rms_magnitude(nf.h_a_per_m)
    a = assess.assess(s)
    ix = list(a.plan.x_m).index(3.0)
    iy = list(a.plan.y_m).index(0.0)
    expected = max((e[0] / (300 / F**0.7)) ** 2, (h[0] / (2.2 / F)) ** 2)
    assert lim.e_v_per_m[0] == pytest.approx(300 / F**0.7)
    assert a.transmissions[0].ratio[iy, ix] == pytest.approx(expected, rel=1e-6)


def test_power_ceiling_and_crossings_scale_with_power():
    a = assess.assess(free_dipole_site(power_w=2000, mode="carrier", fraction=1.0, loss_db=0.0))
    t = a.transmissions[0]
    worst = max(x.max_ratio for x in t.areas if x.max_ratio is not None)
    assert t.power_ceiling_w == pytest.approx(2000 / worst)
    b = assess.assess(free_dipole_site(power_w=t.power_ceiling_w * 0.999, mode="carrier", fraction=1.0, loss_db=0.0))
    assert max(x.max_ratio for x in b.transmissions[0].areas if x.max_ratio is not None) < 1.0
    if worst > 1:
        assert t.model_distance_m is not None


def test_spatial_average_of_synthetic_profile():
    z = averaging.BodyLine(0.2, 1.8, 9).heights_m()
    field = np.exp(-z)[:, None, None] * np.ones((9, 2, 3))
    got = averaging.body_reduce(field, "average")
    np.testing.assert_allclose(got, math.sqrt(np.mean(np.exp(-2 * z))))
