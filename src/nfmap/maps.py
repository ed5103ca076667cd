"""Maps over the site plan (matplotlib; functions take ``ax=`` and return what they drew).

Nothing here touches matplotlib's global settings. The exposure ratio is drawn as filled bands
at 0.1, 0.2, 0.5, 1, 2, 5 and 10 x the limit: below the limit pale blue-greys, at and above it
oranges to dark red, the lightness falling monotonically from band to band (CIE L* from 100 to 17)
so the map reads in greyscale print and the bands over the limit stand out in colour. The limit is
a bold black line with a white casing, half the limit a dashed grey line. Labels are placed so that
none overlaps another or leaves the figure (:func:`declutter`).
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import shapely
from matplotlib.colors import BoundaryNorm
from matplotlib.figure import Figure
from matplotlib.patches import Circle, FancyArrow, Polygon, Rectangle

from . import __version__
from .assess import MAP_LEVELS, Plan, feed_point_m

TIER_STYLE = {
    "public": {"edgecolor": "#00796b", "linestyle": "-", "linewidth": 1.6, "hatch": None},
    "occupational": {"edgecolor": "#00796b", "linestyle": (0, (6, 2, 1, 2)), "linewidth": 1.6, "hatch": None},
    "none": {"edgecolor": "#8a8a8a", "linestyle": ":", "linewidth": 1.2, "hatch": "x"},
}
WIRE_COLOUR = "#c2185b"
# band colours, one per interval of BAND_EDGES; CIE L*: 100, 92.6, 83.8, 73.5 | 59.6, 46.7, 32.6, 16.6
BAND_COLOURS = ("#ffffff", "#e3ebf2", "#c3d3e3", "#a0b7d0", "#dc7328", "#bd4a1c", "#8f2716", "#52110d")
BAND_EDGES = (1e-4, *MAP_LEVELS, 1e4)
RATIO_LABEL = ("exposure ratio: (E/E_L)^2 or (H/H_L)^2, the larger\n"
               "1 = at the limit; 0.25 = half the field-strength limit")
MOVABLE = "nfmap-movable"  # gid of the labels declutter() may move


def draw_plan(site, ax, structures=None, label_areas=True):
    """Areas by tier, lines labelled, antennas as their wires projected on the plan, each labelled at its
    feed or mast with its height; a beam's forward direction as an arrow (a circle for a rotator)."""
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
            shape = a.shape
            x0, y0, x1, y1 = shape.bounds
            cy = y1 - min(0.12 * (y1 - y0), 1.5)
            row = shape.intersection(shapely.LineString([(x0, cy), (x1, cy)]))
            cx = row.centroid.x if not row.is_empty else shape.representative_point().x
            text = " / ".join(f"{b.name}" + (f" (floor {b.floor_m:g} m)" if b.floor_m else "") for b in same)
            chars = int(6.5 / site_span_m(site) * (x1 - x0) / 0.055)
            text = "\n".join(textwrap.wrap(text, max(14, chars)))
            t = ax.annotate(text, (cx, cy), xytext=(0, 0), textcoords="offset points", ha="center", va="center",
                            fontsize=6.5, color="#1b3a4b", zorder=6, gid=MOVABLE,
                            bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.8})
            drawn.append(t)
    for ln in site.lines:
        xy = np.array(ln.points)
        (h,) = ax.plot(xy[:, 0], xy[:, 1], color="#6d4c41", linewidth=2.2, solid_capstyle="butt", zorder=5)
        ax.plot(xy[:, 0], xy[:, 1], color="white", linewidth=0.6, linestyle=(0, (2, 2)), zorder=5)
        mid = shapely.LineString(xy).interpolate(0.5, normalized=True) if len(xy) > 1 else shapely.Point(xy[0])
        t = ax.annotate(ln.name, (mid.x, mid.y), xytext=(3, 3), textcoords="offset points", fontsize=6.5,
                        color="#6d4c41", zorder=6, gid=MOVABLE,
                        bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.7})
        drawn += [h, t]
    for name, s in (structures or {}).items():
        for w in s.wires:
            ax.plot([w.start_m[0], w.end_m[0]], [w.start_m[1], w.end_m[1]], color="white", linewidth=3.2, zorder=7)
            ax.plot([w.start_m[0], w.end_m[0]], [w.start_m[1], w.end_m[1]], color=WIRE_COLOUR, linewidth=1.6, zorder=8)
        fx, fy, fz = feed_point_m(s)
        ax.plot([fx], [fy], marker="o", markersize=4, color=WIRE_COLOUR, markeredgecolor="white", zorder=9)
        spec = site.antenna(name)
        label = antenna_label(spec, s)
        if spec.kind == "beam":
            heading = spec.param("heading_deg", 0.0)
            if heading == "any":
                label += ", rotator"
                ax.add_patch(Circle((fx, fy), 1.2, fill=False, edgecolor=WIRE_COLOUR, linestyle=(0, (2, 1.5)),
                                    linewidth=1.0, zorder=9))
            else:
                _beam_arrow(ax, site, fx, fy, float(heading))
        t = ax.annotate(label, (fx, fy), xytext=(0, -9), textcoords="offset points", ha="center", va="top",
                        fontsize=7, color=WIRE_COLOUR, weight="bold", zorder=9, gid=MOVABLE,
                        bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
        drawn.append(t)
    return drawn


def antenna_label(spec, s) -> str:
    """'ten beam, 12 m'; a vertical says how tall it is and what it stands on."""
    if spec.kind == "vertical":
        radiator = s.wires[0]
        base = spec.param("base_height_m", 0.0)
        return f"{spec.name}, {radiator.length_m:.3g} m tall" + (f" on {base:g} m" if base else "")
    z = spec.param("height_m") if spec.kind == "beam" else feed_point_m(s)[2]
    return f"{spec.name}, {z:.3g} m"


def _beam_arrow(ax, site, x: float, y: float, heading_deg: float) -> None:
    """An arrow from the mast towards the beam's heading (a compass bearing; +y is ``north_deg``)."""
    ang = math.radians(heading_deg - site.north_deg)
    length = 0.07 * site_span_m(site)
    ax.annotate("", (x + length * math.sin(ang), y + length * math.cos(ang)), (x, y),
                arrowprops={"arrowstyle": "-|>", "color": WIRE_COLOUR, "lw": 1.4, "shrinkA": 0, "shrinkB": 0},
                zorder=9)


def site_span_m(site) -> float:
    """East-west extent of the site's areas and lines [m] (for sizing labels)."""
    xs = [p[0] for a in site.areas for p in a.polygon] + [p[0] for ln in site.lines for p in ln.points]
    return max(max(xs) - min(xs), 1.0) if xs else 10.0


def draw_furniture(ax, north_deg: float, extent):
    """North arrow (bearing of +y is ``north_deg``) with its N, and a scale bar, in the lower corners."""
    x0, x1, y0, y1 = extent
    span, tall = x1 - x0, y1 - y0
    bar = 10 ** math.floor(math.log10(span / 4))
    bar *= 5 if span / 4 >= 5 * bar else (2 if span / 4 >= 2 * bar else 1)
    bx, by = x0 + 0.04 * span, y0 + 0.04 * tall
    ax.add_patch(Rectangle((bx, by), bar, 0.012 * tall, facecolor="black", zorder=10))
    ax.add_patch(Rectangle((bx + bar / 2, by), bar / 2, 0.012 * tall, facecolor="white", edgecolor="black", zorder=10))
    ax.text(bx + bar / 2, by + 0.02 * tall, f"{bar:g} m", ha="center", fontsize=7, zorder=10,
            bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
    # +y points to bearing north_deg, so north is turned by -north_deg from +y; the arrow sits in a
    # white disc so it reads over any band
    ang = math.radians(-north_deg)
    r = 0.035 * min(span, tall)
    cx, cy = x1 - 1.6 * r, y0 + 1.6 * r
    ax.add_patch(Circle((cx, cy), 1.25 * r, facecolor="white", edgecolor="#444444", linewidth=0.6, alpha=0.9,
                        zorder=10))
    dx, dy = math.sin(ang), math.cos(ang)
    ax.add_patch(FancyArrow(cx - 0.8 * r * dx, cy - 0.8 * r * dy, 1.0 * r * dx, 1.0 * r * dy, width=0.12 * r,
                            head_width=0.45 * r, head_length=0.5 * r, length_includes_head=False, color="black",
                            zorder=11))
    ax.text(cx - 0.1 * r * dx + 0.75 * r * dy, cy - 0.1 * r * dy - 0.75 * r * dx, "N", ha="center", va="center",
            fontsize=8, weight="bold", zorder=11)


def draw_ratio(pl: Plan, ratio: np.ndarray, ax):
    """Filled bands of the exposure ratio, the limit and half-limit lines, and the masked zone."""
    from matplotlib.colors import ListedColormap

    z = np.clip(np.where(np.isnan(ratio), np.nan, ratio), 1e-4, 1e4)
    cmap = ListedColormap(BAND_COLOURS)
    norm = BoundaryNorm(BAND_EDGES, cmap.N)
    filled = ax.contourf(pl.x_m, pl.y_m, z, levels=list(BAND_EDGES), cmap=cmap, norm=norm, zorder=1)
    half = ax.contour(pl.x_m, pl.y_m, z, levels=[0.5], colors="#666666", linewidths=1.0, linestyles="--", zorder=2)
    ax.contour(pl.x_m, pl.y_m, z, levels=[1.0], colors="white", linewidths=3.6, zorder=2)
    lim = ax.contour(pl.x_m, pl.y_m, z, levels=[1.0], colors="black", linewidths=2.0, zorder=3)
    masked = np.isnan(ratio).astype(float)
    hatch = None
    if masked.any():
        hatch = ax.contourf(pl.x_m, pl.y_m, masked, levels=[0.5, 1.5], colors="none", hatches=["////"], zorder=3)
        hatch.set_edgecolor("#9e9e9e")
    return filled, lim, half, hatch


def draw_marks(ax, crossings, worst):
    """Crossings numbered on their lines; the worst point of each public area with its value."""
    for k, c in enumerate(crossings, 1):
        ax.plot([c.from_m[0], c.to_m[0]], [c.from_m[1], c.to_m[1]], color="#ff6f00", linewidth=4.5, zorder=11,
                solid_capstyle="butt", linestyle=(0, (1.5, 1)) if c.masked else "-")
        mx, my = (c.from_m[0] + c.to_m[0]) / 2, (c.from_m[1] + c.to_m[1]) / 2
        ax.annotate(str(k), (mx, my), xytext=(0, 0), textcoords="offset points", ha="center", va="center",
                    fontsize=7, weight="bold", color="black", zorder=12, gid=MOVABLE,
                    bbox={"boxstyle": "circle,pad=0.2", "fc": "#ffcc80", "ec": "black", "lw": 0.8},
                    arrowprops={"arrowstyle": "-", "color": "#444444", "lw": 0.6, "shrinkA": 0, "shrinkB": 0})
    for _name, (x, y), value in worst:
        ax.plot([x], [y], marker="D", markersize=5, markerfacecolor="white", markeredgecolor="black", zorder=12)
        ax.annotate(f"{value:.2g}", (x, y), xytext=(5, -9), textcoords="offset points", fontsize=6.5, zorder=12,
                    gid=MOVABLE, bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "black", "lw": 0.5},
                    arrowprops={"arrowstyle": "-", "color": "#444444", "lw": 0.6, "shrinkA": 0, "shrinkB": 3})


def declutter(fig, ax) -> list:
    """Move the movable labels (gid ``MOVABLE``) so that no text overlaps another or leaves the plan.

    Greedy: fixed texts first (titles, ticks, legend, caption), then each label in drawing order tries
    offsets on growing rings around its anchor and takes the first free place (a leader line shows the
    link when it moved); a label that finds none shrinks a little and tries again, and as a last resort
    is hidden and returned, so the caller can name it. The labels take no part in the layout, which is
    settled first and then frozen, so what was measured is what is drawn.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)  # measuring text needs a renderer; the PNG and PDF writers use their own
    for t in ax.texts:
        if t.get_gid() == MOVABLE:
            t.set_in_layout(False)  # kept inside the plan below: the layout need not make room for them
    for child in ax.child_axes:
        child.set_in_layout(False)  # the colour bar (room kept on the right) and the inset (inside the plan)
    fig.canvas.draw()
    if fig.get_layout_engine() is not None:
        fig.canvas.draw()  # the constrained layout settles over two passes
        fig.set_layout_engine("none")  # then it is frozen: what is measured below is what is drawn
    return _place_labels(fig, ax)


def _place_labels(fig, ax) -> list[str]:
    from matplotlib.text import Annotation, Text

    renderer = fig.canvas.get_renderer()
    area = ax.get_window_extent(renderer)
    movable = [t for t in ax.texts if t.get_gid() == MOVABLE]
    for t in movable:
        t.set_visible(True)
    fixed = [t for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip() and t not in movable]
    taken = [_text_box(t, renderer) for t in fixed]
    rings = [(r * math.cos(a), r * math.sin(a)) for r in (8, 14, 20, 28, 38, 50, 64)
             for a in np.linspace(-math.pi / 2, 1.5 * math.pi, 16, endpoint=False)]
    dropped = []
    for t in movable:
        base = tuple(t.xyann) if isinstance(t, Annotation) else (0.0, 0.0)
        placed = False
        for size in (t.get_fontsize(), t.get_fontsize() * 0.85):
            t.set_fontsize(size)
            for dx, dy in [base] + [(base[0] + a, base[1] + b) for a, b in rings]:
                t.xyann = (dx, dy)
                box = _text_box(t, renderer)
                if not _inside(box, area) or any(box.overlaps(o) for o in taken):
                    continue
                taken.append(box)
                placed = True
                break
            if placed:
                break
        if not placed:
            t.xyann = base
            t.set_visible(False)
            dropped.append(t.get_text())
        elif t.arrow_patch is not None:
            t.arrow_patch.set_visible(math.hypot(*t.xyann) >= 12)  # a leader line only for a label moved away
    return dropped


def _text_box(t, renderer):
    """A label's own box (its text and the padding of its background, not its leader line) [px]."""
    from matplotlib.text import Annotation, Text

    if isinstance(t, Annotation):
        t.update_positions(renderer)
    box = Text.get_window_extent(t, renderer)
    pad = 0.35 * t.get_fontsize() * renderer.points_to_pixels(1.0) if t.get_bbox_patch() is not None else 0.0
    return box.expanded(1.0, 1.0).padded(pad)


def _inside(box, area) -> bool:
    return box.x0 >= area.x0 and box.y0 >= area.y0 and box.x1 <= area.x1 and box.y1 <= area.y1


def map_figure(assessment, ratio, title: str, crossings, areas, caption: str, structures,
               paper_in: tuple[float, float] | None = None) -> Figure:
    """One complete map figure (not attached to pyplot); ``paper_in`` sizes it to a page [in]."""
    site, pl = assessment.site, assessment.plan
    fig, ax, foot = _plan_figure(pl, paper_in)
    filled, *_ = draw_ratio(pl, ratio, ax)
    draw_plan(site, ax, structures)
    # worst point of each public area; the unnamed rest of the plan only where it matters
    worst = [(a.name, a.where_m, a.max_ratio) for a in areas
             if a.exposure == "public" and a.where_m and a.max_ratio and (a.name != "elsewhere" or a.max_ratio >= 0.5)]
    draw_marks(ax, crossings, worst)
    frame(ax, site, pl)
    draw_inset(ax, pl, ratio, site, structures)
    fig.suptitle(f"{site.title}\n{title}", fontsize=10)  # over the figure: a narrow plan is not squeezed
    cax = ax.inset_axes([1.03, 0.1, 0.035, 0.8])  # glued to the plan whatever its aspect; room kept on the right
    cb = fig.colorbar(filled, cax=cax, ticks=MAP_LEVELS)
    cb.ax.set_yticklabels([f"{v:g}" for v in MAP_LEVELS])
    cb.set_label(RATIO_LABEL, fontsize=7.5)
    cb.ax.axhline(1.0, color="black", linewidth=2.5)
    add_legend(foot)
    _settle(fig, ax, foot, caption)
    return fig


def _settle(fig, ax, foot, caption: str) -> None:
    """Caption, then labels placed (:func:`declutter`); labels that found no room are named in the caption."""
    cap = _caption(foot, caption, fig.get_figwidth())
    dropped = declutter(fig, ax)
    if dropped:
        cap.set_text(_wrap(caption + "; labels left out for lack of room: "
                           + ", ".join(d.replace("\n", " ") for d in dropped), fig.get_figwidth()))


INSET_SMALL = 0.2  # an exceedance zone smaller than this share of the plan gets an enlarged inset


def draw_inset(ax, pl: Plan, ratio: np.ndarray, site, structures):
    """An enlarged view of a small zone at or above the limit, in the plan corner farthest from it.

    Returns the inset axes, or None when there is no such zone or it is large enough to read.
    """
    from .assess import exceedance_polygons

    zone = exceedance_polygons(pl, ratio, 1.0)
    if zone.is_empty:
        return None
    zx0, zy0, zx1, zy1 = zone.bounds
    x0, x1, y0, y1 = pl.x_m[0], pl.x_m[-1], pl.y_m[0], pl.y_m[-1]
    if max(zx1 - zx0, zy1 - zy0) > INSET_SMALL * min(x1 - x0, y1 - y0):
        return None
    half = max(zx1 - zx0, zy1 - zy0, 4 * pl.spacing_m, 2.0) * 0.9
    cx, cy = (zx0 + zx1) / 2, (zy0 + zy1) / 2
    # the corner that covers least of the site's drawing (areas, lines, wires), away from the zone itself
    size = 0.32
    drawn = [shapely.Polygon(a.polygon).boundary for a in site.areas] + [shapely.LineString(ln.points)
                                                                          for ln in site.lines]
    drawn += [shapely.LineString([w.start_m[:2], w.end_m[:2]]) for st in (structures or {}).values() for w in st.wires
              if w.start_m[:2] != w.end_m[:2]]
    stuff = shapely.union_all(drawn) if drawn else shapely.GeometryCollection()

    def cost(k):
        fx, fy = k
        box = shapely.box(x0 + fx * (x1 - x0), y0 + fy * (y1 - y0), x0 + (fx + size) * (x1 - x0),
                          y0 + (fy + size) * (y1 - y0))
        return (box.intersects(zone), stuff.intersection(box).length)

    where = min([(0.02, 0.62), (0.64, 0.62), (0.02, 0.16), (0.64, 0.16)], key=cost)
    ins = ax.inset_axes([where[0], where[1], size, size])
    draw_ratio(pl, ratio, ins)
    draw_plan(site, ins, structures, label_areas=False)
    for t in list(ins.texts):
        t.remove()  # labels stay on the main plan
    ins.set_xlim(cx - half, cx + half)
    ins.set_ylim(cy - half, cy + half)
    ins.set_aspect("equal")
    ins.set_xticks([])
    ins.set_yticks([])  # the title gives the scale
    ins.set_title(f"enlarged: {2 * half:.1g} m across", fontsize=6.5, pad=2)
    for sp in ins.spines.values():
        sp.set_edgecolor("black")
        sp.set_linewidth(1.0)
    ax.indicate_inset_zoom(ins, edgecolor="black", linewidth=0.8)
    return ins


FOOT_IN = 1.35  # legend and caption band under the plan [in]
COLOURBAR_IN = 1.3  # room kept on the right for the colour bar glued to the plan [in]


def _plan_figure(pl, paper_in: tuple[float, float] | None = None):
    """A figure shaped to the plan (or to a page): the plan axes and, below, a band for legend and caption."""
    aspect = (pl.y_m[-1] - pl.y_m[0] + 6) / (pl.x_m[-1] - pl.x_m[0] + 10)
    if paper_in is not None:
        # the plan at the top of the page, the legend and caption right under it, the rest left blank
        fig = _paper_figure(paper_in)
        plan_in = min(paper_in[1] - FOOT_IN - 1.0, max(paper_in[0] * aspect + 0.8, 3.5))
        grid = fig.add_gridspec(3, 1, height_ratios=[plan_in, FOOT_IN, max(paper_in[1] - plan_in - FOOT_IN, 0.01)])
    else:
        plan_in = min(max(7.5 * aspect, 3.5), 10.0)
        fig = Figure(figsize=(7.5, plan_in + FOOT_IN), layout="constrained")
        grid = fig.add_gridspec(2, 1, height_ratios=[plan_in, FOOT_IN])
    _keep_right_margin(fig)
    ax = fig.add_subplot(grid[0])
    foot = fig.add_subplot(grid[1])
    foot.set_axis_off()
    return fig, ax, foot


PAGE_FOOTER_IN = 0.5  # strip kept free at the bottom of a page for the report's footer


def _paper_figure(paper_in: tuple[float, float]) -> Figure:
    fig = Figure(figsize=paper_in, layout="constrained")
    fig.get_layout_engine().set(rect=(0.0, PAGE_FOOTER_IN / paper_in[1], 1.0, 1.0 - PAGE_FOOTER_IN / paper_in[1]))
    return fig


def _keep_right_margin(fig) -> None:
    """Room on the right for the colour bar glued to the plan (outside the axes the layout knows)."""
    eng = fig.get_layout_engine()
    x, y, w, h = eng.get()["rect"]
    eng.set(rect=(x, y, w - COLOURBAR_IN / fig.get_figwidth(), h))


def _caption(foot, text: str, width_in: float = 7.5):
    """The caption at the bottom of the band, from the figure's left edge across its width (out of the layout,
    like the legend: it may be wider than the plan's column)."""
    from matplotlib.transforms import blended_transform_factory

    fig = foot.get_figure()
    cap = foot.text(0.15 / width_in, 0.0, _wrap(text, width_in), fontsize=6, color="#333333", ha="left",
                    va="bottom", transform=blended_transform_factory(fig.transFigure, foot.transAxes))
    cap.set_in_layout(False)
    return cap


def _wrap(text: str, width_in: float) -> str:
    """Wrapped to the figure's width less 0.3 in (6 pt text: about 0.047 in a character)."""
    return "\n".join(textwrap.wrap(text, int((width_in - 0.3) / 0.047)))


def _foot_legend(foot, handles):
    """The legend at the top of the foot band, centred on the whole figure (it may be wider than the plan's
    column) and kept out of the layout, which would otherwise shrink the plan to make room for it."""
    from matplotlib.transforms import blended_transform_factory

    fig = foot.get_figure()
    leg = foot.legend(handles=handles, loc="upper center", fontsize=6.5, frameon=False, ncols=3,
                      bbox_to_anchor=(0.5, 1.0), bbox_transform=blended_transform_factory(fig.transFigure,
                                                                                          foot.transAxes))
    leg.set_in_layout(False)
    return leg


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
            Line2D([], [], color="#666666", linewidth=1.0, linestyle="--", label="half the limit (ratio 0.5)"),
            Patch(facecolor="white", edgecolor="#9e9e9e", hatch="////", label="too close to a wire (masked)"),
            Patch(facecolor=BAND_COLOURS[4], edgecolor="none", label="over the limit (orange to red)"),
            Line2D([], [], marker="D", color="none", markerfacecolor="white", markeredgecolor="black", label="worst point, value"),
            Line2D([], [], color="#ff6f00", linewidth=4, label="line crossed by limit region (numbered)"),
            Line2D([], [], color="#ff6f00", linewidth=4, linestyle=(0, (1.5, 1)), label="line crossed by masked zone"),
        ]
    return _foot_legend(foot, handles)


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


