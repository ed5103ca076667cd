"""The record an inspector reads: report.pdf (matplotlib PdfPages) and the map PNGs."""

from __future__ import annotations

import datetime as dt
import math
import textwrap
from pathlib import Path

from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from . import __version__, maps
from .exposure import limits
from .records import CAUTIONS, limit_sources, map_name

PAPERS_IN = {"a4": (8.27, 11.69), "letter": (8.5, 11.0)}  # ISO 216 A4, US letter
LINE_IN = 0.19


class _Pages:
    """Text pages with wrapping; a new page starts when one is full (pages never overflow)."""

    def __init__(self, pdf: PdfPages, footer: str, paper_in: tuple[float, float]):
        self.pdf, self.footer, self.fig, self.y, self.page = pdf, footer, None, 0.0, 0
        self.paper = paper_in

    def _new(self):
        self.close()
        self.page += 1
        self.fig = Figure(figsize=self.paper)
        self.y = self.paper[1] - 0.8
        self.fig.text(0.5, 0.25 / self.paper[1], f"{self.footer}  -  page {self.page}", ha="center", fontsize=7,
                      color="#444")

    def close(self):
        if self.fig is not None:
            self.pdf.savefig(self.fig)
            self.fig = None

    def line(self, text: str, size: float = 9, weight: str = "normal", indent: float = 0.0, width: int = 100,
             mono: bool = False):
        wrapped = textwrap.wrap(text, width=width - int(indent * 12)) or [""]
        for part in wrapped:
            if self.fig is None or self.y < 0.9:
                self._new()
            self.fig.text((0.7 + indent) / self.paper[0], self.y / self.paper[1], part, fontsize=size, weight=weight,
                          family="monospace" if mono else "sans-serif", va="top")
            self.y -= LINE_IN * size / 9

    def gap(self, n: float = 0.5):
        self.y -= LINE_IN * n

    def heading(self, text: str):
        if self.fig is not None and self.y < 2.0:
            self._new()
        self.gap(0.6)
        self.line(text, size=12, weight="bold")
        self.gap(0.3)

    def table(self, header: list[str], rows: list[list[str]], widths: list[int]):
        """A fixed-width table; cells wrap inside their column."""
        def emit(cells, weight="normal"):
            cols = [textwrap.wrap(c, w) or [""] for c, w in zip(cells, widths, strict=True)]
            for k in range(max(len(c) for c in cols)):
                self.line("  ".join((c[k] if k < len(c) else "").ljust(w) for c, w in zip(cols, widths, strict=True)),
                          size=7.5, weight=weight, mono=True, width=200)
        emit(header, "bold")
        for r in rows:
            emit(r)
        self.gap(0.3)

    def figure_page(self, fig: Figure):
        """A figure made at the paper size, with the footer in a strip kept free for it."""
        self.close()
        self.page += 1
        fig.text(0.5, 0.25 / self.paper[1], f"{self.footer}  -  page {self.page}", ha="center", fontsize=7,
                 color="#444")
        self.pdf.savefig(fig)


CHECK_NAMES = {"whole-body": "whole-body", "local": "local", "stimulation": "stimulation", "peak": "envelope-peak"}
CHECK_SHORT = {"whole-body": "WB", "local": "local", "stimulation": "stim", "peak": "peak"}


def _fmt(v, spec=".3g", none="-"):
    return none if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def verdict_sentence(area, over_word="OVER THE LIMIT") -> str:
    if area.exposure == "none":
        return f"{area.name}: not accessible (not judged)."
    if area.covered_by:
        return (f"{area.name}: judged as part of {', '.join(repr(n) for n in area.covered_by)}, whose stricter tier "
                "applies wherever areas overlap (see there).")
    if area.empty:
        return (f"{area.name}: NOT ASSESSED: no lattice point falls inside it; not shown within limit (make "
                "grid.spacing_m smaller than the area).")
    if area.max_ratio is None:
        whose = " of " + ", ".join(repr(n) for n in area.masked_by) if area.masked_by else ""
        return (f"{area.name}: every point lies too close to the wires{whose} for the model "
                f"({_count(area.masked_points, 'plan point')}); not shown within limit{MASK_FIX}.")
    x, y = area.where_m
    state = over_word if area.max_ratio >= 1 else ("not shown within limit" if area.masked_points else "within limit")
    by = f" ({CHECK_NAMES.get(area.check, area.check)} check)" if area.check else ""
    text = (f"{area.name}: {state}, worst {area.max_ratio:.2g} of the {area.exposure} limit{by} "
            f"at ({x:.1f}, {y:.1f}) m")
    if area.max_ratio >= 1:
        text += f", {area.exceedance_area_m2:.1f} m^2 at or above the limit"
    if area.masked_points:
        whose = " of " + ", ".join(repr(n) for n in area.masked_by) if area.masked_by else ""
        text += (f"; {_count(area.masked_points, 'plan point')} {'lies' if area.masked_points == 1 else 'lie'} too "
                 f"close to the wires{whose} for the model and " + ("is" if area.masked_points == 1 else "are")
                 + " not shown within limit" + MASK_FIX)
    return text + "."


