"""Site to results: fields on the lattice, time and body averaging, ratios, area verdicts.

One engine solve per transmission (the other antennas passive; eight headings for a beam on a
rotator), near E and H at the average power on one lattice per floor level (the ground, and each
raised floor of the site's areas), spatial averaging along the body line standing on that floor,
the exposure ratio against the tier of the area each point lies in (``public`` on the ground
outside every area), then per area (on its own floor) and per line the figures, the power
ceiling, the model and far-field distances, and the combined assessment over groups.
"""

from __future__ import annotations

import math
import threading
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import contourpy
import numpy as np
import shapely

import antennas

from . import adaptive, engine
from . import section as section_
from .exposure import averaging, checks, farfield, ratios
from .site import STRICTNESS, Site, build

MAP_LEVELS = (0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0)


@dataclass(frozen=True)
class Level:
    """One floor height people stand on: the ground (0) or a deck, balcony or upper storey.

    ``tier`` holds the tier judged at each plan point ("" where nobody stands at this level);
    ``area_index`` the index of the governing area (-1 outside this level's areas); ``window``
    the plan rows and columns evaluated for it.
    """

    floor_m: float
    tier: np.ndarray
    area_index: np.ndarray
    window: tuple[slice, slice]

    @property
    def place(self) -> np.ndarray:
        return self.tier != ""


@dataclass(frozen=True)
class Plan:
    """The plan lattice (x fastest) and its levels; ``levels[0]`` is the ground."""

    x_m: np.ndarray
    y_m: np.ndarray
    levels: tuple[Level, ...]

    @property
    def ground(self) -> Level:
        return self.levels[0]

    @property
    def spacing_m(self) -> float:
        return float(self.x_m[1] - self.x_m[0]) if len(self.x_m) > 1 else 1.0

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.y_m), len(self.x_m)


@dataclass(frozen=True)
class AreaResult:
    """Figures of one area on its own floor: the worst ratio over every check of the standard, where,
    the governing quantity (E, H, S) and check, and the worst ratio of each check (``by_check``)."""

    name: str
    exposure: str
    max_ratio: float | None
    where_m: tuple[float, float] | None
    governing: str | None
    exceedance_area_m2: float
    masked_points: int
    check: str | None = None
    by_check: tuple[tuple[str, float | None], ...] = ()
    covered_by: tuple[str, ...] = ()  # no point of its own: stricter overlapping areas take all of it
    empty: bool = False  # no lattice point falls inside it: not assessed (refine grid.spacing_m)
    masked_by: tuple[str, ...] = ()  # the antennas whose wires mask its points

    @property
    def over(self) -> bool:
        """Over its limit, or not shown within it (masked points, or too small for the lattice)."""
        return self.exposure != "none" and ((self.max_ratio or 0.0) >= 1.0 or self.masked_points > 0 or self.empty)


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
class Judged:
    """Ratios of one level against every check of the standard, each point against its own tier.

    ``ratio`` is the largest check at each point (0 where nobody stands, NaN masked); ``check``
    the index into ``checks`` of the check giving it (-1 where none); ``governing`` the index
    into ``ratios.GOVERNING`` of the quantity (-1 where unknown); ``by_check`` each check's ratio.
    """

    checks: tuple[str, ...]
    ratio: np.ndarray
    check: np.ndarray
    governing: np.ndarray
    by_check: dict[str, np.ndarray]
    governing_by_check: dict[str, np.ndarray]


def judge(by_check: dict[str, np.ndarray], governing: dict[str, np.ndarray] | None = None) -> Judged:
    """Stack per-check ratio maps into a :class:`Judged` (NaN in any check stays NaN)."""
    names = tuple(by_check)
    stack = np.stack([by_check[n] for n in names])
    masked = np.isnan(stack).any(axis=0)
    best = np.argmax(np.where(np.isnan(stack), -np.inf, stack), axis=0)
    ratio = np.where(masked, np.nan, np.take_along_axis(stack, best[None], axis=0)[0])
    governing = governing or {n: np.full(ratio.shape, -1) for n in names}
    gstack = np.stack([governing[n] for n in names])
    gov = np.take_along_axis(gstack, best[None], axis=0)[0]
    return Judged(names, ratio, np.where(masked, -1, best), np.where(masked, -1, gov), dict(by_check), dict(governing))


@dataclass(frozen=True)
class GroupResult:
    """Transmissions that run at the same time: ``power_scale`` is the common factor on all the
    members' powers that puts the worst combined point of the accessible areas at the limit."""

    name: str
    members: tuple[str, ...]
    power_scale: float | None
    worst_area: str | None
    worst_check: str | None


@dataclass(frozen=True)
class TransmissionResult:
    name: str
    antenna: str
    frequency_mhz: float
    power_w: float
    average_power_w: float
    feed_impedance_ohm: complex
    ratio: np.ndarray  # (ny, nx) as drawn: worst check, tier-applied, worst level, NaN masked
    ratio_public: np.ndarray  # (ny, nx) ground level, whole-body against the public tier
    levels: tuple[LevelMaps, ...]  # per level of the plan: fields (body-reduced and peak) and ratios
    areas: tuple[AreaResult, ...]
    crossings: tuple[Crossing, ...]
    power_ceiling_w: float | None
    model_distance_m: float | None
    far_field_distance_m: float
    gain_dbi: float
    masked_points: int
    warnings: tuple[str, ...] = field(default=())
    checks: tuple[str, ...] = ()  # ids of the checks applied (exposure.checks)
    section: section_.Section | None = None  # elevation section through the fed antenna

    @property
    def governing_check(self) -> str | None:
        """The check of the worst accessible area (the one that sets the power ceiling)."""
        worst = max((a for a in self.areas if a.exposure != "none" and a.max_ratio is not None),
                    key=lambda a: a.max_ratio, default=None)
        return worst.check if worst else None


@dataclass(frozen=True)
class CombinedResult:
    groups: tuple[tuple[str, ...], ...]
    ratio: np.ndarray
    areas: tuple[AreaResult, ...]
    crossings: tuple[Crossing, ...]
    group_results: tuple[GroupResult, ...] = ()
    levels: tuple[Judged, ...] = ()  # per level of the plan: each check summed by group, the worst group


@dataclass(frozen=True)
class Assessment:
    site: Site
    plan: Plan
    transmissions: tuple[TransmissionResult, ...]
    combined: CombinedResult
    points_evaluated: int
    h_method: str
    warnings: tuple[str, ...]
    edge_ratio: float = 0.0  # the largest ratio on the lattice's outer edge (any transmission or the combined case)
    margin_given_m: float | None = None  # the site file's margin, when the lattice was grown beyond it
    exhaustive: bool = False  # every lattice point evaluated (else adaptive: nfmap.adaptive)

    @property
    def over(self) -> bool:
        return any(a.over for a in self.combined.areas) or any(a.over for t in self.transmissions for a in t.areas)


