"""Site file (TOML, ``format = 1``) to frozen dataclasses, validated before any solve.

Every problem is collected (file, key path, what was found, what is allowed) and raised
together as one :class:`SiteError`.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import tomllib
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import shapely

import antennas
from antennas import GeometryError, Structure

from . import engine
from .exposure import averaging, checks, limits, ratios

TIERS = ("public", "occupational", "none")
# Default body line: 0.2 to 2.0 m in 0.2 m steps. The top of 2 m follows the practice of averaging
# over a standing person from the ground to 2 m in 0.2 m steps (IEEE C95.1-1999, read in a secondary
# source; common practice); the bottom stays 0.2 m up, above the radials that stand in for a buried
# radial system 0.05 m above the surface, so that the stand-in does not mask the ground.
BODY_FROM_M, BODY_TO_M, BODY_POINTS = 0.2, 2.0, 10
STRICTNESS = {"public": 0, "occupational": 1, "none": 2}  # lower = stricter


class SiteError(ValueError):
    """Bad site file: ``problems`` lists one line each (file, key, found, allowed)."""

    def __init__(self, problems: list[str]):
        self.problems = problems
        super().__init__("\n".join(problems))


class SiteWarning(UserWarning):
    """Something in the site file that is allowed but worth saying (overlapping tiers...)."""


@dataclass(frozen=True)
class Grid:
    spacing_m: float
    margin_m: float
    body: averaging.BodyLine
    spatial: str


@dataclass(frozen=True)
class Area:
    name: str
    polygon: tuple[tuple[float, float], ...]
    exposure: str
    floor_m: float = 0.0

    @property
    def shape(self) -> shapely.Polygon:
        return shapely.Polygon(self.polygon)


@dataclass(frozen=True)
class Line:
    name: str
    points: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class AntennaSpec:
    name: str
    kind: str
    position_m: tuple[float, float]
    params: tuple[tuple[str, Any], ...]  # builder keyword arguments (resonant_mhz trimmed to a length_m)
    trim: Trim | None = None  # how resonant_mhz became the length in params
    section_deg: float | None = None  # compass bearing of its elevation section (None: chosen by nfmap)

    def param(self, key: str, default=None):
        return dict(self.params).get(key, default)


@dataclass(frozen=True)
class Trim:
    """A ``resonant_mhz`` antenna trimmed in the model: the length whose feed reactance is zero at
    that frequency, at the antenna's real height over the site's ground (the antenna alone)."""

    resonant_mhz: float
    rule_length_m: float  # the builder's rule-of-thumb length
    length_m: float  # trimmed
    feed_impedance_ohm: complex  # at the trimmed length
    solves: int


@dataclass(frozen=True)
class Transmission:
    name: str
    antenna: str
    frequency_mhz: float
    power_w: float
    mode: str | None
    duty_factor: float
    transmit_fraction: float
    feedline_loss_db: float
    group: str | None
    transmit_fraction_6min: float | None = None  # None: the same as transmit_fraction

    @property
    def average_power_w(self) -> float:
        """Power accepted averaged over 30 minutes: PEP x duty x transmit_fraction x loss [W]."""
        return averaging.average_power_w(self.power_w, self.duty_factor, self.transmit_fraction, self.feedline_loss_db)

    @property
    def fraction_6min(self) -> float:
        """Share of the worst 6 minutes spent transmitting (``transmit_fraction`` unless given)."""
        return self.transmit_fraction if self.transmit_fraction_6min is None else self.transmit_fraction_6min

    @property
    def envelope_power_w(self) -> float:
        """Power accepted at the envelope peak: PEP x feedline loss, no duty, no fraction [W]."""
        return averaging.average_power_w(self.power_w, 1.0, 1.0, self.feedline_loss_db)

    def power_factor(self, check, exposure: str) -> float:
        """Power of a check (``exposure.checks.Check``) relative to :attr:`envelope_power_w`."""
        return checks.power_factor(check, exposure, self.duty_factor, self.transmit_fraction, self.fraction_6min)

    def check_ratios(self, standard: str, exposure: str, e_v_per_m, h_a_per_m, e_peak_v_per_m=None,
                     h_peak_a_per_m=None) -> dict:
        """Every check of ``standard`` on fields at :attr:`envelope_power_w`, against one tier.

        ``e_v_per_m``/``h_a_per_m`` are the body-reduced fields (or point values), the ``*_peak_*`` their
        spatial peaks (default: the same values). Returns ``{check id: (ratio, governing quantity index)}``,
        each ratio scaled to the check's own time base.
        """
        e_pk = e_v_per_m if e_peak_v_per_m is None else e_peak_v_per_m
        h_pk = h_a_per_m if h_peak_a_per_m is None else h_peak_a_per_m
        out = {}
        for c in checks.checks_for(standard, self.frequency_mhz):
            e, h = (e_pk, h_pk) if c.spatial == "peak" else (e_v_per_m, h_a_per_m)
            r, g = ratios.exposure_ratio(e, h, checks.check_limits(c, exposure, self.frequency_mhz))
            out[c.id] = (r * self.power_factor(c, exposure), g)
        return out


@dataclass(frozen=True)
class Site:
    path: str
    sha256: str
    title: str
    standard: str
    north_deg: float
    notes: str
    ground: engine.Ground
    grid: Grid
    areas: tuple[Area, ...]
    lines: tuple[Line, ...]
    antennas: tuple[AntennaSpec, ...]
    transmissions: tuple[Transmission, ...]
    warnings: tuple[str, ...] = field(default=())
    origin: tuple[float, float] | None = None  # WGS84 latitude, longitude of site (0, 0) [deg]

    def antenna(self, name: str) -> AntennaSpec:
        return next(a for a in self.antennas if a.name == name)

    def transmission(self, name: str) -> Transmission:
        for t in self.transmissions:
            if t.name == name:
                return t
        raise SiteError([f"{self.path}: no transmission named {name!r}; valid: {', '.join(t.name for t in self.transmissions)}"])


# -- the schema ---------------------------------------------------------------------------------

NUM = (int, float)
TOP_KEYS = {"format", "site", "ground", "grid", "area", "line", "antenna", "transmission"}
SITE_KEYS = {"title", "standard", "north_deg", "notes", "origin"}
GROUND_KEYS = {"kind", "permittivity", "conductivity_s_per_m"}
GRID_KEYS = {"spacing_m", "margin_m", "body_from_m", "body_to_m", "body_points", "spatial"}
AREA_KEYS = {"name", "polygon", "exposure", "floor_m"}
LINE_KEYS = {"name", "points"}
TX_KEYS = {"name", "antenna", "frequency_mhz", "power_w", "mode", "duty_factor", "transmit_fraction",
           "transmit_fraction_6min", "feedline_loss_db", "group"}
ANTENNA_KEYS = {
    "dipole": {"length_m", "resonant_mhz", "height_m", "heading_deg", "apex_deg", "wire_diameter_mm"},
    "vertical": {"length_m", "resonant_mhz", "base_height_m", "radials", "radial_length_m", "radial_droop_deg",
                 "radial_height_m", "ground_loss_ohm", "wire_diameter_mm"},
    "end-fed": {"length_m", "feed_height_m", "far_height_m", "heading_deg", "counterpoise_m", "wire_diameter_mm"},
    "beam": {"elements", "element", "design_mhz", "height_m", "heading_deg", "element_diameter_mm"},
    "wires": {"wire", "feed", "wire_diameter_mm"},
}
ANTENNA_REQUIRED = {
    "dipole": {"height_m"},
    "vertical": set(),
    "end-fed": {"length_m", "feed_height_m", "far_height_m"},
    "beam": {"design_mhz", "height_m"},
    "wires": {"wire", "feed"},
}
ANTENNA_NUMBERS = {"length_m", "resonant_mhz", "height_m", "heading_deg", "apex_deg", "wire_diameter_mm",
                   "base_height_m", "radial_length_m", "radial_droop_deg", "radial_height_m", "ground_loss_ohm",
                   "feed_height_m", "far_height_m", "counterpoise_m", "design_mhz", "element_diameter_mm"}
# Plausible ranges for a property (refused outside, with the reason): what a site file can mean.
SITE_EXTENT_M = 10_000.0  # coordinates and positions: within 10 km of the site origin
HEIGHT_MAX_M = 500.0  # antenna heights and floors
RANGES = {
    # key: (lo, hi, why)
    "length_m": (0, 5000, "an antenna of at most 5 km"),
    "radial_length_m": (0, 5000, "a radial of at most 5 km"),
    "counterpoise_m": (0, 5000, "a counterpoise of at most 5 km"),
    "resonant_mhz": (0.003, 300_000, "a frequency the standards cover (3 kHz to 300 GHz)"),
    "design_mhz": (0.003, 300_000, "a frequency the standards cover (3 kHz to 300 GHz)"),
    "height_m": (0, HEIGHT_MAX_M, "a height above ground of at most 500 m"),
    "base_height_m": (0, HEIGHT_MAX_M, "a height above ground of at most 500 m"),
    "feed_height_m": (0, HEIGHT_MAX_M, "a height above ground of at most 500 m"),
    "far_height_m": (0, HEIGHT_MAX_M, "a height above ground of at most 500 m"),
    "radial_height_m": (0, HEIGHT_MAX_M, "a height above ground of at most 500 m"),
    "radial_droop_deg": (0, 90, "an angle below the horizontal from 0 to 90 degrees"),
    "apex_deg": (0, 180, "an apex angle from 0 (exclusive) to 180 degrees (flat top)"),
    "wire_diameter_mm": (0, 1000, "a conductor diameter of at most 1 m"),
    "element_diameter_mm": (0, 1000, "a conductor diameter of at most 1 m"),
    "ground_loss_ohm": (0, 10_000, "a loss resistance of at most 10 kohm"),
}
BODY_MAX_M = 3.0  # a body line above 3 m is no standing person (180 would be centimetres typed as metres)
POWER_MAX_W = 10e6  # a transmitter of at most 10 MW PEP
LOSS_MAX_DB = 30.0  # a feedline loss above 30 dB cannot be meant (and would hide the exposure)
RESERVED_AREA = "elsewhere"  # the record's name for the ground outside every area
NAME_MAX = 80  # characters in an area, line, antenna or transmission name
MAX_VERTICES = 10_000  # points of one polygon or line

POSITIVE = {"length_m", "resonant_mhz", "wire_diameter_mm", "radial_length_m", "radial_height_m", "feed_height_m",
            "far_height_m", "counterpoise_m", "design_mhz", "element_diameter_mm", "height_m"}


class _Checker:
    def __init__(self, path: str):
        self.path = path
        self.problems: list[str] = []

    def bad(self, key: str, found: Any, allowed: str) -> None:
        shown = repr(found) if not isinstance(found, dict | list) or len(repr(found)) < 60 else type(found).__name__
        self.problems.append(f"{self.path}: {key}: found {shown}; allowed: {allowed}")

    def keys(self, table: Any, allowed: set[str], where: str) -> bool:
        if not isinstance(table, dict):
            self.bad(where, table, "a table")
            return False
        for k in table:
            if k not in allowed:
                near = difflib.get_close_matches(k, sorted(allowed), n=1)
                hint = f" (did you mean {near[0]!r}?)" if near else ""
                self.problems.append(f"{self.path}: {where}.{k}: unknown key{hint}; allowed: {', '.join(sorted(allowed))}")
        return True

    def name(self, table: dict, where: str) -> str | None:
        """A required name of at most ``NAME_MAX`` characters."""
        nm = self.text(table, "name", where, required=True)
        if nm is not None and len(nm) > NAME_MAX:
            self.bad(f"{where}.name", nm[:40] + "...", f"a name of at most {NAME_MAX} characters")
            return None
        return nm

    def xyz(self, v: Any, key: str, z_range: tuple[float, float] | None = None) -> tuple | None:
        """[x, y, z] in metres, finite, within the site's extent."""
        ok = isinstance(v, list) and len(v) == 3 and all(
            isinstance(x, NUM) and not isinstance(x, bool) and math.isfinite(x) for x in v)
        if not ok or max(abs(v[0]), abs(v[1])) > SITE_EXTENT_M:
            self.bad(key, v, f"[x, y, z] in metres, finite, |x| and |y| <= {SITE_EXTENT_M:g}")
            return None
        if z_range and not z_range[0] <= v[2] <= z_range[1]:
            self.bad(key, v, f"z from {z_range[0]:g} to {z_range[1]:g} m above ground")
            return None
        return tuple(float(x) for x in v)

    def num(self, table: dict, key: str, where: str, default=None, lo=None, hi=None, lo_open=False, required=False,
            why: str = ""):
        if key not in table:
            if required:
                self.problems.append(f"{self.path}: {where}.{key}: missing; allowed: a number")
            return default
        v = table[key]
        if isinstance(v, bool) or not isinstance(v, NUM) or not math.isfinite(v):
            self.bad(f"{where}.{key}", v, "a finite number")
            return default
        if lo is not None and (v <= lo if lo_open else v < lo):
            self.bad(f"{where}.{key}", v, f"a number {'>' if lo_open else '>='} {lo:g}" + (f" and <= {hi:g}" if hi is not None else ""))
            return default
        if hi is not None and v > hi:
            self.bad(f"{where}.{key}", v, (f"a number >= {lo:g} and " if lo is not None else "a number ")
                     + f"<= {hi:g}" + (f" ({why})" if why else ""))
            return default
        return float(v)

    def text(self, table: dict, key: str, where: str, default=None, choices=None, required=False):
        if key not in table:
            if required:
                self.problems.append(
                    f"{self.path}: {where}.{key}: missing; allowed: " + (", ".join(choices) if choices else "text")
                )
            return default
        v = table[key]
        if not isinstance(v, str) or (choices and v not in choices):
            self.bad(f"{where}.{key}", v, ", ".join(choices) if choices else "text")
            return default
        if not choices and not v.strip():
            self.bad(f"{where}.{key}", v, "non-empty text")
            return default
        return v

    def points(self, table: dict, key: str, where: str, min_points: int) -> tuple | None:
        v = table.get(key)
        ok = isinstance(v, list) and min_points <= len(v) <= MAX_VERTICES and all(
            isinstance(p, list) and len(p) == 2
            and all(isinstance(c, NUM) and not isinstance(c, bool) and math.isfinite(c) and abs(c) <= SITE_EXTENT_M
                    for c in p)
            for p in v
        )
        if not ok:
            self.bad(f"{where}.{key}", v, f"a list of {min_points} to {MAX_VERTICES} [x, y] pairs in metres, "
                     f"finite, within {SITE_EXTENT_M:g} m of the origin")
            return None
        return tuple((float(x), float(y)) for x, y in v)