MASK_FIX = (" (the usual fix: keep people off that zone with a fenced area of exposure = \"none\" drawn around "
            "the antenna, as the shape of the accessible area; or bring the wire no closer than its exclusion "
            "distance to where people stand)")


def _count(n: int, word: str) -> str:
    """'1 plan point', '3 plan points'."""
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def write_maps_and_report(a, folder: Path, paper: str = "a4") -> None:
    """The map and section PNGs (each shaped to its content) and report.pdf (every page ``paper`` size)."""
    if paper not in PAPERS_IN:
        raise ValueError(f"unknown paper {paper!r}; valid: {', '.join(PAPERS_IN)}")
    paper_in = PAPERS_IN[paper]
    caption = maps.caption_text(a)
    wires = maps.wires_of(a.site)
    names = [t.name for t in a.transmissions]
    pages = []
    for t in a.transmissions:
        title = (f"{t.name}: {t.frequency_mhz:g} MHz, {t.power_w:g} W PEP, {t.average_power_w:.3g} W average\n"
                 f"worst of {' / '.join(CHECK_NAMES[c] for c in t.checks)} at each point; "
                 f"binding: {CHECK_NAMES.get(t.governing_check, '-')}")
        def draw(size, t=t, title=title):
            return maps.map_figure(a, t.ratio, title, t.crossings, t.areas, caption, wires, size)
        draw(None).savefig(folder / map_name(t.name, names), dpi=170)
        pages.append(draw(paper_in))
        if t.section is not None:
            maps.section_figure(a, t).savefig(folder / section_name(t.name, names), dpi=170)
            pages.append(maps.section_figure(a, t, paper_in))
    ctitle = "combined: groups summed check by check; worst check and group"
    maps.map_figure(a, a.combined.ratio, ctitle, a.combined.crossings, a.combined.areas, caption,
                    wires).savefig(folder / "map-combined.png", dpi=170)
    pages.append(maps.map_figure(a, a.combined.ratio, ctitle, a.combined.crossings, a.combined.areas, caption, wires,
                                 paper_in))
    write_report(a, folder / "report.pdf", pages, paper_in)


def section_name(transmission: str, names) -> str:
    """The section file of a transmission, beside its map (same stem)."""
    return map_name(transmission, names).replace("map-", "section-", 1)


