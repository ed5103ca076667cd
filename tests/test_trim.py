"""``resonant_mhz`` made true in the model: the trimmed length has zero feed reactance at its real height."""

import warnings

import pytest

from nfmap import engine, site
from nfmap.site import build


def _site(antenna, ground="average", f=14.2):
    doc = {
        "format": 1,
        "site": {"title": "trim", "standard": "icnirp-2020"},
        "ground": {"kind": ground},
        "area": [{"name": "yard", "polygon": [[-12, -12], [12, -12], [12, 12], [-12, 12]]}],
        "antenna": [{"name": "a", "position_m": [0, 0], **antenna}],
        "transmission": [{"name": "t", "antenna": "a", "frequency_mhz": f, "power_w": 100, "mode": "cw"}],
    }
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return site.parse(doc, "trim.toml")


def _alone(s, f):
    spec = s.antennas[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        st = build(s, spec, f)
    return engine.solve(engine.Model((st,), 0, f, s.ground)).feed_impedance_ohm


@pytest.mark.parametrize(
    ("antenna", "f"),
    [
        ({"kind": "dipole", "resonant_mhz": 14.2, "height_m": 8}, 14.2),  # 78.9 - j36 ohm untrimmed
        ({"kind": "dipole", "resonant_mhz": 3.6, "height_m": 9, "apex_deg": 120}, 3.6),
        ({"kind": "vertical", "resonant_mhz": 7.1, "radials": 4, "radial_length_m": 4.5}, 7.1),
    ],
)
def test_trimmed_length_is_resonant_in_the_model(antenna, f):
    s = _site(antenna, f=f)
    tr = s.antennas[0].trim
    assert tr is not None and tr.resonant_mhz == f and tr.solves <= 12
    z = _alone(s, f)  # an independent solve of the antenna as the site now builds it
    assert abs(z.imag) <= 5.0, z  # the bar: within +/- j5 ohm
    assert dict(s.antennas[0].params)["length_m"] == pytest.approx(tr.length_m)
    assert "resonant_mhz" not in dict(s.antennas[0].params)


def test_free_space_half_wave_resonates_a_little_short_of_half_a_wavelength():
    # Balanis, Antenna Theory, ch. 8 (from memory): a thin centre-fed dipole is resonant a few percent
    # short of lambda/2 (about 0.47-0.49 lambda for a/lambda ~ 1e-4), with R_in near 65-73 ohm.
    s = _site({"kind": "dipole", "resonant_mhz": 14.2, "height_m": 8}, ground="free-space")
    lam = 299.792458 / 14.2
    assert 0.47 * lam <= s.antennas[0].trim.length_m <= 0.49 * lam
    assert 60 <= s.antennas[0].trim.feed_impedance_ohm.real <= 75


def test_an_explicit_length_is_kept():
    s = _site({"kind": "dipole", "length_m": 10.0, "height_m": 8})
    assert s.antennas[0].trim is None and dict(s.antennas[0].params)["length_m"] == 10.0


def test_check_warns_when_a_transmission_misses_its_antennas_design(tmp_path):
    from click.testing import CliRunner

    from nfmap import cli

    p = tmp_path / "off.toml"
    p.write_text('format = 1\n[site]\ntitle = "off"\nstandard = "icnirp-2020"\n'
                 '[[area]]\nname = "yard"\npolygon = [[-12, -12], [12, -12], [12, 12], [-12, 12]]\n'
                 '[[antenna]]\nname = "d"\nkind = "dipole"\nposition_m = [0, 0]\nresonant_mhz = 14.2\nheight_m = 8\n'
                 '[[transmission]]\nname = "t"\nantenna = "d"\nfrequency_mhz = 7.1\npower_w = 100\nmode = "cw"\n')
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        r = CliRunner().invoke(cli.main, ["check", str(p)])
    assert r.exit_code == 0
    assert "7.1 MHz into 'd', designed for 14.2 MHz; feed impedance" in r.output + r.stderr
