"""Parametric antenna builders: metres and degrees in, plain wire geometry out.

Each builder draws its antenna around its own origin with the main axis along +y, then places
it on the site at ``position_m`` turned to ``heading_deg`` (a compass bearing). Heights are above
the ground surface. No NEC engine is involved.

Resonant lengths follow common-practice rules of thumb (marked so below); they are starting
points for an exposure model, not a tuning recipe: the feed impedance computed by the engine is
reported so a user can see how close to resonance the model is.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence

from .geometry import (
    C0_M_PER_S,
    GeometryError,
    Load,
    ModelRuleWarning,
    Placement,
    Structure,
    Wire,
    place,
)

# Common practice: a half-wave wire dipole is cut to 468 / f[MHz] feet (= 142.65 / f metres),
# about 95 % of a free-space half wavelength; a quarter-wave vertical to 234 / f feet.
HALF_WAVE_M_MHZ = 142.65
QUARTER_WAVE_M_MHZ = 71.32

GROUNDS = ("finite", "perfect", "free-space")


def _mm(d_mm: float, key: str) -> float:
    if not d_mm > 0:
        raise GeometryError(f"{key} must be > 0 mm, got {d_mm}")
    return d_mm / 1000.0


def _length(length_m: float | None, resonant_mhz: float | None, rule_m_mhz: float) -> float:
    if (length_m is None) == (resonant_mhz is None):
        raise GeometryError("give exactly one of length_m and resonant_mhz")
    if length_m is not None:
        if not length_m > 0:
            raise GeometryError(f"length_m must be > 0, got {length_m}")
        return float(length_m)
    if not resonant_mhz > 0:
        raise GeometryError(f"resonant_mhz must be > 0, got {resonant_mhz}")
    return rule_m_mhz / resonant_mhz


def dipole(
    name: str,
    position_m: Sequence[float],
    height_m: float,
    length_m: float | None = None,
    resonant_mhz: float | None = None,
    heading_deg: float = 0.0,
    apex_deg: float = 180.0,
    wire_diameter_mm: float = 2.0,
) -> Structure:
    """A centre-fed dipole, flat top (``apex_deg = 180``) or inverted V (``apex_deg < 180``).

    Parameters
    ----------
    position_m : (x, y) [m]
        Plan position of the feed point.
    height_m : float
        Feed (apex) height above ground [m].
    length_m, resonant_mhz : float
        Total wire length [m], or the frequency [MHz] at which the common-practice rule
        L = 142.65 / f makes it a half wave.
    heading_deg : float
        Compass bearing of the wire's axis [deg].
    apex_deg : float
        Angle between the two arms [deg].

    Notes
    -----
    An inverted V is drawn as two sloping arms joined by a short horizontal centre wire
    (1/7 of the length) that carries the feed, so the source sits exactly at the apex.
    """
    total_m = _length(length_m, resonant_mhz, HALF_WAVE_M_MHZ)
    d_m = _mm(wire_diameter_mm, "wire_diameter_mm")
    if not 0 < apex_deg <= 180:
        raise GeometryError(f"apex_deg must be in (0, 180], got {apex_deg}")
    if apex_deg >= 180:
        wires = (Wire((0.0, -total_m / 2, height_m), (0.0, total_m / 2, height_m), d_m),)
        structure = Structure(name, wires, feed_wire=0, feed_at=0.5)
    else:
        centre_m = total_m / 7
        arm_m = (total_m - centre_m) / 2
        droop = math.radians((180.0 - apex_deg) / 2)
        y_end = centre_m / 2 + arm_m * math.cos(droop)
        z_end = height_m - arm_m * math.sin(droop)
        if z_end <= 0:
            raise GeometryError(
                f"antenna {name!r}: inverted V ends at z = {z_end:.2f} m, at or below ground; "
                "raise height_m or widen apex_deg"
            )
        a, b = (0.0, -centre_m / 2, height_m), (0.0, centre_m / 2, height_m)
        wires = (
            Wire(a, b, d_m),
            Wire(b, (0.0, y_end, z_end), d_m),
            Wire(a, (0.0, -y_end, z_end), d_m),
        )
        structure = Structure(name, wires, feed_wire=0, feed_at=0.5)
    return place(structure, Placement(tuple(position_m), heading_deg))


def vertical(
    name: str,
    position_m: Sequence[float],
    length_m: float | None = None,
    resonant_mhz: float | None = None,
    base_height_m: float = 0.0,
    radials: int = 4,
    radial_length_m: float | None = None,
    radial_droop_deg: float = 0.0,
    radial_height_m: float = 0.05,
    ground_loss_ohm: float = 0.0,
    wire_diameter_mm: float = 2.0,
    ground: str = "finite",
) -> Structure:
    """A vertical monopole, fed at its base, with radials.

    Parameters
    ----------
    length_m, resonant_mhz : float
        Radiator length [m], or the frequency [MHz] at which the common-practice rule
        L = 71.32 / f makes it a quarter wave.
    base_height_m : float
        Height of the feed above ground [m]; 0 means a ground-mounted vertical.
    radials : int
        Number of radials, evenly spaced in azimuth, the first towards the heading 0 (north).
    radial_length_m : float
        Radial length [m]; default the radiator length.
    radial_droop_deg : float
        Downward slope of the radials from horizontal [deg].
    radial_height_m : float
        For a ground-mounted vertical over a finite ground: height of the base and the radials
        that stand in for the buried or surface radial system [m].
    ground_loss_ohm : float
        For a ground-mounted vertical over perfect ground: a series resistance at the base
        standing for the ground system's loss [ohm].
    ground : {"finite", "perfect", "free-space"}
        What the vertical stands over; decides how a ground-mounted one is modelled.

    Notes
    -----
    NEC-2 cannot model buried wires and does not converge for a wire ending on a finite
    ground, so a ground-mounted vertical over a finite ground has its base and radials raised to
    ``radial_height_m``; this tends to overstate the fields slightly (conservative). Over perfect
    ground the radiator connects to the ground plane and radials are left out.
    """
    if ground not in GROUNDS:
        raise GeometryError(f"ground must be one of {', '.join(GROUNDS)}, got {ground!r}")
    radiator_m = _length(length_m, resonant_mhz, QUARTER_WAVE_M_MHZ)
    d_m = _mm(wire_diameter_mm, "wire_diameter_mm")
    radial_m = radiator_m if radial_length_m is None else float(radial_length_m)
    if base_height_m < 0:
        raise GeometryError(f"base_height_m must be >= 0, got {base_height_m}")
    if radials < 0 or int(radials) != radials:
        raise GeometryError(f"radials must be a whole number >= 0, got {radials}")
    if radials and not radial_m > 0:
        raise GeometryError(f"radial_length_m must be > 0, got {radial_m}")
    if ground_loss_ohm < 0:
        raise GeometryError(f"ground_loss_ohm must be >= 0, got {ground_loss_ohm}")
    notes: list[str] = []
    grounded = False
    loads: tuple[Load, ...] = ()
    base_m = float(base_height_m)
    use_radials = int(radials)
    if base_height_m == 0 and ground == "perfect":
        grounded = True
        use_radials = 0
        if ground_loss_ohm:
            loads = (Load(0, 0.0, float(ground_loss_ohm)),)
        notes.append(
            f"{name}: ground-mounted vertical over perfect ground, connected to the ground plane; "
            f"radials not modelled, ground loss {ground_loss_ohm:g} ohm at the base"
        )
    elif base_height_m == 0 and ground == "finite":
        if not radials:
            raise GeometryError(
                f"antenna {name!r}: a ground-mounted vertical with no radials cannot be modelled over a "
                "finite ground (NEC-2 does not converge for a wire ending on it); add radials "
                "(they are modelled just above the surface) or use ground kind 'perfect' with ground_loss_ohm"
            )
        if not radial_height_m > 0:
            raise GeometryError(f"radial_height_m must be > 0, got {radial_height_m}")
        base_m = float(radial_height_m)
        message = (
            f"{name}: ground-mounted vertical modelled with its base and {radials} radials at "
            f"{radial_height_m:g} m above the surface, standing in for the buried or surface radial "
            "system (NEC-2 cannot model buried wires); this tends to overstate fields slightly"
        )
        notes.append(message)
        warnings.warn(message, ModelRuleWarning, stacklevel=2)
    elif ground_loss_ohm:
        raise GeometryError("ground_loss_ohm applies only to a ground-mounted vertical over perfect ground")
    wires = [Wire((0.0, 0.0, base_m), (0.0, 0.0, base_m + radiator_m), d_m)]
    droop = math.radians(radial_droop_deg)
    for k in range(use_radials):
        az = 2 * math.pi * k / use_radials
        r_h = radial_m * math.cos(droop)
        end = (r_h * math.sin(az), r_h * math.cos(az), base_m - radial_m * math.sin(droop))
        if ground != "free-space" and end[2] <= 0:
            raise GeometryError(
                f"antenna {name!r}: drooping radials reach the ground (z = {end[2]:.2f} m); "
                "reduce radial_droop_deg or radial_length_m"
            )
        wires.append(Wire((0.0, 0.0, base_m), end, d_m))
    structure = Structure(
        name, tuple(wires), feed_wire=0, feed_at=0.0, loads=loads, grounded=grounded, notes=tuple(notes)
    )
    return place(structure, Placement(tuple(position_m), 0.0))


def end_fed(
    name: str,
    position_m: Sequence[float],
    length_m: float,
    feed_height_m: float,
    far_height_m: float,
    heading_deg: float = 0.0,
    counterpoise_m: float | None = None,
    design_mhz: float | None = None,
    wire_diameter_mm: float = 2.0,
) -> Structure:
    """An end-fed wire from the feed point to a far support, with a short counterpoise.

    Parameters
    ----------
    position_m : (x, y) [m]
        Plan position of the feed point.
    length_m : float
        Radiating wire length [m].
    feed_height_m, far_height_m : float
        Heights of the feed end and the far end [m].
    heading_deg : float
        Compass bearing from the feed to the far end [deg].
    counterpoise_m : float
        Counterpoise length [m], run horizontally at feed height away from the wire; default
        0.05 wavelength at ``design_mhz`` (common practice for a short counterpoise).
    design_mhz : float
        The lowest frequency the wire is used at [MHz]; default the frequency at which the
        wire is a half wave (lambda = 2 L).
    """
    if not length_m > 0:
        raise GeometryError(f"length_m must be > 0, got {length_m}")
    d_m = _mm(wire_diameter_mm, "wire_diameter_mm")
    rise_m = far_height_m - feed_height_m
    if abs(rise_m) >= length_m:
        raise GeometryError(
            f"antenna {name!r}: the heights differ by {abs(rise_m):.2f} m, more than the wire length {length_m:g} m"
        )
    if feed_height_m <= 0 or far_height_m <= 0:
        raise GeometryError(f"antenna {name!r}: feed_height_m and far_height_m must be > 0")
    if counterpoise_m is None:
        wavelength_m = C0_M_PER_S / (design_mhz * 1e6) if design_mhz else 2.0 * length_m
        counterpoise_m = 0.05 * wavelength_m
    if not counterpoise_m > 0:
        raise GeometryError(f"counterpoise_m must be > 0, got {counterpoise_m}")
    run_m = math.sqrt(length_m**2 - rise_m**2)
    feed = (0.0, 0.0, float(feed_height_m))
    wires = (
        Wire(feed, (0.0, run_m, float(far_height_m)), d_m),
        Wire(feed, (0.0, -float(counterpoise_m), float(feed_height_m)), d_m),
    )
    structure = Structure(name, wires, feed_wire=0, feed_at=0.0)
    return place(structure, Placement(tuple(position_m), heading_deg))


def beam_elements(elements: int, design_mhz: float) -> list[tuple[float, float]]:
    """Default Yagi element (length_m, offset_m) pairs, reflector first.

    A stated common-practice recipe, not an optimised design: driven element 142.65 / f
    (the half-wave rule), reflector 5 % longer at 0.2 lambda behind it, first director 5 %
    shorter at 0.15 lambda in front, further directors each 2 % shorter at 0.2 lambda spacing.
    """
    if elements < 2 or int(elements) != elements:
        raise GeometryError(f"elements must be a whole number >= 2, got {elements}")
    wavelength_m = C0_M_PER_S / (design_mhz * 1e6)
    driven_m = HALF_WAVE_M_MHZ / design_mhz
    out = [(1.05 * driven_m, -0.2 * wavelength_m), (driven_m, 0.0)]
    length_m, offset_m = 0.95 * driven_m, 0.15 * wavelength_m
    for _ in range(int(elements) - 2):
        out.append((length_m, offset_m))
        length_m *= 0.98
        offset_m += 0.2 * wavelength_m
    return out


def beam(
    name: str,
    position_m: Sequence[float],
    height_m: float,
    design_mhz: float,
    elements: int = 3,
    element: Sequence[dict] | None = None,
    heading_deg: float = 0.0,
    element_diameter_mm: float = 12.0,
) -> Structure:
    """A horizontal Yagi on a mast; the boom points along ``heading_deg`` (the forward lobe).

    Parameters
    ----------
    element : list of {"length_m", "offset_m"}
        Explicit elements (offset along the boom from the mast [m], forward positive); the fed
        element is the one closest to offset 0 (in the default design, the second).
        Default from :func:`beam_elements`.
    """
    if not design_mhz > 0:
        raise GeometryError(f"design_mhz must be > 0, got {design_mhz}")
    if not height_m > 0:
        raise GeometryError(f"height_m must be > 0, got {height_m}")
    d_m = _mm(element_diameter_mm, "element_diameter_mm")
    if element is None:
        pairs = beam_elements(elements, design_mhz)
        fed = 1
    else:
        try:
            pairs = [(float(e["length_m"]), float(e["offset_m"])) for e in element]
        except (KeyError, TypeError, ValueError) as err:
            raise GeometryError("each element needs numbers length_m and offset_m") from err
        if len(pairs) < 1:
            raise GeometryError("a beam needs at least one element")
        fed = min(range(len(pairs)), key=lambda i: abs(pairs[i][1]))
    wires = tuple(Wire((-length / 2, offset, height_m), (length / 2, offset, height_m), d_m) for length, offset in pairs)
    structure = Structure(name, wires, feed_wire=fed, feed_at=0.5)
    return place(structure, Placement(tuple(position_m), heading_deg))


def wires(
    name: str,
    position_m: Sequence[float],
    wire: Sequence[dict],
    feed: dict,
    wire_diameter_mm: float = 2.0,
) -> Structure:
    """Free-form wires; ``from_m``/``to_m`` x, y relative to ``position_m``, z above ground.

    Parameters
    ----------
    wire : list of {"from_m": [x, y, z], "to_m": [x, y, z], "diameter_mm"?}
    feed : {"wire": N, "at": 0..1}
        N counts from 1; ``at`` is the fraction along the wire from ``from_m``.
    """
    if not wire:
        raise GeometryError("wires: give at least one wire")
    out = []
    for i, w in enumerate(wire):
        try:
            a = tuple(float(v) for v in w["from_m"])
            b = tuple(float(v) for v in w["to_m"])
        except (KeyError, TypeError, ValueError) as err:
            raise GeometryError(f"wire {i + 1}: needs from_m and to_m, each [x, y, z] in metres") from err
        if len(a) != 3 or len(b) != 3:
            raise GeometryError(f"wire {i + 1}: from_m and to_m need three numbers [x, y, z]")
        out.append(Wire(a, b, _mm(float(w.get("diameter_mm", wire_diameter_mm)), "diameter_mm")))
    n = feed.get("wire")
    at = feed.get("at", 0.5)
    if not isinstance(n, int) or not 1 <= n <= len(out):
        raise GeometryError(f"feed.wire must be a wire number from 1 to {len(out)}, got {n!r}")
    if not isinstance(at, int | float) or not 0.0 <= at <= 1.0:
        raise GeometryError(f"feed.at must be a fraction from 0.0 to 1.0, got {at!r}")
    structure = Structure(name, tuple(out), feed_wire=n - 1, feed_at=float(at))
    return place(structure, Placement(tuple(position_m), 0.0))


BUILDERS = {"dipole": dipole, "vertical": vertical, "end-fed": end_fed, "beam": beam, "wires": wires}