def section_figure(assessment, t, paper_in: tuple[float, float] | None = None) -> Figure:
    """The elevation section of one transmission: bands in height, the limit, floors and body lines."""
    from matplotlib.colors import ListedColormap

    sec = t.section
    site = assessment.site
    # a fixed layout in inches (true scale: 1 m across = 1 m up): title, plot, axis label, legend, caption
    width = paper_in[0] if paper_in else 7.5
    left, right, top, below, foot_in = 0.8, 1.5, 0.95, 0.75, 1.2
    span_s, span_z = sec.s_m[-1] - sec.s_m[0], sec.z_m[-1] + 0.5
    plot_w = width - left - right
    plot_h = min(plot_w * span_z / span_s, 7.0)
    plot_h = max(plot_h, 1.2)
    height = paper_in[1] if paper_in else top + plot_h + below + foot_in + 0.1
    fig = Figure(figsize=(width, height))
    bottom_in = height - top - plot_h
    ax = fig.add_axes([left / width, bottom_in / height, plot_w / width, plot_h / height])
    foot = fig.add_axes([0.1 / width, (bottom_in - below - foot_in) / height, (width - 0.2) / width,
                         foot_in / height])
    foot.set_axis_off()
    z = np.clip(sec.ratio, 1e-4, 1e4)
    filled = ax.contourf(sec.s_m, sec.z_m, z, levels=list(BAND_EDGES), cmap=ListedColormap(BAND_COLOURS),
                         norm=BoundaryNorm(BAND_EDGES, len(BAND_COLOURS)), zorder=1)
    ax.contour(sec.s_m, sec.z_m, z, levels=[0.5], colors="#666666", linewidths=1.0, linestyles="--", zorder=2)
    ax.contour(sec.s_m, sec.z_m, z, levels=[1.0], colors="white", linewidths=3.6, zorder=2)
    ax.contour(sec.s_m, sec.z_m, z, levels=[1.0], colors="black", linewidths=2.0, zorder=3)
    masked = np.isnan(sec.ratio).astype(float)
    if masked.any():
        hatch = ax.contourf(sec.s_m, sec.z_m, masked, levels=[0.5, 1.5], colors="none", hatches=["////"], zorder=3)
        hatch.set_edgecolor("#9e9e9e")
    ax.axhspan(-1.0, 0.0, color="#8d6e63", zorder=4)  # the ground
    for f in sec.floors:
        st = TIER_STYLE[f.exposure]
        ax.plot([f.from_s_m, f.to_s_m], [f.floor_m, f.floor_m], color=st["edgecolor"], linewidth=3.0,
                linestyle="-" if f.exposure != "none" else ":", zorder=5, solid_capstyle="butt")
        mid = (f.from_s_m + f.to_s_m) / 2
        if f.exposure != "none":
            ax.plot([mid, mid], [f.floor_m + sec.body_from_m, f.floor_m + sec.body_to_m], color="black",
                    linewidth=1.2, zorder=6)
            ax.plot([mid], [f.floor_m + sec.body_to_m], marker="_", color="black", markersize=6, zorder=6)
        ax.annotate(f"{f.area} ({f.floor_m:g} m)", (mid, f.floor_m), xytext=(0, -3), textcoords="offset points",
                    ha="center", va="top", fontsize=6.5, color=st["edgecolor"], zorder=7, gid=MOVABLE,
                    bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
    for (s0, z0), (s1, z1) in sec.wires:
        ax.plot([s0, s1], [z0, z1], color="white", linewidth=3.2, zorder=7)
        ax.plot([s0, s1], [z0, z1], color=WIRE_COLOUR, linewidth=1.6, zorder=8)
    ax.annotate(t.antenna, (0.0, max(z for w in sec.wires for _, z in w)), xytext=(0, 4), textcoords="offset points",
                ha="center", va="bottom", fontsize=7, color=WIRE_COLOUR, weight="bold", zorder=9, gid=MOVABLE,
                bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
    ax.set_xlim(sec.s_m[0], sec.s_m[-1])
    ax.set_ylim(-0.5, sec.z_m[-1])
    ax.set_aspect("equal")
    compass = (sec.bearing_deg + site.north_deg) % 360
    ax.set_xlabel(f"distance along the section [m]\n(towards bearing {compass:.0f} deg; 0 at the feed)")
    ax.set_ylabel("height above ground [m]")
    how = "as given in the site file" if sec.chosen else "chosen to cross the most floors"
    fig.suptitle("\n".join([site.title, *textwrap.wrap(f"{t.name}: elevation section through {t.antenna} ({how})",
                                                        int(width * 10))]), fontsize=10, y=1.0 - 0.08 / height,
                 va="top")
    cax = fig.add_axes([(left + plot_w + 0.15) / width, (bottom_in + 0.05 * plot_h) / height, 0.14 / width,
                        max(0.9 * plot_h, 1.6) / height])  # at least 1.6 in tall, so its labels stay apart
    cb = fig.colorbar(filled, cax=cax, ticks=MAP_LEVELS)
    cb.ax.set_yticklabels([f"{v:g}" for v in MAP_LEVELS])
    cb.set_label("exposure ratio (1 = at the limit)", fontsize=7.5)
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=TIER_STYLE["public"]["edgecolor"], linewidth=3, label="floor of an area"),
               Line2D([], [], color="black", linewidth=1.2, label="body line (assessed heights)"),
               Line2D([], [], color="black", linewidth=2.0, label="limit (ratio 1)"),
               Line2D([], [], color="#666666", linestyle="--", label="half the limit"),
               Line2D([], [], color=WIRE_COLOUR, linewidth=1.6, label="antenna wire (projected)")]
    _foot_legend(foot, handles)
    caption = (f"Point values on the section (no averaging along the body line), every check of "
               f"{site.standard} against the public tier, the worst shown; {t.frequency_mhz:g} MHz, "
               f"{t.power_w:g} W PEP. The plan maps judge each area on its own floor with its body line.")
    from .assess import headings_for

    if len(headings_for(site, t.antenna)) > 1:
        caption += " A beam on a rotator is drawn here at heading 0 only; the plan maps take every heading."
    _settle(fig, ax, foot, caption)
    return fig


