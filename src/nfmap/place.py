"""Where on the lot may an antenna go, and at what power? A search over candidate positions by reuse.

Over a uniform ground an antenna moved horizontally carries its field with it. So the antenna alone
(the site's other antennas absent) is solved once per height and heading, and its near field is
evaluated once on an "offset" lattice: every plan point minus every candidate position, on each
level's body line. A candidate's fields on the plan are then a slice of that lattice (exact: the
candidates lie on the plan lattice), judged by every check against each point's tier, and its power
ceiling follows as in ``run``. The best candidates are then re-assessed with full solves, the other
antennas in the model, and the difference reported.
"""

from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass, replace

import numpy as np
import shapely
import shapely.affinity

import antennas

from . import assess, engine
from .site import Site, SiteError, build

HEIGHT_KEY = {"dipole": "height_m", "beam": "height_m", "vertical": "base_height_m", "end-fed": "feed_height_m"}
HEADING_KINDS = ("dipole", "beam", "end-fed")


@dataclass(frozen=True)
class Candidate:
    x_m: float
    y_m: float
    height_m: float | None
    heading_deg: float | None
    ceilings_w: dict[str, float]  # per transmission of the antenna [W PEP]; inf where nothing is exposed
    scale: float  # the smallest ceiling / planned power over its transmissions (>= 1: the plan fits)
    masked_points: int


@dataclass(frozen=True)
class Search:
    site: Site
    antenna: str
    within: str
    step_m: float
    candidates: tuple[Candidate, ...]  # ranked, best first
    rejected: int  # positions where the antenna does not fit or touches another antenna
    rechecks: tuple[tuple[Candidate, float], ...] = ()  # (candidate, full-solve scale) for the best few


def moved(site: Site, antenna: str, x_m: float, y_m: float, height_m=None, heading_deg=None) -> Site:
    """The site with one antenna moved (and raised or turned)."""
    specs = []
    for a in site.antennas:
        if a.name == antenna:
            params = dict(a.params)
            if height_m is not None:
                params[HEIGHT_KEY[a.kind]] = float(height_m)
            if heading_deg is not None:
                params["heading_deg"] = float(heading_deg)
            a = replace(a, position_m=(float(x_m), float(y_m)), params=tuple(sorted(params.items())))
        specs.append(a)
    return replace(site, antennas=tuple(specs))


def allowed_area(site: Site, antenna: str, within: str | None) -> tuple[str, shapely.Polygon]:
    """The area the antenna may stand in: ``within`` by name, else the ground area holding it now."""
    if within is not None:
        for a in site.areas:
            if a.name == within:
                return a.name, a.shape
        raise SiteError([f"{site.path}: --within: no area named {within!r}; allowed: "
                         + ", ".join(a.name for a in site.areas)])
    p = shapely.Point(site.antenna(antenna).position_m)
    for a in site.areas:
        if a.floor_m == 0.0 and a.shape.covers(p):
            return a.name, a.shape
    raise SiteError([f"{site.path}: antenna {antenna!r} stands in no area; give --within AREA"])


def search(site: Site, antenna: str, within: str | None = None, heights=None, headings=None,
           step_m: float | None = None, workers=1) -> Search:
    """Rank candidate positions (and heights, headings) of ``antenna`` by the power its transmissions may use."""
    spec = site.antenna(antenna)
    txs = [t for t in site.transmissions if t.antenna == antenna]
    if not txs:
        raise SiteError([f"{site.path}: antenna {antenna!r} has no transmission to rank by"])
    name, region = allowed_area(site, antenna, within)
    step = step_m or max(site.grid.spacing_m, 1.0)
    # the search lattice: the site's plan at the search step; candidates are its points inside the region
    s0 = replace(site, grid=replace(site.grid, spacing_m=step))
    pl = assess.plan(s0)
    heights = list(heights) if heights else [None]
    headings = list(headings) if headings else [None]
    if heights != [None] and spec.kind not in HEIGHT_KEY:
        raise SiteError([f"{site.path}: --heights: a {spec.kind} antenna has no single height to vary"])
    if headings != [None] and spec.kind not in HEADING_KINDS:
        raise SiteError([f"{site.path}: --headings: a {spec.kind} antenna has no heading"])
    xs, ys = np.meshgrid(pl.x_m, pl.y_m)
    inside = shapely.contains_xy(region, xs, ys)
    cand_idx = np.argwhere(inside)  # (iy, ix)
    others = [s for s in _others(s0, antenna)]
    out, rejected = [], 0
    for h in heights:
        for hd in headings:
            trial = moved(s0, antenna, 0.0, 0.0, h, hd)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", antennas.ModelRuleWarning)
                alone = build(trial, trial.antenna(antenna), max(t.frequency_mhz for t in txs))
            fits = _fitting(alone, cand_idx, pl, region, others)
            rejected += int((~fits).sum())
            idx = cand_idx[fits]
            if not len(idx):
                continue
            per_tx = {t.name: _scales(s0, pl, trial, antenna, t, idx, workers) for t in txs}
            for k, (iy, ix) in enumerate(idx):
                ceilings = {n: v[0][k] for n, v in per_tx.items()}
                scale = min(ceilings[t.name] / t.power_w for t in txs)
                masked = sum(v[1][k] for v in per_tx.values())
                out.append(Candidate(float(pl.x_m[ix]), float(pl.y_m[iy]), h, hd, ceilings, scale, masked))
    out.sort(key=lambda c: (c.masked_points > 0, -c.scale))
    return Search(site, antenna, name, step, tuple(out), rejected)


