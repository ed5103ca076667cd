"""Wire geometry: frozen dataclasses, segmentation and the NEC-2 modelling rules.

Nothing here imports an NEC engine: a :class:`Structure` is plain geometry in site metres
(x east, y north, z up, z = 0 on the ground surface).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

C0_M_PER_S = 299_792_458.0  # exact, SI definition


class GeometryError(ValueError):
    """A structure that no NEC-2 engine can model (zero-length wire, crossing, wire below ground)."""


class ModelRuleWarning(UserWarning):
    """A structure outside the usual NEC-2 modelling rules: results may be inaccurate."""


@dataclass(frozen=True)
class Wire:
    """A straight thin wire.

    Parameters
    ----------
    start_m, end_m : tuple of 3 floats
        End points [m], site coordinates.
    diameter_m : float
        Conductor diameter [m].
    segments : int
        Number of NEC segments; 0 means "choose from the frequency" (see :func:`segment`).
    """

    start_m: tuple[float, float, float]
    end_m: tuple[float, float, float]
    diameter_m: float
    segments: int = 0

    @property
    def length_m(self) -> float:
        return float(np.linalg.norm(np.subtract(self.end_m, self.start_m)))

    @property
    def radius_m(self) -> float:
        return self.diameter_m / 2.0


@dataclass(frozen=True)
class Load:
    """A lumped impedance on one wire, at fraction ``at`` of its length from ``start_m``."""

    wire: int  # 0-based index into Structure.wires
    at: float
    resistance_ohm: float
    reactance_ohm: float = 0.0


@dataclass(frozen=True)
class Structure:
    """Wires of one antenna, with its feed.

    Parameters
    ----------
    name : str
    wires : tuple of Wire
    feed_wire : int
        0-based index of the fed wire.
    feed_at : float
        Fraction along the fed wire from its start (0..1); the feed is the segment containing it.
    loads : tuple of Load
    grounded : bool
        True when a wire end touches z = 0 on purpose (a vertical over perfect ground).
    notes : tuple of str
        Modelling notes carried into the report (e.g. how a ground-mounted vertical was modelled).
    """

    name: str
    wires: tuple[Wire, ...]
    feed_wire: int = 0
    feed_at: float = 0.5
    loads: tuple[Load, ...] = ()
    grounded: bool = False
    notes: tuple[str, ...] = field(default=())
    highest_mhz: float | None = None

    def feed_segment(self) -> int:
        """1-based segment number of the feed on the fed wire (segments must be set)."""
        return segment_at(self.wires[self.feed_wire].segments, self.feed_at)

    @property
    def segment_count(self) -> int:
        return sum(w.segments for w in self.wires)


def segment_at(segments: int, at: float) -> int:
    """1-based number of the segment containing fraction ``at`` of a wire of ``segments`` segments."""
    return int(min(max(math.floor(at * segments) + 1, 1), segments))


@dataclass(frozen=True)
class Placement:
    """Where a structure built around its own origin stands on the site."""

    position_m: tuple[float, float]
    heading_deg: float = 0.0  # compass bearing of the structure's +y axis


def place(structure: Structure, placement: Placement) -> Structure:
    """Rotate a structure about z by its compass heading and move it to ``position_m``.

    A builder draws its antenna with the main axis along +y (north); a compass heading of
    ``h`` degrees turns it clockwise seen from above.
    """
    h = math.radians(placement.heading_deg)
    cos_h, sin_h = math.cos(h), math.sin(h)
    x0, y0 = placement.position_m

    def move(p: tuple[float, float, float]) -> tuple[float, float, float]:
        x, y, z = p
        # clockwise rotation by h: +y (north) goes to bearing h
        return (x0 + x * cos_h + y * sin_h, y0 - x * sin_h + y * cos_h, z)

    wires = tuple(replace(w, start_m=move(w.start_m), end_m=move(w.end_m)) for w in structure.wires)
    return replace(structure, wires=wires)


def segment(
    structure: Structure,
    highest_mhz: float,
    per_wavelength: int = 20,
    max_segment_m: Sequence[float | None] | None = None,
) -> Structure:
    """Choose segment counts for the highest frequency the structure is used at.

    Each wire gets at least 3 segments and segments no longer than lambda/``per_wavelength``
    (lambda/20 by default, common practice for near fields), nor than its ``max_segment_m``
    entry where one is given (finer wires where people are close: the fields within half a
    segment of a wire are not computed). Wires meeting at a junction are then evened out so that
    adjacent segment lengths differ by at most a factor of 2 (common practice). Wires with
    ``segments`` already set (> 0) are kept.
    """
    wavelength_m = C0_M_PER_S / (highest_mhz * 1e6)
    caps = list(max_segment_m) if max_segment_m is not None else [None] * len(structure.wires)
    targets = [min(wavelength_m / per_wavelength, c or math.inf) for c in caps]
    counts = [
        w.segments or max(3, math.ceil(w.length_m / t - 1e-9)) for w, t in zip(structure.wires, targets, strict=True)
    ]
    fixed = [w.segments > 0 for w in structure.wires]
    # Even out junctions: at each shared end, no segment may be more than twice its neighbour.
    ends = _junctions(structure.wires)
    for _ in range(10):
        changed = False
        for group in ends:
            lengths = [structure.wires[i].length_m / counts[i] for i in group]
            shortest = min(lengths)
            for i, seg_len in zip(group, lengths, strict=True):
                if seg_len > 2.0 * shortest and not fixed[i]:
                    counts[i] = math.ceil(structure.wires[i].length_m / (2.0 * shortest))
                    changed = True
        if not changed:
            break
    f = structure.feed_wire
    if not fixed[f] and abs(structure.feed_at - 0.5) < 1e-9 and counts[f] % 2 == 0:
        counts[f] += 1  # centre feed: an odd count puts the source exactly at the middle
    wires = tuple(replace(w, segments=n) for w, n in zip(structure.wires, counts, strict=True))
    return replace(structure, wires=wires, highest_mhz=highest_mhz)


def _junctions(wires: tuple[Wire, ...], tol_m: float = 1e-6) -> list[list[int]]:
    """Groups of wire indices sharing an end point."""
    points: list[tuple[np.ndarray, set[int]]] = []
    for i, w in enumerate(wires):
        for p in (w.start_m, w.end_m):
            p = np.asarray(p, float)
            for q, members in points:
                if np.linalg.norm(p - q) <= tol_m:
                    members.add(i)
                    break
            else:
                points.append((p, {i}))
    return [sorted(m) for _, m in points if len(m) > 1]


def _segment_distance(p1, p2, q1, q2) -> tuple[float, float, float]:
    """Closest distance between segments p1-p2 and q1-q2, with the parameters s, t in [0, 1]."""
    d1, d2, r = p2 - p1, q2 - q1, p1 - q1
    a, e, f = d1 @ d1, d2 @ d2, d2 @ r
    c, b = d1 @ r, d1 @ d2
    denom = a * e - b * b
    s = np.clip((b * f - c * e) / denom, 0.0, 1.0) if denom > 1e-12 * a * e else 0.0
    t = (b * s + f) / e
    if t < 0.0:
        t, s = 0.0, np.clip(-c / a, 0.0, 1.0)
    elif t > 1.0:
        t, s = 1.0, np.clip((b - c) / a, 0.0, 1.0)
    return float(np.linalg.norm(p1 + d1 * s - (q1 + d2 * t))), float(s), float(t)


def validate(structure: Structure, frequency_mhz: float, over_ground: bool) -> list[str]:
    """Check a segmented structure against the NEC-2 modelling rules.

    Raises :class:`GeometryError` for what cannot be modelled: zero-length wires, duplicate or
    overlapping wires, wires crossing or touching away from shared ends, a wire below ground, a
    wire end on a finite ground. Issues :class:`ModelRuleWarning` (and returns the messages) for
    segments longer than lambda/10, segment length / radius below 8 (common practice, standard
    thin-wire kernel), adjacent junction segments differing by more than a factor of 2, and
    wires closer than 4 radii (sum) to each other.

    Parameters
    ----------
    frequency_mhz : float
        The highest frequency the structure is used at [MHz].
    over_ground : bool
        True for a perfect or finite ground (z >= 0 is required).
    """
    name = structure.name
    wires = structure.wires
    wavelength_m = C0_M_PER_S / (frequency_mhz * 1e6)
    messages: list[str] = []
    ends = [(np.asarray(w.start_m, float), np.asarray(w.end_m, float)) for w in wires]
    tol_m = 1e-6
    for i, w in enumerate(wires):
        if w.length_m <= tol_m:
            raise GeometryError(f"antenna {name!r}: wire {i + 1} has zero length")
        if w.diameter_m <= 0:
            raise GeometryError(f"antenna {name!r}: wire {i + 1} has diameter {w.diameter_m} m; it must be > 0")
        if w.segments < 1:
            raise GeometryError(f"antenna {name!r}: wire {i + 1} is not segmented")
        if over_ground and min(w.start_m[2], w.end_m[2]) < -tol_m:
            raise GeometryError(
                f"antenna {name!r}: wire {i + 1} goes below ground (z = "
                f"{min(w.start_m[2], w.end_m[2]):.3f} m); NEC-2 cannot model buried wires"
            )
        seg_m = w.length_m / w.segments
        if seg_m > wavelength_m / 10:
            messages.append(
                f"antenna {name!r}: wire {i + 1} segments are {seg_m:.2f} m, longer than lambda/10 "
                f"({wavelength_m / 10:.2f} m) at {frequency_mhz:g} MHz"
            )
        if seg_m / w.radius_m < 8:
            messages.append(
                f"antenna {name!r}: wire {i + 1} segment length / radius is {seg_m / w.radius_m:.1f}, below 8"
            )
    for i in range(len(wires)):
        for j in range(i + 1, len(wires)):
            p1, p2 = ends[i]
            q1, q2 = ends[j]
            dist, s, t = _segment_distance(p1, p2, q1, q2)
            shared = [
                (a, b)
                for a, pa in ((0.0, p1), (1.0, p2))
                for b, qb in ((0.0, q1), (1.0, q2))
                if np.linalg.norm(pa - qb) <= tol_m
            ]
            u, v = p2 - p1, q2 - q1
            parallel = np.linalg.norm(np.cross(u, v)) <= 1e-9 * np.linalg.norm(u) * np.linalg.norm(v)
            if parallel and dist <= tol_m:
                # collinear: overlap unless they only meet end to end
                lo = (q1 - p1) @ u / (u @ u)
                hi = (q2 - p1) @ u / (u @ u)
                overlap = min(1.0, max(lo, hi)) - max(0.0, min(lo, hi))
                if overlap > tol_m / np.linalg.norm(u):
                    raise GeometryError(f"antenna {name!r}: wires {i + 1} and {j + 1} overlap")
                continue
            if dist <= tol_m:
                if not any(abs(a - s) < 1e-6 and abs(b - t) < 1e-6 for a, b in shared):
                    raise GeometryError(
                        f"antenna {name!r}: wires {i + 1} and {j + 1} cross or touch away from a shared end "
                        f"(near {tuple(round(float(c), 3) for c in p1 + (p2 - p1) * s)}); join wires only at their ends"
                    )
                continue
            if not shared:
                limit_m = 4.0 * (wires[i].radius_m + wires[j].radius_m)
                if dist < limit_m:
                    messages.append(
                        f"antenna {name!r}: wires {i + 1} and {j + 1} are {dist * 1000:.1f} mm apart, "
                        f"closer than 4 radii ({limit_m * 1000:.1f} mm)"
                    )
    if over_ground and not structure.grounded:
        for i, (p, q) in enumerate(ends):
            if min(p[2], q[2]) <= tol_m:
                raise GeometryError(
                    f"antenna {name!r}: wire {i + 1} ends on the ground (z = 0); over a finite ground "
                    "NEC-2 does not converge for that: raise it (e.g. radials at 0.05 m)"
                )
    for group in _junctions(wires):
        lengths = [wires[i].length_m / wires[i].segments for i in group]
        if max(lengths) > 2.0 * min(lengths) + 1e-12:
            messages.append(
                f"antenna {name!r}: segments at a junction of wires "
                f"{', '.join(str(i + 1) for i in group)} differ by more than a factor of 2 "
                f"({min(lengths):.3f} to {max(lengths):.3f} m)"
            )
    for m in messages:
        warnings.warn(m, ModelRuleWarning, stacklevel=2)
    return messages


def check_apart(structures: tuple[Structure, ...] | list[Structure]) -> None:
    """Raise :class:`GeometryError` where wires of two different antennas touch or cross.

    Separate antennas must stay separate conductors: touching wires would join them at a point
    NEC-2 cannot model as a junction (common practice: keep them several radii apart).
    """
    for i, a in enumerate(structures):
        for b in structures[i + 1 :]:
            for wi, u in enumerate(a.wires):
                for wj, v in enumerate(b.wires):
                    dist, _, _ = _segment_distance(
                        np.asarray(u.start_m, float), np.asarray(u.end_m, float),
                        np.asarray(v.start_m, float), np.asarray(v.end_m, float),
                    )
                    if dist <= u.radius_m + v.radius_m:
                        raise GeometryError(
                            f"antennas {a.name!r} (wire {wi + 1}) and {b.name!r} (wire {wj + 1}) touch or cross "
                            f"({dist * 1000:.1f} mm apart); move one of them"
                        )
