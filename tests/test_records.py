"""The record: results.json, fields.npz, exceedance.geojson, the maps and report.pdf."""

import dataclasses
import json
import subprocess
import sys
import warnings
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from pypdf import PdfReader

from nfmap import assess, maps, records, report

from .record_text import disagreements
from .test_assess import free_dipole_site

EXAMPLES = sorted(p.name for p in resources.files("nfmap").joinpath("examples").iterdir() if p.name.endswith(".toml"))


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    s = free_dipole_site(power_w=3000, mode="carrier", fraction=1.0, loss_db=0.0)
    a = assess.assess(s)
    out = tmp_path_factory.mktemp("rec") / "out"

    def write(folder):
        records.write_data(a, folder)
        report.write_maps_and_report(a, folder)

    records.write_folder(out, False, write)
    return a, out


def test_results_json_has_the_interface_schema(written):
    a, out = written
    doc = json.loads((out / "results.json").read_text())
    for key in ("tool_version", "site_sha256", "standard", "transmissions", "combined", "warnings"):
        assert key in doc
    t = doc["transmissions"][0]
    for key in ("name", "frequency_mhz", "feed_impedance_ohm", "average_power_w", "max_ratio_by_area",
                "exceedance_area_m2_by_area", "crossings", "power_ceiling_w", "far_field_distance_m", "model_distance_m"):
        assert key in t
    assert t["crossings"] and {"line", "from_m", "to_m", "length_m"} <= set(t["crossings"][0])
    assert t["max_ratio_by_area"]["field"] == pytest.approx(a.transmissions[0].areas[0].max_ratio, rel=1e-5)
    for key in ("governing_check_by_area", "max_ratio_by_area_and_check", "checks", "governing_check",
                "transmit_fraction_6min", "envelope_power_w"):
        assert key in t
    assert [c["id"] for c in t["checks"]] == ["whole-body", "local"]  # 14.2 MHz, ICNIRP 2020
    assert "power_scale" in doc["combined"] and "group_ceilings" in doc["combined"]


def test_site_metre_exceedance_without_an_origin(written):
    _, out = written
    assert not (out / "exceedance.geojson").exists()  # no origin: nothing that claims to be GeoJSON
    doc = json.loads((out / "exceedance-site.json").read_text())
    props = [f["properties"] for f in doc["features"]]
    keys = {(p["transmission"], p["check"], p["level"], p["masked"]) for p in props}
    assert ("t", "worst", 1.0, False) in keys and ("t", "whole-body", 0.5, False) in keys
    assert ("combined", "worst", 1.0, False) in keys
    assert all(isinstance(p["floor_m"], float) for p in props)
    assert all(f["geometry"]["type"] in ("Polygon", "MultiPolygon") for f in doc["features"])


def _rings(geom):
    polys = [geom["coordinates"]] if geom["type"] == "Polygon" else geom["coordinates"]
    return [ring for poly in polys for ring in poly], polys


def _signed_area(ring):
    xy = np.asarray(ring)
    return 0.5 * np.sum(xy[:-1, 0] * xy[1:, 1] - xy[1:, 0] * xy[:-1, 1])


def test_geojson_with_an_origin_is_rfc_7946_and_round_trips(written):
    # RFC 7946 (2016): FeatureCollection of Features; positions [longitude, latitude] in WGS84 (sec. 3.1.1, 4);
    # linear rings closed with >= 4 positions (3.1.6); exterior rings counterclockwise, holes clockwise (3.1.6,
    # "SHOULD"); no "crs" member (4). The round trip goes back through pyproj's inverse.
    a, _ = written
    origin = (47.3, 8.5)
    b = dataclasses.replace(a, site=dataclasses.replace(a.site, origin=origin, north_deg=30.0))
    name, doc = records.geojson_doc(b)
    assert name == "exceedance.geojson" and doc["type"] == "FeatureCollection" and "crs" not in doc
    site_doc = records.geojson_doc(a)[1]
    to_site = records.wgs84_to_site(origin, 30.0)
    assert len(doc["features"]) == len(site_doc["features"]) > 0
    for ft, ref in zip(doc["features"], site_doc["features"], strict=True):
        assert ft["type"] == "Feature" and ft["properties"] == ref["properties"]
        rings, polys = _rings(ft["geometry"])
        for ring in rings:
            xy = np.asarray(ring)
            assert len(ring) >= 4 and ring[0] == ring[-1]
            assert np.all(np.abs(xy[:, 0] - origin[1]) < 0.01) and np.all(np.abs(xy[:, 1] - origin[0]) < 0.01)
        for poly in polys:
            assert _signed_area(poly[0]) > 0 and all(_signed_area(h) < 0 for h in poly[1:])
        back = np.vstack([to_site(np.asarray(r)) for r in rings])
        want = np.vstack([np.asarray(r) for r in _rings(ref["geometry"])[0]])
        np.testing.assert_allclose(back, want, atol=1e-6)  # metres