def write_report(a, path: Path, figs, paper_in: tuple[float, float] = PAPERS_IN["a4"]) -> None:
    site = a.site
    today = dt.date.today().isoformat()
    with PdfPages(path, metadata={"Title": f"RF exposure assessment: {site.title}", "Creator": f"nfmap {__version__}"}) as pdf:
        pg = _Pages(pdf, f"{site.title} - nfmap {__version__} - {today}", paper_in)
        pg.line("RF exposure assessment", size=18, weight="bold")
        pg.line(site.title, size=13)
        pg.gap()
        pg.line(f"Standard: {limits.STANDARD_TITLES[site.standard]}. Tier per area as listed; public outside every area.")
        pg.line(f"Date: {today}.  Tool: nfmap {__version__}.  Site file: {Path(site.path).name}")
        pg.line(f"SHA-256 of the site file: {site.sha256}", size=8, mono=True, width=120)
        if site.notes:
            pg.line(f"Site notes: {site.notes}")
        pg.heading("Verdict")
        worst_all = [ar for ar in a.combined.areas if ar.exposure != "none"]
        over = a.over
        pg.line("Some accessible place is over its limit, or cannot be shown within it." if over else
                "Every accessible area is within its limit for every transmission and for the combined case.",
                weight="bold")
        for ar in worst_all:
            pg.line(verdict_sentence(ar), indent=0.2)
        pg.line("(Combined case: transmissions in one group summed; the worst group at each point.)", size=8)
        for t in a.transmissions:
            pg.line(f"{t.name}: highest power within limits {_ceiling(t)}.", indent=0.2)
        for g in a.combined.group_results:
            if len(g.members) > 1:
                pg.line(_group_sentence(a, g), indent=0.2)
        pg.heading("Cautions")
        for c in CAUTIONS:
            pg.line(f"- {c}")
        pg.heading("Station and operating inputs")
        rows = []
        for spec in site.antennas:
            params = ", ".join(f"{k} {v:.4g}" if isinstance(v, float) else f"{k} {v}" for k, v in spec.params)
            if spec.trim:
                params += (f" (trimmed in the model for resonance at {spec.trim.resonant_mhz:g} MHz; rule of thumb "
                           f"{spec.trim.rule_length_m:.3f} m)")
            rows.append([spec.name, spec.kind, f"({spec.position_m[0]:g}, {spec.position_m[1]:g})", params])
        pg.table(["antenna", "kind", "position m", "parameters"], rows, [18, 8, 12, 62])
        rows = []
        for t in site.transmissions:
            rows.append([t.name, t.antenna, f"{t.frequency_mhz:g}", f"{t.power_w:g}", t.mode or "-",
                         f"{t.duty_factor:g}", f"{t.transmit_fraction:g}", f"{t.feedline_loss_db:g}",
                         f"{t.average_power_w:.3g}", t.group or "-"])
        pg.table(["transmission", "antenna", "MHz", "PEP W", "mode", "duty", "fraction", "loss dB", "avg W", "group"],
                 rows, [16, 16, 7, 6, 13, 5, 8, 7, 6, 8])
        pg.line(f"Ground: {site.ground.describe()}.")
        b = site.grid.body
        pg.line(f"Lattice: {site.grid.spacing_m:g} m spacing, {len(a.plan.x_m)} x {len(a.plan.y_m)} plan points, "
                f"x {a.plan.x_m[0]:g} to {a.plan.x_m[-1]:g} m, y {a.plan.y_m[0]:g} to {a.plan.y_m[-1]:g} m; "
                f"{a.points_evaluated} field points in all.")
        pg.line(_edge_sentence(a))
        pg.line(f"Body line: {b.points} heights from {b.from_m:g} to {b.to_m:g} m above the floor of each area; "
                f"{site.grid.spatial} of E^2 and of H^2 along it (ICNIRP 2020 spatial averaging of squared values).")
        areas = [[ar.name, ar.exposure, f"{ar.floor_m:g}"] for ar in site.areas]
        pg.table(["area", "tier", "floor m"], areas, [30, 14, 8])
        _checks_section(pg, a)
        for t in a.transmissions:
            pg.heading(f"Transmission: {t.name}")
            z = t.feed_impedance_ohm
            pg.line(f"{t.frequency_mhz:g} MHz on {t.antenna}; feed impedance {z.real:.1f} {'+' if z.imag >= 0 else '-'} "
                    f"j{abs(z.imag):.1f} ohm; {t.power_w:g} W PEP, {t.average_power_w:.3g} W average accepted "
                    "(all of it radiated: conservative).")
            _area_table(pg, t.areas, t.checks, quantity=True)
            _crossing_lines(pg, t.crossings)
            pg.line(f"Highest power within limits: {_ceiling(t)}.")
            pg.line(_distance_sentence(t))
            if t.warnings:
                pg.line("Modelling notes: " + "; ".join(t.warnings), size=8)
        pg.heading("Combined")
        pg.line("Groups (transmissions that run at the same time, ratios summed): "
                + "; ".join(" + ".join(g) for g in a.combined.groups))
        pg.line("Each check's ratios are added within a group by that check's own rule (power ratios for the "
                "time-averaged checks, field ratios for the envelope checks); the worst group is shown.", size=8)
        _area_table(pg, a.combined.areas, tuple(dict.fromkeys(c for t in a.transmissions for c in t.checks)))
        _crossing_lines(pg, a.combined.crossings)
        for g in a.combined.group_results:
            if len(g.members) > 1:
                pg.line(_group_sentence(a, g))
        pg.heading("Assumptions and limitations")
        for text in _assumptions(a):
            pg.line(f"- {text}")
        pg.heading("References")
        for ref in REFERENCES:
            pg.line(ref)
        pg.heading("Where the limit values were read")
        for src in limit_sources(site):
            flag = "FROM MEMORY (not yet read in a published copy)" if src["from_memory"] else "read"
            pg.line(f"- {src['table']} ({src['exposure']}): {flag}. {src['source']}", size=8)
        for fig in figs:
            pg.figure_page(fig)
        pg.close()


