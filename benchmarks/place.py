"""How long does ranking 1,000 candidate positions take, by reuse against direct solves?

The demo's vertical: one solve and one offset lattice, then 1,000 candidates judged by shifting
(``nfmap.place``), against a full assessment per candidate (measured on a few candidates and scaled,
as said in the output). Prints the figures; asserts nothing (targets: >= 50x, under 20 s on 2 cores).
"""

import time
import warnings

import numpy as np

from nfmap import assess, engine, place, site

N = 1000
DIRECT_SAMPLE = 3


def main() -> None:
    warnings.simplefilter("ignore")
    s = site.load("src/nfmap/examples/demo.toml")
    t = s.transmission("40 m phone")
    step = 1.0
    s0 = place.replace(s, grid=place.replace(s.grid, spacing_m=step))
    pl = assess.plan(s0)
    idx = np.argwhere(np.ones((len(pl.y_m), len(pl.x_m)), bool))
    rng = np.random.default_rng(1)
    idx = idx[rng.choice(len(idx), size=min(N, len(idx)), replace=False)]
    trial = place.moved(s0, t.antenna, 0.0, 0.0)
    with engine.Workers(2) as workers:
        t0 = time.perf_counter()
        ceilings, _ = place._scales(s0, pl, trial, t.antenna, t, idx, workers)
        shifted = time.perf_counter() - t0
    t0 = time.perf_counter()
    for iy, ix in idx[:DIRECT_SAMPLE]:
        moved = place.moved(s0, t.antenna, float(pl.x_m[ix]), float(pl.y_m[iy]))
        moved = place.replace(moved, transmissions=(t,))  # the same transmission only: a fair comparison
        assess.assess(moved, jobs=2, grow=False)
    direct_each = (time.perf_counter() - t0) / DIRECT_SAMPLE
    direct = direct_each * len(idx)
    print(f"candidates: {len(idx)} on a {step:g} m lattice ({len(pl.x_m)} x {len(pl.y_m)} plan points, "
          f"{len(pl.levels)} levels), 2 jobs")
    print(f"by reuse (one solve, shifted): {shifted:.1f} s")
    print(f"by direct solves: {direct_each:.2f} s each, measured on {DIRECT_SAMPLE} and scaled: {direct:.0f} s "
          "(a full assessment of this transmission each, the other antennas in the model, same lattice)")
    print(f"speed-up: {direct / shifted:.0f}x; finite ceilings: {sum(np.isfinite(ceilings))}")


if __name__ == "__main__":
    main()
