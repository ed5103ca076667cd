"""H from curl E at nodes only (engine.SampledH) against the reference (curl E at every point).

The reference is nfmap's own H over a finite ground: the curl of NEC-2's Sommerfeld E field by central
differences (Faraday's law; see nfmap.engine), itself checked against nec2c and closed forms in
test_engine.py. It is compared where it is steady: where its 1, 2 and 4 cm stencils agree within 0.5 %
(NEC-2's Sommerfeld interpolation steps E by about 1 % between its cells; a stencil across a step reads a
spike of H, common practice to discard as a numerical artefact). The bound, 2 % of |H|, is the one the
README states.
"""

from __future__ import annotations

import warnings
from importlib import resources

import numpy as np
import pytest

import antennas
from nfmap import assess, engine, site
from nfmap.exposure import limits

from .cards import cards_sent

BOUND = 0.02


def _model(structure, f_mhz, ground="average"):
    """``structure``: a builder call (builders warn of modelling choices; not this test's business)."""
    # segments of 0.5 m at most, as nfmap gives wires where people stand: fields are computed to 0.25 m
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = antennas.segment(structure(), f_mhz, max_segment_m=[0.5] * len(structure().wires))
    return engine.Model((s,), 0, f_mhz, engine.ground(ground))


def _reference(model, where, power_w=100.0):
    """|H| by the reference and a mask of the points where it is steady (and not masked)."""
    ref = engine.near_fields(model, where, power_w)
    mag = engine.rms_magnitude(ref.h_a_per_m)
    steady = ~ref.masked
    for step_m in (0.01, 0.04):
        other = engine.near_fields(model, where, power_w, step_m=step_m)
        steady &= engine.rms_magnitude(other.h_a_per_m - ref.h_a_per_m) <= 0.005 * mag
    return ref, mag, steady


def _within_bound(m, lat, band_m, node_share):
    """Sampled against the reference on ``lat``: within the bound wherever the reference is steady, and at
    0.3, 1 and 3 m (+- ``band_m``) from the wires in particular; H interpolated at more than 1 - ``node_share`` of
    the columns (the check is not vacuous). Returns both."""
    ref, mag, steady = _reference(m, lat)
    got = engine.near_fields(m, lat, 100.0, h_method="sampled")
    assert got.h_method == "sampled"
    nodes = int(got.notes[0].split()[5])
    assert nodes < node_share * lat.shape[0] * lat.shape[1]
    np.testing.assert_array_equal(got.masked, ref.masked)
    err = np.abs(engine.rms_magnitude(got.h_a_per_m) - mag) / mag
    assert np.max(err[steady]) <= BOUND
    d = engine.wire_distance_m(m, lat.points())
    for r in (0.3, 1.0, 3.0):
        band = steady & (np.abs(d - r) < band_m)
        assert band.any(), r
        assert np.max(err[band]) <= BOUND, r
    return got, ref, steady


def test_sampled_h_within_the_bound_of_the_reference_around_a_low_dipole():
    # a 14 MHz dipole 4 m over average ground; points from 0.3 m to 10 m from the wire, below and beside it
    m = _model(lambda: antennas.dipole("d", (0, 0), 4.0, resonant_mhz=14.2), 14.2)
    got, ref, steady = _within_bound(m, engine.Lattice((-9.0, -9.0, 0.7), (0.5, 0.5, 1.0), (37, 37, 4)), 0.25, 0.5)
    # E is computed at every point: the reference's E is the mean of its six shifted evaluations (second order)
    e_err = engine.rms_magnitude(got.e_v_per_m - ref.e_v_per_m) / engine.rms_magnitude(ref.e_v_per_m)
    assert np.nanmax(e_err) < 1e-3
    assert steady.sum() > 0.9 * (~ref.masked).sum()