def tier_at(site: Site, x_m: float, y_m: float) -> str:
    """The tier judged at a plan point: the strictest area covering it, ``public`` outside every area."""
    covering = [a for a in site.areas if a.shape.covers(shapely.Point(x_m, y_m))]
    return min(covering, key=lambda a: STRICTNESS[a.exposure]).exposure if covering else "public"


def plan_axes(site: Site) -> tuple[np.ndarray, np.ndarray]:
    """The plan lattice's x and y [m]: the extent of areas, lines and antennas plus the margin, on the spacing."""
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
    return (x0 + d * np.arange(int(round((x1 - x0) / d)) + 1), y0 + d * np.arange(int(round((y1 - y0) / d)) + 1))


def plan(site: Site) -> Plan:
    """The plan lattice from the extent of areas, lines and antennas plus the margin, and its levels."""
    x, y = plan_axes(site)
    xx, yy = np.meshgrid(x, y)
    levels = []
    for floor in sorted({0.0, *(a.floor_m for a in site.areas)}):
        # the ground is public outside every area (conservative); a raised floor exists only in its areas
        tier = np.full(xx.shape, "public" if floor == 0.0 else "", dtype=object)
        index = np.full(xx.shape, -1)
        strict = np.full(xx.shape, 99)
        for i, a in enumerate(site.areas):
            if a.floor_m != floor:
                continue
            # only the lattice points inside the area's bounding box are tested (fast for many small areas)
            bx0, by0, bx1, by1 = a.shape.bounds
            cols = slice(int(np.searchsorted(x, bx0 - 1e-9)), int(np.searchsorted(x, bx1 + 1e-9, side="right")))
            rows = slice(int(np.searchsorted(y, by0 - 1e-9)), int(np.searchsorted(y, by1 + 1e-9, side="right")))
            sx_, sy_ = xx[rows, cols], yy[rows, cols]
            if sx_.size == 0:
                continue
            inside = shapely.contains_xy(a.shape, sx_, sy_) | shapely.intersects_xy(a.shape.boundary, sx_, sy_)
            rank = STRICTNESS[a.exposure]
            take = inside & (rank < strict[rows, cols])
            tier[rows, cols][take], index[rows, cols][take], strict[rows, cols][take] = a.exposure, i, rank
        if floor == 0.0:
            window = (slice(0, len(y)), slice(0, len(x)))
        else:
            used = index >= 0
            if not used.any():
                continue  # an area too small to hold a lattice point: reported as having no points
            iy, ix = np.flatnonzero(used.any(axis=1)), np.flatnonzero(used.any(axis=0))
            window = (slice(iy.min(), iy.max() + 1), slice(ix.min(), ix.max() + 1))
        levels.append(Level(floor, tier, index, window))
    return Plan(x, y, tuple(levels))


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


def _lattices(site: Site, pl: Plan) -> list[engine.Lattice]:
    """The field lattice of each level: its window of the plan, body line raised to its floor."""
    d = pl.spacing_m
    heights = site.grid.body.heights_m()
    dz = float(heights[1] - heights[0]) if len(heights) > 1 else 1.0
    out = []
    for lv in pl.levels:
        sy, sx = lv.window
        out.append(
            engine.Lattice(
                (float(pl.x_m[int(sx.start)]), float(pl.y_m[int(sy.start)]), float(heights[0] + lv.floor_m)),
                (d, d, dz),
                (int(sx.stop - sx.start), int(sy.stop - sy.start), len(heights)),
            )
        )
    return out


@dataclass(frozen=True)
class LevelMaps:
    """Fields and ratios of one level on the plan (NaN: masked; ratio 0 where nobody stands).

    Fields are rms at ``power_w``, the power accepted at the envelope peak (PEP x feedline loss):
    ``e_v_per_m`` / ``h_a_per_m`` reduced along the body line by the site's scheme, ``e_peak_*``
    the spatial peak along it. Each check scales them to its own time base (``judged``).
    """

    floor_m: float
    power_w: float
    judged: Judged
    ratio_public: np.ndarray  # whole-body against the public tier where people stand
    e_v_per_m: np.ndarray
    h_a_per_m: np.ndarray
    e_peak_v_per_m: np.ndarray
    h_peak_a_per_m: np.ndarray
    final: np.ndarray | None = None  # plan points whose E and H NEC computed (else interpolated); None: every one

    @property
    def ratio(self) -> np.ndarray:
        return self.judged.ratio

    @property
    def governing(self) -> np.ndarray:
        return self.judged.governing


EDGE_RATIO = 0.1  # the lattice grows until the ratio on its edge is below this (the lowest level drawn)
MARGIN_MAX_M = 100.0  # ... but not beyond this margin


def assess(site: Site, jobs: int = 1, progress: Callable[[int], None] | None = None,
           grow: bool = True, max_field_points: int | None = None, exhaustive: bool = False) -> Assessment:
    """The whole assessment of a site (see the module docstring).

    Each level's lattice and each section is evaluated adaptively (:mod:`nfmap.adaptive`: NEC points only
    where the answer changes, the rest interpolated within a stated tolerance; the ring of the margin
    search at the coarse stride); ``exhaustive`` evaluates every point, as a check.

    When the ratio on the lattice's outer edge would be ``EDGE_RATIO`` or more, the exposure goes on
    beyond the map: before the assessment the margin is grown (only a ring of points evaluated at each
    trial margin) until the ring reads below it, up to ``MARGIN_MAX_M`` and ``max_field_points``; the
    site is then assessed once. The record says how far it was grown, or where the lattice ends and its
    edge value.
    """
    with engine.Workers(jobs) as workers:
        samplers = Samplers()  # the margin's ring and the ground level's lattice share their H nodes
        margin = (covering_margin_m(site, workers, max_field_points, exhaustive, samplers) if grow
                  else site.grid.margin_m)
        if margin <= site.grid.margin_m:
            return _assess_once(site, workers, progress, exhaustive, samplers)
        grown = replace(site, grid=replace(site.grid, margin_m=margin))
        return replace(_assess_once(grown, workers, progress, exhaustive, samplers), margin_given_m=site.grid.margin_m)


class Samplers:
    """The H samplers (:class:`engine.SampledH`) of an assessment, one per transmission, model and lattice: a point
    computed for one part of a transmission's run (the margin's ring) is not computed again for another (the
    lattice). Not shared between transmissions, though two may have one model and power: a sampler's answers
    depend on what it computed before (a point computed in full keeps its own H), so each is used by one
    transmission in its own order, whatever the threads. Safe to use from several threads."""

    def __init__(self):
        self._kept: list[tuple[tuple, engine.SampledH]] = []
        self._lock = threading.Lock()

    def get(self, transmission, model: engine.Model, lattice: engine.Lattice, workers,
            progress: Callable[[int], None] | None = None) -> engine.SampledH:
        key = (transmission.name, model, lattice)
        with self._lock:
            found = next((s for k, s in self._kept if k == key), None)
            if found is None:
                found = engine.SampledH(model, lattice, transmission.envelope_power_w, workers, progress)
                self._kept.append((key, found))
        found.progress = progress
        return found

    def release(self, sampler: engine.SampledH) -> None:
        """Forget a sampler whose lattice is done (its nodes free their memory)."""
        with self._lock:
            self._kept = [(k, s) for k, s in self._kept if s is not sampler]

    def keep_only(self, lattice: engine.Lattice) -> None:
        """Forget the samplers of other lattices (a margin tried and grown past)."""
        with self._lock:
            self._kept = [(k, s) for k, s in self._kept if k[2] == lattice]