def _area_table(pg, areas, check_ids, quantity: bool = False) -> None:
    """Per area: the worst ratio, the check (and quantity) giving it, and each check's worst ratio."""
    rows = []
    for ar in areas:
        each = dict(ar.by_check)
        by = CHECK_SHORT.get(ar.check, "-") + (f" {ar.governing}" if quantity and ar.governing else "")
        rows.append([ar.name, ar.exposure, _fmt(ar.max_ratio), by if ar.check else "-",
                     *[_fmt(each.get(c)) for c in check_ids],
                     f"({ar.where_m[0]:.1f}, {ar.where_m[1]:.1f})" if ar.where_m else "-",
                     f"{ar.exceedance_area_m2:.1f}", str(ar.masked_points)])
    pg.table(["area", "tier", "worst", "by", *[CHECK_SHORT[c] for c in check_ids], "where m", "over m^2", "masked"],
             rows, [22, 12, 8, 9, *[8 for _ in check_ids], 13, 8, 6])


def _checks_section(pg, a) -> None:
    """Which checks the standard asks for, and which power and transmit fraction served each window."""
    from .records import check_rows

    site = a.site
    pg.heading("Checks applied")
    for line in CHECK_TEXT[site.standard]:
        pg.line(f"- {line}")
    rows = []
    defaulted = []
    for t in site.transmissions:
        for r in check_rows(site, t):
            for tier in ("public", "occupational"):
                w = r[f"window_min_{tier}"]
                win = "envelope peak" if r["envelope_peak"] else (f"{w:g} min" if w is not None else "not given")
                frac = r[f"transmit_fraction_{tier}"]
                rows.append([t.name, CHECK_NAMES[r["id"]], tier, win, "-" if frac is None else f"{frac:g}",
                             f"{r[f'power_w_{tier}']:.4g}", r["spatial"]])
        if t.transmit_fraction_6min is None:
            defaulted.append(t.name)
    pg.table(["transmission", "check", "tier", "window", "fraction", "power W", "body line"], rows,
             [18, 13, 13, 14, 8, 9, 8])
    if defaulted:
        pg.line("Assumption: transmit_fraction_6min not given for " + ", ".join(defaulted) + "; the 30-minute "
                "transmit_fraction was used for the 6-minute windows as well. If the busiest 6 minutes are busier, "
                "give transmit_fraction_6min.", size=8)


CHECK_TEXT = {
    "icnirp-2020": [
        "Whole-body: Table 5, E^2 and H^2 averaged along the body line and over 30 minutes.",
        "Local: Table 6, the spatial peak along the body line, averaged over 6 minutes (note 4: below 30 MHz "
        "neither the peak spatial E nor H may exceed the level).",
        "Stimulation, 100 kHz - 10 MHz: the ICNIRP 2010 reference levels (E 83 / 170 V/m, B 27 / 100 uT, public / "
        "occupational) applied to the rms field at the envelope peak (PEP x feedline loss; no duty factor, no "
        "transmit fraction) and to the spatial peak along the body line: the levels are not time-averaged and the "
        "text read gives no spatial averaging for them, so the conservative reading is taken.",
    ],
    "icnirp-1998": [
        "Whole-body: Tables 6 (occupational) and 7 (general public), averaged along the body line and over 6 minutes.",
        "Stimulation, up to 10 MHz: eqs. 10-11 (E / 87 V/m and H / 5 A/m public; 610 V/m and 24.4 A/m occupational, "
        "from memory) and the peak rule for pulsed fields (1.5 x the level at 100 kHz to 32 x at 10 MHz, interpolated "
        "linearly in frequency: the strictest reading), on the field at the envelope peak and the spatial peak.",
        "Above 10 MHz: the peak field at the envelope peak may not exceed 32 x the Table 6/7 levels.",
    ],
    "fcc-1310": [
        "Table 1: E and H (and S above 30 MHz) averaged along the body line and over 30 minutes (general "
        "population / uncontrolled) or 6 minutes (occupational / controlled). Below 30 MHz the power density in "
        "the table is a plane-wave equivalent and is not applied: E and H are judged separately.",
        "47 CFR 1.1310 has no separate rule for nerve stimulation or for the envelope peak: none is applied.",
    ],
}


