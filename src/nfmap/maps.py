"""Maps over the site plan (matplotlib; functions take ``ax=`` and return what they drew).

Nothing here touches matplotlib's global settings. Exposure ratio is drawn as filled contours
on the perceptually uniform, colour-blind-safe "cividis" scale at 0.1 ... 10 x the limit (log),
the limit as a bold solid line with white casing, the 0.5 margin as a dashed line, so the two
read apart in greyscale print.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import shapely
from matplotlib.colors import BoundaryNorm
from matplotlib.figure import Figure
from matplotlib.patches import FancyArrow, Polygon, Rectangle

from . import __version__
from .assess import MAP_LEVELS, Plan

TIER_STYLE = {
    "public": {"edgecolor": "#00796b", "linestyle": "-", "linewidth": 1.6, "hatch": None},
    "occupational": {"edgecolor": "#00796b", "linestyle": (0, (6, 2, 1, 2)), "linewidth": 1.6, "hatch": None},
    "none": {"edgecolor": "#8a8a8a", "linestyle": ":", "linewidth": 1.2, "hatch": "x"},
}
WIRE_COLOUR = "#c2185b"


def draw_plan(site, ax, antennas_wires=None, label_areas=True):
    """Areas by tier, lines labelled, antennas as their wires projected on the plan."""
    drawn = []
    labelled = set()
    for a in site.areas:
        st = TIER_STYLE[a.exposure]
        p = Polygon(a.polygon, closed=True, fill=st["hatch"] is not None, facecolor="none", hatch=st["hatch"],
                    edgecolor=st["edgecolor"], linestyle=st["linestyle"], linewidth=st["linewidth"], zorder=4)
        ax.add_patch(p)
        drawn.append(p)
        if label_areas and a.polygon not in labelled:
            labelled.add(a.polygon)
            same = [b for b in site.areas if b.polygon == a.polygon]  # stacked floors share one label
            # label inside the polygon, at the middle of its widest row near the top
            shape = a.shape
            x0, y0, x1, y1 = shape.bounds
            cy = y1 - min(0.12 * (y1 - y0), 1.5)
            row = shape.intersection(shapely.LineString([(x0, cy), (x1, cy)]))
            cx = row.centroid.x if not row.is_empty else shape.representative_point().x
            text = " / ".join(f"{b.name}" + (f" (floor {b.floor_m:g} m)" if b.floor_m else "") for b in same)
            # wrap to the polygon's width on a 7.5 in wide figure (about 0.055 in per character)
            chars = int(6.5 / site_span_m(site) * (x1 - x0) / 0.055)
            text = "\n".join(textwrap.wrap(text, max(10, chars)))
            ax.annotate(text, (cx, cy), xytext=(0, 0), textcoords="offset points", ha="center", va="center",
                        fontsize=6.5, color="#1b3a4b", zorder=6,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7})
    for ln in site.lines:
        xy = np.array(ln.points)
        (h,) = ax.plot(xy[:, 0], xy[:, 1], color="#6d4c41", linewidth=2.2, solid_capstyle="butt", zorder=5)
        ax.plot(xy[:, 0], xy[:, 1], color="white", linewidth=0.6, linestyle=(0, (2, 2)), zorder=5)
        mid = xy[len(xy) // 2 - 1 : len(xy) // 2 + 1].mean(axis=0) if len(xy) > 1 else xy[0]
        ax.annotate(ln.name, mid, xytext=(3, 3), textcoords="offset points", fontsize=6.5, color="#6d4c41", zorder=6)
        drawn.append(h)
    for name, wires in (antennas_wires or {}).items():
        for w in wires:
            ax.plot([w.start_m[0], w.end_m[0]], [w.start_m[1], w.end_m[1]], color="white", linewidth=3.2, zorder=7)
            ax.plot([w.start_m[0], w.end_m[0]], [w.start_m[1], w.end_m[1]], color=WIRE_COLOUR, linewidth=1.6, zorder=8)
        # label below the lowest (southernmost) end, clear of the wires
        ends = [p for w in wires for p in (w.start_m, w.end_m)]
        x, y = min(ends, key=lambda p: p[1])[:2]
        ax.annotate(name, (x, y), xytext=(0, -7), textcoords="offset points", ha="center", va="top", fontsize=7,
                    color=WIRE_COLOUR, weight="bold", zorder=9,
                    bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.75})
    return drawn


def site_span_m(site) -> float:
    """East-west extent of the site's areas and lines [m] (for sizing labels)."""
    xs = [p[0] for a in site.areas for p in a.polygon] + [p[0] for ln in site.lines for p in ln.points]
    return max(max(xs) - min(xs), 1.0) if xs else 10.0