def test_the_origin_turns_with_north():
    # a point 100 m along +y with +y at bearing 90 degrees lies due east of the origin (common practice:
    # bearings clockwise from true north)
    f = records.site_to_wgs84((0.0, 0.0), 90.0)
    lon, lat = f(np.array([[0.0, 100.0]]))[0]
    assert lat == pytest.approx(0.0, abs=1e-9) and lon > 0
    # 1 degree of longitude on the equator of the WGS84 ellipsoid: 111,319.49 m (a = 6,378,137 m)
    lon, _ = f(np.array([[0.0, 111_319.49]]))[0]
    assert lon == pytest.approx(1.0, abs=1e-4)


def test_fields_npz_holds_lattice_fields_and_ratios(written):
    a, out = written
    with np.load(out / "fields.npz") as z:
        assert z["t0_level0_e_v_per_m"].shape == (len(z["y_m"]), len(z["x_m"]))
        np.testing.assert_array_equal(z["t0_ratio"], a.transmissions[0].ratio)
        assert str(z["t0_name"]) == "t"


def test_report_pages_and_texts(written):
    a, out = written
    reader = PdfReader(out / "report.pdf")
    text = "\n".join(p.extract_text() for p in reader.pages)
    for needle in ("RF exposure assessment", "Verdict", "OVER THE LIMIT", "Cautions", "not a measurement",
                   "not a certificate", "Keep people away", "Station and operating inputs", "Transmission: t",
                   "Highest power within limits", "Far-field estimate", "Combined", "Assumptions and limitations",
                   "References", a.site.sha256):
        assert needle in text, needle
    # one page per map (each transmission and the combined one) after the text pages
    assert len(reader.pages) >= 1 + len(a.transmissions) + 1
    assert (out / report.map_name("t")).stat().st_size > 20_000 and (out / "map-combined.png").exists()


def test_report_text_agrees_with_its_figures(written):
    _, out = written
    assert disagreements(out) == []


