"""The site commands as a user runs them."""

import json
import subprocess
import sys
from importlib import resources
from pathlib import Path

import pytest

DEMO = str(resources.files("nfmap").joinpath("examples/demo.toml"))


def nfmap(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "nfmap", *args], capture_output=True, text=True, timeout=900, cwd=cwd)


def test_check_json_and_plan(tmp_path):
    r = nfmap("check", DEMO, "--json", "--plan", str(tmp_path / "plan.png"))
    doc = json.loads(r.stdout)
    assert r.returncode == 0 and doc["ok"] and len(doc["antennas"]) == 3
    assert all(abs(a["agt_db"]) <= 0.2 for a in doc["antennas"])
    assert (tmp_path / "plan.png").stat().st_size > 10_000


def test_deck_prints_cards():
    r = nfmap("deck", DEMO, "--transmission", "20 m CW")
    assert r.returncode == 0 and r.stdout.startswith("CM") and "\nEN" in r.stdout and "GN 2" in r.stdout


def test_bad_site_file_exit_2_without_traceback(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(Path(DEMO).read_text().replace("power_w = 400", "power_w = -400").replace("spacing_m = 0.5", "spacing_m = 0"))
    r = nfmap("run", str(bad), "-o", str(tmp_path / "out"))
    assert r.returncode == 2 and "Traceback" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert any("transmission[3].power_w" in ln for ln in lines) and any("grid.spacing_m" in ln for ln in lines)
    assert not (tmp_path / "out").exists()
    r = nfmap("deck", DEMO, "--transmission", "nope")
    assert r.returncode == 2 and "valid: 40 m phone" in r.stderr


@pytest.mark.slow
def test_demo_writes_every_output(tmp_path):
    r = nfmap("demo", "-o", str(tmp_path / "d"), "--quiet")
    assert r.returncode in (0, 1), r.stderr
    out = tmp_path / "d" / "results"
    for f in ("report.pdf", "results.json", "fields.npz", "exceedance-site.json", "map-combined.png",
              "map-40-m-phone.png", "map-20-m-cw.png", "map-10-m-digital.png"):
        assert (out / f).exists(), f
    doc = json.loads((out / "results.json").read_text())
    assert doc["site_sha256"] and len(doc["transmissions"]) == 3
    again = nfmap("demo", "-o", str(tmp_path / "d"), "--quiet")
    assert again.returncode == 2 and "--force" in again.stderr
    from pypdf import PdfReader

    text = "".join(p.extract_text() for p in PdfReader(out / "report.pdf").pages)
    for needle in ("Verdict", "Cautions", "not a measurement", "Assumptions and limitations", "References"):
        assert needle in text


def test_engine_failure_exits_3_with_the_stage(monkeypatch, tmp_path):
    from click.testing import CliRunner

    from nfmap import cli, engine

    def broken(model, *a, **k):
        raise engine.EngineError("near field", model.name, "Unknown exception")

    monkeypatch.setattr(engine, "near_fields", broken)
    r = CliRunner().invoke(cli.main, ["run", DEMO, "-o", str(tmp_path / "o"), "--quiet"])
    assert r.exit_code == 3
    assert "near field stage" in r.output and not (tmp_path / "o").exists()


def test_probe_json_schema():
    r = nfmap("probe", DEMO, "--at", "9,12,1.5", "--at", "5.5,24.5,0.1", "--transmission", "20 m CW", "--json")
    doc = json.loads(r.stdout)
    assert r.returncode == 0
    assert set(doc["transmissions"][0]) == {"name", "frequency_mhz", "feed_impedance_ohm", "input_power_w",
                                            "average_power_w", "envelope_power_w"}
    p0, p1 = doc["points"]
    assert set(p0) == {"x_m", "y_m", "z_m", "transmission", "e_rms_v_per_m", "h_rms_a_per_m", "ratio", "exposure",
                       "masked", "check", "ratio_by_check"}
    assert p0["ratio"] == max(p0["ratio_by_check"].values()) and p0["check"] in ("whole-body", "local")
    assert not p0["masked"] and p0["ratio"] > 0 and p0["exposure"] == "public"
    assert p1["masked"] and p1["e_rms_v_per_m"] is None  # on the vertical's base
