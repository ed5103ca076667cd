"""Layouts side by side: the same file twice gives identical figures; different sites are refused."""

import dataclasses
import subprocess
import sys
import warnings
from importlib import resources

import pytest

from nfmap import assess, compare, report, site

from .test_assess import free_dipole_site


def test_a_layout_compared_with_itself_gives_identical_figures(tmp_path):
    s = free_dipole_site(power_w=3000, mode="carrier", fraction=1.0, loss_db=0.0)
    a, b = compare.Layout("a", assess.assess(s)), compare.Layout("b", assess.assess(s))
    ra, rb = compare.table_rows([a, b])
    for key in ("worst_ratio", "worst_ratio_by_area", "exceedance_area_m2", "crossings", "power_ceiling_w"):
        assert ra[key] == rb[key], key
    assert "a and b" in compare.best_lines([a, b])[0]  # a tie names both
    report.write_compare([a, b], tmp_path)
    assert (tmp_path / "compare.pdf").stat().st_size > 0 and (tmp_path / "compare.png").stat().st_size > 0


def test_a_moved_antenna_changes_the_figures():
    s = free_dipole_site(power_w=3000, mode="carrier", fraction=1.0, loss_db=0.0)
    moved = dataclasses.replace(s, antennas=(dataclasses.replace(s.antennas[0], position_m=(-14.0, 0.0)),))
    a, b = compare.Layout("centre", assess.assess(s)), compare.Layout("west", assess.assess(moved))
    # moved 6 m outside the field, the field's own worst ratio drops (the ground around the antenna, public
    # outside every area, still reads high: every layout is judged everywhere people can stand)
    assert b.worst_by_area["field"][0] < 0.5 * a.worst_by_area["field"][0]
    rows = {r["layout"]: r for r in compare.table_rows([a, b])}
    assert rows["west"]["worst_ratio_by_area"]["field"]["ratio"] == b.worst_by_area["field"][0]


def test_different_sites_are_refused():
    s = free_dipole_site()
    other_std = dataclasses.replace(s, path="b.toml", standard="fcc-1310")
    with pytest.raises(compare.NotSameSite, match="standard"):
        compare.same_site([s, other_std])
    other_areas = dataclasses.replace(s, path="c.toml", areas=(dataclasses.replace(s.areas[0], exposure="occupational"),))
    with pytest.raises(compare.NotSameSite, match="areas differ"):
        compare.same_site([s, other_areas])
    ex = resources.files("nfmap").joinpath("examples")
    r = subprocess.run([sys.executable, "-m", "nfmap", "compare", str(ex / "demo.toml"), str(ex / "balcony.toml")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "areas differ" in r.stderr and "Traceback" not in r.stderr


def test_compare_needs_two_files():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ex = resources.files("nfmap").joinpath("examples")
        site.load(ex / "demo.toml")
    r = subprocess.run([sys.executable, "-m", "nfmap", "compare", str(ex / "demo.toml")], capture_output=True,
                       text=True, timeout=120)
    assert r.returncode == 2 and "at least two" in r.stderr