def _assess_once(site: Site, workers: engine.Workers, progress, exhaustive: bool = False,
                 samplers: Samplers | None = None) -> Assessment:
    pl = plan(site)
    notes: list[str] = list(site.warnings)
    lats = _lattices(site, pl)
    progress = _serialised(progress)
    samplers = samplers or Samplers()

    def one(t) -> tuple[TransmissionResult, int]:
        points = [0]
        return _one(site, pl, lats, t, workers, progress, exhaustive, points, samplers), points[0]

    # transmissions side by side (threads waiting on the shared workers); notes merged in the site's order
    done = workers.each(one, site.transmissions)
    results = [r for r, _ in done]
    points = [sum(n for _, n in done)]
    if not exhaustive:
        results, n = settle_groups(site, pl, results, workers)
        points[0] += n
    for r in results:
        notes += [n for n in r.warnings if n not in notes]
    if exhaustive:
        notes.append("Every lattice point evaluated with NEC (--exhaustive)")
    else:
        full = sum(lat.size for lat in lats) * sum(len(headings_for(site, t.antenna)) for t in site.transmissions)
        notes.append(
            f"Adaptive lattice: {points[0]} of {full} lattice points evaluated with NEC ({100 * points[0] / full:.0f} %): "
            f"every cell crossed by the 0.1, 0.5 or 1 line, within {adaptive.WIRE_REACH_M:g} m of a wire where people "
            "are judged, or on an area edge where the ratio reaches 0.05 in full; elsewhere interpolated from the cell's "
            f"corners where that reproduces the evaluated centre within {100 * adaptive.TOLERANCE:g} % (+ "
            f"{adaptive.FLOOR:g} where both read below 0.1; {100 * adaptive.DRAWN_TOLERANCE:g} % + {adaptive.DRAWN_FLOOR:g} in "
            "not-accessible areas and on sections, whose ratios are only drawn). Each area's "
            f"worst point is a computed one, and so is each group's worst combined point. A hot spot smaller than {adaptive.COARSE_M:g} m across and more than "
            f"{adaptive.WIRE_REACH_M:g} m from every wire could be missed; --exhaustive evaluates every point")
    comb = combined(site, pl, results)
    edge = max([edge_ratio(r.ratio) for r in results] + [edge_ratio(comb.ratio)])
    h_method = engine.default_h_method(site.ground)
    if h_method == "curl" and not exhaustive:
        h_method = "sampled"
    return Assessment(site, pl, tuple(results), comb, points[0], h_method, tuple(notes),
                      edge, exhaustive=exhaustive)


def _serialised(progress: Callable[[int], None] | None) -> Callable[[int], None] | None:
    """``progress`` called by one thread at a time."""
    if progress is None:
        return None
    lock = threading.Lock()

    def call(n: int) -> None:
        with lock:
            progress(n)

    return call


def edge_ratio(ratio: np.ndarray) -> float:
    """The largest ratio on the outer rows and columns of a plan map (masked points left out)."""
    ring = np.concatenate([ratio[0], ratio[-1], ratio[:, 0], ratio[:, -1]])
    ring = ring[np.isfinite(ring)]
    return float(ring.max()) if ring.size else 0.0


def covering_margin_m(site: Site, workers: engine.Workers, max_field_points: int | None = None,
                      exhaustive: bool = True, samplers: Samplers | None = None) -> float:
    """The smallest margin (tried in growing steps) whose lattice edge reads below ``EDGE_RATIO``.

    At each trial only the ground ring of the lattice is evaluated (every transmission, its worst
    check against the public tier, added within each group as field ratios: at least the combined case's
    value under either summation rule); not ``exhaustive``, every coarse point of the ring (the adaptive
    lattice's coarse stride, through ``samplers``: the lattice of the margin kept takes those points as computed).
    Stops at ``MARGIN_MAX_M`` or where the lattice would exceed ``max_field_points``.
    """
    margin = site.grid.margin_m
    points_per_plan = site.grid.body.points * sum(len(headings_for(site, t.antenna)) for t in site.transmissions)
    while margin < MARGIN_MAX_M:
        trial = replace(site, grid=replace(site.grid, margin_m=margin))
        r = (_ring_ratio(trial, workers) if exhaustive else
             _ring_ratio(trial, workers, adaptive.stride_for(site.grid.spacing_m), samplers or Samplers()))
        if r < EDGE_RATIO:
            return margin
        step = max(2.0, (margin + 5.0) * (math.sqrt(r / EDGE_RATIO) - 1.0))
        nxt = min(MARGIN_MAX_M, margin + step)
        if max_field_points is not None:
            pl = plan(replace(site, grid=replace(site.grid, margin_m=nxt)))
            if len(pl.x_m) * len(pl.y_m) * points_per_plan * len(pl.levels) > max_field_points:
                return margin
        margin = nxt
    return margin


def _ring_ratio(site: Site, workers: engine.Workers, stride: int = 1, samplers: Samplers | None = None) -> float:
    """The worst check on the ground ring of the site's lattice (every ``stride``-th point and the corners):
    per transmission, added within each group, the worst group (every point against the public tier).
    With ``samplers`` (over a finite ground) each ring point is computed in full by the ground level's sampler,
    so that the lattice finds it done."""
    pl = plan(site)
    xx, yy = np.meshgrid(pl.x_m, pl.y_m)
    ring = np.zeros(xx.shape, bool)
    ring[0, ::stride], ring[-1, ::stride], ring[::stride, 0], ring[::stride, -1] = True, True, True, True
    ring[0, -1], ring[-1, 0], ring[-1, -1] = True, True, True
    iy, ix = np.nonzero(ring)
    px, py = xx[iy, ix], yy[iy, ix]
    heights = site.grid.body.heights_m()
    dz = float(heights[1] - heights[0]) if len(heights) > 1 else 1.0
    # one NEC card a column, the first and last rows one card each
    pts = engine.Columns(np.column_stack([px, py]), float(heights[0]), dz, len(heights), stride * pl.spacing_m)
    ground = _lattices(site, pl)[0]  # the ground level's lattice (its window is the whole plan)
    if samplers is not None:
        samplers.keep_only(ground)

    def worst_of(t) -> np.ndarray:
        worst = np.zeros(len(px))
        for heading in headings_for(site, t.antenna):
            model = model_for(site, t.name, heading_deg=heading)
            if samplers is not None and engine.samples_h(model):
                e_c, h_c = samplers.get(t, model, ground, workers).fields(iy, ix, exact=True)
            else:
                nf = engine.near_fields(model, pts, t.envelope_power_w, jobs=workers)
                e_c, h_c = nf.e_v_per_m, nf.h_a_per_m
            e = engine.rms_magnitude(e_c).reshape(len(px), len(heights)).T
            h = engine.rms_magnitude(h_c).reshape(len(px), len(heights)).T
            for r, _ in t.check_ratios(site.standard, "public", *body_fields(site, e, h)).values():
                worst = np.fmax(worst, np.nan_to_num(r))
        return worst

    by_tx = dict(zip([t.name for t in site.transmissions], workers.each(worst_of, site.transmissions), strict=True))
    # field ratios added: never less than either summation rule gives
    groups = [np.sum([np.sqrt(by_tx[n]) for n in g], axis=0) ** 2 for g in group_members(site)]
    return float(np.max(groups)) if len(px) else 0.0


