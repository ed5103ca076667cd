"""Engine speed: near E+H points per second on a lattice around each default antenna over
average ground, with 1 and 2 jobs, the overhead against a bare PyNEC script doing the same
evaluations, and the cost of H relative to E: by the reference (curl E at every point) and by
sampling (curl E at nodes, engine.SampledH, what an assessment uses).

    python benchmarks/engine.py [--n 100] [--nz 9]

It also prints the share of points where the reference H is unsteady: where its 1, 2 and 4 cm stencils
differ by more than 0.5 % (NEC-2's Sommerfeld interpolation steps E by up to about 1 % across its cells;
a stencil across a step turns it into a spike of H; see nfmap.engine), and the error of the sampled |H|
against the reference where the reference is steady: the largest, the 99th percentile, and the largest
where H is at least sqrt(0.05) of the ICNIRP 2020 public reference level at 100 W (ratio >= 0.05).

Targets: sampled E+H / E <= 2.0, error <= 2 %; 2-job speed-up >= 1.8.
"""

import argparse
import os
import time
import warnings

import numpy as np

import antennas
from nfmap import engine
from nfmap.exposure import limits

CASES = {
    "dipole 14.2 MHz at 10 m": (lambda: antennas.dipole("dipole", (0, 0), 10.0, resonant_mhz=14.2), 14.2),
    "vertical 7.1 MHz, 4 radials": (lambda: antennas.vertical("vertical", (0, 0), resonant_mhz=7.1), 7.1),
    "end-fed 20 m": (lambda: antennas.end_fed("end-fed", (0, 0), 20.0, 4.0, 9.0, design_mhz=7.1), 7.1),
    "beam 28.4 MHz at 12 m": (lambda: antennas.beam("beam", (0, 0), 12.0, 28.4), 28.4),
}


def bare(model, lattice, shifts):
    """The same quantities by the same method, straight PyNEC: one E grid per shift (one context)."""
    import PyNEC

    ctx = PyNEC.nec_context()
    geo = ctx.get_geometry()
    tag = 1
    for s in model.structures:
        for w in s.wires:
            geo.wire(tag, w.segments, *w.start_m, *w.end_m, w.radius_m, 1.0, 1.0)
            tag += 1
    ctx.geometry_complete(1)
    ctx.gn_card(2, 0, model.ground.permittivity, model.ground.conductivity_s_per_m, 0, 0, 0, 0)
    ctx.fr_card(0, 1, model.frequency_mhz, 0)
    ctx.ex_card(0, 1 + model.structures[0].feed_wire, model.structures[0].feed_segment(), 0, 1.0, 0, 0, 0, 0, 0)
    ctx.xq_card(0)
    (x0, y0, z0), (dx, dy, dz), (nx, ny, nz) = lattice.origin_m, lattice.step_m, lattice.shape
    for k, (axis, sign) in enumerate(shifts):
        o = [x0, y0, z0]
        o[axis] += sign * 0.01
        ctx.ne_card(0, nx, ny, nz, *o, dx, dy, dz)
        nf = ctx.get_near_field_pattern(k)
        np.asarray(nf.get_field_x()), np.asarray(nf.get_field_y()), np.asarray(nf.get_field_z())


SIX = [(a, s) for a in range(3) for s in (1, -1)]


def best_of(repeat, fn):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def _accuracy(model, lattice, pool) -> tuple[float, float, float, float]:
    """Share of the live points where the reference H is unsteady (moves by more than 0.5 % between 1, 2 and
    4 cm), and the sampled |H|'s relative error where it is steady: max, 99th percentile, max where the
    ratio >= 0.05."""
    ref = engine.near_fields(model, lattice, 100.0, jobs=pool)
    mag = engine.rms_magnitude(ref.h_a_per_m)
    live = ~ref.masked
    moved = np.zeros(len(mag), bool)
    for step_m in (0.01, 0.04):
        other = engine.near_fields(model, lattice, 100.0, jobs=pool, step_m=step_m)
        moved |= engine.rms_magnitude(other.h_a_per_m - ref.h_a_per_m) > 0.005 * mag
    steady = live & ~moved
    got = engine.near_fields(model, lattice, 100.0, jobs=pool, h_method="sampled")
    err = np.abs(engine.rms_magnitude(got.h_a_per_m) - mag) / mag
    h_lim = float(limits.limits("icnirp-2020", "public", model.frequency_mhz).h_a_per_m[0])
    matters = steady & ((mag / h_lim) ** 2 >= 0.05)
    return (float((moved & live).sum() / live.sum()), float(err[steady].max()), float(np.percentile(err[steady], 99)),
            float(err[matters].max()) if matters.any() else 0.0)


def main():
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        os.environ.setdefault(var, "1")  # one core per job, as the CLI runs (PyNEC loads later)
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=100)
    ap.add_argument("--nz", type=int, default=9)
    ap.add_argument("--repeat", type=int, default=3, help="best of this many runs (the machine is noisy)")
    args = ap.parse_args()
    print(f"lattice {args.n} x {args.n} x {args.nz}, 0.3 m spacing, average ground, H from curl E; best of {args.repeat}")
    print(f"{'antenna':<30} {'segs':>5} {'pts/s 1 job':>12} {'pts/s 2 jobs':>13} {'speed-up':>9} {'overhead':>9} "
          f"{'E+H / E':>8} {'sampled':>8} {'unsteady H':>11} {'error max':>10} {'p99':>6} {'r>=0.05':>8}")
    for name, (make, f) in CASES.items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            s = antennas.segment(make(), f)
        m = engine.Model((s,), 0, f, engine.ground("average"))
        lat = engine.Lattice((-args.n * 0.15, -args.n * 0.15, 0.2), (0.3, 0.3, 0.2), (args.n, args.n, args.nz))
        t1 = best_of(args.repeat, lambda m=m, lat=lat: engine.near_fields(m, lat, 100.0, jobs=1))
        with engine.Workers(2) as pool:
            engine.near_fields(m, lat, 100.0, jobs=pool)  # start the workers once, as a run does
            t2 = best_of(args.repeat, lambda m=m, lat=lat, pool=pool: engine.near_fields(m, lat, 100.0, jobs=pool))
            unsteady, e_max, e_99, e_matters = _accuracy(m, lat, pool)
        tb6 = best_of(args.repeat, lambda m=m, lat=lat: bare(m, lat, SIX))
        tb1 = best_of(args.repeat, lambda m=m, lat=lat: bare(m, lat, SIX[:1]))
        ts = best_of(args.repeat, lambda m=m, lat=lat: engine.near_fields(m, lat, 100.0, jobs=1, h_method="sampled"))
        print(f"{name:<30} {s.segment_count:>5} {lat.size / t1:>12.0f} {lat.size / t2:>13.0f} {t1 / t2:>9.2f} "
              f"{t1 / tb6:>9.2f} {tb6 / tb1:>8.1f} {ts / tb1:>8.2f} {100 * unsteady:>10.1f}% {100 * e_max:>9.2f}% "
              f"{100 * e_99:>5.2f}% {100 * e_matters:>7.2f}%")
    print("overhead: nfmap (1 job) / bare PyNEC making the same six E evaluations; E+H / E: cost of E and H from "
          "curl E at every point over one E evaluation (bare); sampled: the same by engine.SampledH (1 job)")


if __name__ == "__main__":
    main()