def _group_sentence(a, g) -> str:
    members = " + ".join(g.members)
    if g.power_scale is None:
        return f"Group {g.name!r} ({members}): no accessible point is exposed; not limited on the lattice."
    powers = ", ".join(f"{m} {a.site.transmission(m).power_w * g.power_scale:.0f} W PEP" for m in g.members)
    return (f"Group {g.name!r} ({members}) running together: all members' powers times {g.power_scale:.3g} put the "
            f"worst combined point ({g.worst_area}, {CHECK_NAMES.get(g.worst_check, g.worst_check)} check) at the "
            f"limit: {powers}. The single-transmission ceilings hold only when each transmission runs alone.")


def _edge_sentence(a) -> str:
    from .assess import EDGE_RATIO

    grown = (f"The margin was grown from {a.margin_given_m:g} m (site file) to {a.site.grid.margin_m:g} m so that the "
             "lattice covers the exposure. ") if a.margin_given_m is not None else ""
    if a.edge_ratio < EDGE_RATIO:
        return grown + (f"On the lattice's outer edge the ratio is at most {a.edge_ratio:.2g}, below {EDGE_RATIO:g}: "
                        "the maps show where the exposure ends.")
    return grown + (f"CAUTION: on the lattice's outer edge the ratio is still {a.edge_ratio:.2g} (at or above "
                    f"{EDGE_RATIO:g}): the exposure continues beyond x {a.plan.x_m[0]:g} to {a.plan.x_m[-1]:g} m, "
                    f"y {a.plan.y_m[0]:g} to {a.plan.y_m[-1]:g} m; places outside the map are not assessed.")


def _crossing_lines(pg, crossings) -> None:
    over = [c for c in crossings if not c.masked]
    if not over:
        pg.line("No line is crossed by the region at or above the limit.")
    for k, c in enumerate(crossings, 1):
        what = "the zone too close to a wire for the model (not shown compliant)" if c.masked else "the region at or above the limit"
        pg.line(f"{k}. {c.line} crosses {what}: from ({c.from_m[0]:.1f}, {c.from_m[1]:.1f}) to ({c.to_m[0]:.1f}, "
                f"{c.to_m[1]:.1f}), {c.length_m:.1f} m (numbered {k} on the map)", indent=0.2)


def _ceiling(t) -> str:
    if t.power_ceiling_w is None or math.isinf(t.power_ceiling_w):
        return "not limited by any accessible area on the lattice"
    text = (f"{t.power_ceiling_w:.0f} W PEP with the same mode and habits, set by the "
            f"{CHECK_NAMES.get(t.governing_check, t.governing_check)} check, when it runs alone "
            "(an exposure figure: the licence limit still applies)")
    if any(a.masked_points for a in t.areas if a.exposure != "none"):
        text += " (points too close to a wire left out: keep people off those zones)"
    return text


def _distance_sentence(t) -> str:
    ff = t.far_field_distance_m
    md = t.model_distance_m
    base = (f"Far-field estimate (FCC OET 65 Eq. 7, {t.gain_dbi:.1f} dBi free-space gain, ground reflection 2.56): "
            f"the whole-body public limit is met beyond {ff:.1f} m. ")
    if md is None:
        return base + "The model finds no point, on any floor, at or above the whole-body public limit on the lattice."
    if ff < md:
        return base + (f"The model finds points at or above it out to {md:.1f} m: the far-field estimate is SHORTER "
                       "than the model - here the simple formula would under-state the exposure.")
    return base + (f"The model finds points at or above it out to {md:.1f} m, within the far-field estimate: "
                   "the formula is conservative here.")


