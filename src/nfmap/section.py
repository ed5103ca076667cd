"""Elevation sections: the exposure in height along a vertical plane through a fed antenna.

A plan cannot show stacked floors and balconies; a section does. The plane passes through the
antenna's feed (a beam's mast) along ``section_deg`` from the site file, or else along the bearing
(every 15 degrees) that crosses the most accessible areas, raised floors counting double. Points
on it are evaluated at the envelope power and judged, point by point, by every check of the
standard against the public tier (a point of a section has no body line to average over: its own
value serves every check, which is conservative for the body-averaged ones).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

from . import adaptive, engine
from .site import Site, Transmission

SECTION_STEP_DEG = 15
DZ_MAX_M = 0.25


@dataclass(frozen=True)
class Floor:
    """Where the section crosses an area: its floor height over an interval of the section."""

    area: str
    exposure: str
    floor_m: float
    from_s_m: float
    to_s_m: float


@dataclass(frozen=True)
class Section:
    origin_m: tuple[float, float]  # plan point where s = 0 (the feed or mast)
    bearing_deg: float  # compass bearing of +s
    chosen: bool  # True: bearing from the site file; False: picked as the one crossing most floors
    s_m: np.ndarray  # (ns,) along the section
    z_m: np.ndarray  # (nz,) height above ground
    ratio: np.ndarray  # (nz, ns): worst check, public tier, point values; NaN masked
    floors: tuple[Floor, ...]
    wires: tuple[tuple[tuple[float, float], tuple[float, float]], ...]  # fed antenna, (s, z) ends
    body_from_m: float
    body_to_m: float

    def point_m(self, s_m: float) -> tuple[float, float]:
        """Plan coordinates of a point along the section."""
        ux, uy = _unit(self.bearing_deg)
        return self.origin_m[0] + s_m * ux, self.origin_m[1] + s_m * uy


def _unit(bearing_deg: float, north_deg: float = 0.0) -> tuple[float, float]:
    a = math.radians(bearing_deg - north_deg)
    return math.sin(a), math.cos(a)


def bearing_for(site: Site, origin: tuple[float, float], extent: tuple[float, float, float, float]) -> float:
    """The section bearing (0-165 degrees, site grid) crossing the most accessible areas, raised floors
    counting double; the first such bearing on a tie."""
    x0, x1, y0, y1 = extent
    reach = math.hypot(x1 - x0, y1 - y0)
    best, best_score = 0.0, -1.0
    for b in range(0, 180, SECTION_STEP_DEG):
        ux, uy = _unit(b)
        line = shapely.LineString([(origin[0] - reach * ux, origin[1] - reach * uy),
                                   (origin[0] + reach * ux, origin[1] + reach * uy)])
        # each accessible area crossed counts (a raised floor double), more for a longer crossing
        score = sum((2.0 if a.floor_m > 0 else 1.0) * (1.0 + min(line.intersection(a.shape).length, 5.0) / 5.0)
                    for a in site.areas if a.exposure != "none" and line.intersects(a.shape))
        if score > best_score:
            best, best_score = float(b), score
    return best


def compute(site: Site, t: Transmission, model: engine.Model, feed_m: tuple[float, float, float],
            extent: tuple[float, float, float, float], spacing_m: float, workers=1,
            bearing_deg: float | None = None, adaptive_: bool = False) -> Section:
    """The section of one transmission (see the module docstring).

    ``bearing_deg`` is a bearing in the site's grid (0 = +y); None picks one with :func:`bearing_for`.
    ``adaptive_``: NEC points only where the answer changes (:mod:`nfmap.adaptive`), else every point.
    """
    origin = (feed_m[0], feed_m[1])
    chosen = bearing_deg is not None
    bearing = float(bearing_deg) % 180.0 if chosen else bearing_for(site, origin, extent)
    ux, uy = _unit(bearing)
    x0, x1, y0, y1 = extent
    # the stretch of the line inside the plan
    reach = math.hypot(x1 - x0, y1 - y0)
    line = shapely.LineString([(origin[0] - reach * ux, origin[1] - reach * uy),
                               (origin[0] + reach * ux, origin[1] + reach * uy)]).intersection(
        shapely.box(x0, y0, x1, y1))
    (ax_, ay_), (bx_, by_) = line.coords[0], line.coords[-1]
    s_lo = (ax_ - origin[0]) * ux + (ay_ - origin[1]) * uy
    s_hi = (bx_ - origin[0]) * ux + (by_ - origin[1]) * uy
    s_lo, s_hi = min(s_lo, s_hi), max(s_lo, s_hi)
    s = np.arange(math.ceil(s_lo / spacing_m), math.floor(s_hi / spacing_m) + 1) * spacing_m
    floors = _floors(site, origin, (ux, uy), s_lo, s_hi)
    body = site.grid.body
    wires = []
    fed = model.structures[model.active]
    for w in fed.wires:
        ends = []
        for p in (w.start_m, w.end_m):
            ends.append(((p[0] - origin[0]) * ux + (p[1] - origin[1]) * uy, float(p[2])))
        wires.append(tuple(ends))
    top = max([f.floor_m + body.to_m for f in floors] + [max(z for w in wires for _, z in w)] + [body.to_m]) + 1.5
    dz = min(DZ_MAX_M, spacing_m)
    z = np.arange(1, math.ceil(top / dz) + 1) * dz
    if adaptive_:
        worst = _adaptive_ratio(site, t, model, feed_m, origin, (ux, uy), s, z, spacing_m, workers)
    else:
        # one NEC card per vertical column of the section
        cols = engine.Columns(np.column_stack([origin[0] + s * ux, origin[1] + s * uy]), float(z[0]), dz, len(z))
        nf = engine.near_fields(model, cols, t.envelope_power_w, jobs=workers)
        e = engine.rms_magnitude(nf.e_v_per_m)
        h = engine.rms_magnitude(nf.h_a_per_m)
        worst = np.where(nf.masked, np.nan, _worst(site, t, e, h)).reshape(len(s), len(z)).T  # (z, s)
    return Section(origin, bearing, chosen, s, z, worst, floors, tuple(wires), body.from_m, body.to_m)


def _worst(site: Site, t: Transmission, e: np.ndarray, h: np.ndarray) -> np.ndarray:
    """The worst check against the public tier (point values serve every check); NaN stays NaN."""
    worst = np.zeros(np.shape(e))
    for r, _ in t.check_ratios(site.standard, "public", e, h).values():
        worst = np.where(np.isnan(r), np.nan, np.fmax(worst, r))
    return worst


def _adaptive_ratio(site, t, model, feed_m, origin, u, s, z, spacing_m, workers) -> np.ndarray:
    """The section's ratio (z, s) with NEC points only where the answer changes."""
    def where(iz, i_s):
        return np.column_stack([origin[0] + s[i_s] * u[0], origin[1] + s[i_s] * u[1], z[iz]])

    # over a finite ground H comes from curl E at nodes, interpolated where it is smooth (engine.SampledH)
    dz = float(z[1] - z[0]) if len(z) > 1 else 1.0
    sheet = engine.Sheet((origin[0] + s[0] * u[0], origin[1] + s[0] * u[1], float(z[0])),
                         (spacing_m * u[0], spacing_m * u[1], 0.0), (0.0, 0.0, dz), len(s), len(z))
    sampler = engine.SampledH(model, sheet, t.envelope_power_w, workers) if engine.samples_h(model) else None

    def evaluate(iz, i_s):
        if sampler is not None:
            e, h = (v[:, 0] for v in sampler.fields(iz, i_s))
        else:
            nf = engine.near_fields(model, where(iz, i_s), t.envelope_power_w, jobs=workers)
            e, h = nf.e_v_per_m, nf.h_a_per_m
        return {"e": engine.rms_magnitude(e), "h": engine.rms_magnitude(h)}

    def ratio(v, iz, i_s):
        return _worst(site, t, v["e"], v["h"])

    stride = adaptive.stride_for(spacing_m)
    ss, zz = np.meshgrid(s, z)
    trend = adaptive.inverse_square_trend(np.hypot(ss, zz - feed_m[2]), spacing_m)
    # a drawing: nothing on it is judged (the levels' maps are), so a wire's neighbourhood is refined where the
    # drawn levels or the interpolation check ask, not in full
    got = adaptive.refine(ss.shape, evaluate, ratio, adaptive.LEVELS, stride, None, None, trend,
                          np.zeros(ss.shape, bool))
    return ratio(got.values, None, None)


def _floors(site: Site, origin, u, s_lo: float, s_hi: float) -> tuple[Floor, ...]:
    out = []
    line = shapely.LineString([(origin[0] + s_lo * u[0], origin[1] + s_lo * u[1]),
                               (origin[0] + s_hi * u[0], origin[1] + s_hi * u[1])])
    for a in site.areas:
        inter = line.intersection(a.shape)
        for part in getattr(inter, "geoms", [inter]):
            if part.is_empty or part.geom_type != "LineString" or part.length <= 0:
                continue
            ends = sorted((px - origin[0]) * u[0] + (py - origin[1]) * u[1] for px, py in part.coords)
            out.append(Floor(a.name, a.exposure, a.floor_m, ends[0], ends[-1]))
    return tuple(out)