def _others(site: Site, antenna: str):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", antennas.ModelRuleWarning)
        return [build(site, a, assess.highest_any(site)) for a in site.antennas if a.name != antenna]


def _fitting(alone, cand_idx, pl, region, others) -> np.ndarray:
    """Candidates where the antenna's plan footprint lies inside the region and clear of the other antennas."""
    foot = shapely.union_all([shapely.LineString([w.start_m[:2], w.end_m[:2]]) if w.start_m[:2] != w.end_m[:2]
                              else shapely.Point(w.start_m[:2]).buffer(0.01) for w in alone.wires])
    keep = np.zeros(len(cand_idx), bool)
    other_geo = [(shapely.union_all([shapely.LineString([w.start_m, w.end_m]) for w in o.wires])) for o in others]
    for k, (iy, ix) in enumerate(cand_idx):
        dx, dy = float(pl.x_m[ix]), float(pl.y_m[iy])
        if not region.covers(shapely.affinity.translate(foot, dx, dy)):
            continue
        moved_wires = shapely.union_all([shapely.LineString([(w.start_m[0] + dx, w.start_m[1] + dy, w.start_m[2]),
                                                             (w.end_m[0] + dx, w.end_m[1] + dy, w.end_m[2])])
                                         for w in alone.wires])
        if any(moved_wires.distance(g) < 0.1 for g in other_geo):  # plan distance: conservative
            continue
        keep[k] = True
    return keep


