"""What a run will cost, estimated before any solve, and the budget beyond which it needs ``--large``.

The time estimate uses the measured cost of NEC-2 near fields (see DEVELOPERS.md): about 0.75 us per
field point per segment over a finite (Sommerfeld) ground and 0.25 us in free space or over perfect
ground, on one core; H from curl E costs six E evaluations per point.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import antennas

from . import assess
from .site import Site, build

# the budget a run keeps to unless --large is given
SEGMENTS_MAX = 2_000  # per model: the NEC matrix is segments^2 complex numbers
FIELD_POINTS_MAX = 2_000_000  # lattice points x body heights x levels x headings, over all transmissions
MEMORY_MAX_BYTES = 4e9
PLAN_POINTS_QUICK = 4_000_000  # above this the plan lattice is not built for the estimate
US_PER_POINT_SEGMENT = {"curl": 0.75, "nh": 0.25}  # measured, one core (pynec-accel)
CURL_E_PASSES = 6


@dataclass(frozen=True)
class Estimate:
    segments_max: int  # the largest model of any transmission
    segments_by_antenna: dict[str, int]
    plan_points: int  # points of the plan lattice
    field_points: int  # evaluated body-line points, summed over levels, headings and transmissions
    nec_points: int  # NEC near-field evaluations (x6 where H comes from curl E)
    memory_bytes: float
    output_bytes: float
    cpu_seconds: float  # on one core

    def seconds(self, jobs: int) -> float:
        """Wall time on ``jobs`` cores (an estimate; start-up and the record add a few seconds)."""
        return self.cpu_seconds / max(1, jobs) + 3.0

    def over(self) -> list[str]:
        """What exceeds the budget, one phrase each (empty: within)."""
        out = []
        if self.segments_max > SEGMENTS_MAX:
            big = max(self.segments_by_antenna, key=self.segments_by_antenna.get)
            out.append(f"{self.segments_max} segments in one model (budget {SEGMENTS_MAX}; antenna {big!r} has "
                       f"{self.segments_by_antenna[big]}: check its length and frequency)")
        if self.field_points > FIELD_POINTS_MAX:
            out.append(f"{self.field_points:,} field points (budget {FIELD_POINTS_MAX:,}: a coarser grid.spacing_m, a "
                       "smaller grid.margin_m, fewer body_points, or areas and antennas closer together)")
        if self.memory_bytes > MEMORY_MAX_BYTES:
            out.append(f"about {self.memory_bytes / 1e9:.1f} GB of memory (budget {MEMORY_MAX_BYTES / 1e9:.0f} GB)")
        return out

    def describe(self, jobs: int) -> str:
        return (f"{self.field_points:,} field points ({self.plan_points:,} plan points), at most {self.segments_max} "
                f"segments, about {self.memory_bytes / 1e6:.0f} MB, about {_duration(self.seconds(jobs))} on {jobs} "
                f"core{'s' if jobs != 1 else ''}")


def _duration(s: float) -> str:
    if s < 90:
        return f"{s:.0f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


def estimate(site: Site) -> Estimate:
    """The cost of ``nfmap run`` on ``site`` (no solve; builds the geometry only)."""
    seg_by_ant: dict[str, int] = {}
    seg_models = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", antennas.ModelRuleWarning)
        for t in site.transmissions:
            total = 0
            for spec in site.antennas:
                s = build(site, spec, t.frequency_mhz, passive=spec.name != t.antenna)
                seg_by_ant[spec.name] = max(seg_by_ant.get(spec.name, 0), s.segment_count)
                total += s.segment_count
            seg_models.append(total)
    plan_points = plan_points_estimate(site)
    n_levels = len({0.0, *(a.floor_m for a in site.areas)})
    if plan_points > PLAN_POINTS_QUICK:
        windows = [plan_points] * n_levels  # an upper bound, without building a lattice that large
    else:
        pl = assess.plan(site)
        plan_points = len(pl.x_m) * len(pl.y_m)
        windows = [_window_size(lv) for lv in pl.levels]
        n_levels = len(pl.levels)
    heights = site.grid.body.points
    per_tx = [sum(windows) * heights * len(assess.headings_for(site, t.antenna)) for t in site.transmissions]
    field_points = int(sum(per_tx))
    method = "curl" if site.ground.finite else "nh"
    passes = CURL_E_PASSES if method == "curl" else 2
    nec_points = field_points * passes
    cpu = sum(n * heights_segments for n, heights_segments in zip(
        [p * passes for p in per_tx], seg_models, strict=True)) * US_PER_POINT_SEGMENT[method] * 1e-6
    largest_level = max(windows, default=0) * heights
    # per level: complex E and H (N, 3) at 16 bytes, kept while reduced; per transmission its plan maps
    maps_per_tx = 8 + 3 * 2
    memory = (largest_level * 3 * 16 * 2 * 2 + max(seg_models) ** 2 * 16
              + plan_points * n_levels * len(site.transmissions) * maps_per_tx * 8)
    output = plan_points * n_levels * len(site.transmissions) * maps_per_tx * 8 * 0.6 + 1.5e6 * (
        len(site.transmissions) + 2)
    return Estimate(max(seg_models), seg_by_ant, plan_points, field_points, nec_points, float(memory), float(output),
                    float(cpu))


def _window_size(lv: assess.Level) -> int:
    sy, sx = lv.window
    return (sy.stop - sy.start) * (sx.stop - sx.start)


def plan_points_estimate(site: Site) -> int:
    """Plan lattice points from the extent alone (cheap: the axes, not the lattice)."""
    x, y = assess.plan_axes(site)
    return len(x) * len(y)
