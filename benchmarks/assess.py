"""Whole assessments, adaptive (the default) against exhaustive (every lattice point), side by side in one
run: NEC points and wall time for the demo at 0.5 m and 0.25 m and for the other examples at their own
spacing, and how far the adaptive answer is from the exhaustive one; peak memory of a 200 x 200 x 9 lattice.

    python benchmarks/assess.py [--jobs 2] [--examples demo.toml balcony.toml ...]
    python benchmarks/assess.py --memory     # one transmission on a 200 x 200 x 9 lattice

Targets: >= 4x fewer NEC points and >= 5x less wall time on the demo at 0.5 m and 0.25 m; every area's
worst ratio within 2 % (or adaptive.FLOOR), the same verdicts; peak memory for 200 x 200 x 9 < 1 GB. The
adaptive run takes H from curl E at nodes (engine.SampledH), the exhaustive one at every point.
"""

import argparse
import dataclasses
import os
import resource
import time
import warnings
from importlib import resources

from nfmap import adaptive, assess, site

EXAMPLES = ["demo-raised.toml", "balcony.toml", "end-fed.toml", "inverted-v.toml"]


def _load(name):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return site.load(str(resources.files("nfmap").joinpath(f"examples/{name}")))


def _timed(s, jobs, exhaustive):
    t = time.perf_counter()
    a = assess.assess(s, jobs=jobs, exhaustive=exhaustive)
    return a, time.perf_counter() - t


def _worst_area_difference(a, e):
    """Largest |adaptive - exhaustive| of an area's worst ratio beyond adaptive.FLOOR, relative to the exhaustive
    one (an exhaustive worst that is an isolated spike of the reference H is left out: adaptive.isolated_h_spike)."""
    worst = 0.0
    same = True
    for ta, te in zip(a.transmissions, e.transmissions, strict=True):
        for aa, ae in zip(ta.areas, te.areas, strict=True):
            same &= aa.over == ae.over
            if adaptive.isolated_h_spike(e.plan, te, ae):
                continue
            ra, re = aa.max_ratio or 0.0, ae.max_ratio or 0.0
            if abs(ra - re) > adaptive.FLOOR:
                worst = max(worst, abs(ra - re) / re)
    return worst, same


def main():
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        os.environ.setdefault(var, "1")  # one core per job, as the CLI runs (PyNEC loads later)
    ap = argparse.ArgumentParser()
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--examples", nargs="*", default=EXAMPLES)
    ap.add_argument("--memory", action="store_true", help="200 x 200 x 9 lattice, first transmission only")
    args = ap.parse_args()
    demo = _load("demo.toml")
    if args.memory:
        return memory(demo, args.jobs)
    cases = [(f"demo {d:g} m", dataclasses.replace(demo, grid=dataclasses.replace(demo.grid, spacing_m=d)))
             for d in (0.5, 0.25)]
    cases += [(f"{n.removesuffix('.toml')} {s.grid.spacing_m:g} m", s) for n in args.examples for s in [_load(n)]]
    print(f"{'case':<22} {'points adaptive':>16} {'exhaustive':>11} {'fewer':>6} {'wall s adaptive':>16} "
          f"{'exhaustive':>11} {'faster':>7} {'worst area diff':>16} {'verdicts':>9}")
    for name, s in cases:
        a, ta = _timed(s, args.jobs, False)
        e, te = _timed(s, args.jobs, True)
        diff, same = _worst_area_difference(a, e)
        print(f"{name:<22} {a.points_evaluated:>16} {e.points_evaluated:>11} {e.points_evaluated / a.points_evaluated:>6.1f} "
              f"{ta:>16.1f} {te:>11.1f} {te / ta:>7.1f} {100 * diff:>15.2f}% {'same' if same else 'DIFFER':>9}")
    print("points: NEC field points of the plan lattices (heights included, every heading); wall: the whole "
          "assessment (margin search, sections, checks) on", args.jobs, "jobs")


def memory(base, jobs):
    """Peak memory of one transmission on a lattice of about 200 x 200 plan points x 9 heights, both ways."""
    s = dataclasses.replace(base, transmissions=base.transmissions[:1], areas=base.areas[:-2])  # one level
    pl = assess.plan(s)
    span = max(pl.x_m[-1] - pl.x_m[0], pl.y_m[-1] - pl.y_m[0])
    grid = dataclasses.replace(base.grid, spacing_m=span / 199, body=dataclasses.replace(base.grid.body, points=9))
    s = dataclasses.replace(s, grid=grid)
    pl = assess.plan(s)
    for exhaustive in (False, True):
        t = time.perf_counter()
        a = assess.assess(s, jobs=jobs, grow=False, exhaustive=exhaustive)
        wall = time.perf_counter() - t
        own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
        print(f"{'exhaustive' if exhaustive else 'adaptive':<10} plan {len(pl.x_m)} x {len(pl.y_m)} x 9 heights: "
              f"{a.points_evaluated} points, {wall:.0f} s, peak memory so far {own:.0f} MB (main process), "
              f"{workers:.0f} MB (largest worker)")


if __name__ == "__main__":
    main()
