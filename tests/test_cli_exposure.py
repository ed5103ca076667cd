"""`nfmap limits` and `nfmap reading` as a user runs them."""

import json
import subprocess
import sys

import pytest


def nfmap(*args):
    return subprocess.run([sys.executable, "-m", "nfmap", *args], capture_output=True, text=True, timeout=120)


def test_limits_json_for_each_standard():
    out = json.loads(nfmap("limits", "--standard", "fcc-1310", "--exposure", "public", "--mhz", "14.2", "--json").stdout)
    assert out[0]["e_v_per_m"] == pytest.approx(824 / 14.2) and out[0]["s_w_per_m2"] is None
    assert out[0]["averaging_min"] == 30
    # 47 CFR 1.1310 Table 1 (B), read in reproductions of the CFR: 180/f^2 mW/cm^2 plane-wave equivalent
    # = 1800/f^2 W/m^2, shown but not applied
    assert out[0]["s_plane_wave_equivalent_w_per_m2"] == pytest.approx(1800 / 14.2**2)
    assert [r["check"] for r in out] == ["whole-body"]  # no stimulation or envelope rule in the FCC rule
    for std in ("icnirp-2020", "icnirp-1998"):
        doc = json.loads(nfmap("limits", "--standard", std, "--mhz", "14.2", "--json").stdout)
        assert set(doc[0]) == {"standard", "exposure", "frequency_mhz", "e_v_per_m", "h_a_per_m", "s_w_per_m2",
                               "averaging_min", "check", "check_title", "envelope_peak",
                               "s_plane_wave_equivalent_w_per_m2"}
        assert doc[0]["check"] == "whole-body"
    bands = json.loads(nfmap("limits", "--standard", "icnirp-2020", "--json").stdout)
    assert bands[0]["from_mhz"] == 0.1 and "f^0.7" in bands[0]["e"]


def test_limits_table_prints_readably():
    r = nfmap("limits", "--standard", "icnirp-1998")
    assert r.returncode == 0 and "Table" in r.stdout and "87/f^0.5 V/m" in r.stdout


def test_reading_prints_the_field():
    r = nfmap("reading", "--dbm", "-14", "--antenna-factor-db", "34.3")
    assert r.returncode == 0 and "2.315 V/m" in r.stdout
    doc = json.loads(nfmap("reading", "--dbm", "-14", "--antenna-factor-db", "34.3", "--json").stdout)
    assert set(doc) == {"dbm", "dbuv", "probe", "e_v_per_m", "h_a_per_m", "s_equiv_w_per_m2"}


@pytest.mark.parametrize(
    "args",
    [
        ("limits", "--standard", "nope"),
        ("limits", "--mhz", "0"),
        ("limits", "--mhz", "400000"),
        ("limits", "--exposure", "staff"),
        ("reading", "--dbm", "-14"),
        ("reading", "--dbm", "-14", "--antenna-factor-db", "3", "--cable-loss-db", "-2"),
        ("reading", "--dbm", "minus", "--antenna-factor-db", "3"),
    ],
)
def test_bad_arguments_give_one_line_and_exit_2(args):
    r = nfmap(*args)
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
