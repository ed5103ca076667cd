"""Readings against the model: conversions, a known offset comes back, bad rows are reported and skipped."""

import json
import math
import subprocess
import sys
from importlib import resources
from pathlib import Path

import numpy as np
import pytest

from nfmap import assess, engine, survey
from nfmap.exposure import readings

from .test_assess import free_dipole_site

HEADER = "x_m,y_m,z_m,transmission,power_w,reading,unit,antenna_factor_db,cable_loss_db,probe"


@pytest.mark.parametrize(
    ("unit", "probe", "af"),
    [("dbm", "e", 30.0), ("dbuv", "e", 12.0), ("dbuv_per_m", "e", None), ("v_per_m", "e", None),
     ("dbm", "h", 21.5), ("dbuv_per_m", "h", None), ("v_per_m", "h", None), ("a_per_m", "h", None)],
)
def test_a_field_to_a_reading_and_back_is_exact(unit, probe, af):
    # the conversions of exposure.readings (checked there against the worked examples: -20 dBm into 50 ohm with a
    # 30 dB/m factor and 1 dB cable is 0.794 V/m); a reading made from a field converts back to that field
    r = survey.Reading(2, 0, 0, 1, "t", 10.0, 0.0, unit, af, 1.0 if af else 0.0, probe)
    field = 0.0371 if probe == "h" else 3.7
    back = survey.Reading(**{**r.__dict__, "reading": survey.reading_for(field, r)}).measured()
    assert back == pytest.approx(field, rel=1e-12)


def test_the_worked_example_reads_as_published():
    # -20 dBm into 50 ohm = 87 dBuV; + 30 dB/m + 1 dB = 118 dBuV/m = 0.794 V/m (a test-equipment maker's note,
    # as in tests/exposure/test_physics.py)
    r = survey.Reading(2, 0, 0, 1, "t", 10.0, -20.0, "dbm", 30.0, 1.0, "e")
    assert r.measured() == pytest.approx(float(readings.db_micro_to_si(118.0 - 0.01)), rel=2e-3)
    assert r.measured() == pytest.approx(0.794, abs=0.002)


def _readings_for(s, rows):
    """Readings made from the model with known offsets (dB)."""
    lines = [HEADER]
    for x, y, z, unit, probe, af, off in rows:
        t = s.transmissions[0]
        nf = engine.near_fields(assess.model_for(s, t.name), np.array([[x, y, z]]), 50.0 * 10 ** (-t.feedline_loss_db / 10))
        field = float(engine.rms_magnitude(nf.e_v_per_m if probe == "e" else nf.h_a_per_m)[0]) * 10 ** (off / 20)
        r = survey.Reading(0, x, y, z, t.name, 50.0, 0.0, unit, af, 0.5 if af else 0.0, probe)
        lines.append(f"{x},{y},{z},{t.name},50,{survey.reading_for(field, r)!r},{unit},{'' if af is None else af},"
                     f"{0.5 if af else 0},{probe}")
    return "\n".join(lines) + "\n"


def test_known_offsets_come_back(tmp_path):
    s = free_dipole_site(loss_db=1.0)
    rows = [(3.0, 0.0, 1.0, "dbm", "e", 30.0, 2.0), (5.0, 2.0, 1.5, "dbm", "h", 21.5, -1.0),
            (4.0, -3.0, 1.0, "a_per_m", "h", None, 4.5), (6.0, 1.0, 1.0, "v_per_m", "e", None, 7.0)]
    p = tmp_path / "r.csv"
    p.write_text(_readings_for(s, rows))
    got, problems = survey.read(p, s)
    assert problems == []
    sv = survey.compare(s, str(p), got, problems)
    np.testing.assert_allclose([c.difference_db for c in sv.rows], [r[-1] for r in rows], atol=1e-9)
    assert [c.quantity for c in sv.rows] == ["E", "H", "H", "E"]  # a loop is compared with H, never E
    assert [c.verdict for c in sv.rows] == ["agrees within 3 dB", "agrees within 3 dB", "agrees within 6 dB",
                                            "disagrees"]
    assert sv.median_db == pytest.approx(3.25)


def test_a_systematic_offset_is_named():
    s = free_dipole_site()
    r = [survey.Comparison(survey.Reading(k, 0, 0, 1, "t", 1, 0, "v_per_m", None, 0, "e"), "E", 1, 1, d, "")
         for k, d in enumerate((4.9, 5.2, 5.6), 2)]
    text = survey.offset_sentence(survey.Survey(s, "r.csv", tuple(r), ()))
    assert "+5.2 dB" in text and "antenna factor" in text


def test_bad_rows_are_reported_with_their_line_and_skipped(tmp_path):
    s = free_dipole_site()
    good = _readings_for(s, [(3.0, 0.0, 1.0, "dbm", "e", 30.0, 0.0)]).splitlines()[1]
    p = tmp_path / "r.csv"
    p.write_text("\n".join([
        HEADER,
        good,                                   # line 2: fine
        "3,0,1,t,50,-10,dbw,30,0,e",            # line 3: unknown unit
        "3,0,1,t,50,-10,dbm,,0,e",              # line 4: missing factor
        "0,0,1,t,50,-10,dbm,30,0,e",            # line 5: on the wire (masked)
        "3,0,1,nope,50,-10,dbm,30,0,e",         # line 6: no such transmission
        "3,0,1,t,50,0.1,a_per_m,,0,e",          # line 7: a loop unit with an electric probe
        "x,0,1,t,50,-10,dbm,30,0,e",            # line 8: not a number
    ]) + "\n")
    rows, problems = survey.read(p, s)
    sv = survey.compare(s, str(p), rows, problems)
    assert [c.reading.line for c in sv.rows] == [2]
    lines = [int(q.split(": line ")[1].split(":")[0]) for q in sv.problems]
    assert lines == [3, 4, 5, 6, 7, 8]
    assert "allowed: dbm, dbuv" in sv.problems[0] and "antenna factor" in sv.problems[1]
    assert "exclusion distance" in sv.problems[2] and "no transmission named 'nope'" in sv.problems[3]


def test_survey_command_on_the_demo_example(tmp_path):
    ex = resources.files("nfmap").joinpath("examples")
    r = subprocess.run([sys.executable, "-m", "nfmap", "survey", str(ex / "demo.toml"), str(ex / "demo-readings.csv"),
                        "-o", str(tmp_path / "sv"), "--json"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert len(doc["readings"]) == 8 and doc["skipped"] == []
    assert all(abs(x["difference_db"]) < 6 for x in doc["readings"])
    for f in ("survey.csv", "survey-map.png", "survey.pdf"):
        assert (tmp_path / "sv" / f).stat().st_size > 0
    assert math.isfinite(doc["median_difference_db"])
    assert Path(tmp_path / "sv" / "survey.csv").read_text().count("\n") == 9
