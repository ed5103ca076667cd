"""The station's records: results.json, fields.npz, exceedance.geojson.

The folder they go in is reserved, written and swapped in by ``outfolder``: a record is never left
half written, and a folder is replaced only with ``force`` and only if an earlier run wrote it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import math
import re
from pathlib import Path

import numpy as np
import shapely

from . import __version__, outfolder
from .assess import AreaResult, Assessment, exceedance_polygons, masked_polygons
from .exposure import checks, limits
from .outfolder import OutputExistsError  # noqa: F401  (re-exported)

CAUTIONS = (
    "This is a computer model, not a measurement. Its results are only as good as the inputs "
    "and the modelling assumptions listed in this record.",
    "It is not a certificate. Local regulations, the regulator's requirements and a licensed or "
    "otherwise qualified assessment prevail over anything shown here.",
    "Keep people away from antennas and feed lines while transmitting; near the wires the "
    "fields are far higher than anywhere on these maps, and contact with an antenna can burn.",
    "Check the model with measurements where you can, and reassess when the station, the "
    "operating habits or the surroundings change.",
)


def _slug(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-").lower() or "transmission"


RESERVED_STEMS = ("combined",)  # map-combined.png is the combined map


def map_name(transmission: str, names: tuple[str, ...] | list[str] = ()) -> str:
    """The map file of a transmission: a readable stem from its name, unique among ``names``.

    A stem that is empty (a name without Latin letters or digits), reserved, or shared with another
    transmission of ``names`` gets a short suffix from the name's hash, so no map replaces another.
    """
    stem = _slug(transmission)
    stems = [_slug(n) for n in names] if names else [stem]
    if not re.search(r"[a-z0-9]", re.sub(r"[^A-Za-z0-9]", "", transmission).lower()) or stem in RESERVED_STEMS or \
            stems.count(stem) > 1:
        stem = f"{stem}-{hashlib.sha1(transmission.encode()).hexdigest()[:6]}"
    return f"map-{stem}.png"


def _num(v):
    if v is None:
        return None
    if isinstance(v, float) and math.isinf(v):
        return None
    return round(float(v), 6) if isinstance(v, float | np.floating) else v


def _area_dict(areas: tuple[AreaResult, ...], attr: str) -> dict:
    return {a.name: _num(getattr(a, attr)) for a in areas}


def _area_figures(areas: tuple[AreaResult, ...], crossings) -> dict:
    """The per-area figures and crossings shared by each transmission and the combined case."""
    return {
        "max_ratio_by_area": _area_dict(areas, "max_ratio"),
        "governing_check_by_area": _area_dict(areas, "check"),
        "max_ratio_by_area_and_check": {a.name: {c: _num(v) for c, v in a.by_check} for a in areas},
        "worst_point_m_by_area": {x.name: x.where_m for x in areas},
        "exceedance_area_m2_by_area": _area_dict(areas, "exceedance_area_m2"),
        "masked_points_by_area": _area_dict(areas, "masked_points"),
        "crossings": [
            {"line": c.line, "from_m": list(c.from_m), "to_m": list(c.to_m), "length_m": c.length_m, "masked": c.masked}
            for c in crossings
        ],
    }


def results_doc(a: Assessment) -> dict:
    """Every figure of the report, machine-readable."""
    site = a.site
    txs = []
    for t in a.transmissions:
        spec = site.transmission(t.name)
        txs.append(
            {
                "name": t.name,
                "antenna": t.antenna,
                "frequency_mhz": t.frequency_mhz,
                "power_w": t.power_w,
                "mode": spec.mode,
                "duty_factor": spec.duty_factor,
                "transmit_fraction": spec.transmit_fraction,
                "transmit_fraction_6min": spec.fraction_6min,
                "transmit_fraction_6min_given": spec.transmit_fraction_6min is not None,
                "feedline_loss_db": spec.feedline_loss_db,
                "envelope_power_w": _num(spec.envelope_power_w),
                "checks": check_rows(site, spec),
                "governing_check": t.governing_check,
                "map_file": map_name(t.name, [x.name for x in a.transmissions]),
                "group": spec.group,
                "feed_impedance_ohm": [_num(t.feed_impedance_ohm.real), _num(t.feed_impedance_ohm.imag)],
                "average_power_w": _num(t.average_power_w),
                **_area_figures(t.areas, t.crossings),
                "governing_by_area": _area_dict(t.areas, "governing"),
                "power_ceiling_w": _num(t.power_ceiling_w),
                "power_ceiling_unlimited": t.power_ceiling_w is not None and math.isinf(t.power_ceiling_w),
                "far_field_distance_m": _num(t.far_field_distance_m),
                "model_distance_m": _num(t.model_distance_m),
                "gain_dbi": _num(t.gain_dbi),
                "masked_points": t.masked_points,
                "warnings": list(t.warnings),
            }
        )
    c = a.combined
    return {
        "tool_version": __version__,
        "created": dt.datetime.now(dt.UTC).replace(microsecond=0).isoformat(),
        "site_file": Path(site.path).name,
        "site_sha256": site.sha256,
        "title": site.title,
        "standard": site.standard,
        "standard_title": limits.STANDARD_TITLES[site.standard],
        "ground": site.ground.describe(),
        "h_method": a.h_method,
        "lattice": {
            "spacing_m": site.grid.spacing_m,
            "x_m": [float(a.plan.x_m[0]), float(a.plan.x_m[-1])],
            "y_m": [float(a.plan.y_m[0]), float(a.plan.y_m[-1])],
            "body_heights_m": site.grid.body.heights_m().tolist(),
            "spatial": site.grid.spatial,
            "points_evaluated": a.points_evaluated,
            "evaluation": "exhaustive" if a.exhaustive else "adaptive",
            "margin_m": site.grid.margin_m,
            "margin_given_m": a.margin_given_m if a.margin_given_m is not None else site.grid.margin_m,
            "edge_ratio_max": _num(a.edge_ratio),
        },
        "areas": [{"name": x.name, "exposure": x.exposure, "floor_m": x.floor_m} for x in site.areas],
        "transmissions": txs,
        "combined": {
            "groups": [list(g) for g in c.groups],
            **_area_figures(c.areas, c.crossings),
            "power_scale": {g.name: _num(g.power_scale) for g in c.group_results},
            "group_ceilings": [
                {
                    "group": g.name,
                    "members": list(g.members),
                    "power_scale": _num(g.power_scale),
                    "power_ceiling_w_by_member": {
                        m: None if g.power_scale is None else _num(site.transmission(m).power_w * g.power_scale)
                        for m in g.members
                    },
                    "worst_area": g.worst_area,
                    "governing_check": g.worst_check,
                }
                for g in c.group_results
            ],
        },
        "limit_sources": limit_sources(site),
        "over_limit": a.over,
        "warnings": list(a.warnings),
        "cautions": list(CAUTIONS),
    }


def check_rows(site, t) -> list[dict]:
    """What each check of a transmission applies: its table, time base, window and power per tier."""
    out = []
    for c in checks.checks_for(site.standard, t.frequency_mhz):
        row = {"id": c.id, "title": c.title, "envelope_peak": c.envelope,
               "spatial": "peak" if c.spatial == "peak" else site.grid.spatial, "summation": c.summation}
        for tier in ("public", "occupational"):
            w = checks.window_min(c, tier)
            row[f"window_min_{tier}"] = w
            row[f"power_w_{tier}"] = _num(t.envelope_power_w * t.power_factor(c, tier))
            row[f"transmit_fraction_{tier}"] = None if c.envelope else (
                t.fraction_6min if w is not None and w <= 6 else t.transmit_fraction)
        out.append(row)
    return out


LEVELS = (1.0, 0.5)  # exceedance contours written: at the limit, and half the limit


def exceedance_features(a: Assessment) -> list[dict]:
    """Exceedance regions in site metres, one feature per transmission (and the combined case), floor,
    check and level, and the masked zone per floor; properties as numbers and flags."""
    feats = []
    maps = [(t.name, "transmission", t.frequency_mhz, [lv.judged for lv in t.levels]) for t in a.transmissions]
    maps.append(("combined", "combined", None, list(a.combined.levels)))
    for name, kind, f, judged in maps:
        for lv, j in zip(a.plan.levels, judged, strict=True):
            place = lv.place
            layers = [("worst", j.ratio)] + [(c, j.by_check[c]) for c in j.checks]
            for check, ratio in layers:
                shown = np.where(place, ratio, 0.0)
                for level in LEVELS:
                    region = exceedance_polygons(a.plan, shown, level)
                    if not region.is_empty:
                        feats.append(_feature(region, {"transmission": name, "kind": kind, "frequency_mhz": f,
                                                       "floor_m": lv.floor_m, "check": check, "level": level,
                                                       "masked": False}))
            region = masked_polygons(a.plan, np.where(place, j.ratio, 0.0))
            if not region.is_empty:
                feats.append(_feature(region, {"transmission": name, "kind": kind, "frequency_mhz": f,
                                               "floor_m": lv.floor_m, "check": None, "level": None, "masked": True}))
    return feats


def _feature(region, props: dict) -> dict:
    return {"type": "Feature", "properties": props, "geometry": shapely.orient_polygons(region)}


def limit_sources(site) -> list[dict]:
    """Every limit table the assessment used: its source as its header states it, and whether the values
    were read in a published reproduction or are still from memory."""
    seen, out = set(), []
    for t in site.transmissions:
        for c in checks.checks_for(site.standard, t.frequency_mhz):
            for tid in dict.fromkeys((c.table, c.main_table or c.table)):
                for tier in limits.EXPOSURES:
                    if (tid, tier) in seen:
                        continue
                    seen.add((tid, tier))
                    tab = limits.table(tid, tier)
                    out.append({"table": tid, "exposure": tier, "source": tab.source,
                                "from_memory": "from memory" in tab.source})
    return out


def geojson_doc(a: Assessment) -> tuple[str, dict]:
    """The exceedance file: with a site origin, RFC 7946 GeoJSON in WGS84 longitude/latitude through a
    local transverse Mercator projection centred on the origin (``exceedance.geojson``); without one,
    the same features in site metres (``exceedance-site.json``, not GeoJSON)."""
    feats = exceedance_features(a)
    if a.site.origin is None:
        for ft in feats:
            ft["geometry"] = json.loads(shapely.to_geojson(ft["geometry"]))
        return "exceedance-site.json", {
            "type": "FeatureCollection", "name": "nfmap exceedance (site metres)",
            "coordinates": "site metres: x east, y north of the site file (no geographic origin given: add "
                           "site.origin = [latitude, longitude] for GeoJSON)",
            "north_deg": a.site.north_deg, "features": feats}
    to_geo = site_to_wgs84(a.site.origin, a.site.north_deg)
    for ft in feats:
        ft["geometry"] = json.loads(shapely.to_geojson(shapely.transform(ft["geometry"], to_geo)))
    return "exceedance.geojson", {"type": "FeatureCollection", "features": feats}


def site_to_wgs84(origin: tuple[float, float], north_deg: float):
    """A function (N, 2) site metres -> (N, 2) longitude, latitude [deg] (for ``shapely.transform``).

    Site x, y are turned by ``north_deg`` (the bearing of +y) to east, north, then taken from a
    transverse Mercator projection centred on ``origin`` (scale 1 there) to WGS84 with pyproj.
    """
    import pyproj

    lat0, lon0 = origin
    tm = pyproj.CRS.from_proj4(f"+proj=tmerc +lat_0={lat0!r} +lon_0={lon0!r} +k=1 +x_0=0 +y_0=0 +ellps=WGS84 "
                               "+units=m +no_defs")
    fwd = pyproj.Transformer.from_crs(tm, "EPSG:4326", always_xy=True)
    th = math.radians(north_deg)

    def f(xy: np.ndarray) -> np.ndarray:
        east = xy[:, 0] * math.cos(th) + xy[:, 1] * math.sin(th)
        north = -xy[:, 0] * math.sin(th) + xy[:, 1] * math.cos(th)
        lon, lat = fwd.transform(east, north)
        return np.column_stack([lon, lat])

    return f


def wgs84_to_site(origin: tuple[float, float], north_deg: float):
    """The inverse of :func:`site_to_wgs84` (for checks and for users bringing GIS points in)."""
    import pyproj

    lat0, lon0 = origin
    tm = pyproj.CRS.from_proj4(f"+proj=tmerc +lat_0={lat0!r} +lon_0={lon0!r} +k=1 +x_0=0 +y_0=0 +ellps=WGS84 "
                               "+units=m +no_defs")
    inv = pyproj.Transformer.from_crs("EPSG:4326", tm, always_xy=True)
    th = math.radians(north_deg)

    def f(lonlat: np.ndarray) -> np.ndarray:
        east, north = inv.transform(lonlat[:, 0], lonlat[:, 1])
        x = east * math.cos(th) - north * math.sin(th)
        y = east * math.sin(th) + north * math.cos(th)
        return np.column_stack([x, y])

    return f


def fields_arrays(a: Assessment) -> dict[str, np.ndarray]:
    """Arrays for fields.npz: plan axes; per level (k) its floor and tiers; per transmission (i) and
    level the body-reduced rms E [V/m] and H [A/m] and their spatial peaks at the 30-minute average
    power (``average_power_w``), the ratio (worst check) and each check's ratio; the drawn
    (worst-level) ratio per transmission and combined. NaN = masked."""
    out = {"x_m": a.plan.x_m, "y_m": a.plan.y_m, "body_heights_m": a.site.grid.body.heights_m(),
           "level_floor_m": np.array([lv.floor_m for lv in a.plan.levels])}
    for k, lv in enumerate(a.plan.levels):
        out[f"level{k}_tier"] = lv.tier.astype(str)
    for i, t in enumerate(a.transmissions):
        out[f"t{i}_name"] = np.array(t.name)
        out[f"t{i}_ratio"] = t.ratio
        scale = math.sqrt(t.average_power_w / t.levels[0].power_w)
        for k, m in enumerate(t.levels):
            out[f"t{i}_level{k}_e_v_per_m"] = m.e_v_per_m * scale
            out[f"t{i}_level{k}_h_a_per_m"] = m.h_a_per_m * scale
            out[f"t{i}_level{k}_e_peak_v_per_m"] = m.e_peak_v_per_m * scale
            out[f"t{i}_level{k}_h_peak_a_per_m"] = m.h_peak_a_per_m * scale
            out[f"t{i}_level{k}_ratio"] = m.ratio
            for c in m.judged.checks:
                out[f"t{i}_level{k}_ratio_{c}"] = m.judged.by_check[c]
    out["combined_ratio"] = a.combined.ratio
    return out


def write_folder(out_dir: Path, force: bool, write) -> Path:
    """Reserve ``out_dir`` and write the record into it via ``write(folder)`` (see ``outfolder``)."""
    with outfolder.reserved(Path(out_dir), force) as res:
        return res.commit(write)


def write_data(a: Assessment, folder: Path) -> None:
    (folder / "results.json").write_text(json.dumps(results_doc(a), indent=2, allow_nan=False) + "\n")
    name, doc = geojson_doc(a)
    (folder / name).write_text(json.dumps(doc, indent=1, allow_nan=False) + "\n")
    np.savez_compressed(folder / "fields.npz", **fields_arrays(a))
