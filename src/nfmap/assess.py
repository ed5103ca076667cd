"""Site to results: fields on the lattice, time and body averaging, ratios, area verdicts.

One engine solve per transmission (the other antennas passive), near E and H on the lattice at
the average power, spatial averaging along the body line, the exposure ratio against the tier
of the area each plan point lies in (``public`` outside every area), then per area and line
figures, the power ceiling, the model and far-field distances, and the combined assessment
over groups.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import contourpy
import numpy as np
import shapely

import antennas

from . import engine
from .exposure import averaging, farfield, limits, ratios
from .site import STRICTNESS, Site, build

MAP_LEVELS = (0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0)


@dataclass(frozen=True)
class Plan:
    """The plan lattice (x fastest) and what each plan point belongs to."""

    x_m: np.ndarray
    y_m: np.ndarray
    tier: np.ndarray  # (ny, nx) str: public / occupational / none
    area_index: np.ndarray  # (ny, nx) int: index of the governing area, -1 outside every area
    floor_m: np.ndarray  # (ny, nx) floor height of the governing area

    @property
    def spacing_m(self) -> float:
        return float(self.x_m[1] - self.x_m[0]) if len(self.x_m) > 1 else 1.0

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.y_m), len(self.x_m)


@dataclass(frozen=True)
class AreaResult:
    name: str
    exposure: str
    max_ratio: float | None
    where_m: tuple[float, float] | None
    governing: str | None
    exceedance_area_m2: float
    masked_points: int

    @property
    def over(self) -> bool:
        return self.exposure != "none" and ((self.max_ratio or 0.0) >= 1.0 or self.masked_points > 0)


@dataclass(frozen=True)
class Crossing:
    """A stretch of a line inside the region at or above the limit (``masked``: inside the zone
    too close to a wire for the model, which is never counted as compliant)."""

    line: str
    from_m: tuple[float, float]
    to_m: tuple[float, float]
    length_m: float
    masked: bool = False


@dataclass(frozen=True)
class TransmissionResult:
    name: str
    antenna: str
    frequency_mhz: float
    power_w: float
    average_power_w: float
    feed_impedance_ohm: complex
    ratio: np.ndarray  # (ny, nx), tier-applied, NaN masked
    ratio_public: np.ndarray  # (ny, nx) against the public tier everywhere
    governing: np.ndarray  # (ny, nx) int into ratios.GOVERNING
    e_v_per_m: np.ndarray  # (ny, nx) body-reduced rms E
    h_a_per_m: np.ndarray
    e_peak_v_per_m: np.ndarray  # spatial peak along the body line
    h_peak_a_per_m: np.ndarray
    areas: tuple[AreaResult, ...]
    crossings: tuple[Crossing, ...]
    power_ceiling_w: float | None
    model_distance_m: float | None
    far_field_distance_m: float
    gain_dbi: float
    masked_points: int
    warnings: tuple[str, ...] = field(default=())


@dataclass(frozen=True)
class CombinedResult:
    groups: tuple[tuple[str, ...], ...]
    ratio: np.ndarray
    areas: tuple[AreaResult, ...]
    crossings: tuple[Crossing, ...]


@dataclass(frozen=True)
class Assessment:
    site: Site
    plan: Plan
    transmissions: tuple[TransmissionResult, ...]
    combined: CombinedResult
    points_evaluated: int
    h_method: str
    warnings: tuple[str, ...]

    @property
    def over(self) -> bool:
        return any(a.over for a in self.combined.areas) or any(a.over for t in self.transmissions for a in t.areas)


def tier_at(site: Site, x_m: float, y_m: float) -> str:
    """The tier judged at a plan point: the strictest area covering it, ``public`` outside every area."""
    covering = [a for a in site.areas if a.shape.covers(shapely.Point(x_m, y_m))]
    return min(covering, key=lambda a: STRICTNESS[a.exposure]).exposure if covering else "public"


def plan(site: Site) -> Plan:
    """The plan lattice from the extent of areas, lines and antennas plus the margin."""
    xs, ys = [], []
    for a in site.areas:
        xs += [p[0] for p in a.polygon]
        ys += [p[1] for p in a.polygon]
    for ln in site.lines:
        xs += [p[0] for p in ln.points]
        ys += [p[1] for p in ln.points]
    for spec in site.antennas:
        s = _structure(site, spec.name, highest_any(site))
        for w in s.wires:
            xs += [w.start_m[0], w.end_m[0]]
            ys += [w.start_m[1], w.end_m[1]]
    d, m = site.grid.spacing_m, site.grid.margin_m
    x0, x1 = math.floor((min(xs) - m) / d) * d, math.ceil((max(xs) + m) / d) * d
    y0, y1 = math.floor((min(ys) - m) / d) * d, math.ceil((max(ys) + m) / d) * d
    x = x0 + d * np.arange(int(round((x1 - x0) / d)) + 1)
    y = y0 + d * np.arange(int(round((y1 - y0) / d)) + 1)
    xx, yy = np.meshgrid(x, y)
    tier = np.full(xx.shape, "public", dtype=object)
    index = np.full(xx.shape, -1)
    strict = np.full(xx.shape, 99)
    floor = np.zeros(xx.shape)
    for i, a in enumerate(site.areas):
        inside = shapely.contains_xy(a.shape, xx, yy) | shapely.intersects_xy(a.shape.boundary, xx, yy)
        rank = STRICTNESS[a.exposure]
        take = inside & ((rank < strict) | ((rank == strict) & (a.floor_m > floor)))
        tier[take], index[take], strict[take], floor[take] = a.exposure, i, rank, a.floor_m
    return Plan(x, y, tier, index, floor)


def highest_any(site: Site) -> float:
    return max(t.frequency_mhz for t in site.transmissions)


def _structure(site: Site, name: str, segment_mhz: float, heading_deg: float | None = None) -> antennas.Structure:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", antennas.ModelRuleWarning)
        return build(site, site.antenna(name), segment_mhz, heading_deg)


def model_for(
    site: Site, transmission: str, collect: list[str] | None = None, heading_deg: float | None = None
) -> engine.Model:
    """The engine model of one transmission: every antenna, this one fed, the rest passive.

    ``heading_deg`` turns the fed antenna if it is a beam on a rotator (default heading 0).
    """
    t = site.transmission(transmission)
    structures = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", antennas.ModelRuleWarning)
        for spec in site.antennas:
            if spec.name == t.antenna:
                s = build(site, spec, t.frequency_mhz, heading_deg)  # lambda/20 at its own highest frequency
            else:
                s = build(site, spec, t.frequency_mhz, passive=True)  # passive: lambda/10 at this one
            antennas.validate(s, t.frequency_mhz, site.ground.over_ground)
            structures.append(s)
    if collect is not None:
        for w in caught:
            msg = str(w.message)
            if msg not in collect:
                collect.append(msg)
    active = [s.name for s in structures].index(t.antenna)
    return engine.Model(tuple(structures), active, t.frequency_mhz, site.ground)


def _lattices(site: Site, pl: Plan) -> list[tuple[float, engine.Lattice, np.ndarray]]:
    """(floor, lattice, plan-mask) for the ground body line and every raised floor in use."""
    d = pl.spacing_m
    heights = site.grid.body.heights_m()
    dz = float(heights[1] - heights[0]) if len(heights) > 1 else 1.0
    out = []
    for floor in sorted(set(np.unique(pl.floor_m).tolist())):
        sel = pl.floor_m == floor
        if floor == 0.0:
            iy, ix = np.arange(pl.shape[0]), np.arange(pl.shape[1])
        else:
            iy, ix = np.flatnonzero(sel.any(axis=1)), np.flatnonzero(sel.any(axis=0))
        iy0, iy1, ix0, ix1 = iy.min(), iy.max() + 1, ix.min(), ix.max() + 1
        lat = engine.Lattice(
            (float(pl.x_m[ix0]), float(pl.y_m[iy0]), float(heights[0] + floor)),
            (d, d, dz),
            (int(ix1 - ix0), int(iy1 - iy0), len(heights)),
        )
        out.append((floor, lat, (slice(iy0, iy1), slice(ix0, ix1))))
    return out


def assess(site: Site, jobs: int = 1, progress: Callable[[int], None] | None = None) -> Assessment:
    """The whole assessment of a site (see the module docstring)."""
    pl = plan(site)
    notes: list[str] = list(site.warnings)
    lats = _lattices(site, pl)
    results = []
    points = 0
    h_method = engine.default_h_method(site.ground)
    with engine.Workers(jobs) as workers:
        for t in site.transmissions:
            results.append(_one(site, pl, lats, t, workers, progress, notes))
            points += sum(lat.size for _, lat, _ in lats) * len(headings_for(site, t.antenna))
    comb = combined(site, pl, results)
    return Assessment(site, pl, tuple(results), comb, points, h_method, tuple(notes))


ROTATOR_HEADINGS_DEG = tuple(range(0, 360, 45))


def headings_for(site: Site, antenna: str) -> tuple[float | None, ...]:
    """The headings to assess: every 45 degrees for a beam on a rotator (``heading_deg = "any"``)."""
    spec = site.antenna(antenna)
    return ROTATOR_HEADINGS_DEG if spec.kind == "beam" and spec.param("heading_deg") == "any" else (None,)


def _body_maps(site, pl, lats, model, power_w, workers, progress):
    """Body-reduced E and H (scheme of the site) and their spatial peaks on the plan, and the solution."""
    maps = [np.full(pl.shape, np.nan) for _ in range(4)]
    sol = None
    for floor, lat, (sy, sx) in lats:
        nf = engine.near_fields(model, lat, power_w, jobs=workers, progress=progress)
        sol = nf.solution
        nx, ny, nz = lat.shape
        e_z = engine.rms_magnitude(nf.e_v_per_m).reshape(nz, ny, nx)
        h_z = engine.rms_magnitude(nf.h_a_per_m).reshape(nz, ny, nx)
        take = pl.floor_m[sy, sx] == floor
        reduced = (
            averaging.body_reduce(e_z, site.grid.spatial),
            averaging.body_reduce(h_z, site.grid.spatial),
            averaging.spatial_peak(e_z),
            averaging.spatial_peak(h_z),
        )
        for dst, src in zip(maps, reduced, strict=True):
            dst[sy, sx] = np.where(take, src, dst[sy, sx])
    return (*maps, sol)


def _tier_ratio(site, pl, e, h, frequency_mhz):
    """Ratio against each plan point's tier and the governing quantity; also the public ratio."""
    r_pub, g_pub = ratios.exposure_ratio(e, h, limits.limits(site.standard, "public", frequency_mhz))
    r_occ, g_occ = ratios.exposure_ratio(e, h, limits.limits(site.standard, "occupational", frequency_mhz))
    occ = pl.tier == "occupational"
    return np.where(occ, r_occ, r_pub), np.where(occ, g_occ, g_pub), r_pub