def _assumptions(a) -> list[str]:
    out = [
        "NEC-2 thin-wire method of moments (PyNEC); wires are perfect conductors unless a load is listed; all the "
        "accepted power is radiated (conservative).",
        "Buildings, trees, fences, vehicles and people are not in the model; they can raise or lower the fields.",
        f"Ground: {a.site.ground.describe()}, one model for the whole site.",
        "Other antennas of the site stay in each model as passive structures with 50 ohm across their feeds.",
        "Ground-mounted verticals over a finite ground are modelled with base and radials just above the surface "
        "(NEC-2 cannot model buried wires); this tends to overstate the fields slightly. Over perfect ground they "
        "connect to the ground plane with a loss resistor.",
        "H over a finite ground is derived from the Sommerfeld E field by Faraday's law (central differences, 2 cm), "
        "because NEC-2's near-H routine uses the reflection-coefficient approximation for the ground term. NEC-2's "
        "Sommerfeld interpolation steps E by up to about 1 % between its cells; where the 2 cm stencil straddles "
        "a step, H shows an isolated spike (a speck on a map, reading high or low)."
        + (" Within a few metres of every wire H is computed so at every point; farther out at nodes (every 2nd to "
           "8th lattice point along each axis, closer where a wire is nearer across it, at most an eighth of a "
           "wavelength apart), each checked "
           "for a step inside its stencil and then read by a step-proof one, and interpolated between them by "
           "cubic polynomials; near a wire or not, a column's H is computed (and checked) at every 2nd or 3rd "
           "body-line height where the wires are as far away again in height, cubic in height between (through four "
           "heights or more); E is computed at every point. Against H computed at every point: within 2 % wherever the "
           "ratio is 0.05 or more (tested on the examples; --exhaustive computes every point). Wherever H was "
           "not computed (between nodes, or between the points NEC evaluated) it is judged 2 % high, the top of that "
           "bound, and each area's worst point (and each group's worst combined point) has its H computed."
           if a.h_method == "sampled" else "")
        if a.h_method in ("curl", "sampled") else "H is NEC's near-H field (exact for free space and perfect ground).",
        "Masked: a plan point whose body line comes within the exclusion distance of a wire (10 radii or half a "
        "segment, the larger) or below ground; its fields are not computed and it never counts as compliant.",
        "The far-field estimate is shown only for comparison; the verdicts come from the model.",
        "Contact currents (touching the antenna, its feed line or a conductor near it, and currents induced "
        "through the limbs) are outside what the model assesses; the standards set separate levels for them "
        "(ICNIRP 2010: 20 mA public, 40 mA occupational, 100 kHz - 10 MHz).",
        "Simultaneous transmissions: a group's ratios are added per check: E^2 and H^2 ratios for the time-averaged "
        "checks, field ratios for the envelope-peak checks (conservative: a linear sum of field ratios is never "
        "smaller than the root of the sum of their squares); E and H terms are not split, which is also conservative.",
    ]
    return out + list(a.warnings)


REFERENCES = [
    "[1] ICNIRP, Guidelines for limiting exposure to electromagnetic fields (100 kHz to 300 GHz), Health Phys. 118(5):483-524, 2020.",
    "[2] ICNIRP, Guidelines for limiting exposure to time-varying electric, magnetic and electromagnetic fields (up to 300 GHz), Health Phys. 74(4):494-522, 1998.",
    "[3] US 47 CFR 1.1310, Radiofrequency radiation exposure limits, Table 1.",
    "[4] FCC OET Bulletin 65, Edition 97-01 (1997), and Supplement B (amateur stations).",
    "[5] G. J. Burke, A. J. Poggio, Numerical Electromagnetics Code (NEC) - Method of Moments, LLNL, 1981.",
    "[6] Rec. ITU-R P.527-3, Electrical characteristics of the surface of the Earth, 1992.",
    "[7] ICNIRP, Guidelines for limiting exposure to time-varying electric and magnetic fields (1 Hz to 100 kHz), Health Phys. 99(6):818-836, 2010 (levels read in a textbook reproduction).",
]