def load(path: str | Path) -> Site:
    """Read and validate a site file; raises :class:`SiteError` listing every problem."""
    p = Path(path)
    name = str(path)
    try:
        raw = p.read_bytes()
    except OSError as err:
        raise SiteError([f"{name}: cannot read the file ({err.strerror})"]) from None
    try:
        doc = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise SiteError([f"{name}: not a valid TOML file: {err}"]) from None
    except RecursionError:
        raise SiteError([f"{name}: not a valid site file: arrays or tables nested too deeply"]) from None
    try:
        return parse(doc, name, hashlib.sha256(raw).hexdigest())
    except RecursionError:
        raise SiteError([f"{name}: not a valid site file: arrays or tables nested too deeply"]) from None


def parse(doc: dict, name: str = "<site>", sha256: str = "") -> Site:
    c = _Checker(name)
    notes: list[str] = []
    c.keys(doc, TOP_KEYS, "(top level)")
    if doc.get("format") != 1:
        c.bad("format", doc.get("format"), "1")
    s = doc.get("site", {})
    title = standard = None
    origin = None
    north = 0.0
    site_notes = ""
    if c.keys(s, SITE_KEYS, "site"):
        title = c.text(s, "title", "site", required=True)
        standard = c.text(s, "standard", "site", choices=limits.STANDARDS, required=True)
        north = c.num(s, "north_deg", "site", 0.0)
        o = s.get("origin")
        if o is not None:
            if (isinstance(o, list) and len(o) == 2 and all(isinstance(v, NUM) and not isinstance(v, bool)
                                                            and math.isfinite(v) for v in o)
                    and -90 < o[0] < 90 and -180 <= o[1] <= 180):
                origin = (float(o[0]), float(o[1]))
            else:
                c.bad("site.origin", o, "[latitude, longitude] in WGS84 degrees (latitude -90..90, longitude -180..180)")
        site_notes = s.get("notes", "") if isinstance(s.get("notes", ""), str) else c.bad("site.notes", s["notes"], "text") or ""

    g = doc.get("ground", {"kind": "average"})
    gnd = None
    if c.keys(g, GROUND_KEYS, "ground"):
        if "permittivity" in g or "conductivity_s_per_m" in g:
            eps = c.num(g, "permittivity", "ground", lo=1, hi=100, required=True)  # water ~80
            sig = c.num(g, "conductivity_s_per_m", "ground", lo=0, hi=100, required=True)  # sea water ~5 S/m
            if "kind" in g:
                c.bad("ground.kind", g["kind"], "omit kind when permittivity and conductivity_s_per_m are given")
            if eps is not None and sig is not None:
                gnd = engine.ground(permittivity=eps, conductivity_s_per_m=sig)
        else:
            kind = c.text(g, "kind", "ground", choices=engine.GROUND_KINDS, required=True)
            gnd = engine.ground(kind) if kind else None

    gr = doc.get("grid", {})
    grid = None
    if c.keys(gr, GRID_KEYS, "grid"):
        spacing = c.num(gr, "spacing_m", "grid", 0.5, lo=0, lo_open=True, hi=10)
        margin = c.num(gr, "margin_m", "grid", 5.0, lo=0, hi=200)
        body_why = "metres above the floor: a standing person is about 2 m tall; 180 would be centimetres"
        b_from = c.num(gr, "body_from_m", "grid", BODY_FROM_M, lo=0, hi=BODY_MAX_M, why=body_why)
        b_to = c.num(gr, "body_to_m", "grid", BODY_TO_M, lo=0, hi=BODY_MAX_M, why=body_why)
        n = gr.get("body_points", BODY_POINTS)
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= 50:
            c.bad("grid.body_points", n, "a whole number from 1 to 50")
            n = BODY_POINTS
        spatial = c.text(gr, "spatial", "grid", "average", choices=("average", "peak"))
        if b_from is not None and b_to is not None and b_to < b_from:
            c.bad("grid.body_to_m", b_to, f"a height >= body_from_m ({b_from:g})")
        if spacing is not None and spacing < 0.05:
            c.bad("grid.spacing_m", spacing, "at least 0.05 m")
        if None not in (spacing, margin, b_from, b_to, spatial):
            grid = Grid(spacing, margin, averaging.BodyLine(b_from, b_to, n), spatial)

    areas = _tables(c, doc, "area")
    area_list: list[Area] = []
    for i, a in enumerate(areas):
        where = f"area[{i + 1}]"
        if not c.keys(a, AREA_KEYS, where):
            continue
        nm = c.name(a, where)
        if nm is not None and nm.strip().lower() == RESERVED_AREA:
            c.bad(f"{where}.name", nm, f"any name but {RESERVED_AREA!r}, which the record uses for the ground outside "
                  "every area")
            nm = None
        poly = c.points(a, "polygon", where, 3)
        tier = c.text(a, "exposure", where, "public", choices=TIERS)
        floor = c.num(a, "floor_m", where, 0.0, lo=0, hi=HEIGHT_MAX_M)
        if poly is not None:
            shp = shapely.Polygon(poly)
            if not shp.is_valid or shp.area <= 0:
                c.bad(f"{where}.polygon", [list(p) for p in poly], "a simple polygon (no self-intersection, non-zero area)")
                poly = None
        if nm and poly and tier is not None and floor is not None:
            area_list.append(Area(nm, poly, tier, floor))
    _unique(c, [a.name for a in area_list], "area")
    notes += _overlap_notes(area_list)

    line_list: list[Line] = []
    for i, ln in enumerate(_tables(c, doc, "line")):
        where = f"line[{i + 1}]"
        if not c.keys(ln, LINE_KEYS, where):
            continue
        nm = c.name(ln, where)
        pts = c.points(ln, "points", where, 2)
        if nm and pts:
            line_list.append(Line(nm, pts))
    _unique(c, [ln.name for ln in line_list], "line")

    ant_list: list[AntennaSpec] = []
    for i, a in enumerate(_tables(c, doc, "antenna")):
        where = f"antenna[{i + 1}]"
        if not isinstance(a, dict):
            c.bad(where, a, "a table")
            continue
        kind = c.text(a, "kind", where, choices=tuple(antennas.BUILDERS), required=True)
        allowed = {"name", "kind", "position_m", "section_deg"} | ANTENNA_KEYS.get(kind, set())
        c.keys(a, allowed, where)
        nm = c.name(a, where)
        pos = a.get("position_m")
        if not (isinstance(pos, list) and len(pos) == 2
                and all(isinstance(v, NUM) and not isinstance(v, bool) and math.isfinite(v) and abs(v) <= SITE_EXTENT_M
                        for v in pos)):
            c.bad(f"{where}.position_m", pos, f"[x, y] in metres, finite, within {SITE_EXTENT_M:g} m of the origin")
            pos = None
        if kind is None:
            continue
        if kind != "beam" and a.get("heading_deg") == "any":
            c.bad(f"{where}.heading_deg", "any", "a compass bearing in degrees ('any' is for a beam on a rotator)")
        for req in ANTENNA_REQUIRED[kind]:
            if req not in a:
                c.problems.append(f"{c.path}: {where}.{req}: missing; allowed: see the {kind} builder's parameters")
        params = {}
        section = c.num(a, "section_deg", where)
        for k in ANTENNA_KEYS[kind] & set(a):
            v = a[k]
            if k in ("radials", "elements"):
                low = 0 if k == "radials" else 2
                if isinstance(v, bool) or not isinstance(v, int) or v < low or v > 64:
                    c.bad(f"{where}.{k}", v, f"a whole number from {low} to 64")
                    continue
            if k in ANTENNA_NUMBERS and not (k == "heading_deg" and v == "any"):
                lo, hi, why = RANGES.get(k, (0 if k in POSITIVE else None, None, ""))
                v = c.num(a, k, where, lo=lo, hi=hi, lo_open=k in POSITIVE or k == "apex_deg", why=why)
                if v is None:
                    continue
            if k in ("element", "wire", "feed"):
                v = _nested(c, k, v, where)
                if v is None:
                    continue
            params[k] = v
        if kind in ("dipole", "vertical") and ("length_m" in a) == ("resonant_mhz" in a):
            c.problems.append(f"{c.path}: {where}: give exactly one of length_m and resonant_mhz")
        if nm and pos is not None:
            ant_list.append(AntennaSpec(nm, kind, (float(pos[0]), float(pos[1])), tuple(sorted(params.items())),
                                        section_deg=section))
    _unique(c, [a.name for a in ant_list], "antenna")
    if not ant_list and not any("antenna[" in p for p in c.problems):
        c.problems.append(f"{name}: antenna: missing; allowed: at least one [[antenna]] table")

    tx_list: list[Transmission] = []
    ant_names = [a.name for a in ant_list]
    for i, t in enumerate(_tables(c, doc, "transmission")):
        where = f"transmission[{i + 1}]"
        if not c.keys(t, TX_KEYS, where):
            continue
        nm = c.name(t, where)
        ant = c.text(t, "antenna", where, required=True)
        if ant is not None and ant_list and ant not in ant_names:
            near = difflib.get_close_matches(ant, ant_names, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            c.problems.append(f"{name}: {where}.antenna: no antenna named {ant!r}{hint}; allowed: {', '.join(ant_names)}")
        f = c.num(t, "frequency_mhz", where, lo=0, lo_open=True, required=True)
        pw = c.num(t, "power_w", where, lo=0, lo_open=True, hi=POWER_MAX_W, required=True)
        mode = c.text(t, "mode", where, choices=tuple(averaging.MODES))
        duty = c.num(t, "duty_factor", where, lo=0, lo_open=True, hi=1)
        if mode is None and duty is None and "mode" not in t and "duty_factor" not in t:
            c.problems.append(f"{name}: {where}: give mode ({', '.join(averaging.MODES)}) or duty_factor (0..1]")
        if mode is not None and "duty_factor" in t:
            c.problems.append(f"{name}: {where}: give mode or duty_factor, not both")
        if duty is None and mode is not None:
            duty = averaging.duty_factor(mode)
        frac = c.num(t, "transmit_fraction", where, 1.0, lo=0, lo_open=True, hi=1)
        frac6 = c.num(t, "transmit_fraction_6min", where, None, lo=0, lo_open=True, hi=1)
        if frac is not None and frac6 is not None and frac6 < frac:
            c.bad(f"{where}.transmit_fraction_6min", frac6,
                  f"a share >= transmit_fraction ({frac:g}): the worst 6 minutes of a 30-minute window are at least "
                  "as busy as the window's average")
            frac6 = None
        loss = c.num(t, "feedline_loss_db", where, 0.0, lo=0, hi=LOSS_MAX_DB)
        grp = c.text(t, "group", where)
        if standard and f is not None:
            for tier in ("public", "occupational"):
                try:
                    limits.limits(standard, tier, f)
                except ValueError as err:
                    c.problems.append(f"{name}: {where}.frequency_mhz: {err}")
                    break
        if None not in (nm, ant, f, pw, duty, frac, loss):
            tx_list.append(Transmission(nm, ant, f, pw, mode, duty, frac, loss, grp, frac6))
    _unique(c, [t.name for t in tx_list], "transmission")
    if not tx_list and not any("transmission[" in p for p in c.problems):
        c.problems.append(f"{name}: transmission: missing; allowed: at least one [[transmission]] table")
    if c.problems:
        raise SiteError(c.problems)
    site = Site(name, sha256, title, standard, north, site_notes, gnd, grid, tuple(area_list), tuple(line_list),
                tuple(ant_list), tuple(tx_list), tuple(notes), origin)
    # build every antenna once, so geometry errors surface here, before any solve; then make
    # resonant_mhz true in the model (a few solves per antenna) and check the trimmed geometry again
    built = _build_all(site)
    try:
        site = replace(site, antennas=tuple(trim_resonant(site, a) for a in site.antennas))
    except engine.EngineError as err:
        raise SiteError([f"{name}: antenna: trimming to resonance failed: {err}"]) from None
    if any(a.trim for a in site.antennas):
        built = _build_all(site)
    notes += _body_line_notes(site) + _far_antenna_notes(site, built) + _unusual_notes(site)
    for n in notes:
        warnings.warn(n, SiteWarning, stacklevel=2)
    return site


NESTED_KEYS = {
    "element": ({"length_m", "offset_m"}, {"length_m", "offset_m"}),
    "wire": ({"from_m", "to_m", "diameter_mm"}, {"from_m", "to_m"}),
    "feed": ({"wire", "at"}, {"wire"}),
}


def _nested(c: _Checker, key: str, v: Any, where: str) -> Any:
    """Check the nested tables of a builder (``element``, ``wire``, ``feed``): known keys, numbers, ranges."""
    allowed, required = NESTED_KEYS[key]
    rows = [v] if key == "feed" else v
    if key == "feed" and not isinstance(v, dict):
        c.bad(f"{where}.feed", v, "a table {wire = N, at = 0.0..1.0}")
        return None
    if key != "feed" and (not isinstance(v, list) or not v or len(v) > 500):
        c.bad(f"{where}.{key}", v, f"an array of 1 to 500 tables {{{', '.join(sorted(allowed))}}}")
        return None
    ok = True
    for i, row in enumerate(rows):
        at = f"{where}.{key}" if key == "feed" else f"{where}.{key}[{i + 1}]"
        if not c.keys(row, allowed, at):
            ok = False
            continue
        for r in sorted(required - set(row)):
            c.problems.append(f"{c.path}: {at}.{r}: missing; allowed: {', '.join(sorted(allowed))}")
            ok = False
        if key == "element":
            ok &= c.num(row, "length_m", at, lo=0, lo_open=True, hi=1000) is not None
            ok &= c.num(row, "offset_m", at, lo=-1000, hi=1000) is not None
        elif key == "wire":
            for end in ("from_m", "to_m"):
                if end in row:
                    ok &= c.xyz(row[end], f"{at}.{end}", (-HEIGHT_MAX_M, HEIGHT_MAX_M)) is not None
            if "diameter_mm" in row:
                ok &= c.num(row, "diameter_mm", at, lo=0, lo_open=True, hi=1000) is not None
        else:
            n = row.get("wire")
            if isinstance(n, bool) or not isinstance(n, int) or n < 1:
                c.bad(f"{at}.wire", n, "a wire number counting from 1")
                ok = False
            if "at" in row:
                ok &= c.num(row, "at", at, lo=0, hi=1) is not None
    return v if ok else None


def _overlap_notes(areas: list[Area]) -> list[str]:
    """Areas of different tiers on one floor that overlap (a spatial index: fast for many areas)."""
    notes = []
    if len(areas) < 2:
        return notes
    shapes = np.array([a.shape for a in areas], dtype=object)
    tree = shapely.STRtree(shapes)
    left, right = tree.query(shapes, predicate="intersects")
    for i, j in zip(left.tolist(), right.tolist(), strict=True):
        a, b = areas[i], areas[j]
        if i < j and a.floor_m == b.floor_m and a.exposure != b.exposure and shapes[i].intersection(shapes[j]).area > 1e-9:
            strict = a if STRICTNESS[a.exposure] < STRICTNESS[b.exposure] else b
            notes.append(
                f"areas {a.name!r} ({a.exposure}) and {b.name!r} ({b.exposure}) overlap; "
                f"the stricter tier ({strict.exposure}) applies where they overlap"
            )
    if len(notes) > 5:
        notes = [*notes[:3], f"... and {len(notes) - 3} more pairs of areas of different tiers overlap; the stricter "
                 "tier applies where they do"]
    return notes


def _unusual_notes(site: Site) -> list[str]:
    """Values allowed but unusual for a small station's property: said, so a typing slip is seen."""
    out = []
    for t in site.transmissions:
        if t.power_w > 15_000 or t.power_w < 1:
            out.append(f"transmission {t.name!r}: power_w = {t.power_w:g} W PEP is unusual for a small station "
                       "(PEP at the transmitter output, in watts)")
        if t.feedline_loss_db > 10:
            out.append(f"transmission {t.name!r}: feedline_loss_db = {t.feedline_loss_db:g} dB is unusually high; "
                       "the loss lowers every result (the default 0 dB is the conservative choice)")
    for a in site.antennas:
        for k in ("height_m", "feed_height_m", "far_height_m", "base_height_m"):
            v = a.param(k)
            if isinstance(v, float) and v > 100:
                out.append(f"antenna {a.name!r}: {k} = {v:g} m is unusually high for a small station")
    for a in site.areas:
        if a.floor_m > 60:
            out.append(f"area {a.name!r}: floor_m = {a.floor_m:g} m is unusually high (metres above the ground)")
    if site.grid.spacing_m > 2:
        out.append(f"grid.spacing_m = {site.grid.spacing_m:g} m is coarse: peaks between lattice points may be "
                   "missed (0.5 m or less is usual)")
    return out


FAR_ANTENNA_M = 100.0


TRIM_KINDS = {"dipole": "length_m", "vertical": "length_m"}
TRIM_REACTANCE_OHM = 1.0  # stop when |X| is below this
TRIM_SOLVES = 12
TRIM_SEGMENTS_MAX = 2_000


def trim_resonant(site: Site, spec: AntennaSpec) -> AntennaSpec:
    """``resonant_mhz`` made true in the model: the length with zero feed reactance at that frequency.

    The antenna alone (other antennas absent) at its own height and over the site's ground, segmented
    as for its own transmissions; a secant search on the length from the builder's rule of thumb, a
    few solves. An explicit ``length_m`` is kept as given. The returned spec carries ``length_m`` and
    the :class:`Trim` record.
    """
    f = spec.param("resonant_mhz")
    if spec.kind not in TRIM_KINDS or f is None or spec.trim is not None:
        return spec
    others = tuple((k, v) for k, v in spec.params if k != "resonant_mhz")

    def reactance(length_m: float) -> complex:
        trial = AntennaSpec(spec.name, spec.kind, spec.position_m, tuple(sorted((*others, ("length_m", length_m)))))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            s = build(site, trial, max(f, highest_frequency_mhz(site, spec.name)))
        return engine.solve(engine.Model((s,), 0, f, site.ground)).feed_impedance_ohm

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rule = build(site, spec, max(f, highest_frequency_mhz(site, spec.name)))
    if rule.segment_count > TRIM_SEGMENTS_MAX:
        return spec  # beyond any budget: the run is refused later with the reason
    l0 = _radiator_length_m(rule, spec.kind)
    z0 = reactance(l0)
    l1 = l0 * (0.97 if z0.imag > 0 else 1.03)
    z1 = reactance(l1)
    n = 2
    while abs(z1.imag) > TRIM_REACTANCE_OHM and n < TRIM_SOLVES and z1.imag != z0.imag:
        l2 = l1 - z1.imag * (l1 - l0) / (z1.imag - z0.imag)
        l2 = min(max(l2, 0.5 * l1), 1.5 * l1)  # keep a wild step in bounds
        l0, z0, l1, z1 = l1, z1, l2, reactance(l2)
        n += 1
    trim = Trim(float(f), _radiator_length_m(rule, spec.kind), float(l1), z1, n)
    return AntennaSpec(spec.name, spec.kind, spec.position_m, tuple(sorted((*others, ("length_m", float(l1))))), trim,
                       spec.section_deg)


def _radiator_length_m(s: Structure, kind: str) -> float:
    """The length a builder's ``length_m`` means: a dipole's wire end to end, a vertical's radiator."""
    if kind == "vertical":
        return s.wires[0].length_m
    return sum(w.length_m for w in s.wires)


def _far_antenna_notes(site: Site, built: list[Structure]) -> list[str]:
    """An antenna far from every area grows the lattice to reach it: say so (the budget may refuse the run)."""
    if not site.areas:
        return []
    where = shapely.union_all([a.shape for a in site.areas])
    out = []
    for s in built:
        track = shapely.MultiPoint([p[:2] for w in s.wires for p in (w.start_m, w.end_m)])
        d = track.distance(where)
        if d > FAR_ANTENNA_M:
            out.append(f"antenna {s.name!r} is {d:.0f} m from the nearest area; the lattice grows to cover it "
                       "(check its position_m: site metres, x east, y north)")
    return out


def _body_line_notes(site: Site) -> list[str]:
    """A body line starting at or just above the radials that stand in for a buried radial system."""
    out = []
    if not site.ground.finite:
        return out
    for a in site.antennas:
        if a.kind != "vertical" or a.param("base_height_m", 0.0) != 0.0 or not a.param("radials", 4):
            continue
        rh = a.param("radial_height_m", 0.05)
        if site.grid.body.from_m < rh + 0.1:
            out.append(
                f"grid.body_from_m = {site.grid.body.from_m:g} m is within 0.1 m of the radials of {a.name!r} "
                f"({rh:g} m up, standing in for a buried system): points near them are masked; start the body line "
                f"at {rh + 0.15:.2f} m or higher"
            )
    return out


def _build_all(site: Site) -> list[Structure]:
    """Every antenna built and checked against the NEC rules and each other; ``SiteError`` listing problems."""
    problems = []
    built = []
    for a in site.antennas:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", antennas.ModelRuleWarning)
                f = highest_frequency_mhz(site, a.name)
                s = build(site, a, f)
                antennas.validate(s, f, site.ground.over_ground)
                built.append(s)
        except (GeometryError, TypeError, ValueError) as err:
            problems.append(f"{site.path}: antenna {a.name!r}: {str(err).removeprefix(f'antenna {a.name!r}: ')}")
    if not problems:
        try:
            antennas.check_apart(built)
        except GeometryError as err:
            problems.append(f"{site.path}: antenna: {err}")
    if problems:
        raise SiteError(problems)
    return built


def _tables(c: _Checker, doc: dict, key: str) -> list:
    v = doc.get(key, [])
    if not isinstance(v, list):
        c.bad(key, v, f"an array of tables [[{key}]]")
        return []
    return v


def _unique(c: _Checker, names: list[str], what: str) -> None:
    seen = set()
    for n in names:
        if n in seen:
            c.problems.append(f"{c.path}: {what}: the name {n!r} is used twice; allowed: unique names")
        seen.add(n)


def highest_frequency_mhz(site: Site, antenna: str | None = None) -> float:
    """Highest frequency of the site's transmissions (on one antenna, if named; else of all)."""
    fs = [t.frequency_mhz for t in site.transmissions if antenna is None or t.antenna == antenna]
    return max(fs) if fs else max(t.frequency_mhz for t in site.transmissions)


def build(
    site: Site, spec: AntennaSpec, segment_mhz: float, heading_deg: float | None = None, passive: bool = False
) -> Structure:
    """The segmented structure of one antenna, for use at frequencies up to ``segment_mhz``.

    A fed antenna gets segments of at most lambda/20 at the higher of ``segment_mhz`` and its own
    highest transmission frequency; a passive one (another antenna's model) lambda/10 at
    ``segment_mhz`` (the NEC-2 rule). Either way wires near people get short segments
    (:func:`near_people_caps`).
    """
    kw = dict(spec.params)
    if spec.kind == "vertical":
        kw["ground"] = "free-space" if site.ground.kind == "free-space" else ("perfect" if site.ground.kind == "perfect" else "finite")
    if spec.kind == "end-fed":
        kw["design_mhz"] = min(t.frequency_mhz for t in site.transmissions if t.antenna == spec.name) if any(
            t.antenna == spec.name for t in site.transmissions) else None
    if spec.kind == "beam" and (heading_deg is not None or kw.get("heading_deg") == "any"):
        kw["heading_deg"] = heading_deg or 0.0
    structure = antennas.BUILDERS[spec.kind](spec.name, spec.position_m, **kw)
    own_mhz = highest_frequency_mhz(site, spec.name)
    caps = near_people_caps(site, structure)
    if passive:
        return antennas.segment(structure, segment_mhz, per_wavelength=10, max_segment_m=caps)
    return antennas.segment(structure, max(segment_mhz, own_mhz), max_segment_m=caps)


NEAR_PEOPLE_SEGMENT_M = 0.5  # segment cap for wires near a body line: masks shrink to 0.25 m
NEAR_PEOPLE_BAND_M = 1.0  # "near": within this height of a body line's span on any floor


def near_people_caps(site: Site, structure: Structure) -> list[float | None]:
    """Per wire, ``NEAR_PEOPLE_SEGMENT_M`` where the wire passes near a place people can stand,
    else None.

    Points within half a segment of a wire are masked (the model gives no reliable field there),
    so wires near people get short segments, shrinking the masked zone to a quarter of a metre.
    "Near": the wire comes within ``NEAR_PEOPLE_BAND_M`` of the heights of a body line on some
    floor, and within a sixth of its own length (half of its longest possible segment: 3 at least) of an
    accessible place on that floor in plan (the ground is accessible outside every area with
    ``exposure = "none"``).
    """
    b = site.grid.body
    floors = sorted({0.0, *(a.floor_m for a in site.areas)})
    places = {}
    for f in floors:
        open_ = [a.shape for a in site.areas if a.floor_m == f and a.exposure != "none"]
        if f == 0.0:
            closed = [a.shape for a in site.areas if a.floor_m == f and a.exposure == "none"]
            world = shapely.box(-1e6, -1e6, 1e6, 1e6)
            places[f] = shapely.union_all([world.difference(shapely.union_all(closed)) if closed else world, *open_])
        else:
            places[f] = shapely.union_all(open_) if open_ else None
    caps = []
    for w in structure.wires:
        lo, hi = sorted((w.start_m[2], w.end_m[2]))
        track = shapely.LineString([w.start_m[:2], w.end_m[:2]]) if w.start_m[:2] != w.end_m[:2] else shapely.Point(w.start_m[:2])
        near = False
        for f in floors:
            bottom, top = f + b.from_m - NEAR_PEOPLE_BAND_M, f + b.to_m + NEAR_PEOPLE_BAND_M
            if lo <= top and hi >= bottom and places[f] is not None:
                near |= track.distance(places[f]) <= max(w.length_m / 6, 10 * w.radius_m)
        caps.append(NEAR_PEOPLE_SEGMENT_M if near else None)
    return caps
