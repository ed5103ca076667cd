"""Layouts of one site side by side: which one keeps people furthest below their limits?

Every layout is assessed as ``run`` does (:func:`nfmap.assess.assess`); the figures compared are the
combined case's worst ratio per accessible area (with the check that governs), the area at or above
the limit in accessible places, the crossings of lines, and the power ceilings per transmission and
per group. Layouts must describe the same site: the same standard and the same areas (names,
polygons, tiers and floors); antennas and transmissions may differ.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .assess import ELSEWHERE, Assessment
from .site import Site


class NotSameSite(ValueError):
    """The files describe different sites (the reason names what differs)."""


@dataclass(frozen=True)
class Layout:
    name: str  # the site file's stem (or its path when stems repeat)
    assessment: Assessment

    @property
    def worst_by_area(self) -> dict[str, tuple[float | None, str | None]]:
        return {a.name: (a.max_ratio, a.check) for a in self.assessment.combined.areas if a.exposure != "none"}

    @property
    def worst(self) -> float:
        return max((r for r, _ in self.worst_by_area.values() if r is not None), default=0.0)

    @property
    def exceedance_m2(self) -> float:
        """Area at or above the limit in accessible places (every area but 'none', and the ground outside them)."""
        return sum(a.exceedance_area_m2 for a in self.assessment.combined.areas if a.exposure != "none")

    @property
    def crossings(self) -> int:
        return sum(1 for c in self.assessment.combined.crossings if not c.masked)

    @property
    def ceilings(self) -> dict[str, float | None]:
        return {t.name: t.power_ceiling_w for t in self.assessment.transmissions}

    @property
    def group_scales(self) -> dict[str, float | None]:
        return {g.name: g.power_scale for g in self.assessment.combined.group_results if len(g.members) > 1}


def same_site(sites: list[Site]) -> None:
    """Refuse files that are not layouts of one site (``NotSameSite`` naming the first difference)."""
    first = sites[0]
    for s in sites[1:]:
        if s.standard != first.standard:
            raise NotSameSite(f"{s.path}: standard {s.standard} but {first.path} uses {first.standard}; layouts of one "
                              "site are judged by one standard")
        a = {(x.name, x.polygon, x.exposure, x.floor_m) for x in first.areas}
        b = {(x.name, x.polygon, x.exposure, x.floor_m) for x in s.areas}
        if a != b:
            diff = sorted({n for n, *_ in a ^ b})
            raise NotSameSite(f"{s.path}: its areas differ from {first.path}'s ({', '.join(diff)}); layouts of one site "
                              "share the same areas (names, polygons, tiers, floors)")


def best_lines(layouts: list[Layout]) -> list[str]:
    """One sentence per criterion naming the best layout (ties named together)."""
    def best(key, higher=False, fmt="{:.3g}"):
        vals = [(key(lay), lay.name) for lay in layouts]
        finite = [v for v in vals if v[0] is not None]
        if not finite:
            return None, "-"
        target = (max if higher else min)(v for v, _ in finite)
        names = [n for v, n in finite if math.isclose(v, target, rel_tol=1e-9) or v == target]
        return fmt.format(target) if math.isfinite(target) else "no limit", " and ".join(names)

    out = []
    v, n = best(lambda lay: lay.worst)
    out.append(f"Lowest worst ratio in an accessible area: {n} ({v} of the limit).")
    v, n = best(lambda lay: lay.exceedance_m2, fmt="{:.1f} m^2")
    out.append(f"Smallest area at or above the limit in accessible places: {n} ({v}).")
    v, n = best(lambda lay: lay.crossings, fmt="{:d}")
    out.append(f"Fewest line crossings by the region at or above the limit: {n} ({v}).")
    names = sorted({t for lay in layouts for t in lay.ceilings})
    for t in names:
        v, n = best(lambda lay, t=t: lay.ceilings.get(t), higher=True, fmt="{:.0f} W PEP")
        out.append(f"Highest power ceiling for {t!r}: {n} ({v}).")
    for g in sorted({g for lay in layouts for g in lay.group_scales}):
        v, n = best(lambda lay, g=g: lay.group_scales.get(g), higher=True)
        out.append(f"Largest common power scale for group {g!r}: {n} ({v}).")
    return out


def table_rows(layouts: list[Layout]) -> list[dict]:
    """The figures compared, one dict per layout (for --json and the tables)."""
    rows = []
    for lay in layouts:
        rows.append({
            "layout": lay.name,
            "site_file": lay.assessment.site.path,
            "site_sha256": lay.assessment.site.sha256,
            "worst_ratio": lay.worst,
            "worst_ratio_by_area": {k: {"ratio": r, "check": c} for k, (r, c) in lay.worst_by_area.items()
                                    if k != ELSEWHERE or r is not None},
            "exceedance_area_m2": lay.exceedance_m2,
            "crossings": lay.crossings,
            "power_ceiling_w": {k: (None if v is None or math.isinf(v) else v) for k, v in lay.ceilings.items()},
            "group_power_scale": lay.group_scales,
            "over_limit": lay.assessment.over,
        })
    return rows