def draw_furniture(ax, north_deg: float, extent):
    """North arrow (bearing of +y is ``north_deg``) and a scale bar, in the lower left."""
    x0, x1, y0, y1 = extent
    span = x1 - x0
    bar = 10 ** math.floor(math.log10(span / 4))
    bar *= 5 if span / 4 >= 5 * bar else (2 if span / 4 >= 2 * bar else 1)
    bx, by = x0 + 0.04 * span, y0 + 0.04 * (y1 - y0)
    ax.add_patch(Rectangle((bx, by), bar, 0.012 * (y1 - y0), facecolor="black", zorder=10))
    ax.add_patch(Rectangle((bx + bar / 2, by), bar / 2, 0.012 * (y1 - y0), facecolor="white", edgecolor="black", zorder=10))
    ax.text(bx + bar / 2, by + 0.02 * (y1 - y0), f"{bar:g} m", ha="center", fontsize=7, zorder=10)
    # +y points to bearing north_deg, so north is turned by -north_deg from +y
    ang = math.radians(-north_deg)
    ax_x, ax_y = x1 - 0.06 * span, y0 + 0.08 * (y1 - y0)
    length = 0.07 * (y1 - y0)
    ax.add_patch(FancyArrow(ax_x, ax_y, length * math.sin(ang), length * math.cos(ang), width=0.012 * span,
                            head_width=0.035 * span, head_length=0.03 * (y1 - y0), color="black", zorder=10))
    ax.text(ax_x + 1.35 * length * math.sin(ang), ax_y + 1.35 * length * math.cos(ang), "N", ha="center",
            va="center", fontsize=9, weight="bold", zorder=10)


def draw_ratio(pl: Plan, ratio: np.ndarray, ax):
    """Filled contours of the exposure ratio, the limit and 0.5 lines, and the masked zone."""
    z = np.clip(np.where(np.isnan(ratio), np.nan, ratio), 1e-4, 1e4)
    levels = [1e-4, *MAP_LEVELS, 1e4]
    from matplotlib import colormaps
    from matplotlib.colors import ListedColormap

    # below 0.1 of the limit: paper white, so the plan stays readable; then cividis upwards
    steps = colormaps["cividis"].resampled(len(levels) - 2)(np.arange(len(levels) - 2))
    cmap = ListedColormap(np.vstack([[1.0, 1.0, 1.0, 1.0], steps]))
    norm = BoundaryNorm(levels, cmap.N)
    filled = ax.contourf(pl.x_m, pl.y_m, z, levels=levels, cmap=cmap, norm=norm, zorder=1)
    half = ax.contour(pl.x_m, pl.y_m, z, levels=[0.5], colors="#777777", linewidths=1.0, linestyles="--", zorder=2)
    ax.clabel(half, fmt={0.5: "0.5"}, fontsize=6.5, colors="#444444")
    ax.contour(pl.x_m, pl.y_m, z, levels=[1.0], colors="white", linewidths=3.6, zorder=2)
    lim = ax.contour(pl.x_m, pl.y_m, z, levels=[1.0], colors="black", linewidths=2.0, zorder=3)
    ax.clabel(lim, fmt={1.0: "limit"}, fontsize=7, colors="black")
    masked = np.isnan(ratio).astype(float)
    hatch = None
    if masked.any():
        hatch = ax.contourf(pl.x_m, pl.y_m, masked, levels=[0.5, 1.5], colors="none", hatches=["////"], zorder=3)
        hatch.set_edgecolor("#d9d9d9")
    return filled, lim, half, hatch


def draw_marks(ax, crossings, worst):
    """Crossings numbered on their lines; the worst point of each public area with its value."""
    for k, c in enumerate(crossings, 1):
        ax.plot([c.from_m[0], c.to_m[0]], [c.from_m[1], c.to_m[1]], color="#ff6f00", linewidth=4.5, zorder=11,
                solid_capstyle="butt", linestyle=(0, (1.5, 1)) if c.masked else "-")
        mx, my = (c.from_m[0] + c.to_m[0]) / 2, (c.from_m[1] + c.to_m[1]) / 2
        ax.annotate(str(k), (mx, my), ha="center", va="center", fontsize=7, weight="bold", color="black", zorder=12,
                    bbox={"boxstyle": "circle,pad=0.2", "fc": "#ffcc80", "ec": "black", "lw": 0.8})
    for _name, (x, y), value in worst:
        ax.plot([x], [y], marker="D", markersize=5, markerfacecolor="white", markeredgecolor="black", zorder=12)
        ax.annotate(f"{value:.2g}", (x, y), xytext=(4, -8), textcoords="offset points", fontsize=6.5, zorder=12,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "black", "lw": 0.5})