def write_survey(sv, folder: Path, paper: str = "a4") -> None:
    """survey.csv, survey-map.png and survey.pdf for a :class:`nfmap.survey.Survey`."""
    import csv

    from .survey import offset_sentence

    paper_in = PAPERS_IN[paper]
    with open(folder / "survey.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["line", "x_m", "y_m", "z_m", "transmission", "probe", "quantity", "measured", "model", "unit_si",
                    "difference_db", "verdict"])
        for c in sv.rows:
            r = c.reading
            w.writerow([r.line, r.x_m, r.y_m, r.z_m, r.transmission, r.probe, c.quantity, f"{c.measured:.6g}",
                        f"{c.model:.6g}", "V/m" if c.quantity == "E" else "A/m", f"{c.difference_db:.2f}", c.verdict])
    maps.survey_figure(sv).savefig(folder / "survey-map.png", dpi=170)
    today = dt.date.today().isoformat()
    with PdfPages(folder / "survey.pdf", metadata={"Title": f"Readings against the model: {sv.site.title}",
                                                   "Creator": f"nfmap {__version__}"}) as pdf:
        pg = _Pages(pdf, f"{sv.site.title} - nfmap {__version__} - {today}", paper_in)
        pg.line("Field readings against the model", size=18, weight="bold")
        pg.line(sv.site.title, size=13)
        pg.line(f"Site file: {Path(sv.site.path).name} (SHA-256 {sv.site.sha256[:16]}...); readings: {Path(sv.path).name}")
        pg.heading("Summary")
        pg.line(offset_sentence(sv))
        counts = {v: sum(c.verdict == v for c in sv.rows) for v in ("agrees within 3 dB", "agrees within 6 dB",
                                                                      "disagrees")}
        pg.line("; ".join(f"{n} {v}" for v, n in counts.items()) + ".")
        pg.heading("Readings")
        rows = [[str(c.reading.line), f"({c.reading.x_m:g}, {c.reading.y_m:g}, {c.reading.z_m:g})", c.reading.transmission,
                 f"{c.quantity} {c.measured:.3g}", f"{c.model:.3g}", f"{c.difference_db:+.1f}", c.verdict]
                for c in sv.rows]
        pg.table(["line", "point m", "transmission", "measured", "model", "dB", "verdict"], rows,
                 [5, 18, 16, 13, 9, 6, 20])
        pg.line("E in V/m for electric probes, H in A/m for loops (in the near field a loop does not measure E). The "
                "model: the transmission's antenna fed with the reading's carrier power less the feedline loss, the "
                "other antennas passive.", size=8)
        if sv.problems:
            pg.heading("Rows skipped")
            for p in sv.problems:
                pg.line(f"- {p}", size=8)
        pg.heading("Cautions")
        for c in CAUTIONS:
            pg.line(f"- {c}")
        pg.line("- A reading is one instrument at one moment: probe calibration, the body of the person holding it and "
                "objects nearby all change it; readings check the model, they do not replace the assessment.")
        pg.figure_page(maps.survey_figure(sv, paper_in))
        pg.close()