@pytest.mark.parametrize("example", ["balcony.toml", "inverted-v.toml"])
def test_small_examples_report_agrees_with_results(example, tmp_path):
    # the two quickest examples in the default run; every example in the slow run
    path = Path(resources.files("nfmap").joinpath("examples", example))
    r = subprocess.run([sys.executable, "-m", "nfmap", "run", str(path), "-o", str(tmp_path / "o"), "--quiet"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode in (0, 1), r.stderr
    assert disagreements(tmp_path / "o") == []


def test_existing_record_is_never_replaced_without_force(written):
    _, out = written
    with pytest.raises(records.OutputExistsError):
        records.write_folder(out, False, lambda folder: None)
    before = (out / "results.json").read_text()
    with pytest.raises(RuntimeError):
        records.write_folder(out, True, lambda folder: (_ for _ in ()).throw(RuntimeError("disk full")))
    assert (out / "results.json").read_text() == before  # a failed write leaves the old record


@pytest.mark.slow
@pytest.mark.parametrize("example", EXAMPLES)
def test_every_example_runs_and_renders(example, tmp_path):
    path = Path(resources.files("nfmap").joinpath("examples", example))
    r = subprocess.run([sys.executable, "-m", "nfmap", "run", str(path), "-o", str(tmp_path / "o"), "--quiet"],
                       capture_output=True, text=True, timeout=900)
    assert r.returncode in (0, 1), r.stderr
    doc = json.loads((tmp_path / "o" / "results.json").read_text())
    text = "\n".join(p.extract_text() for p in PdfReader(tmp_path / "o" / "report.pdf").pages)
    for t in doc["transmissions"]:
        assert (tmp_path / "o" / report.map_name(t["name"])).exists()
        assert f"Transmission: {t['name']}" in text
    for area in doc["areas"]:
        assert area["name"] in text
    assert disagreements(tmp_path / "o") == []
    # every area of every transmission names the check that governs it, in results.json and in the summary
    for t in doc["transmissions"]:
        for name, ratio in t["max_ratio_by_area"].items():
            if ratio is not None:
                assert t["governing_check_by_area"][name] in t["max_ratio_by_area_and_check"][name]
    assert "Checks applied" in text
    if doc["standard"] == "icnirp-2020":
        assert "Local: Table 6" in text and "Whole-body: Table 5" in text
    if example == "demo.toml":
        # the demo's record lists the group ceiling of its contest group
        (g,) = [g for g in doc["combined"]["group_ceilings"] if g["group"] == "contest"]
        assert g["power_scale"] > 0 and "Group 'contest'" in text
        assert doc["combined"]["power_scale"]["contest"] == g["power_scale"]
        assert "(local," in r.stdout or "(whole-body," in r.stdout


def _text_boxes(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.text import Text

    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    # tick labels exist for ticks outside the view too; only those of ticks drawn count
    tick_texts, drawn = set(), set()
    for ax in fig.get_axes():
        for axis in (ax.xaxis, ax.yaxis):
            for tick in axis.get_major_ticks() + axis.get_minor_ticks():
                tick_texts |= {id(tick.label1), id(tick.label2)}
            if ax.axison and axis.get_visible():
                for tick in axis._update_ticks():
                    drawn |= {id(tick.label1), id(tick.label2)}
    out = []
    for t in fig.findobj(Text):
        if t.get_visible() and t.get_text().strip() and (id(t) not in tick_texts or id(t) in drawn):
            out.append((t.get_text(), maps._text_box(t, r)))
    return out, fig.bbox


def assert_legible(fig, plan_share: float = 0.6):
    """No two texts of a figure overlap, every text lies inside the figure, and the plan (the first axes) spans
    at least ``plan_share`` of the figure's width or height: the layout did not squeeze it."""
    boxes, page = _text_boxes(fig)
    ax = fig.axes[0].get_position()
    assert max(ax.width, ax.height) >= plan_share, f"the plan was squeezed to {ax.bounds}"
    for text, b in boxes:
        assert b.x0 >= page.x0 - 0.5 and b.y0 >= page.y0 - 0.5 and b.x1 <= page.x1 + 0.5 and b.y1 <= page.y1 + 0.5, \
            f"{text!r} leaves the figure"
    for i, (ta, a) in enumerate(boxes):
        for tb, b in boxes[i + 1:]:
            assert not a.overlaps(b), f"{ta!r} overlaps {tb!r}"


@pytest.mark.parametrize("example", [pytest.param(e, marks=pytest.mark.slow) if e.startswith("demo") else e
                                     for e in EXAMPLES])
def test_every_example_map_and_section_is_legible(example, tmp_path):
    # every text box (labels, values, titles, ticks, legend, caption) apart from every other and inside the
    # figure, on the maps, the sections and the page-sized versions in the PDF
    from nfmap import site as site_

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = site_.load(Path(resources.files("nfmap").joinpath("examples", example)))
        a = assess.assess(s, jobs=2)
    caption = maps.caption_text(a)
    wires = maps.wires_of(s)
    for t in a.transmissions:
        assert_legible(maps.map_figure(a, t.ratio, "t", t.crossings, t.areas, caption, wires))
        assert_legible(maps.map_figure(a, t.ratio, "t", t.crossings, t.areas, caption, wires, report.PAPERS_IN["a4"]))
        assert_legible(maps.section_figure(a, t), plan_share=0.5)


def test_report_pages_are_all_one_paper_size(tmp_path):
    s = free_dipole_site(power_w=3000, mode="carrier", fraction=1.0, loss_db=0.0)
    a = assess.assess(s)
    for paper, (w_in, h_in) in report.PAPERS_IN.items():
        out = tmp_path / paper
        out.mkdir()
        report.write_maps_and_report(a, out, paper)
        sizes = {(round(float(p.mediabox.width)), round(float(p.mediabox.height))) for p in PdfReader(out / "report.pdf").pages}
        assert sizes == {(round(w_in * 72), round(h_in * 72))}  # ISO 216 A4 595 x 842 pt; US letter 612 x 792 pt