def _scales(site: Site, pl: assess.Plan, trial: Site, antenna: str, t, idx: np.ndarray, workers):
    """Per candidate: the power ceiling of transmission ``t`` [W PEP] and its masked points."""
    spec = trial.antenna(antenna)
    rotator = len(assess.headings_for(trial, antenna)) > 1
    if rotator:
        model = assess.beam_alone(trial, t, 0.0, 0.0)
    else:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", antennas.ModelRuleWarning)
            alone = build(trial, spec, t.frequency_mhz)
        model = engine.Model((alone,), 0, t.frequency_mhz, site.ground)
    ny, nx = len(pl.y_m), len(pl.x_m)
    cy, cx = idx[:, 0], idx[:, 1]
    d = pl.spacing_m
    body = site.grid.body.heights_m()
    fields = []
    for lv in pl.levels:
        # offsets (plan point minus candidate, in lattice steps) needed by every candidate, for the plan
        # points of this level only (a raised floor covers a small window of the plan)
        wy, wx = lv.window
        oy0, oy1 = int(wy.start) - int(cy.max()), int(wy.stop) - 1 - int(cy.min())
        ox0, ox1 = int(wx.start) - int(cx.max()), int(wx.stop) - 1 - int(cx.min())
        if rotator:
            # a beam on a rotator: the envelope over every heading depends on the distance to the mast only
            oxg, oyg = np.meshgrid(np.arange(ox0, ox1 + 1) * d, np.arange(oy0, oy1 + 1) * d)
            r = np.hypot(oxg, oyg)
            dr = min(assess.ENVELOPE_DR_M, d / 2)
            radii = np.arange(0, math.ceil(r.max() / dr) + 1) * dr
            per_r = assess.envelope_by_radius(site, model, (0.0, 0.0), radii, lv.floor_m + body,
                                              t.envelope_power_w, workers)
            fields.append(((oy0, ox0), tuple(assess.at_radius(per_r, radii, r))))
            continue
        lat = engine.Lattice((ox0 * d, oy0 * d, lv.floor_m + body[0]),
                             (d, d, float(body[1] - body[0]) if len(body) > 1 else 1.0),
                             (ox1 - ox0 + 1, oy1 - oy0 + 1, len(body)))
        # H from curl E at nodes where it is smooth, as an assessment takes it (engine.SampledH)
        nf = engine.near_fields(model, lat, t.envelope_power_w, jobs=workers,
                                h_method="sampled" if engine.samples_h(model) else None)
        nxo, nyo, nz = lat.shape
        e = engine.rms_magnitude(nf.e_v_per_m).reshape(nz, nyo, nxo)
        h = engine.rms_magnitude(nf.h_a_per_m).reshape(nz, nyo, nxo)
        fields.append(((oy0, ox0), assess.body_fields(site, e, h)))
    ceilings, masked = [], []
    iy = np.arange(ny)[:, None]
    ix = np.arange(nx)[None, :]
    for y0, x0 in zip(cy.tolist(), cx.tolist(), strict=True):
        judged = []
        for lv, ((oy0, ox0), quad) in zip(pl.levels, fields, strict=True):
            wy, wx = lv.window
            sl = (iy[wy] - y0 - oy0, ix[:, wx] - x0 - ox0)
            arrays = []
            for f in quad:
                full = np.full((ny, nx), np.nan)
                full[wy, wx] = f[sl]
                arrays.append(np.where(lv.place, full, np.nan))
            j, _ = assess.judge_level(site, lv, t, *arrays)
            judged.append(j)
        worst, hidden = 0.0, 0
        for lv, j in zip(pl.levels, judged, strict=True):
            people = (lv.tier == "public") | (lv.tier == "occupational")  # as area_results: "none" left out
            vals = j.ratio[people]
            hidden += int(np.isnan(vals).sum())
            if np.isfinite(vals).any():
                worst = max(worst, float(np.nanmax(vals)))
        ceilings.append(math.inf if worst <= 0 else t.power_w / worst)  # as assess.power_ceiling_w
        masked.append(hidden)
    return ceilings, masked


def recheck(s: Search, best: int = 3, workers=1) -> Search:
    """Full solves (other antennas in the model, the site's own lattice) of the best candidates."""
    out = []
    for c in s.candidates[:best]:
        site = moved(s.site, s.antenna, c.x_m, c.y_m, c.height_m, c.heading_deg)
        a = assess.assess(site, jobs=workers, grow=False)
        scale = min(t.power_ceiling_w / site.transmission(t.name).power_w for t in a.transmissions
                    if t.antenna == s.antenna)
        out.append((c, scale, a))
    return replace(s, rechecks=tuple((c, sc) for c, sc, _ in out)), [a for *_, a in out]


def winner_toml(site_text: str, antenna: str, c: Candidate, kind: str) -> str:
    """The site file's text with the antenna moved to the winning candidate (other lines as they were)."""
    blocks = re.split(r"(?m)^(?=\[\[)", site_text)
    out = []
    for b in blocks:
        if b.startswith("[[antenna]]") and re.search(r'(?m)^name\s*=\s*"' + re.escape(antenna) + '"', b):
            b = _set_key(b, "position_m", f"[{c.x_m:g}, {c.y_m:g}]")
            if c.height_m is not None:
                b = _set_key(b, HEIGHT_KEY[kind], f"{c.height_m:g}")
            if c.heading_deg is not None:
                b = _set_key(b, "heading_deg", f"{c.heading_deg:g}")
        out.append(b)
    return "".join(out)


def _set_key(block: str, key: str, value: str) -> str:
    pattern = re.compile(rf"(?m)^{re.escape(key)}\s*=.*$")
    line = f"{key} = {value}                 # placed by nfmap place"
    if pattern.search(block):
        return pattern.sub(line, block, count=1)
    head, _, rest = block.partition("\n")
    return f"{head}\n{line}\n{rest}"


def search_figure_values(s: Search):
    """Per candidate position the best scale over heights and headings (for the heat map)."""
    best: dict[tuple[float, float], float] = {}
    for c in s.candidates:
        key = (c.x_m, c.y_m)
        v = c.scale if c.masked_points == 0 else 0.0
        best[key] = max(best.get(key, -math.inf), v)
    return best