def write_compare(layouts, folder: Path, paper: str = "a4") -> None:
    """compare.png, compare.json and compare.pdf for layouts of one site."""
    import json

    from .compare import best_lines, table_rows

    paper_in = PAPERS_IN[paper]
    maps.compare_figure(layouts).savefig(folder / "compare.png", dpi=150)
    doc = {"best": best_lines(layouts), "layouts": table_rows(layouts)}
    (folder / "compare.json").write_text(json.dumps(doc, indent=1, allow_nan=False, default=float) + "\n")
    site = layouts[0].assessment.site
    today = dt.date.today().isoformat()
    with PdfPages(folder / "compare.pdf", metadata={"Title": f"Layouts compared: {site.title}",
                                                    "Creator": f"nfmap {__version__}"}) as pdf:
        pg = _Pages(pdf, f"{site.title} - layouts compared - nfmap {__version__} - {today}", paper_in)
        pg.line("Layouts compared", size=18, weight="bold")
        pg.line(site.title, size=13)
        pg.line(f"Standard: {limits.STANDARD_TITLES[site.standard]}. Combined case: each group's transmissions added "
                "check by check, the worst group at each point.")
        for lay in layouts:
            pg.line(f"{lay.name}: {Path(lay.assessment.site.path).name}, SHA-256 {lay.assessment.site.sha256[:16]}...",
                    size=8)
        pg.heading("Best layout for each criterion")
        for line in best_lines(layouts):
            pg.line(f"- {line}")
        pg.heading("Worst ratio per accessible area (combined case)")
        names = [a.name for a in layouts[0].assessment.combined.areas if a.exposure != "none"]
        rows = []
        for n in names:
            cells = [n]
            for lay in layouts:
                r, c = lay.worst_by_area.get(n, (None, None))
                cells.append("-" if r is None else f"{r:.3g} {CHECK_SHORT.get(c, '')}".strip())
            rows.append(cells)
        widths = [24] + [max(12, min(20, 90 // len(layouts)))] * len(layouts)
        pg.table(["area", *[lay.name for lay in layouts]], rows, widths)
        pg.heading("Power ceilings (each transmission alone) and group scales")
        tx = sorted({t for lay in layouts for t in lay.ceilings})
        rows = [[t, *[_fmt(lay.ceilings.get(t), ".0f", "-") for lay in layouts]] for t in tx]
        for g in sorted({g for lay in layouts for g in lay.group_scales}):
            rows.append([f"group {g} (scale)", *[_fmt(lay.group_scales.get(g)) for lay in layouts]])
        pg.table(["W PEP", *[lay.name for lay in layouts]], rows, widths)
        pg.heading("Cautions")
        for c in CAUTIONS:
            pg.line(f"- {c}")
        pg.line("- Each layout's own record (nfmap run) carries its per-transmission maps, sections and assumptions.")
        pg.figure_page(maps.compare_figure(layouts, paper_in))
        pg.close()


def place_doc(result) -> dict:
    """The ranked candidates and the re-checks, machine-readable."""
    def num(v):
        return None if v is None or (isinstance(v, float) and math.isinf(v)) else v

    return {
        "antenna": result.antenna, "within": result.within, "step_m": result.step_m, "rejected": result.rejected,
        "candidates": [{"x_m": c.x_m, "y_m": c.y_m, "height_m": c.height_m, "heading_deg": c.heading_deg,
                        "power_scale": num(c.scale), "power_ceiling_w": {k: num(v) for k, v in c.ceilings_w.items()},
                        "masked_points": c.masked_points} for c in result.candidates],
        "rechecks": [{"x_m": c.x_m, "y_m": c.y_m, "search_power_scale": num(c.scale), "full_power_scale": num(sc),
                      "difference_db": None if not (c.scale and sc and math.isfinite(c.scale) and math.isfinite(sc))
                      else 10 * math.log10(sc / c.scale)} for c, sc in result.rechecks],
    }


def write_place(result, full, folder: Path, winner_text: str, paper: str = "a4") -> None:
    """place-map.png, place.json, winner.toml, place.pdf (with the best candidates' full maps)."""
    import json

    paper_in = PAPERS_IN[paper]
    maps.place_figure(result).savefig(folder / "place-map.png", dpi=170)
    (folder / "place.json").write_text(json.dumps(place_doc(result), indent=1, allow_nan=False) + "\n")
    (folder / "winner.toml").write_text(winner_text)
    site = result.site
    today = dt.date.today().isoformat()
    with PdfPages(folder / "place.pdf", metadata={"Title": f"Placement search: {site.title}",
                                                  "Creator": f"nfmap {__version__}"}) as pdf:
        pg = _Pages(pdf, f"{site.title} - placement - nfmap {__version__} - {today}", paper_in)
        pg.line(f"Where may {result.antenna!r} stand?", size=18, weight="bold")
        pg.line(site.title, size=13)
        pg.line(f"Candidates every {result.step_m:g} m inside {result.within!r}; {len(result.candidates)} ranked, "
                f"{result.rejected} left out (the antenna's wires must lie inside the area and clear of the others).")
        pg.line("Ranked by the power its transmissions may use, as a share of the planned power (1: the plan fits), "
                "over every accessible area and every check; candidates with points too close to its wires come last.")
        rows = []
        for k, c in enumerate(result.candidates[:25], 1):
            rows.append([str(k), f"({c.x_m:g}, {c.y_m:g})", "-" if c.height_m is None else f"{c.height_m:g}",
                         "-" if c.heading_deg is None else f"{c.heading_deg:g}", _fmt(c.scale),
                         ", ".join(f"{_fmt(v, '.0f', 'no limit')}" for v in c.ceilings_w.values()),
                         str(c.masked_points)])
        pg.table(["rank", "position m", "height", "heading", "scale", "ceiling W PEP", "masked"], rows,
                 [5, 14, 7, 8, 7, 22, 7])
        pg.heading("The best, re-checked with full solves")
        for c, sc in result.rechecks:
            d = 10 * math.log10(sc / c.scale) if c.scale and sc and math.isfinite(sc) and math.isfinite(c.scale) else 0
            pg.line(f"({c.x_m:g}, {c.y_m:g}): search {c.scale:.3g}, full solve {sc:.3g} x the planned power "
                    f"({d:+.2f} dB: the other antennas' re-radiation, left out of the search).")
        pg.line("winner.toml is the site file with the best position written in; run it for the full record.")
        pg.heading("Cautions")
        for c in CAUTIONS:
            pg.line(f"- {c}")
        pg.figure_page(maps.place_figure(result, paper_in))
        caption = maps.caption_text(full[0]) if full else ""
        wires = None
        for a in full:
            wires = maps.wires_of(a.site)
            pg.figure_page(maps.map_figure(a, a.combined.ratio, "a best candidate: combined case", a.combined.crossings,
                                           a.combined.areas, caption, wires, paper_in))
        pg.close()
