"""Site files: every problem reported with file, key path, what was found and what is allowed."""

import copy
import tomllib
import warnings
from importlib import resources

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from nfmap import site

DEMO = tomllib.loads(resources.files("nfmap").joinpath("examples/demo.toml").read_text())


def parse(doc):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return site.parse(doc, "s.toml")


def problems(doc):
    with pytest.raises(site.SiteError) as err:
        parse(doc)
    return err.value.problems


def test_demo_is_valid():
    s = parse(copy.deepcopy(DEMO))
    assert len(s.antennas) == 3 and s.transmission("40 m phone").duty_factor == 0.5


@pytest.mark.parametrize(
    "mutate,expect",
    [
        (lambda d: d["transmission"][1].__setitem__("power_w", -5), "transmission[2].power_w: found -5"),
        (lambda d: d["transmission"][0].__setitem__("frequency_mhz", 0), "transmission[1].frequency_mhz: found 0"),
        (lambda d: d["transmission"][0].update(duty_factor=1.5, mode=None) or d["transmission"][0].pop("mode"),
         "duty_factor: found 1.5"),
        (lambda d: d["grid"].__setitem__("spacing_m", 0), "grid.spacing_m: found 0"),
        (lambda d: d["grid"].__setitem__("spacng_m", 1), "did you mean 'spacing_m'"),
        (lambda d: d["site"].__setitem__("standard", "ieee"), "allowed: icnirp-2020, icnirp-1998, fcc-1310"),
        (lambda d: d["area"][0].__setitem__("polygon", [[0, 0], [10, 10], [10, 0], [0, 10]]), "simple polygon"),
        (lambda d: d["transmission"][0].__setitem__("antenna", "forty vertcal"), "did you mean 'forty vertical'"),
        (lambda d: d["antenna"][1].__setitem__("name", "forty vertical"), "used twice"),
        (lambda d: d["antenna"][0].pop("position_m"), "antenna[1].position_m"),
        (lambda d: d["transmission"][0].__setitem__("frequency_mhz", "seven"), "a finite number"),
        (lambda d: d["transmission"][0].__setitem__("frequency_mhz", 500000.0), "outside the table"),
        (lambda d: d["antenna"][1].__setitem__("heading_deg", "any"), "'any' is for a beam on a rotator"),
        (lambda d: d["antenna"][0].__setitem__("radials", "four"), "antenna[1].radials: found 'four'"),
        (lambda d: d["antenna"][1].__setitem__("position_m", [5.5, 24.5]), "touch or cross"),
        (lambda d: d["antenna"][1].__setitem__("height_m", 0.5) or d["antenna"][1].__setitem__("apex_deg", 40),
         "at or below ground"),
    ],
)
def test_errors_name_key_found_and_allowed(mutate, expect):
    d = copy.deepcopy(DEMO)
    mutate(d)
    got = problems(d)
    assert any(expect in p for p in got), got
    assert all(p.startswith("s.toml") for p in got)


def test_all_errors_are_collected_together():
    d = copy.deepcopy(DEMO)
    d["transmission"][0]["power_w"] = -1
    d["grid"]["spacing_m"] = -1
    d["site"]["standard"] = "x"
    assert len(problems(d)) >= 3


def test_overlapping_tiers_say_the_stricter_wins():
    d = copy.deepcopy(DEMO)
    d["area"].append({"name": "Shed", "polygon": [[1, 1], [4, 1], [4, 4], [1, 4]], "exposure": "occupational"})
    with pytest.warns(site.SiteWarning, match="stricter tier \\(public\\)"):
        site.parse(d, "s.toml")


MUTATIONS = st.sampled_from(["delete", "string", "negative", "huge", "list", "nan", "bool"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.integers(0, 10_000), MUTATIONS), min_size=1, max_size=4))
def test_fuzzed_site_files_never_raise_anything_but_site_error(edits):
    d = copy.deepcopy(DEMO)
    for pick, how in edits:
        tables = [d["site"], d["grid"], d["ground"], *d["area"], *d["line"], *d["antenna"], *d["transmission"]]
        t = tables[pick % len(tables)]
        if not t:
            continue
        key = sorted(t)[pick % len(t)]
        if how == "delete":
            del t[key]
        else:
            t[key] = {"string": "x", "negative": -3.0, "huge": 1e12, "list": [1, "a"], "nan": float("nan"),
                      "bool": True}[how]
    try:
        parse(d)
    except site.SiteError as err:
        assert err.problems and all(isinstance(p, str) and "\n" not in p for p in err.problems)