def test_sampled_h_at_points_0p3_1_and_3_m_from_the_radials_of_a_ground_mounted_vertical():
    # the hardest case measured: radials 5 cm above the ground under the points, beside one radial (along +y)
    m = _model(lambda: antennas.vertical("v", (0, 0), resonant_mhz=7.1), 7.1)
    _within_bound(m, engine.Lattice((-1.5, 0.3, 0.2), (0.3, 0.3, 0.4), (30, 30, 3)), 0.15, 0.7)


def _sampled_everywhere(m, lat, power_w):
    """A SampledH on ``lat`` and its E and H at every plan point (with the plan indices asked)."""
    sampler = engine.SampledH(m, lat, power_w)
    nx, ny, _ = lat.shape
    iy, ix = np.divmod(np.arange(nx * ny), nx)
    e, h = sampler.fields(iy, ix)
    return sampler, iy, ix, e, h


def test_nodes_are_kept_and_the_order_of_points_does_not_matter():
    m = _model(lambda: antennas.dipole("d", (0, 0), 6.0, resonant_mhz=14.2), 14.2)
    sampler, iy, ix, e1, h1 = _sampled_everywhere(m, engine.Lattice((-6.0, -6.0, 1.0), (0.5, 0.5, 0.5), (25, 25, 2)), 10.0)
    assert max(sampler.stride_x.max(), sampler.stride_y.max()) > 1
    nodes = sampler.node_columns
    rng = np.random.default_rng(1)
    k = rng.permutation(len(iy))[:100]
    e2, h2 = sampler.fields(iy[k], ix[k])
    assert sampler.node_columns == nodes  # nothing new to compute at the nodes
    np.testing.assert_allclose(h2, h1[k], rtol=1e-12)
    np.testing.assert_allclose(e2, e1[k], rtol=1e-9)