ROTATOR_HEADINGS_DEG = tuple(range(0, 360, 45))
ENVELOPE_STEP_DEG = 2.0
ENVELOPE_DR_M = 0.25  # radial step of the envelope (at most half the lattice spacing)


def rotator_envelope(site: Site, pl: Plan, t, workers) -> list[LevelMaps]:
    """A beam on a rotator: per level, the worst over every heading of its field, exact in azimuth.

    Turning the beam about its mast turns its field: the field at a plan point for some heading is the
    heading-0 field at the point turned about the mast. So the beam alone (other antennas absent) is
    solved once at heading 0 and evaluated on circles about the mast (every ``ENVELOPE_STEP_DEG``, at
    radii ``ENVELOPE_DR_M`` apart or closer, on every level's body line); each radius keeps the largest
    body-reduced E and H (and spatial peaks) over the circle, and each plan point takes the larger
    value of the two radii bracketing its own. Ratios are then judged as for any point. A body line
    masked at any azimuth is masked.
    """
    spec = site.antenna(t.antenna)
    mx, my = spec.position_m
    model = beam_alone(site, t)
    xx, yy = np.meshgrid(pl.x_m, pl.y_m)
    r_plan = np.hypot(xx - mx, yy - my)
    dr = min(ENVELOPE_DR_M, pl.spacing_m / 2)
    body = site.grid.body.heights_m()
    out = []
    for lv in pl.levels:
        rr = r_plan[lv.place] if lv.place.any() else r_plan.ravel()
        radii = np.arange(math.floor(rr.min() / dr), math.ceil(rr.max() / dr) + 1) * dr
        per_r = envelope_by_radius(site, model, (mx, my), radii, lv.floor_m + body, t.envelope_power_w, workers)
        fields = at_radius(per_r, radii, r_plan)
        e_b, h_b, e_p, h_p = (np.where(lv.place, f, np.nan) for f in fields)
        judged, r_pub = judge_level(site, lv, t, e_b, h_b, e_p, h_p)
        out.append(LevelMaps(lv.floor_m, t.envelope_power_w, judged, r_pub, e_b, h_b, e_p, h_p))
    return out