def _worst(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Elementwise larger value; masked (NaN) in either stays masked (never compliant)."""
    return np.where(np.isnan(a) | np.isnan(b), np.nan, np.fmax(a, b))


def _one(site, pl, lats, t, workers, progress, notes) -> TransmissionResult:
    """One transmission: solve, fields on every lattice, body reduction, ratios and figures.

    A beam on a rotator is assessed at every heading of ``ROTATOR_HEADINGS_DEG``; each plan
    point keeps its worst heading (ratio), and E and H their largest values.
    """
    tx_notes: list[str] = []
    headings = headings_for(site, t.antenna)
    if len(headings) > 1:
        tx_notes.append(
            f"{t.antenna}: beam on a rotator, assessed at {len(headings)} headings every "
            f"{360 // len(headings)} degrees; each point shows its worst heading"
        )
    best = None
    for heading in headings:
        model = model_for(site, t.name, tx_notes, heading_deg=heading)
        e, h, e_pk, h_pk, sol = _body_maps(site, pl, lats, model, t.average_power_w, workers, progress)
        ratio, gov, r_pub = _tier_ratio(site, pl, e, h, t.frequency_mhz)
        if best is None:
            best = [ratio, gov, r_pub, e, h, e_pk, h_pk, sol, model]
            continue
        worse = ratio > best[0]
        best[1] = np.where(worse, gov, best[1])
        for k, v in ((0, ratio), (2, r_pub), (3, e), (4, h), (5, e_pk), (6, h_pk)):
            best[k] = _worst(best[k], v)
    ratio, gov, r_pub, e, h, e_pk, h_pk, sol, model = best
    for s in model.structures:
        for n in s.notes:
            if n not in tx_notes:
                tx_notes.append(n)
    z = sol.feed_impedance_ohm
    if abs(z.imag) > max(z.real, 50.0):
        tx_notes.append(
            f"{t.name}: feed impedance {z.real:.1f} {'+' if z.imag >= 0 else '-'} j{abs(z.imag):.1f} ohm is far from "
            "resonance; check the antenna's dimensions (the fields are computed for the power accepted, so the "
            "assessment stays valid for the model as described)"
        )
    areas = area_results(site, pl, ratio, gov)
    crossings = line_crossings(site, pl, ratio)
    structure = model.structures[model.active]
    _, gain_dbi = engine.pattern_figures(structure, t.frequency_mhz)
    lim_pub = limits.limits(site.standard, "public", t.frequency_mhz)
    ff = farfield.distance_to_limit_m(t.average_power_w, 10 ** (gain_dbi / 10), lim_pub)
    for n in tx_notes:
        if n not in notes:
            notes.append(n)
    return TransmissionResult(
        t.name, t.antenna, t.frequency_mhz, t.power_w, t.average_power_w, sol.feed_impedance_ohm,
        ratio, r_pub, gov, e, h, e_pk, h_pk, areas, crossings,
        power_ceiling_w(t.power_w, areas), model_distance_m(pl, r_pub, structure), ff, gain_dbi,
        int(np.isnan(ratio).sum()), tuple(tx_notes),
    )


def area_results(site: Site, pl: Plan, ratio: np.ndarray, gov: np.ndarray) -> tuple[AreaResult, ...]:
    """Per area: max ratio and where, governing quantity, exceedance area, masked points.

    Plan points outside every area are reported as the area "elsewhere (public)".
    """
    out = []
    cell_m2 = pl.spacing_m**2
    xx, yy = np.meshgrid(pl.x_m, pl.y_m)
    groups = [(a.name, a.exposure, pl.area_index == i) for i, a in enumerate(site.areas)]
    groups.append(("elsewhere", "public", pl.area_index == -1))
    for name, tier, sel in groups:
        vals = np.where(sel, ratio, np.nan)
        masked = int((sel & np.isnan(ratio)).sum())
        if not np.isfinite(vals).any():
            out.append(AreaResult(name, tier, None, None, None, 0.0, masked))
            continue
        k = np.nanargmax(vals)
        iy, ix = np.unravel_index(k, vals.shape)
        g = int(gov[iy, ix])
        out.append(
            AreaResult(
                name, tier, float(vals[iy, ix]), (float(xx[iy, ix]), float(yy[iy, ix])),
                ratios.GOVERNING[g] if g >= 0 else None, float((vals >= 1.0).sum() * cell_m2), masked,
            )
        )
    return tuple(out)


def _filled(pl: Plan, z: np.ndarray, level: float) -> shapely.MultiPolygon:
    gen = contourpy.contour_generator(pl.x_m, pl.y_m, z, fill_type=contourpy.FillType.OuterOffset)
    polys, offsets = gen.filled(level, np.inf)
    shapes = []
    for pts, offs in zip(polys, offsets, strict=True):
        rings = [pts[offs[i] : offs[i + 1]] for i in range(len(offs) - 1)]
        if len(rings[0]) >= 4:
            shapes.append(shapely.Polygon(rings[0], [r for r in rings[1:] if len(r) >= 4]))
    return shapely.MultiPolygon([s for s in shapes if s.is_valid and s.area > 0])


def exceedance_polygons(pl: Plan, ratio: np.ndarray, level: float) -> shapely.MultiPolygon:
    """Where the computed ratio is >= level, as polygons in site metres (masked points left out)."""
    return _filled(pl, np.where(np.isnan(ratio), 0.0, ratio), level)


def masked_polygons(pl: Plan, ratio: np.ndarray) -> shapely.MultiPolygon:
    """The zone where the model gives no value (too close to a wire, or below ground)."""
    return _filled(pl, np.isnan(ratio).astype(float), 0.5)


def line_crossings(site: Site, pl: Plan, ratio: np.ndarray) -> tuple[Crossing, ...]:
    """Stretches of each line inside the region at or above the limit, then inside the masked zone."""
    over = exceedance_polygons(pl, ratio, 1.0)
    masked = shapely.difference(masked_polygons(pl, ratio), over)
    out = []
    for flag, region in ((False, over), (True, masked)):
        for ln in site.lines:
            inter = shapely.LineString(ln.points).intersection(region)
            for part in getattr(inter, "geoms", [inter]):
                if part.is_empty or part.length <= 0 or part.geom_type != "LineString":
                    continue
                (x0, y0), (x1, y1) = part.coords[0], part.coords[-1]
                out.append(Crossing(ln.name, (round(x0, 3), round(y0, 3)), (round(x1, 3), round(y1, 3)),
                                    round(part.length, 3), flag))
    return tuple(out)


def power_ceiling_w(power_w: float, areas: tuple[AreaResult, ...]) -> float | None:
    """Largest PEP keeping every accessible area within its limit (ratios scale with power).

    Masked points (too close to a wire for the model) are left out of it: the report says so
    and they never count as compliant. inf when nothing accessible is exposed.
    """
    accessible = [a for a in areas if a.exposure != "none"]
    worst = max((a.max_ratio for a in accessible if a.max_ratio is not None), default=0.0)
    return math.inf if worst <= 0 else power_w / worst


def model_distance_m(pl: Plan, ratio_public: np.ndarray, structure: antennas.Structure) -> float | None:
    """Farthest plan point with ratio >= 1 (public tier) from the antenna's feed, horizontally."""
    fw = structure.wires[structure.feed_wire]
    fx = fw.start_m[0] + structure.feed_at * (fw.end_m[0] - fw.start_m[0])
    fy = fw.start_m[1] + structure.feed_at * (fw.end_m[1] - fw.start_m[1])
    xx, yy = np.meshgrid(pl.x_m, pl.y_m)
    over = ratio_public >= 1.0
    if not over.any():
        return None
    return float(np.hypot(xx - fx, yy - fy)[over].max())


def group_members(site: Site) -> list[tuple[str, ...]]:
    """Transmissions grouped: a named group runs together; others each alone."""
    groups: dict[str, list[str]] = {}
    alone = []
    for t in site.transmissions:
        if t.group:
            groups.setdefault(t.group, []).append(t.name)
        else:
            alone.append((t.name,))
    return [tuple(v) for v in groups.values()] + alone


def combined(site: Site, pl: Plan, results: list[TransmissionResult]) -> CombinedResult:
    by_name = {r.name: r for r in results}
    groups = group_members(site)
    sums = [ratios.sum_ratios([by_name[n].ratio for n in g]) for g in groups]
    ratio = ratios.combine_groups(sums)
    gov = np.full(ratio.shape, 0)
    areas = area_results(site, pl, ratio, gov)
    areas = tuple(a.__class__(a.name, a.exposure, a.max_ratio, a.where_m, None, a.exceedance_area_m2, a.masked_points) for a in areas)
    return CombinedResult(tuple(groups), ratio, areas, line_crossings(site, pl, ratio))