def test_node_columns_between_nodes_take_every_other_height():
    # body-line heights 0.36 m apart, as the demo's: a node column far enough from the wire takes curl E at heights
    # 0, 2, 4 and 5 and H cubic in height between them; within the bound of the reference at every height
    m = _model(lambda: antennas.dipole("d", (0, 0), 8.0, resonant_mhz=14.2), 14.2)
    lat = engine.Lattice((-8.0, -8.0, 0.2), (0.5, 0.5, 0.36), (33, 33, 6))
    sampler, iy, ix, _, h = _sampled_everywhere(m, lat, 100.0)
    assert (sampler.stride_z > 1).mean() > 0.5
    ref, mag, steady = _reference(m, lat)
    got = engine.rms_magnitude(h.transpose(1, 0, 2).reshape(-1, 3))  # heights slowest, as the lattice
    err = np.abs(got - mag) / mag
    assert np.max(err[steady]) <= BOUND
    # a node interpolated in height is not "computed"; asked exactly, it is, and reads the reference there
    k = next(int(i) for i in range(len(iy)) if sampler.stride_z[iy[i], ix[i]] > 1 and sampler.stride_x[iy[i] // 4, ix[i] // 4] * sampler.stride_y[iy[i] // 4, ix[i] // 4] > 1
             and iy[i] % 8 == 0 and ix[i] % 8 == 0)
    assert not sampler.computed(iy[[k]], ix[[k]])[0]
    _, h_exact = sampler.fields(iy[[k]], ix[[k]], exact=True)
    assert sampler.computed(iy[[k]], ix[[k]])[0]
    col = np.arange(6) * 33 * 33 + k
    live = steady[col]
    np.testing.assert_allclose(engine.rms_magnitude(h_exact[0])[live], mag[col][live], rtol=1e-9)


def test_a_batch_reads_as_its_requests_one_by_one():
    # near_fields_batch hands several requests to the workers together; each answer is what near_fields gives
    m = _model(lambda: antennas.dipole("d", (0, 0), 6.0, resonant_mhz=14.2), 14.2)
    cols = engine.Columns(np.array([[1.0, 2.0], [1.5, 2.0], [2.0, 2.0], [4.0, -3.0]]), 0.2, 0.3, 5, 0.5)
    pts = np.array([[0.5, 0.5, 1.0], [0.5, 0.5, 1.4], [0.5, 0.5, 1.8], [3.0, 1.0, 0.7]])
    requests = [(cols, "e-only"), (pts, "curl"), (cols, "checked")]
    with engine.Workers(2) as pool:
        batch = engine.near_fields_batch(m, requests, 50.0, pool)
    for (where, method), got in zip(requests, batch, strict=True):
        one = engine.near_fields(m, where, 50.0, h_method=method)
        # the same to NEC's last bits (points grouped into other cards are summed in another order)
        np.testing.assert_allclose(got.e_v_per_m, one.e_v_per_m, rtol=1e-9)
        np.testing.assert_allclose(got.h_a_per_m, one.h_a_per_m, rtol=1e-9)
    # points on one vertical share a NEC card: the same fields as a column of that vertical
    col = engine.near_fields(m, engine.Columns(np.array([[0.5, 0.5]]), 1.0, 0.4, 3), 50.0, h_method="e-only")
    run = engine.near_fields(m, pts, 50.0, h_method="e-only")
    np.testing.assert_allclose(run.e_v_per_m[:3], col.e_v_per_m, rtol=1e-9)


def test_a_vertical_section_sheet_is_sampled_like_a_plan():
    # a vertical sheet across a dipole: x along the ground, y upward; against the reference at its points
    m = _model(lambda: antennas.dipole("d", (0, 0), 8.0, resonant_mhz=14.2), 14.2)
    u = np.array([np.cos(0.4), np.sin(0.4), 0.0])
    sheet = engine.Sheet((-10 * u[0], -10 * u[1], 0.25), tuple(0.5 * u), (0.0, 0.0, 0.25), 41, 12)
    iy, ix = np.divmod(np.arange(41 * 12), 41)
    pts = sheet.points(iy, ix)
    assert pts[41 * 11 + 40] == pytest.approx([10 * u[0], 10 * u[1], 3.0])
    e, h = engine.SampledH(m, sheet, 100.0).fields(iy, ix)
    ref, mag, steady = _reference(m, pts)
    err = np.abs(engine.rms_magnitude(h[:, 0]) - mag) / mag
    assert np.max(err[steady]) <= BOUND


def test_axis_table_interpolates_cubics_exactly():
    # cubic Lagrange interpolation reproduces any cubic (common practice: the defining property)
    for n, s in ((30, 4), (9, 8), (17, 2), (5, 4)):
        idx, w = engine._axis_table(n, s)
        x = np.arange(n, dtype=float)
        f = 0.3 * x**3 - 2 * x**2 + x - 5 if n >= 4 else x
        got = (w * f[idx]).sum(axis=1)
        exact = f if len(set(range(0, n, s)) | {n - 1}) >= 4 else None
        if exact is not None:
            np.testing.assert_allclose(got, exact, rtol=1e-9, atol=1e-9)
        nodes = idx[w != 0]
        assert np.all(np.isin(nodes, sorted(set(range(0, n, s)) | {n - 1})))


def _load(name):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return site.load(str(resources.files("nfmap").joinpath(f"examples/{name}")))


@pytest.mark.slow
@pytest.mark.parametrize("name", ["demo.toml", "demo-raised.toml", "balcony.toml", "end-fed.toml", "inverted-v.toml"])
def test_sampled_h_within_the_bound_on_every_example(name):
    """Every transmission of every example, on a 40 x 40 window of its ground-floor lattice around the fed
    antenna: within the bound wherever the ratio (H against the site's standard, public) is 0.05 or more."""
    s = _load(name)
    pl = assess.plan(s)
    heights = s.grid.body.heights_m()
    for t in s.transmissions:
        model = assess.model_for(s, t.name)
        if not engine.samples_h(model):
            continue
        ax, ay = s.antenna(t.antenna).position_m
        ix0 = int(np.clip(np.searchsorted(pl.x_m, ax) - 20, 0, max(len(pl.x_m) - 40, 0)))
        iy0 = int(np.clip(np.searchsorted(pl.y_m, ay) - 20, 0, max(len(pl.y_m) - 40, 0)))
        nx, ny = min(40, len(pl.x_m)), min(40, len(pl.y_m))
        lat = engine.Lattice((float(pl.x_m[ix0]), float(pl.y_m[iy0]), float(heights[0])),
                             (pl.spacing_m, pl.spacing_m, float(heights[1] - heights[0])), (nx, ny, len(heights)))
        ref, mag, steady = _reference(model, lat, t.envelope_power_w)
        got = engine.near_fields(model, lat, t.envelope_power_w, h_method="sampled")
        err = np.abs(engine.rms_magnitude(got.h_a_per_m) - mag) / mag
        h_lim = float(limits.limits(s.standard, "public", t.frequency_mhz).h_a_per_m[0])
        matters = steady & ((mag / h_lim) ** 2 >= 0.05)
        if matters.any():
            assert np.max(err[matters]) <= BOUND, (name, t.name)
        assert np.percentile(err[steady], 99) <= BOUND, (name, t.name)


def test_the_robust_curl_reads_through_a_sommerfeld_step():
    # a point of the demo's footpath where the 2 cm stencil straddles one of NEC-2's Sommerfeld interpolation
    # steps (measured: 1, 2 and 4 cm stencils read 0.065, 0.047, 0.038 A/m there, 0.024 A/m 0.5 m either side);
    # the robust curl (median of slopes) reads as its neighbours do, and equals the reference where it is steady
    s = _load("demo.toml")
    t = next(t for t in s.transmissions if t.name.startswith("20 m"))
    model = assess.model_for(s, t.name)
    heights = s.grid.body.heights_m()
    pts = np.array([(x, -1.5, z) for x in (9.0, 9.5, 10.0) for z in heights])
    curl = engine.rms_magnitude(engine.near_fields(model, pts, t.envelope_power_w).h_a_per_m).reshape(3, -1)
    robust = engine.rms_magnitude(engine.near_fields(model, pts, t.envelope_power_w, h_method="robust").h_a_per_m)
    robust = robust.reshape(3, -1)
    checked = engine.rms_magnitude(engine.near_fields(model, pts, t.envelope_power_w, h_method="checked").h_a_per_m)
    checked = checked.reshape(3, -1)
    assert curl[1].max() > 1.5 * curl[0].max()  # the spike is there
    for got in (robust, checked):
        # either side the reference wiggles by up to 0.9 % from height to height (smaller steps); the robust curl
        # runs smoothly through it
        np.testing.assert_allclose(got[[0, 2]], curl[[0, 2]], rtol=0.01)
        assert got[1].max() == pytest.approx(0.5 * (curl[0].max() + curl[2].max()), rel=0.02)
    # where the check finds the step, the node takes the robust curl itself (the stencil's own +-1 cm samples
    # serve as two of its offsets: the same value)
    flagged = ~np.isclose(checked[1], curl[1], rtol=1e-12)
    assert flagged.any()
    np.testing.assert_allclose(checked[1][flagged], robust[1][flagged], rtol=1e-9)


def test_a_checked_node_near_a_wire_keeps_the_central_curl():
    # beside a wire E curves strongly over the stencil (its one-sided halves differ by several per cent), yet
    # its Laplacian is -k^2 E there as anywhere in air (the Helmholtz equation for E in a source-free region:
    # Balanis, Advanced Engineering Electromagnetics, 2nd ed., sec. 3.4, from memory); the check finds no step
    # and the node keeps the central H, equal to the reference
    m = _model(lambda: antennas.dipole("d", (0, 0), 1.5, resonant_mhz=14.2), 14.2)
    pts = np.array([[x, 1.0, 1.5] for x in (0.3, 0.35, 0.4, 0.5)])  # the dipole runs north, along y
    ref, mag, steady = _reference(m, pts)
    assert steady.sum() >= 3
    checked = engine.near_fields(m, pts, 100.0, h_method="checked")
    np.testing.assert_allclose(checked.h_a_per_m[steady], ref.h_a_per_m[steady], rtol=1e-12)
    # the halves of the stencil (+-1 cm) do differ by more than twice 1 %: a one-sided test would have flagged them
    half = engine.CURL_STEP_M / 2

    def e(offset):
        return engine.near_fields(m, pts + offset, 100.0, h_method="e-only").e_v_per_m

    centre = e(np.zeros(3))
    shifts = [(e(half * a), e(-half * a)) for a in np.eye(3)]
    left = engine._curl_h([(centre - mi) / half for _, mi in shifts], m)
    right = engine._curl_h([(pl - centre) / half for pl, _ in shifts], m)
    apart = engine.rms_magnitude(right - left) / engine.rms_magnitude(ref.h_a_per_m)
    assert apart[steady].max() > 2 * engine.H_STEADY


def test_wire_scales_follow_the_wire():
    # geometry of a line current (common practice: its near field changes across it on the scale of the distance
    # to it, along it only as its current does and its ends come nearer; past an end on the distance to the end)
    north = antennas.Structure("w", (antennas.Wire((0.0, 0.0, 1.0), (0.0, 10.0, 1.0), 0.002, 9),))
    m = engine.Model((north,), 0, 14.2, engine.ground("average"))
    x, y, diag = np.eye(3)[0], np.eye(3)[1], np.array([1.0, 1.0, 0.0]) / np.sqrt(2)
    pts = np.array([[1.0, 5.0, 1.0], [0.0, 12.0, 1.0], [0.5, 9.0, 1.0]])
    sc = engine.wire_scales_m(m, pts, [x, y, diag])
    np.testing.assert_allclose(sc[:, 0], [1.0, np.hypot(1.0, 5.0), np.sqrt(2)])  # beside, mid-way
    np.testing.assert_allclose(sc[:, 1], [2.0, 2.0, 2.0])  # past an end: the distance to it, every way
    np.testing.assert_allclose(sc[:, 2], [0.5, np.hypot(0.5, 1.0), 0.5 * np.sqrt(2)])  # beside, near an end


def test_nodes_are_spaced_along_a_low_wire_more_widely_than_across_it():
    # a wire 0.3 m up, running north (y): blocks beside it take nodes farther apart along y than along x
    m = _model(lambda: antennas.dipole("d", (0, 0), 0.3, resonant_mhz=14.2), 14.2)
    lat = engine.Lattice((-4.0, -5.0, 0.5), (0.25, 0.25, 0.4), (33, 41, 4))
    sampler = engine.SampledH(m, lat, 100.0)
    beside = (sampler.stride_x == 1) & (sampler.stride_y > 1)
    assert beside.any()
    assert not ((sampler.stride_y == 1) & (sampler.stride_x > 1)).any()


def test_node_columns_far_from_wires_take_every_third_height():
    # nine heights 0.2 m apart 4 m and more from a dipole 8 m up: curl E at heights 0, 3, 6 and 8 (a cubic through
    # four), E alone between; within the bound of the reference at every height
    m = _model(lambda: antennas.dipole("d", (0, 0), 8.0, resonant_mhz=14.2), 14.2)
    lat = engine.Lattice((-8.0, -8.0, 0.2), (0.5, 0.5, 0.2), (33, 33, 9))
    sampler, iy, ix, _, h = _sampled_everywhere(m, lat, 100.0)
    assert (sampler.stride_z == 3).mean() > 0.5
    ref, mag, steady = _reference(m, lat)
    got = engine.rms_magnitude(h.transpose(1, 0, 2).reshape(-1, 3))
    err = np.abs(got - mag) / mag
    assert np.max(err[steady]) <= BOUND
    assert engine._axis_nodes(9, 3) == [0, 3, 6, 8]


def test_reference_columns_take_fewer_heights_only_where_height_is_within_reach():
    # beside the radials of a ground-mounted vertical every column is a node (strides 1); those far enough from
    # the radials in height are curl E at every other height (checked), the rest at every height; within the
    # bound of the reference; asked exactly, such a column is computed at every height
    m = _model(lambda: antennas.vertical("v", (0, 0), resonant_mhz=7.1), 7.1)
    lat = engine.Lattice((-1.5, 0.3, 0.2), (0.3, 0.3, 0.2), (12, 12, 9))
    sampler, iy, ix, _, h = _sampled_everywhere(m, lat, 100.0)
    reference = (sampler.stride_x == 1) & (sampler.stride_y == 1)
    on_ref = reference[iy // engine.H_BLOCK, ix // engine.H_BLOCK]
    sparse = sampler.stride_z[iy, ix] > 1
    assert (on_ref & sparse).any() and (on_ref & ~sparse).any()  # both kinds present
    assert not sampler.computed(iy, ix)[on_ref & sparse].any()
    assert sampler.computed(iy, ix)[on_ref & ~sparse].all()
    ref, mag, steady = _reference(m, lat)
    err = np.abs(engine.rms_magnitude(h.transpose(1, 0, 2).reshape(-1, 3)) - mag) / mag
    assert np.max(err[steady]) <= BOUND
    k = np.flatnonzero(on_ref & sparse)[:1]
    sampler.fields(iy[k], ix[k], exact=True)
    assert sampler.computed(iy[k], ix[k])[0]


def test_columns_of_several_rows_share_a_card_and_read_as_points():
    # columns at equal steps in x and y go to NEC as one card (x fastest, then y, then height): the same fields
    # as the points one by one, in far fewer cards
    m = _model(lambda: antennas.dipole("d", (0, 0), 6.0, resonant_mhz=14.2), 14.2)
    block = [(y, x) for y in range(1, 5) for x in range(3, 8)]  # 4 rows of 5 columns: one card
    iy, ix = np.array(sorted(block + [(0, 0), (2, 12), (2, 14), (5, 6)])).T
    cols = engine.Columns(np.column_stack([ix * 0.5 - 3.0, iy * 0.5 + 1.0]), 0.2, 0.36, 4, 0.5)
    got, cards = cards_sent(lambda: engine.near_fields(m, cols, 10.0, h_method="e-only"))
    one = engine.near_fields(m, cols.points(), 10.0, h_method="e-only")
    np.testing.assert_allclose(got.e_v_per_m, one.e_v_per_m, rtol=1e-12)
    runs = engine._runs(cols.xy_m[:, 0], cols.xy_m[:, 1:])
    assert len(runs) == 7 and len(cards) == 4 and (5, 4) in [(c[1], c[2]) for c in cards]


def test_runs_are_the_greedy_runs_of_equal_steps():
    # each run as long as it goes: entries on one line at equal positive steps (checked against the plain loop)
    def greedy(along, line):
        out, k = [], 0
        while k < len(along):
            j = k + 1
            if j < len(along) and (line[j] == line[k]).all() and along[j] > along[k]:
                gap = along[j] - along[k]
                while j < len(along) and (line[j] == line[k]).all() and abs(along[j] - along[j - 1] - gap) <= 1e-9:
                    j += 1
                out.append((k, j, float(gap)))
            else:
                out.append((k, j, 0.0))
            k = j
        return out

    rng = np.random.default_rng(1)
    for _ in range(300):
        n = int(rng.integers(0, 25))
        along = rng.choice(np.arange(12) * 0.5, n)
        if rng.random() < 0.5:
            along = np.sort(along)
        line = rng.integers(0, 2, (n, 1)).astype(float)
        assert engine._runs(along, line) == greedy(along, line)


def test_the_window_minimum_is_scipys():
    # engine._min_filter stands in for scipy.ndimage.minimum_filter (mode "nearest") so that the main process need
    # not import ndimage; the reference is scipy's own (SciPy reference guide, scipy.ndimage.minimum_filter)
    from scipy import ndimage

    a = np.random.default_rng(2).random((13, 17))
    for hy, hx in ((0, 0), (1, 2), (4, 1), (8, 8)):
        np.testing.assert_array_equal(engine._min_filter(a, hy, hx),
                                      ndimage.minimum_filter(a, size=(2 * hy + 1, 2 * hx + 1), mode="nearest"))