def beam_alone(site: Site, t, x_m: float | None = None, y_m: float | None = None) -> engine.Model:
    """The model of a transmission's beam at heading 0, the other antennas absent (at its mast, or moved)."""
    spec = site.antenna(t.antenna)
    if x_m is not None:
        spec = replace(spec, position_m=(float(x_m), float(y_m)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", antennas.ModelRuleWarning)
        beam = build(site, spec, t.frequency_mhz, 0.0)
    return engine.Model((beam,), 0, t.frequency_mhz, site.ground)


def envelope_by_radius(site: Site, model: engine.Model, mast_m, radii: np.ndarray, z_m: np.ndarray, power_w: float,
                       workers) -> list[np.ndarray]:
    """Per radius about the mast: the largest body-reduced E, H and spatial peaks over a full circle.

    Returns four arrays (nr,): E and H reduced by the site's body-line scheme, and their spatial peaks,
    each the maximum over azimuth (every ``ENVELOPE_STEP_DEG``); NaN where the body line is masked at
    any azimuth.
    """
    mx, my = mast_m
    phi = np.radians(np.arange(0.0, 360.0, ENVELOPE_STEP_DEG))
    rg, pg, zg = np.meshgrid(radii, phi, z_m, indexing="ij")  # (nr, nphi, nz)
    pts = np.column_stack([(mx + rg * np.sin(pg)).ravel(), (my + rg * np.cos(pg)).ravel(), zg.ravel()])
    nf = engine.near_fields(model, pts, power_w, jobs=workers)
    shape = (len(radii), len(phi), len(z_m))
    e = np.moveaxis(engine.rms_magnitude(nf.e_v_per_m).reshape(shape), 2, 0)  # (nz, nr, nphi)
    h = np.moveaxis(engine.rms_magnitude(nf.h_a_per_m).reshape(shape), 2, 0)
    return [np.max(v, axis=1) for v in body_fields(site, e, h)]  # over azimuth; masked anywhere stays NaN


def at_radius(per_r: list[np.ndarray], radii: np.ndarray, r_m: np.ndarray) -> list[np.ndarray]:
    """Values at radii ``r_m``: the larger of the two sampled radii bracketing each (a sampled one alone)."""
    dr = float(radii[1] - radii[0]) if len(radii) > 1 else 1.0
    pos = r_m / dr - radii[0] / dr
    k = np.clip(np.floor(pos + 1e-9).astype(int), 0, len(radii) - 1)
    on_sample = np.abs(pos - np.round(pos)) < 1e-6  # a point on a sampled radius needs no neighbour
    k1 = np.where(on_sample, k, np.clip(k + 1, 0, len(radii) - 1))
    return [np.where(np.isnan(v[k]) | np.isnan(v[k1]), np.nan, np.fmax(v[k], v[k1])) for v in per_r]


def point_fields(site: Site, t, pts: np.ndarray, jobs: int | engine.Workers = 1):
    """rms E [V/m] and H [A/m] at points at the envelope power, the masked flags and one solution's fields.

    For a beam on a rotator: the largest over the full solves at ``ROTATOR_HEADINGS_DEG`` and over the
    envelope (the beam alone turned about its mast every ``ENVELOPE_STEP_DEG``), E and H each.
    """
    headings = headings_for(site, t.antenna)
    first = None
    e_all, h_all, m_all = [], [], []
    for heading in headings:
        nf = engine.near_fields(model_for(site, t.name, heading_deg=heading), pts, t.envelope_power_w, jobs=jobs)
        first = first or nf
        e_all.append(engine.rms_magnitude(nf.e_v_per_m))
        h_all.append(engine.rms_magnitude(nf.h_a_per_m))
        m_all.append(nf.masked)
    if len(headings) > 1:
        mx, my = site.antenna(t.antenna).position_m
        phi = np.radians(np.arange(0.0, 360.0, ENVELOPE_STEP_DEG))
        r = np.hypot(pts[:, 0] - mx, pts[:, 1] - my)
        circ = np.column_stack([(mx + r[:, None] * np.sin(phi)).ravel(), (my + r[:, None] * np.cos(phi)).ravel(),
                                np.repeat(pts[:, 2], len(phi))])
        nf = engine.near_fields(beam_alone(site, t), circ, t.envelope_power_w, jobs=jobs)
        e_all.append(np.max(engine.rms_magnitude(nf.e_v_per_m).reshape(len(pts), len(phi)), axis=1))
        h_all.append(np.max(engine.rms_magnitude(nf.h_a_per_m).reshape(len(pts), len(phi)), axis=1))
        m_all.append(nf.masked.reshape(len(pts), len(phi)).any(axis=1))
    masked = np.any(m_all, axis=0)
    e = np.where(masked, np.nan, np.nanmax(np.where(np.isnan(e_all), -np.inf, e_all), axis=0))
    h = np.where(masked, np.nan, np.nanmax(np.where(np.isnan(h_all), -np.inf, h_all), axis=0))
    return e, h, masked, first


def _difference_db(a: list[np.ndarray], b: list[np.ndarray]) -> float:
    """Largest |10 log10(a / b)| where either is 0.1 or more (both computed) [dB]."""
    worst = 0.0
    for x, y in zip(a, b, strict=True):
        sel = np.isfinite(x) & np.isfinite(y) & (np.fmax(x, y) >= 0.1) & (x > 0) & (y > 0)
        if sel.any():
            worst = max(worst, float(np.max(np.abs(10 * np.log10(x[sel] / y[sel])))))
    return worst


def headings_for(site: Site, antenna: str) -> tuple[float | None, ...]:
    """The headings to assess: every 45 degrees for a beam on a rotator (``heading_deg = "any"``)."""
    spec = site.antenna(antenna)
    return ROTATOR_HEADINGS_DEG if spec.kind == "beam" and spec.param("heading_deg") == "any" else (None,)


def _level_maps(site, pl, lats, model, t, workers, progress, exhaustive=True, samplers=None):
    """Per level: fields on its lattice at the envelope power (every point, or adaptively), body reduction,
    every check's ratio against each point's tier; the solution and the NEC points evaluated."""
    def level(pair):
        lv, lat = pair
        if exhaustive:
            nf = engine.near_fields(model, lat, t.envelope_power_w, jobs=workers, progress=progress)
            sol = nf.solution
            nx, ny, nz = lat.shape
            e_z = engine.rms_magnitude(nf.e_v_per_m).reshape(nz, ny, nx)
            h_z = engine.rms_magnitude(nf.h_a_per_m).reshape(nz, ny, nx)
            reduced = body_fields(site, e_z, h_z)
            n, final = lat.size, None
        else:
            reduced, sol, n, done = _adaptive_level(site, pl, lv, lat, model, t, workers, progress, samplers)
            final = np.zeros((len(pl.y_m), len(pl.x_m)), bool)
            final[lv.window] = done
        full = [np.full((len(pl.y_m), len(pl.x_m)), np.nan) for _ in range(4)]
        for dst, src in zip(full, reduced, strict=True):
            dst[lv.window] = src
        e, h, e_pk, h_pk = full
        judged, r_pub = judge_level(site, lv, t, e, h, e_pk, h_pk)
        return LevelMaps(lv.floor_m, t.envelope_power_w, judged, r_pub, e, h, e_pk, h_pk, final), sol, n

    # levels side by side (a raised floor's small lattice need not wait for the ground's)
    done_ = workers.each(level, list(zip(pl.levels, lats, strict=True)))
    sol = next((s_ for _, s_, _ in done_ if s_ is not None), None)
    return [m for m, _, _ in done_], sol or engine.solve(model), sum(n for _, _, n in done_)


FIELDS = ("e", "h", "e_pk", "h_pk")


def body_fields(site: Site, e: np.ndarray, h: np.ndarray) -> tuple[np.ndarray, ...]:
    """|E| and |H| along body lines (heights first) reduced by the site's scheme, and their spatial peaks:
    the four field maps every check takes (``FIELDS``)."""
    return (averaging.body_reduce(e, site.grid.spatial), averaging.body_reduce(h, site.grid.spatial),
            averaging.spatial_peak(e), averaging.spatial_peak(h))


def _adaptive_level(site: Site, pl: Plan, lv: Level, lat: engine.Lattice, model: engine.Model, t, workers, progress,
                    samplers: Samplers | None = None):
    """One level's body-reduced fields on its window of the plan, NEC points only where the answer
    changes (:mod:`nfmap.adaptive`). Returns the four maps, a solution (or None) and the NEC points."""
    sy, sx = lv.window
    xs, ys = pl.x_m[sx], pl.y_m[sy]
    heights = lv.floor_m + site.grid.body.heights_m()
    dz = float(heights[1] - heights[0]) if len(heights) > 1 else 1.0
    tier = lv.tier[lv.window]
    occupational = tier == "occupational"
    sol = []
    # over a finite ground H comes from curl E at nodes, interpolated where it is smooth (engine.SampledH)
    samplers = samplers or Samplers()
    sampler = samplers.get(t, model, lat, workers, progress) if engine.samples_h(model) else None

    def evaluate(iy: np.ndarray, ix: np.ndarray, exact: bool = False) -> dict[str, np.ndarray]:
        if sampler is not None:
            e_c, h_c = sampler.fields(iy, ix, exact)
            sol[:] = sol or [sampler.solution]
        else:
            cols = engine.Columns(np.column_stack([xs[ix], ys[iy]]), float(heights[0]), dz, len(heights), pl.spacing_m)
            nf = engine.near_fields(model, cols, t.envelope_power_w, jobs=workers, progress=progress)
            sol[:] = sol or [nf.solution]  # one solution serves: the model is the same
            e_c, h_c = nf.e_v_per_m, nf.h_a_per_m
        e = engine.rms_magnitude(e_c).reshape(len(iy), len(heights)).T
        h = engine.rms_magnitude(h_c).reshape(len(iy), len(heights)).T
        return dict(zip(FIELDS, body_fields(site, e, h), strict=True))

    def ratio(v: dict[str, np.ndarray], iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        per, _ = tier_ratios(site, t, occupational[iy, ix], *(v[k] for k in FIELDS))
        worst = np.zeros(len(iy))
        for r, _ in per.values():
            worst = np.where(np.isnan(r), np.nan, np.fmax(worst, r))
        return worst

    stride = adaptive.stride_for(pl.spacing_m)
    xx, yy = np.meshgrid(xs, ys)
    column = np.column_stack([np.repeat(xx.ravel(), len(heights)), np.repeat(yy.ravel(), len(heights)),
                              np.tile(heights, xx.size)])
    # every wire's neighbourhood is evaluated in full
    reach = max(adaptive.WIRE_REACH_M, 2 * pl.spacing_m)
    near = engine.mask_points(model, column, reach).reshape(xx.size, len(heights)).any(axis=1)
    # fields fall off roughly as the inverse square of the distance from the feed: interpolate about that
    feed = np.array(feed_point_m(model.structures[model.active]))
    trend = adaptive.inverse_square_trend(np.sqrt((xx - feed[0]) ** 2 + (yy - feed[1]) ** 2 + (heights.mean() - feed[2]) ** 2),
                                          pl.spacing_m)
    # a wire's neighbourhood is evaluated in full where people are judged; in a not-accessible area the drawn
    # levels and a looser interpolation check still refine (the map shows its ratios under the hatching)
    judged = np.isin(tier, ("public", "occupational"))
    got = adaptive.refine(xx.shape, evaluate, ratio, adaptive.LEVELS, stride, near.reshape(xx.shape) & judged,
                          _edges(site, lv, xs, ys), trend, judged)
    # each area's worst (and the ground outside every area) at a point NEC computed, H too: a point whose H was
    # not computed (interpolated between nodes or between evaluated points) reads at the top of the sampled H's
    # bound, so no point left interpolated can be worse than the worst computed one. (The margin is applied after
    # refinement: inside it, it would read as an interpolation miss between a node and its neighbours.)
    labels = np.where(lv.place[lv.window], lv.area_index[lv.window], -2)
    final = None
    if sampler is not None:
        iy_all, ix_all = np.indices(xx.shape)
        # final: evaluated here and H computed there (a node the lattice never asked for holds interpolated values)
        final = sampler.computed(iy_all.ravel(), ix_all.ravel()).reshape(xx.shape) & got.evaluated
        for k in ("h", "h_pk"):
            got.values[k][~final] *= 1.0 + engine.H_BOUND
    got = adaptive.settle_worst(got, lambda iy, ix: evaluate(iy, ix, exact=True), ratio, labels, final=final)
    if sampler is not None:
        samplers.release(sampler)
    return tuple(got.values[k] for k in FIELDS), (sol[0] if sol else None), got.plan_points * len(heights), got.final


def _edges(site: Site, lv: Level, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """Plan points of a level's window on an area or floor edge (the governing area changes next to
    them) or within a spacing of a line."""
    index = lv.area_index[lv.window]
    edge = np.zeros(index.shape, bool)
    dx = index[:, 1:] != index[:, :-1]
    dy = index[1:, :] != index[:-1, :]
    edge[:, 1:] |= dx
    edge[:, :-1] |= dx
    edge[1:, :] |= dy
    edge[:-1, :] |= dy
    xx, yy = np.meshgrid(xs, ys)
    d = float(xs[1] - xs[0]) if len(xs) > 1 else 1.0
    for ln in site.lines:
        edge |= shapely.distance(shapely.LineString(ln.points), shapely.points(xx, yy)) <= d
    return edge


def judge_level(site: Site, lv: Level, t, e, h, e_pk, h_pk) -> tuple[Judged, np.ndarray]:
    """Every check of the site's standard on one level's fields at the envelope power.

    Each check takes the body-reduced or the peak fields, as it says, and its own time base
    (``Transmission.power_factor``); each point is judged against its own tier ("none" and the
    ground outside every area against public). Returns the judged level and the whole-body ratio
    against the public tier where people stand.
    """
    per, r_pub_whole = tier_ratios(site, t, lv.tier == "occupational", e, h, e_pk, h_pk)
    by_check = {cid: np.where(lv.place, r, 0.0) for cid, (r, _) in per.items()}
    gov_by = {cid: g for cid, (_, g) in per.items()}
    return judge(by_check, gov_by), np.where(lv.place, r_pub_whole, 0.0)


def tier_ratios(site: Site, t, occupational: np.ndarray, e, h, e_pk, h_pk):
    """Each check's (ratio, governing quantity) with every point against its own tier (occupational where
    ``occupational``, else public), and the whole-body ratio against the public tier."""
    per = {tier: t.check_ratios(site.standard, tier, e, h, e_pk, h_pk) for tier in ("public", "occupational")}
    out = {}
    for cid, (r_pub, g_pub) in per["public"].items():
        r_occ, g_occ = per["occupational"][cid]
        out[cid] = (np.where(occupational, r_occ, r_pub), np.where(occupational, g_occ, g_pub))
    return out, per["public"]["whole-body"][0]


def display_ratio(pl: Plan, ratios_by_level: list[np.ndarray]) -> np.ndarray:
    """The ratio drawn on the plan: the worst level at each point.

    A point masked on some level stays masked (never compliant), unless another level there is at or
    above the limit: a definite exceedance is shown rather than hidden under the hatching.
    """
    out = np.array(ratios_by_level[0], float)
    for lv, r in zip(pl.levels[1:], ratios_by_level[1:], strict=True):
        over = np.fmax(out, r)  # NaN only where both are masked
        out = np.where(lv.place, np.where(over >= 1.0, over, _worst(out, r)), out)
    return out


def _worst(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Elementwise larger value; masked (NaN) in either stays masked (never compliant)."""
    return np.where(np.isnan(a) | np.isnan(b), np.nan, np.fmax(a, b))


def _merge_headings(a: list[LevelMaps], b: list[LevelMaps]) -> list[LevelMaps]:
    """Worst of two headings, level by level and check by check (each point keeps the worse)."""
    out = []
    for x, y in zip(a, b, strict=True):
        jx, jy = x.judged, y.judged
        by_check = {n: _worst(jx.by_check[n], jy.by_check[n]) for n in jx.checks}
        gov = {n: np.where(jy.by_check[n] > jx.by_check[n], jy.governing_by_check[n], jx.governing_by_check[n])
               for n in jx.checks}
        out.append(
            LevelMaps(
                x.floor_m, x.power_w, judge(by_check, gov), _worst(x.ratio_public, y.ratio_public),
                _worst(x.e_v_per_m, y.e_v_per_m), _worst(x.h_a_per_m, y.h_a_per_m),
                _worst(x.e_peak_v_per_m, y.e_peak_v_per_m), _worst(x.h_peak_a_per_m, y.h_peak_a_per_m),
                _both_final(x.final, y.final),
            )
        )
    return out


def _both_final(a: np.ndarray | None, b: np.ndarray | None) -> np.ndarray | None:
    """Final where both are (None: everywhere)."""
    return b if a is None else a if b is None else a & b


def _one(site, pl, lats, t, workers, progress, exhaustive=True, points=None, samplers=None) -> TransmissionResult:
    """One transmission: solve, fields on every level, body reduction, ratios and figures.

    A beam on a rotator is assessed at every heading of ``ROTATOR_HEADINGS_DEG``; each plan
    point keeps its worst heading (ratio), and E and H their largest values.
    """
    tx_notes: list[str] = []
    headings = headings_for(site, t.antenna)
    models = [model_for(site, t.name, tx_notes, heading_deg=heading) for heading in headings]
    first = next(k for k, heading in enumerate(headings) if heading in (None, 0))
    model = models[first]
    structure = model.structures[model.active]
    spec = site.antenna(t.antenna)

    def section() -> section_.Section:
        return section_.compute(
            site, t, model, feed_point_m(structure),
            (float(pl.x_m[0]), float(pl.x_m[-1]), float(pl.y_m[0]), float(pl.y_m[-1])), pl.spacing_m, workers,
            None if spec.section_deg is None else spec.section_deg - site.north_deg, adaptive_=not exhaustive)

    def headings_() -> list:
        return [_level_maps(site, pl, lats, m, t, workers, progress, exhaustive, samplers) for m in models]

    # the section (a drawing of its own) side by side with the levels: while one waits on a small adaptive round,
    # the workers compute the other's
    by_heading, sec = workers.each(lambda part: part(), [headings_, section])
    levels = None
    for maps_, _, n in by_heading:
        if points is not None:
            points[0] += n
        levels = maps_ if levels is None else _merge_headings(levels, maps_)
    sol = by_heading[first][1]
    if len(headings) > 1:
        env = rotator_envelope(site, pl, t, workers)
        diff_db = _difference_db([m.ratio for m in env], [m.ratio for m in levels])
        levels = _merge_headings(levels, env)
        tx_notes.append(
            f"{t.antenna}: beam on a rotator: every point keeps the worst of the envelope over all headings "
            f"(every {ENVELOPE_STEP_DEG:g} degrees, the beam alone, its field rotated about the mast) and of "
            f"{len(headings)} full solves every {360 // len(headings)} degrees with the other antennas in the model; "
            f"where the ratio is 0.1 or more the two differ by up to {diff_db:.1f} dB"
        )
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
    _, gain_dbi = engine.pattern_figures(structure, t.frequency_mhz)
    whole = checks.checks_for(site.standard, t.frequency_mhz)[0]
    lim_pub = checks.check_limits(whole, "public", t.frequency_mhz)
    ff = farfield.distance_to_limit_m(t.envelope_power_w * t.power_factor(whole, "public"), 10 ** (gain_dbi / 10), lim_pub)
    return TransmissionResult(
        t.name, t.antenna, t.frequency_mhz, t.power_w, t.average_power_w, sol.feed_impedance_ohm,
        **_from_levels(site, pl, t, levels, structure), far_field_distance_m=ff, gain_dbi=gain_dbi,
        warnings=tuple(tx_notes), section=sec,
    )


def _from_levels(site: Site, pl: Plan, t, levels: list[LevelMaps], structure: antennas.Structure) -> dict:
    """The parts of a transmission's result that follow from its level maps."""
    areas = area_results(site, pl, [m.judged for m in levels])
    return dict(
        ratio=display_ratio(pl, [m.ratio for m in levels]), ratio_public=levels[0].ratio_public, levels=tuple(levels),
        areas=areas, crossings=line_crossings(site, pl, levels[0].ratio), power_ceiling_w=power_ceiling_w(t.power_w, areas),
        model_distance_m=model_distance_m(pl, [m.ratio_public for m in levels], structure),
        masked_points=sum(int((np.isnan(m.ratio) & lv.place).sum()) for m, lv in zip(levels, pl.levels, strict=True)),
        checks=levels[0].judged.checks,
    )


def feed_point_m(s: antennas.Structure) -> tuple[float, float, float]:
    """Where a structure is fed (a beam: its driven element's centre, on the mast) [m]."""
    w = s.wires[s.feed_wire]
    return tuple(float(w.start_m[i] + s.feed_at * (w.end_m[i] - w.start_m[i])) for i in range(3))


def area_results(site: Site, pl: Plan, levels: list[Judged]) -> tuple[AreaResult, ...]:
    """Per area, on its own level: the worst ratio over every check and where, the governing quantity
    and check, each check's worst ratio, the exceedance area and the masked points.

    Ground points outside every area are reported as the area ``ELSEWHERE`` (public).
    """
    out = []
    cell_m2 = pl.spacing_m**2
    xx, yy = np.meshgrid(pl.x_m, pl.y_m)
    by_floor = {lv.floor_m: k for k, lv in enumerate(pl.levels)}
    groups = []
    for i, a in enumerate(site.areas):
        k = by_floor.get(a.floor_m)
        groups.append((a.name, a.exposure, k, None if k is None else pl.levels[k].area_index == i))
    groups.append((ELSEWHERE, "public", 0, pl.ground.area_index == -1))
    for gi, (name, tier, k, sel) in enumerate(groups):
        if k is None or not sel.any():
            covered: tuple[str, ...] = ()
            if gi < len(site.areas) and k is not None:
                a = site.areas[gi]
                inside = shapely.contains_xy(a.shape, xx, yy) | shapely.intersects_xy(a.shape.boundary, xx, yy)
                idx = pl.levels[k].area_index[inside]
                covered = tuple(dict.fromkeys(site.areas[int(i)].name for i in idx if i >= 0))
            out.append(AreaResult(name, tier, None, None, None, 0.0, 0, covered_by=covered,
                                  empty=not covered and name != ELSEWHERE))
            continue
        j = levels[k]
        vals = np.where(sel, j.ratio, np.nan)
        hidden = sel & np.isnan(j.ratio)
        masked = int(hidden.sum())
        by = _masking_antennas(site, xx[hidden], yy[hidden]) if masked else ()
        if not np.isfinite(vals).any():
            out.append(AreaResult(name, tier, None, None, None, 0.0, masked, masked_by=by))
            continue
        iy, ix = np.unravel_index(np.nanargmax(vals), vals.shape)
        g, c = int(j.governing[iy, ix]), int(j.check[iy, ix])
        each = []
        for n in j.checks:
            v = np.where(sel, j.by_check[n], np.nan)
            each.append((n, float(np.nanmax(v)) if np.isfinite(v).any() else None))
        out.append(
            AreaResult(
                name, tier, float(vals[iy, ix]), (float(xx[iy, ix]), float(yy[iy, ix])),
                ratios.GOVERNING[g] if g >= 0 else None, float((vals >= 1.0).sum() * cell_m2), masked,
                j.checks[c] if c >= 0 else None, tuple(each), masked_by=by,
            )
        )
    return tuple(out)


def _masking_antennas(site: Site, x_m: np.ndarray, y_m: np.ndarray) -> tuple[str, ...]:
    """The antennas nearest (in plan) to masked points: those whose wires mask them."""
    tracks = {}
    for spec in site.antennas:
        st = _structure(site, spec.name, highest_any(site))
        tracks[spec.name] = shapely.union_all([shapely.LineString([w.start_m[:2], w.end_m[:2]])
                                               if w.start_m[:2] != w.end_m[:2] else shapely.Point(w.start_m[:2])
                                               for w in st.wires])
    names = []
    for x, y in zip(x_m.tolist(), y_m.tolist(), strict=True):
        p = shapely.Point(x, y)
        names.append(min(tracks, key=lambda n: tracks[n].distance(p)))
    return tuple(dict.fromkeys(names))


ELSEWHERE = "elsewhere"


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


def model_distance_m(pl: Plan, ratio_public_by_level: list[np.ndarray], structure: antennas.Structure) -> float | None:
    """Farthest plan point, on any level, with the whole-body ratio >= 1 against the public tier, from
    the antenna's feed, horizontally (the figure the far-field estimate is compared with)."""
    fx, fy, _ = feed_point_m(structure)
    xx, yy = np.meshgrid(pl.x_m, pl.y_m)
    over = np.zeros(xx.shape, bool)
    for r in ratio_public_by_level:
        over |= np.nan_to_num(r) >= 1.0
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
    """Per level: each check's ratios added within each group by the check's own summation rule, the
    worst check at each point, then the worst group; and per group the common power scale."""
    by_name = {r.name: r for r in results}
    groups = group_members(site)
    group_levels = [_group_levels(site, pl, by_name, g) for g in groups]  # per group, per level: Judged
    per_level = []
    for k in range(len(pl.levels)):
        names = tuple(dict.fromkeys(n for gl in group_levels for n in gl[k].checks))
        # np.max keeps NaN: a point masked in any group stays masked
        stack = {n: np.max([gl[k].by_check.get(n, np.zeros_like(gl[k].ratio)) for gl in group_levels], axis=0)
                 for n in names}
        per_level.append(judge(stack))
    areas = area_results(site, pl, per_level)
    group_results = []
    for g, gl in zip(groups, group_levels, strict=True):
        gareas = area_results(site, pl, gl)
        acc = [a for a in gareas if a.exposure != "none" and a.max_ratio is not None]
        worst = max(acc, key=lambda a: a.max_ratio, default=None)
        scale = None if worst is None or worst.max_ratio <= 0 else 1.0 / worst.max_ratio
        name = by_name[g[0]].name if len(g) == 1 else (site.transmission(g[0]).group or " + ".join(g))
        group_results.append(GroupResult(name, g, scale, worst.name if worst else None, worst.check if worst else None))
    return CombinedResult(tuple(groups), display_ratio(pl, [j.ratio for j in per_level]), areas,
                          line_crossings(site, pl, per_level[0].ratio), tuple(group_results), tuple(per_level))


def _group_levels(site: Site, pl: Plan, by_name: dict[str, TransmissionResult], g: tuple[str, ...]) -> list[Judged]:
    """Per level: each check of a group's members added by the check's own summation rule, then judged."""
    per_level = []
    for k in range(len(pl.levels)):
        by_check = {}
        for c in _checks_of(site, [by_name[n] for n in g]):
            members = [by_name[n].levels[k].judged.by_check[c.id] for n in g if c.id in by_name[n].checks]
            by_check[c.id] = checks.group_sum(c, members)
        per_level.append(judge(by_check))
    return per_level


GROUP_SETTLE_ROUNDS = 6


def settle_groups(site: Site, pl: Plan, results: list[TransmissionResult], workers: engine.Workers,
                  per_round: int = 8) -> tuple[list[TransmissionResult], int]:
    """Each group's worst combined point in each area (and on the ground outside every area) made one where every
    member's E and H were computed, as each member's own worst already is (``adaptive.settle_worst``).

    The members' maps are each settled alone; their sum can peak where one member's H was interpolated (read at the
    top of its bound) or its fields interpolated. Each round evaluates, in every member, a region's highest combined
    points not final in all of them that read above its highest final one (at most ``per_round``, doubled each
    round, for ``GROUP_SETTLE_ROUNDS``); the members' maps take the computed fields there, and their results follow.
    Returns the results and the NEC points evaluated (body-line points, each member once).
    """
    by_name = {r.name: r for r in results}
    points = 0
    for g in group_members(site):
        if len(g) < 2:
            continue
        for round_ in range(GROUP_SETTLE_ROUNDS):
            picks = []
            for k, (lv, judged) in enumerate(zip(pl.levels, _group_levels(site, pl, by_name, g), strict=True)):
                done = np.logical_and.reduce([_final_of(by_name[n].levels[k]) for n in g])
                flat = adaptive.unsettled(judged.ratio, done, np.where(lv.place, lv.area_index, -2), per_round << round_)
                if len(flat):
                    picks.append((k, flat))
            if not picks:
                break
            for n in g:
                by_name[n] = _computed_at(site, pl, by_name[n], picks, workers)
            points += len(g) * site.grid.body.points * sum(len(flat) for _, flat in picks)
    return [by_name[r.name] for r in results], points


def _final_of(m: LevelMaps) -> np.ndarray:
    return np.ones(m.ratio.shape, bool) if m.final is None else m.final


def _computed_at(site: Site, pl: Plan, res: TransmissionResult, picks: list[tuple[int, np.ndarray]],
                 workers: engine.Workers) -> TransmissionResult:
    """``res`` with its fields computed at plan points (level index, flat plan indices), judged there again."""
    t = site.transmission(res.name)
    heights = site.grid.body.heights_m()
    levels = list(res.levels)
    for k, flat in picks:
        lv, m = pl.levels[k], levels[k]
        iy, ix = np.divmod(flat, len(pl.x_m))
        pts = np.column_stack([np.repeat(pl.x_m[ix], len(heights)), np.repeat(pl.y_m[iy], len(heights)),
                               np.tile(lv.floor_m + heights, len(flat))])
        e, h, _, _ = point_fields(site, t, pts, workers)
        e, h = e.reshape(len(flat), len(heights)).T, h.reshape(len(flat), len(heights)).T
        fields = [np.array(f) for f in (m.e_v_per_m, m.h_a_per_m, m.e_peak_v_per_m, m.h_peak_a_per_m)]
        for f, v in zip(fields, body_fields(site, e, h), strict=True):
            f[iy, ix] = v
        at = np.zeros(m.ratio.shape, bool)
        at[iy, ix] = True
        # judged again only at these points (a beam on a rotator keeps its per-check worst over headings elsewhere)
        again, r_pub = judge_level(site, lv, t, *fields)
        by_check = {c: np.where(at, again.by_check[c], m.judged.by_check[c]) for c in m.judged.checks}
        gov = {c: np.where(at, again.governing_by_check[c], m.judged.governing_by_check[c]) for c in m.judged.checks}
        final = None if m.final is None else m.final | at
        levels[k] = LevelMaps(m.floor_m, m.power_w, judge(by_check, gov), np.where(at, r_pub, m.ratio_public), *fields,
                              final)
    model = model_for(site, t.name)
    return replace(res, **_from_levels(site, pl, t, levels, model.structures[model.active]))


def _checks_of(site: Site, members: list[TransmissionResult]) -> list[checks.Check]:
    """Every check that applies to some member of a group, each once, in the standard's order."""
    out: dict[str, checks.Check] = {}
    for t in members:
        for c in checks.checks_for(site.standard, t.frequency_mhz):
            out.setdefault(c.id, c)
    return list(out.values())
