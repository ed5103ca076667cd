"""The NEC-2 modelling rules (common practice, see the physics notes) each fire."""

import math

import pytest

import antennas
from antennas import GeometryError, ModelRuleWarning, Structure, Wire


def _s(*wires, grounded=False):
    return Structure("t", tuple(wires), 0, 0.5, grounded=grounded)


def test_zero_length_wire_is_an_error():
    with pytest.raises(GeometryError, match="zero length"):
        antennas.validate(_s(Wire((0, 0, 5), (0, 0, 5), 0.002, 3)), 14.0, True)


def test_overlapping_wires_are_an_error():
    s = _s(Wire((0, 0, 5), (0, 4, 5), 0.002, 5), Wire((0, 2, 5), (0, 6, 5), 0.002, 5))
    with pytest.raises(GeometryError, match="overlap"):
        antennas.validate(s, 14.0, True)
    dup = _s(Wire((0, 0, 5), (0, 4, 5), 0.002, 5), Wire((0, 0, 5), (0, 4, 5), 0.002, 5))
    with pytest.raises(GeometryError, match="overlap"):
        antennas.validate(dup, 14.0, True)


def test_crossing_away_from_shared_ends_is_an_error():
    s = _s(Wire((0, -2, 5), (0, 2, 5), 0.002, 5), Wire((-2, 0, 5), (2, 0, 5), 0.002, 5))
    with pytest.raises(GeometryError, match="cross"):
        antennas.validate(s, 14.0, True)


def test_wire_below_ground_and_end_on_finite_ground_are_errors():
    with pytest.raises(GeometryError, match="below ground"):
        antennas.validate(_s(Wire((0, 0, -1), (0, 0, 5), 0.002, 5)), 14.0, True)
    with pytest.raises(GeometryError, match="ends on the ground"):
        antennas.validate(_s(Wire((0, 0, 0), (0, 0, 5), 0.002, 5)), 14.0, True)
    # allowed in free space, and for a vertical connected to perfect ground
    antennas.validate(_s(Wire((0, 0, -1), (0, 0, 5), 0.002, 5)), 14.0, False)
    antennas.validate(_s(Wire((0, 0, 0), (0, 0, 5), 0.002, 5), grounded=True), 14.0, True)


def test_long_segments_warn():
    with pytest.warns(ModelRuleWarning, match="lambda/10"):
        antennas.validate(_s(Wire((0, 0, 5), (0, 10, 5), 0.002, 3)), 14.0, True)


def test_low_length_to_radius_warns():
    with pytest.warns(ModelRuleWarning, match="radius"):
        antennas.validate(_s(Wire((0, 0, 5), (0, 1, 5), 0.05, 11)), 14.0, True)


def test_close_wires_warn():
    s = _s(Wire((0, 0, 5), (0, 4, 5), 0.002, 9), Wire((0.005, 0, 5), (0.005, 4, 5), 0.002, 9))
    with pytest.warns(ModelRuleWarning, match="apart"):
        antennas.validate(s, 14.0, True)


def test_unequal_junction_segments_warn():
    s = _s(Wire((0, 0, 5), (0, 4, 5), 0.002, 20), Wire((0, 4, 5), (0, 8, 5), 0.002, 4))
    with pytest.warns(ModelRuleWarning, match="junction"):
        antennas.validate(s, 14.0, True)


def test_segmentation_lambda_over_20_min_3_and_even_junctions():
    s = antennas.segment(_s(Wire((0, 0, 5), (0, 21.4, 5), 0.002), Wire((0, 21.4, 5), (0, 21.6, 5), 0.002)), 14.0)
    lam = antennas.C0_M_PER_S / 14e6
    w0, w1 = s.wires
    assert w0.length_m / w0.segments <= lam / 20 * 1.0001
    assert w1.segments >= 3
    assert w0.length_m / w0.segments <= 2 * w1.length_m / w1.segments + 1e-9
    antennas.validate(s, 14.0, True)  # no warnings (warnings are errors in the test run)


def test_centre_fed_wire_gets_an_odd_segment_count():
    s = antennas.segment(antennas.dipole("d", (0, 0), 10.0, length_m=10.0), 14.2)
    assert s.wires[0].segments % 2 == 1
    assert s.feed_segment() == (s.wires[0].segments + 1) // 2


def test_placement_heading_is_a_compass_bearing():
    s = antennas.end_fed("e", (10.0, 20.0), 10.0, 5.0, 5.0, heading_deg=90.0, counterpoise_m=1.0)
    end = s.wires[0].end_m
    assert end[0] == pytest.approx(20.0) and end[1] == pytest.approx(20.0)  # due east
    b = antennas.beam("b", (0, 0), 10.0, 28.4, heading_deg=180.0)
    assert b.wires[2].start_m[1] < 0  # director points south


def test_builders_validate_their_parameters():
    with pytest.raises(GeometryError, match="exactly one"):
        antennas.dipole("d", (0, 0), 10.0)
    with pytest.raises(GeometryError, match="no radials"):
        antennas.vertical("v", (0, 0), resonant_mhz=7.1, radials=0)
    with pytest.raises(GeometryError, match="below ground|at or below"):
        antennas.dipole("d", (0, 0), 2.0, resonant_mhz=3.6, apex_deg=60)
    with pytest.raises(GeometryError, match="more than the wire length"):
        antennas.end_fed("e", (0, 0), 5.0, 1.0, 8.0)
    with pytest.warns(ModelRuleWarning, match="0.05 m above"):
        v = antennas.vertical("v", (0, 0), resonant_mhz=7.1)
    assert v.wires[0].start_m[2] == pytest.approx(0.05)
    assert len(v.wires) == 5
    p = antennas.vertical("v", (0, 0), resonant_mhz=7.1, ground="perfect", ground_loss_ohm=10)
    assert p.grounded and len(p.wires) == 1 and p.loads[0].resistance_ohm == 10


def test_default_beam_recipe():
    # common practice recipe stated in antennas.beam_elements
    els = antennas.beam_elements(3, 28.4)
    lam = antennas.C0_M_PER_S / 28.4e6
    assert els[1][0] == pytest.approx(142.65 / 28.4)
    assert els[0][0] == pytest.approx(1.05 * els[1][0]) and els[0][1] == pytest.approx(-0.2 * lam)
    assert els[2][0] == pytest.approx(0.95 * els[1][0]) and els[2][1] == pytest.approx(0.15 * lam)
    assert math.isclose(sum(1 for _ in els), 3)


def test_antennas_that_touch_each_other_are_an_error():
    a = _s(Wire((0, -2, 5), (0, 2, 5), 0.002, 5))
    b = Structure("u", (Wire((-2, 0, 5), (2, 0, 5), 0.002, 5),), 0, 0.5)
    with pytest.raises(GeometryError, match="touch or cross"):
        antennas.check_apart([a, b])
    c = Structure("v", (Wire((-2, 0, 6), (2, 0, 6), 0.002, 5),), 0, 0.5)
    antennas.check_apart([a, c])