def wires_of(site) -> dict:
    """Every antenna's structure as drawn on the plan, by antenna name."""
    from .assess import _structure, highest_any

    return {a.name: _structure(site, a.name, highest_any(site)) for a in site.antennas}


def compare_figure(layouts, paper_in: tuple[float, float] | None = None) -> Figure:
    """Layouts side by side on one plan frame and one colour scale (the combined case of each)."""
    n = len(layouts)
    cols = min(n, 3)
    rows = math.ceil(n / cols)
    x0 = min(lay.assessment.plan.x_m[0] for lay in layouts)
    x1 = max(lay.assessment.plan.x_m[-1] for lay in layouts)
    y0 = min(lay.assessment.plan.y_m[0] for lay in layouts)
    y1 = max(lay.assessment.plan.y_m[-1] for lay in layouts)
    width = paper_in[0] if paper_in else 3.6 * cols + 1.2
    cell_h = (width - 1.2) / cols * (y1 - y0) / (x1 - x0) + 0.6
    height = paper_in[1] if paper_in else rows * cell_h + 1.6
    fig = Figure(figsize=(width, height), layout="constrained")
    grid = fig.add_gridspec(rows + 1, cols, height_ratios=[cell_h] * rows + [1.0])
    filled = None
    for k, lay in enumerate(layouts):
        a = lay.assessment
        ax = fig.add_subplot(grid[k // cols, k % cols])
        filled, *_ = draw_ratio(a.plan, a.combined.ratio, ax)
        draw_plan(a.site, ax, wires_of(a.site), label_areas=False)
        for t in list(ax.texts):
            t.remove()  # one frame for all: names in the legend and the titles, not on each plan
        ax.set_xlim(x0, x1)
        ax.set_ylim(y0, y1)
        ax.set_aspect("equal")
        ax.tick_params(labelsize=6.5)
        ax.set_title(f"{lay.name}\nworst {lay.worst:.2g}; {lay.exceedance_m2:.1f} m^2 over; "
                     f"{lay.crossings} crossing{'s' if lay.crossings != 1 else ''}", fontsize=8)
    cb = fig.colorbar(filled, ax=fig.axes, ticks=MAP_LEVELS, shrink=0.8, aspect=30)
    cb.ax.set_yticklabels([f"{v:g}" for v in MAP_LEVELS])
    cb.set_label("exposure ratio, combined case (1 = at the limit)", fontsize=7.5)
    foot = fig.add_subplot(grid[rows, :])
    foot.set_axis_off()
    add_legend(foot)
    fig.suptitle(f"{layouts[0].assessment.site.title}: layouts compared (worst check and group at each point)",
                 fontsize=10)
    return fig


def place_figure(search, paper_in: tuple[float, float] | None = None) -> Figure:
    """Heat map of the allowed power (as a share of the planned power) over the candidate positions."""
    from matplotlib import colormaps

    from .assess import plan
    from .place import search_figure_values

    site = search.site
    pl = plan(site)
    fig, ax, foot = _plan_figure(pl, paper_in)
    vals = search_figure_values(search)
    if vals:
        xy = np.array(list(vals))
        v = np.array(list(vals.values()))
        half = search.step_m / 2
        cmap = colormaps["viridis"]
        vmax = max(float(np.nanmax(v)), 1.0)
        for (x, y), val in zip(xy, v, strict=True):
            ax.add_patch(Rectangle((x - half, y - half), 2 * half, 2 * half, facecolor=cmap(min(val / vmax, 1.0)),
                                   edgecolor="none", zorder=1))
        from matplotlib.cm import ScalarMappable
        from matplotlib.colors import Normalize

        sm = ScalarMappable(norm=Normalize(0, vmax), cmap=cmap)
        cax = ax.inset_axes([1.03, 0.1, 0.035, 0.8])
        cb = fig.colorbar(sm, cax=cax)
        cb.set_label("allowed power / planned power\n(1 = the plan fits; 0 = not shown within)", fontsize=7.5)
    others = {k: v for k, v in wires_of(site).items() if k != search.antenna}
    draw_plan(site, ax, others)
    if search.candidates:
        best = search.candidates[0]
        ax.plot([best.x_m], [best.y_m], marker="*", markersize=14, color="white", markeredgecolor="black", zorder=13)
    frame(ax, site, pl)
    fig.suptitle(f"{site.title}\nwhere {search.antenna!r} may stand in {search.within!r} (star: best)", fontsize=10)
    add_legend(foot, fields=False)
    _settle(fig, ax, foot, f"Each square: one candidate position ({search.step_m:g} m apart), its best height and heading; "
                           "the antenna alone (other antennas absent: the best are re-checked with full solves); "
                           f"nfmap {__version__}")
    return fig


SURVEY_COLOURS = {"agrees within 3 dB": "#1a9850", "agrees within 6 dB": "#fdae61", "disagrees": "#b2182b"}
SURVEY_MARKERS = {"agrees within 3 dB": "o", "agrees within 6 dB": "s", "disagrees": "X"}


def survey_figure(sv, paper_in: tuple[float, float] | None = None) -> Figure:
    """The plan with each reading marked by its verdict (colour and shape) and labelled with its difference."""
    from matplotlib.lines import Line2D

    from .assess import plan

    site = sv.site
    pl = plan(site)
    fig, ax, foot = _plan_figure(pl, paper_in)
    draw_plan(site, ax, wires_of(site))
    for c in sv.rows:
        r = c.reading
        ax.plot([r.x_m], [r.y_m], marker=SURVEY_MARKERS[c.verdict], markersize=8, color=SURVEY_COLOURS[c.verdict],
                markeredgecolor="black", zorder=12)
        ax.annotate(f"{c.difference_db:+.1f} dB {c.quantity}", (r.x_m, r.y_m), xytext=(6, 6),
                    textcoords="offset points", fontsize=6.5, zorder=12, gid=MOVABLE,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "black", "lw": 0.5},
                    arrowprops={"arrowstyle": "-", "color": "#444444", "lw": 0.6, "shrinkA": 0, "shrinkB": 3})
    frame(ax, site, pl)
    fig.suptitle(f"{site.title}\nreadings against the model (measured - model, dB)", fontsize=10)
    handles = [Line2D([], [], marker=SURVEY_MARKERS[v], color="none", markerfacecolor=SURVEY_COLOURS[v],
                      markeredgecolor="black", markersize=7, label=v) for v in SURVEY_COLOURS]
    _foot_legend(foot, handles)
    _settle(fig, ax, foot, "E for electric probes, H for loops; the model at each reading's carrier power less the "
                           f"feedline loss; nfmap {__version__}")
    return fig


def save_plan(site, path) -> None:
    """The plan and antennas, no fields (for ``check``)."""
    from .assess import plan

    pl = plan(site)
    fig, ax, foot = _plan_figure(pl)
    draw_plan(site, ax, wires_of(site))
    frame(ax, site, pl)
    fig.suptitle(f"{site.title}\nplan and antennas (no fields computed)", fontsize=10)
    add_legend(foot, fields=False)
    declutter(fig, ax)
    fig.savefig(path, dpi=170)