def map_figure(assessment, ratio, title: str, crossings, areas, caption: str, structures) -> Figure:
    """One complete map figure (not attached to pyplot)."""
    site, pl = assessment.site, assessment.plan
    fig, ax, foot = _plan_figure(pl)
    filled, *_ = draw_ratio(pl, ratio, ax)
    draw_plan(site, ax, structures)
    # worst point of each public area; the unnamed rest of the plan only where it matters
    worst = [(a.name, a.where_m, a.max_ratio) for a in areas
             if a.exposure == "public" and a.where_m and a.max_ratio and (a.name != "elsewhere" or a.max_ratio >= 0.5)]
    draw_marks(ax, crossings, worst)
    frame(ax, site, pl)
    ax.set_title(f"{site.title}\n{title}", fontsize=10)
    cax = ax.inset_axes([1.03, 0.1, 0.035, 0.8])  # glued to the plan, whatever its aspect
    cb = fig.colorbar(filled, cax=cax, ticks=MAP_LEVELS)
    cb.ax.set_yticklabels([f"{v:g}" for v in MAP_LEVELS])
    cb.set_label("exposure ratio (1 = at the limit)")
    cb.ax.axhline(1.0, color="black", linewidth=2.5)
    add_legend(foot)
    _caption(foot, caption)
    return fig


FOOT_IN = 1.25  # legend and caption band under the plan [in]


def _plan_figure(pl):
    """A figure shaped to the plan: the plan axes and, below, a band for the legend and caption."""
    aspect = (pl.y_m[-1] - pl.y_m[0] + 6) / (pl.x_m[-1] - pl.x_m[0] + 10)
    plan_in = min(max(7.5 * aspect, 3.5), 10.0)
    fig = Figure(figsize=(7.5, plan_in + FOOT_IN), layout="constrained")
    grid = fig.add_gridspec(2, 1, height_ratios=[plan_in, FOOT_IN])
    ax = fig.add_subplot(grid[0])
    foot = fig.add_subplot(grid[1])
    foot.set_axis_off()
    return fig, ax, foot


def _caption(foot, text: str) -> None:
    """The caption at the bottom of the band."""
    foot.text(0.0, 0.0, "\n".join(textwrap.wrap(text, 165)), fontsize=6, color="#333333", ha="left", va="bottom",
              transform=foot.transAxes)


def add_legend(foot, fields: bool = True):
    """What the line styles and marks mean (readable in greyscale)."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = [
        Line2D([], [], color=TIER_STYLE["public"]["edgecolor"], linestyle="-", label="public area"),
        Line2D([], [], color=TIER_STYLE["occupational"]["edgecolor"], linestyle=(0, (6, 2, 1, 2)), label="occupational area"),
        Patch(facecolor="none", edgecolor="#555555", hatch="xx", label="not accessible"),
        Line2D([], [], color="#6d4c41", linewidth=2.2, label="fence / line"),
        Line2D([], [], color=WIRE_COLOUR, linewidth=1.6, label="antenna wire"),
    ]
    if fields:
        handles += [
            Line2D([], [], color="black", linewidth=2.0, label="limit (ratio 1)"),
            Line2D([], [], color="#777777", linewidth=1.0, linestyle="--", label="0.5: usual safety margin"),
            Patch(facecolor="white", edgecolor="#999999", hatch="////", label="too close to a wire (masked)"),
            Line2D([], [], marker="D", color="none", markerfacecolor="white", markeredgecolor="black", label="worst point, value"),
            Line2D([], [], color="#ff6f00", linewidth=4, label="line crossed by limit region (numbered)"),
            Line2D([], [], color="#ff6f00", linewidth=4, linestyle=(0, (1.5, 1)), label="line crossed by masked zone"),
        ]
    return foot.legend(handles=handles, loc="upper center", fontsize=6.5, frameon=False, ncols=3)


def frame(ax, site, pl) -> None:
    """Plan extent, equal aspect, axis labels, north arrow and scale bar."""
    extent = (pl.x_m[0], pl.x_m[-1], pl.y_m[0], pl.y_m[-1])
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    ax.set_aspect("equal")
    draw_furniture(ax, site.north_deg, extent)
    ax.set_xlabel("x east [m]")
    ax.set_ylabel("y north [m]")


def caption_text(assessment) -> str:
    import datetime as dt

    from .exposure import limits

    s = assessment.site
    return (
        f"{limits.STANDARD_TITLES[s.standard]}; tier per area (public outside every area); "
        f"body line {s.grid.body.from_m:g}-{s.grid.body.to_m:g} m, {s.grid.body.points} points, {s.grid.spatial} of E^2 and H^2; "
        f"time-averaged power (duty x transmit fraction x feedline loss); hatched: too close to a wire for the model; "
        f"{'where floors are stacked the worst level is drawn; ' if len(assessment.plan.levels) > 1 else ''}"
        f"nfmap {__version__}, {dt.date.today().isoformat()}"
    )


def wires_of(site) -> dict:
    """Every antenna's wires as drawn on the plan, by antenna name."""
    from .assess import _structure, highest_any

    return {a.name: _structure(site, a.name, highest_any(site)).wires for a in site.antennas}


def save_plan(site, path) -> None:
    """The plan and antennas, no fields (for ``check``)."""
    from .assess import plan

    pl = plan(site)
    fig, ax, foot = _plan_figure(pl)
    draw_plan(site, ax, wires_of(site))
    frame(ax, site, pl)
    ax.set_title(f"{site.title}\nplan and antennas (no fields computed)", fontsize=10)
    add_legend(foot, fields=False)
    fig.savefig(path, dpi=170)
