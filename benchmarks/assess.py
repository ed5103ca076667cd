"""Whole assessment of the demo at 0.5 m and 0.25 m spacing: wall time, peak memory, points,
and the share of the time spent outside the engine's near-field evaluations.

    python benchmarks/assess.py [--spacing 0.5 0.25] [--jobs 2]
    python benchmarks/assess.py --memory     # one transmission on a 200 x 200 x 9 lattice

Target: total / engine <= 1.3; peak memory for a 200 x 200 x 9 lattice < 1 GB.
"""

import argparse
import dataclasses
import os
import resource
import time
import warnings
from importlib import resources
from unittest import mock

from nfmap import assess, engine, site


def _timer(fn, spent):
    def timed(*a, **k):
        t = time.perf_counter()
        out = fn(*a, **k)
        spent[0] += time.perf_counter() - t
        return out

    return timed


def main():
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        os.environ.setdefault(var, "1")  # one core per job, as the CLI runs (PyNEC loads later)
    ap = argparse.ArgumentParser()
    ap.add_argument("--spacing", type=float, nargs="+", default=[0.5, 0.25])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--memory", action="store_true", help="200 x 200 x 9 lattice, first transmission only")
    args = ap.parse_args()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        base = site.load(str(resources.files("nfmap").joinpath("examples/demo.toml")))
    if args.memory:
        return memory(base, args.jobs)
    print(f"{'spacing m':>9} {'points':>9} {'wall s':>8} {'engine s':>9} {'total/engine':>13} {'peak MB':>8}")
    for d in args.spacing:
        s = dataclasses.replace(base, grid=dataclasses.replace(base.grid, spacing_m=d))
        spent = [0.0]
        timed = _timer(engine.near_fields, spent)

        t = time.perf_counter()
        with mock.patch.object(assess.engine, "near_fields", timed):
            a = assess.assess(s, jobs=args.jobs)
        wall = time.perf_counter() - t
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(f"{d:>9g} {a.points_evaluated:>9} {wall:>8.1f} {spent[0]:>9.1f} {wall / spent[0]:>13.2f} {peak:>8.0f}")


def memory(base, jobs):
    """Peak memory of one transmission on a lattice of about 200 x 200 plan points x 9 heights."""
    s = dataclasses.replace(base, transmissions=base.transmissions[:1], areas=base.areas[:-2])  # one level
    pl = assess.plan(s)
    span = max(pl.x_m[-1] - pl.x_m[0], pl.y_m[-1] - pl.y_m[0])
    grid = dataclasses.replace(base.grid, spacing_m=span / 199, body=dataclasses.replace(base.grid.body, points=9))
    s = dataclasses.replace(s, grid=grid)
    pl = assess.plan(s)
    t = time.perf_counter()
    a = assess.assess(s, jobs=jobs)
    wall = time.perf_counter() - t
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(f"plan {len(pl.x_m)} x {len(pl.y_m)} x 9 heights: {a.points_evaluated} points, {wall:.0f} s, "
          f"peak memory {own:.0f} MB (main process), {workers:.0f} MB (largest worker)")


if __name__ == "__main__":
    main()
