"""NEC-2 method of moments through PyNEC: solve a model, near E and H at arbitrary points.

Conventions
-----------
NEC excites with **peak** voltages and returns **peak** field phasors (time dependence
exp(+j omega t)). Everything this module returns is converted once, here, to **rms** complex
vectors in SI units (V/m, A/m), scaled to a requested accepted (input) power:
E_rms = E_peak(1 V) * sqrt(P / P_in(1 V)) / sqrt(2), with P_in = 0.5 Re(V I*).

H over a finite ground
----------------------
NEC-2's near-H routine (NH card) uses the reflection-coefficient approximation for the ground
term even when the E field (NE card) uses the Sommerfeld-Norton method; low down it under-reads.
Over a finite ground this module therefore derives H from the Sommerfeld E field by Faraday's
law, H = j curl(E) / (omega mu0), with second-order central differences over six E lattices
shifted by +-d/2 along x, y and z (d = 2 cm by default); E itself is then the mean of the six
(second order too). In free space and over perfect ground NEC's NH is exact for the model and
is used.

NEC-2's Sommerfeld interpolation makes E step by up to about 1 % where a point crosses the edge of
one of its interpolation cells (measured here: a 28 MHz beam's E_x steps by 1.1 % within 5 mm). A
2 cm stencil that straddles such a step turns it into a spike of H (up to tens of per cent, at a few
per cent of points far from the wires, where H is small); it reads high as often as low, and E
governs the ratio there in the cases measured. Wider stencils dilute a step but see more of the
near field's curvature; differences taken on a 0.3 m lattice were measured to differ from this
reference by up to 30 % at points where the reference does not change with its step, so the
reference stays.

H for about the cost of E
-------------------------
Six E evaluations a point make H the whole cost of an assessment. :class:`SampledH` computes the
reference at every point only near the wires; elsewhere at nodes every s-th point along each axis (s = 1,
2, 4, 8, by the scale on which the field changes along it: the distance to a wire across it, farther along
it; at most an eighth of a wavelength apart), checked for a Sommerfeld step inside
the stencil (then read by the median of slopes, which a step cannot move), and interpolates H's
components between nodes by cubic Lagrange polynomials; a node column (near a wire too) takes curl E at every
2nd or 3rd height where the wires are as far away again in height (a cubic through four heights or more), H cubic
in height between; E is computed at every point. Against the reference where it is steady, on a 0.3 m lattice
(30 m square, 9 heights) around each of ``benchmarks/engine.py``'s antennas: within 1.2 % everywhere, in the
time of 1.2 (dipole at 10 m), 1.3 (beam at 12 m; end-fed wire) and 1.9 (ground-mounted vertical, radials across
the lattice) E evaluations a point; within 2 % on every example wherever the ratio is 0.05 or more
(``tests/engine/test_sampled_h.py``).

References
----------
[1] G. J. Burke, A. J. Poggio, "Numerical Electromagnetics Code (NEC) - Method of Moments",
    Part III: User's Guide, Lawrence Livermore National Laboratory, 1981 (card formats).
[2] Rec. ITU-R P.527-3, "Electrical characteristics of the surface of the Earth", 1992, Fig. 1.
"""

from __future__ import annotations

import functools
import math
import os
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_EXCEPTION, ProcessPoolExecutor, ThreadPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field, replace

import numpy as np

from antennas import C0_M_PER_S, Structure, segment_at

# vacuum permeability, CODATA 2022 (scipy.constants.mu_0, tested); a literal so that worker processes, which
# import this module, need not import scipy (a fifth of a second each)
MU0_H_PER_M = 1.25663706127e-6
CURL_STEP_M = 0.02
CHUNK_POINTS = 2000
CHUNKS_PER_JOB = 1  # a small call is cut into this many chunks a job: calls from several threads keep the workers busy,
# and larger chunks share more NEC cards (measured on the demo: 1 a job 6.8 s, 2 7.1 s, 4 7.5 s)
LATTICE_CHUNK_POINTS = 8000
PASSIVE_LOAD_OHM = 50.0

# Ground classes: relative permittivity, conductivity [S/m].
# sea .. very-dry: Rec. ITU-R P.527-3 (1992), Fig. 1, values of the curves at HF (read off the
# curves; from memory, the document's figure was not available here).
# average and city: common practice in NEC modelling (average 13 / 0.005; city / industrial 5 / 0.001).
GROUND_CLASSES: dict[str, tuple[float, float]] = {
    "sea": (70.0, 5.0),
    "fresh-water": (80.0, 3.0e-3),
    "wet": (30.0, 1.0e-2),
    "average": (13.0, 5.0e-3),
    "dry": (15.0, 1.0e-3),
    "very-dry": (3.0, 1.0e-4),
    "city": (5.0, 1.0e-3),
}
GROUND_KINDS = ("free-space", "perfect", *GROUND_CLASSES)


class EngineError(RuntimeError):
    """The NEC engine failed; ``stage`` is geometry, ground, solve or near field."""

    def __init__(self, stage: str, structure: str, detail: str):
        self.stage, self.structure, self.detail = stage, structure, detail
        super().__init__(f"NEC engine failed at the {stage} stage for {structure!r}: {detail}")


class EngineUnsoundError(EngineError):
    """The installed PyNEC fails the low-wire regression check."""


@dataclass(frozen=True)
class Ground:
    """Ground under the whole site: ``kind`` is free-space, perfect, a named class or 'custom'."""

    kind: str
    permittivity: float | None = None
    conductivity_s_per_m: float | None = None

    @property
    def finite(self) -> bool:
        return self.kind not in ("free-space", "perfect")

    @property
    def over_ground(self) -> bool:
        return self.kind != "free-space"

    def describe(self) -> str:
        if not self.finite:
            return self.kind
        return (
            f"{self.kind} (relative permittivity {self.permittivity:g}, "
            f"conductivity {self.conductivity_s_per_m:g} S/m, Sommerfeld-Norton)"
        )


def ground(kind: str = "average", permittivity: float | None = None, conductivity_s_per_m: float | None = None) -> Ground:
    """A :class:`Ground` from a class name, or explicit values (``kind='custom'``).

    Raises ``ValueError`` for an unknown class or values out of range.
    """
    if permittivity is not None or conductivity_s_per_m is not None:
        if permittivity is None or conductivity_s_per_m is None:
            raise ValueError("give both permittivity and conductivity_s_per_m")
        if not permittivity >= 1:
            raise ValueError(f"permittivity must be >= 1, got {permittivity}")
        if not conductivity_s_per_m >= 0:
            raise ValueError(f"conductivity_s_per_m must be >= 0, got {conductivity_s_per_m}")
        return Ground("custom", float(permittivity), float(conductivity_s_per_m))
    if kind in ("free-space", "perfect"):
        return Ground(kind)
    if kind not in GROUND_CLASSES:
        raise ValueError(f"unknown ground kind {kind!r}; valid: {', '.join(GROUND_KINDS)}")
    eps, sig = GROUND_CLASSES[kind]
    return Ground(kind, eps, sig)


@dataclass(frozen=True)
class Model:
    """One NEC run: the structures of the site, which one is fed, the frequency and the ground.

    The structures must be segmented (``antennas.segment``). Every structure but ``active`` is
    passive, with ``passive_load_ohm`` across its feed (a nearby antenna re-radiates).
    """

    structures: tuple[Structure, ...]
    active: int
    frequency_mhz: float
    ground: Ground
    passive_load_ohm: float = PASSIVE_LOAD_OHM

    @property
    def name(self) -> str:
        return self.structures[self.active].name

    @property
    def wavelength_m(self) -> float:
        return C0_M_PER_S / (self.frequency_mhz * 1e6)


@dataclass(frozen=True)
class Solution:
    """Feed-point figures of a solved model at 1 V peak excitation."""

    feed_impedance_ohm: complex
    feed_current_a: complex
    input_power_w: float  # 0.5 Re(V I*) at 1 V peak


@dataclass(frozen=True)
class Lattice:
    """A regular lattice; points ordered x fastest, then y, then z (as NEC's grid cards)."""

    origin_m: tuple[float, float, float]
    step_m: tuple[float, float, float]
    shape: tuple[int, int, int]  # (nx, ny, nz)

    def axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return tuple(o + s * np.arange(n) for o, s, n in zip(self.origin_m, self.step_m, self.shape, strict=True))

    def points(self) -> np.ndarray:
        x, y, z = self.axes()
        zz, yy, xx = np.meshgrid(z, y, x, indexing="ij")
        return np.column_stack([xx.ravel(), yy.ravel(), zz.ravel()])

    @property
    def size(self) -> int:
        return int(np.prod(self.shape))

    def split_y(self, parts: int) -> list[Lattice]:
        ny = self.shape[1]
        edges = np.linspace(0, ny, min(parts, ny) + 1).round().astype(int)
        out = []
        for a, b in zip(edges[:-1], edges[1:], strict=True):
            if b > a:
                o = (self.origin_m[0], self.origin_m[1] + a * self.step_m[1], self.origin_m[2])
                out.append(Lattice(o, self.step_m, (self.shape[0], int(b - a), self.shape[2])))
        return out

    def shifted(self, offset_m: Sequence[float]) -> Lattice:
        return replace(self, origin_m=tuple(o + d for o, d in zip(self.origin_m, offset_m, strict=True)))


@dataclass(frozen=True, eq=False)
class Columns:
    """Vertical lines of points: at each plan point ``xy_m`` (N, 2) the heights z0 + k dz, k < nz.

    Points are ordered column by column, heights fastest; each column is one NEC near-field card
    (far fewer cards than single points); when ``run_dx_m`` > 0, consecutive columns on one row at equal
    gaps (the plan spacing, or a multiple of it) share one card.
    """

    xy_m: np.ndarray
    z0_m: float
    dz_m: float
    nz: int
    run_dx_m: float = 0.0

    def points(self) -> np.ndarray:
        xy = np.asarray(self.xy_m, float).reshape(-1, 2)
        z = self.z0_m + self.dz_m * np.arange(self.nz)
        return np.column_stack([np.repeat(xy, self.nz, axis=0), np.tile(z, len(xy))])

    @property
    def size(self) -> int:
        return len(self.xy_m) * self.nz

    def take(self, index) -> Columns:
        return replace(self, xy_m=np.asarray(self.xy_m, float).reshape(-1, 2)[index])


@dataclass(frozen=True)
class NearField:
    """Near fields at points, rms complex vectors at the requested accepted power.

    ``e_v_per_m`` and ``h_a_per_m`` have shape (N, 3); masked points hold NaN.
    """

    points_m: np.ndarray
    e_v_per_m: np.ndarray
    h_a_per_m: np.ndarray
    masked: np.ndarray
    h_method: str
    solution: Solution
    power_w: float
    notes: tuple[str, ...] = field(default=())

    @property
    def masked_count(self) -> int:
        return int(self.masked.sum())


def _pynec():
    import PyNEC  # imported late so worker processes can set thread counts first

    return PyNEC


def _tags(model: Model) -> list[list[int]]:
    """NEC tag number of every wire, by structure (1-based, consecutive)."""
    tags, t = [], 1
    for s in model.structures:
        tags.append(list(range(t, t + len(s.wires))))
        t += len(s.wires)
    return tags


# PyNEC in one process is used by one thread at a time (an assessment's transmissions run in threads of the main
# process, each waiting on the workers; the few solves the main process does itself take this lock)
_NEC_LOCK = threading.RLock()


def _build(model: Model, check_engine: bool = True):
    """A solved PyNEC context for ``model`` (excitation 1 V peak)."""
    with _NEC_LOCK:
        return _build_unlocked(model, check_engine)


def _build_unlocked(model: Model, check_engine: bool):
    nec = _pynec()
    name = model.name
    if check_engine and model.ground.finite:
        _require_sound_engine(model)
    try:
        ctx = nec.nec_context()
        geo = ctx.get_geometry()
        tags = _tags(model)
        for s, stags in zip(model.structures, tags, strict=True):
            for w, tag in zip(s.wires, stags, strict=True):
                geo.wire(tag, w.segments, *map(float, w.start_m), *map(float, w.end_m), w.radius_m, 1.0, 1.0)
        ctx.geometry_complete(1 if model.ground.over_ground else 0)
    except RuntimeError as err:
        raise EngineError("geometry", name, str(err) or "geometry rejected") from err
    try:
        if model.ground.finite:
            ctx.gn_card(2, 0, model.ground.permittivity, model.ground.conductivity_s_per_m, 0, 0, 0, 0)
        elif model.ground.kind == "perfect":
            ctx.gn_card(1, 0, 0, 0, 0, 0, 0, 0)
        else:
            ctx.gn_card(-1, 0, 0, 0, 0, 0, 0, 0)
        ctx.fr_card(0, 1, float(model.frequency_mhz), 0.0)
        for k, (s, stags) in enumerate(zip(model.structures, tags, strict=True)):
            for ld in s.loads:
                seg = segment_at(s.wires[ld.wire].segments, ld.at)
                ctx.ld_card(4, stags[ld.wire], seg, seg, ld.resistance_ohm, ld.reactance_ohm, 0.0)
            if k != model.active:
                seg = s.feed_segment()
                ctx.ld_card(4, stags[s.feed_wire], seg, seg, model.passive_load_ohm, 0.0, 0.0)
    except RuntimeError as err:
        raise EngineError("ground", name, str(err) or "ground or load rejected") from err
    active = model.structures[model.active]
    try:
        ctx.ex_card(0, tags[model.active][active.feed_wire], active.feed_segment(), 0, 1.0, 0, 0, 0, 0, 0)
        ctx.xq_card(0)
        ip = ctx.get_input_parameters(0)
        z = complex(ip.get_impedance()[0])
        i = complex(ip.get_current()[0])
    except (RuntimeError, AttributeError, IndexError) as err:
        raise EngineError("solve", name, str(err) or "no solution") from err
    p_in = 0.5 * (1.0 * i.conjugate()).real
    if not (np.isfinite(z.real) and np.isfinite(z.imag)) or not p_in > 0:
        raise EngineError("solve", name, f"non-physical feed: Z = {z}, P_in = {p_in} W at 1 V")
    return ctx, Solution(z, i, p_in)


def solve(model: Model) -> Solution:
    """Solve ``model`` and return its feed figures at 1 V peak."""
    return _build(model)[1]


class _Counter:
    """Wraps a PyNEC context to count near-field cards (PyNEC indexes patterns by card)."""

    def __init__(self, ctx):
        self.ctx, self.n = ctx, 0

    def card(self, kind: str, args: tuple) -> object:
        (self.ctx.ne_card if kind == "e" else self.ctx.nh_card)(*args)
        self.n += 1
        return self.ctx.get_near_field_pattern(self.n - 1)


def _grid(counter: _Counter, lattice: Lattice, kind: str, name: str) -> np.ndarray:
    (x0, y0, z0), (dx, dy, dz), (nx, ny, nz) = lattice.origin_m, lattice.step_m, lattice.shape
    try:
        nf = counter.card(kind, (0, int(nx), int(ny), int(nz), float(x0), float(y0), float(z0), float(dx), float(dy), float(dz)))
        out = np.column_stack([np.asarray(nf.get_field_x()), np.asarray(nf.get_field_y()), np.asarray(nf.get_field_z())])
    except (RuntimeError, AttributeError) as err:
        raise EngineError("near field", name, str(err) or "near-field card failed") from err
    if out.shape != (lattice.size, 3):
        raise EngineError("near field", name, f"expected {lattice.size} points, got {out.shape[0]}")
    return out


def _points(counter: _Counter, pts: np.ndarray, kind: str, name: str) -> np.ndarray:
    """E or H at points; points on one vertical at equal gaps (a section's columns) share one card."""
    out = np.empty((len(pts), 3), complex)
    order = np.lexsort((pts[:, 2], pts[:, 1], pts[:, 0]))  # by x, then y, then height
    p = pts[order]
    try:
        for k, j, gap in _runs(p[:, 2], p[:, :2]):
            x, y, z = (float(v) for v in p[k])
            nf = counter.card(kind, (0, 1, 1, j - k, x, y, z, 0.0, 0.0, gap if j - k > 1 else 0.0))
            out[order[k:j]] = np.column_stack([np.asarray(nf.get_field_x()), np.asarray(nf.get_field_y()),
                                               np.asarray(nf.get_field_z())])
    except (RuntimeError, AttributeError, IndexError, ValueError) as err:
        raise EngineError("near field", name, str(err) or "near-field card failed") from err
    return out


def _runs(along: np.ndarray, line: np.ndarray) -> list[tuple[int, int, float]]:
    """The runs of entries that one NEC card each can hold, in order: entries on the same line (equal rows of
    ``line``) at equal positive steps of ``along``, each run as long as it goes. Returns (start, end exclusive,
    step; 0 for a single entry)."""
    n = len(along)
    d = np.diff(along)
    pair = (line[1:] == line[:-1]).all(axis=1) & (d > 0)  # entries i and i + 1 can share a card
    cont = np.zeros(max(n - 1, 0), bool)  # pair i continues pair i - 1's run (same step)
    if n > 2:
        cont[1:] = pair[1:] & pair[:-1] & (np.abs(d[1:] - d[:-1]) <= 1e-9 * np.maximum(1.0, d[:-1]))
    stops = np.flatnonzero(~cont)
    out, k = [], 0
    while k < n:
        if k < n - 1 and pair[k]:
            i = int(np.searchsorted(stops, k + 1))
            end = int(stops[i]) + 1 if i < len(stops) else n
            out.append((k, end, float(d[k])))
        else:
            end = k + 1
            out.append((k, end, 0.0))
        k = end
    return out


def _stacks(runs: list[tuple[int, int, float]], xy: np.ndarray) -> list[tuple[list[tuple[int, int]], float, float]]:
    """Runs (from :func:`_runs`) stacked across rows: runs of one start x, length and step at equal steps of y
    share one card. Returns (the runs' (start, end), x step, y step) of each card."""
    by_kind: dict[tuple, list[tuple[float, int, int]]] = {}
    for k, j, gap in runs:
        by_kind.setdefault((float(xy[k, 0]), j - k, gap), []).append((float(xy[k, 1]), k, j))
    out = []
    for (_, _, gap), rows in by_kind.items():
        rows.sort()
        i = 0
        while i < len(rows):
            end, dy = i + 1, 0.0
            if end < len(rows) and rows[end][0] > rows[i][0]:
                dy = rows[end][0] - rows[i][0]
                while end < len(rows) and abs(rows[end][0] - rows[end - 1][0] - dy) <= 1e-9 * max(1.0, dy):
                    end += 1
            out.append(([(k, j) for _, k, j in rows[i:end]], gap, dy))
            i = end
    return out


def _columns(counter: _Counter, cols: Columns, offset, kind: str, name: str) -> np.ndarray:
    xy = np.asarray(cols.xy_m, float).reshape(-1, 2)
    out = np.empty((len(xy), cols.nz, 3), complex)
    ox, oy, oz = (float(v) for v in offset)
    runs = _runs(xy[:, 0], xy[:, 1:]) if cols.run_dx_m > 0 else [(k, k + 1, 0.0) for k in range(len(xy))]
    try:
        for rows, gap, dy in _stacks(runs, xy):
            k0, j0 = rows[0]
            n = j0 - k0
            nf = counter.card(kind, (0, n, len(rows), cols.nz, float(xy[k0, 0]) + ox, float(xy[k0, 1]) + oy, cols.z0_m + oz,
                                     gap if n > 1 else 0.0, dy, cols.dz_m))
            v = np.column_stack([np.asarray(nf.get_field_x()), np.asarray(nf.get_field_y()), np.asarray(nf.get_field_z())])
            v = v.reshape(cols.nz, len(rows), n, 3)  # x fastest, then y, then height
            for r, (k, j) in enumerate(rows):
                out[k:j] = v[:, r].transpose(1, 0, 2)
    except (RuntimeError, AttributeError, IndexError, ValueError) as err:
        raise EngineError("near field", name, str(err) or "near-field card failed") from err
    return out.reshape(-1, 3)


_AXES = np.eye(3)


def _evaluator(counter: _Counter, where, name: str) -> Callable:
    """``evaluate(kind, offset)``: E or H at ``where`` (a Lattice, Columns or points) shifted by ``offset``."""
    if isinstance(where, Lattice):
        return lambda kind, offset: _grid(counter, where.shifted(offset), kind, name)
    if isinstance(where, Columns):
        return lambda kind, offset: _columns(counter, where, offset, kind, name)
    return lambda kind, offset: _points(counter, where + offset, kind, name)


def _fields_peak(counter: _Counter, where, model: Model, h_method: str, step_m: float):
    """Peak E and H (N, 3) at a lattice or a point array, by ``h_method``."""
    name = model.name
    evaluate = _evaluator(counter, where, name)
    if h_method == "nh":
        return evaluate("e", (0.0, 0.0, 0.0)), evaluate("h", (0.0, 0.0, 0.0))
    if h_method == "e-only":
        e = evaluate("e", (0.0, 0.0, 0.0))
        return e, np.zeros_like(e)
    if h_method == "robust":
        return _robust_curl(evaluate, model, step_m)
    half = step_m / 2.0
    plus = [evaluate("e", half * _AXES[a]) for a in range(3)]
    minus = [evaluate("e", -half * _AXES[a]) for a in range(3)]
    e = sum(plus + minus) / 6.0
    h = _curl_h([(plus[a] - minus[a]) / step_m for a in range(3)], model)
    if h_method == "checked":
        # E at the point itself too: a smooth field's Laplacian over the stencil is -k^2 E (Helmholtz), whatever
        # its curvature near a wire; a Sommerfeld step of delta in one sample leaves a residual of delta / half^2
        # and moves the central H by at most delta / (step omega mu0)
        e = evaluate("e", (0.0, 0.0, 0.0))
        omega = 2 * math.pi * model.frequency_mhz * 1e6
        residual = sum(plus[a] + minus[a] - 2 * e for a in range(3)) / half**2 + (omega / C0_M_PER_S) ** 2 * e
        moved = rms_magnitude(residual) * half**2 / (step_m * omega * MU0_H_PER_M)
        odd = moved > H_STEADY * rms_magnitude(h)

        def robust(sub, at):  # the stencil's own samples at +-half are two of the robust curl's offsets
            known = {o: [(plus if o > 0 else minus)[a][at] for a in range(3)] for o in (-0.5, 0.5)}
            return _robust_curl(_evaluator(counter, sub, name), model, step_m, known)[1]

        if isinstance(where, Columns):  # height by height: a row's points share NEC cards
            grid = odd.reshape(-1, where.nz)
            xy = np.asarray(where.xy_m, float).reshape(-1, 2)
            for k in np.flatnonzero(grid.any(axis=0)):
                cols = np.flatnonzero(grid[:, k])
                level = replace(where, xy_m=xy[cols], z0_m=where.z0_m + k * where.dz_m, nz=1)
                h[cols * where.nz + k] = robust(level, cols * where.nz + k)
        elif odd.any():
            h[odd] = robust((where if isinstance(where, np.ndarray) else where.points())[odd], odd)
    return e, h


def _curl_h(d: list[np.ndarray], model: Model) -> np.ndarray:
    """H from the derivatives d[a][:, c] = dE_c / dx_a by Faraday's law."""
    curl = np.column_stack([d[1][:, 2] - d[2][:, 1], d[2][:, 0] - d[0][:, 2], d[0][:, 1] - d[1][:, 0]])
    omega = 2 * math.pi * model.frequency_mhz * 1e6
    return 1j * curl / (omega * MU0_H_PER_M)


H_METHODS = ("nh", "curl", "checked", "robust", "e-only", "sampled")
ROBUST_OFFSETS = (-1.0, -0.5, -0.25, 0.25, 0.5, 1.0)  # in units of the stencil step (2 cm: +-5 mm to +-2 cm)


def _robust_curl(evaluate, model: Model, step_m: float, known: dict | None = None):
    """Peak E and H where a Sommerfeld step may lie inside the stencil: E at six offsets along each axis
    (``ROBUST_OFFSETS`` x ``step_m``), each derivative the median of the five slopes between neighbouring
    offsets (real and imaginary parts apart). A step crosses a line once: it spoils one slope of five
    (two steps, two), and the median is the slope of the smooth field. E is the mean at +-step/4."""
    offsets = np.asarray(ROBUST_OFFSETS) * step_m
    known = known or {}
    d, e_mid = [], []
    for a in range(3):
        samples = np.stack([known[f][a] if f in known else evaluate("e", o * _AXES[a])
                            for f, o in zip(ROBUST_OFFSETS, offsets, strict=True)])  # (6, N, 3)
        slopes = np.diff(samples, axis=0) / np.diff(offsets)[:, None, None]
        d.append(np.median(slopes.real, axis=0) + 1j * np.median(slopes.imag, axis=0))
        e_mid.append(0.5 * (samples[2] + samples[3]))
    return sum(e_mid) / 3.0, _curl_h(d, model)


def exclusion_m(model: Model) -> list[tuple[np.ndarray, np.ndarray, float]]:
    """(start, end, exclusion radius) of every wire: max(10 radii, half a segment) [m]."""
    out = []
    for s in model.structures:
        for w in s.wires:
            r = max(10.0 * w.radius_m, 0.5 * w.length_m / w.segments)
            out.append((np.asarray(w.start_m, float), np.asarray(w.end_m, float), r))
    return out


DISTANCE_BLOCK = 20_000  # points a block when measuring distances to every wire at once


def _wire_distances2(model: Model, pts: np.ndarray):
    """Blocks of the squared distance from points (N, 3) to every wire's axis segment: yields (the block's slice,
    its distances (n, W) [m^2], the wires' exclusion radii (W,) [m])."""
    wires = exclusion_m(model)
    a = np.array([w[0] for w in wires]).reshape(-1, 3)
    ab = np.array([w[1] for w in wires]).reshape(-1, 3) - a
    radius = np.array([w[2] for w in wires])
    length2 = np.einsum("wc,wc->w", ab, ab)
    for k in range(0, len(pts), DISTANCE_BLOCK):
        rel = pts[k : k + DISTANCE_BLOCK, None, :] - a  # (n, W, 3)
        t = np.clip(np.einsum("nwc,wc->nw", rel, ab) / length2, 0.0, 1.0)
        off = rel - t[:, :, None] * ab
        yield slice(k, k + DISTANCE_BLOCK), np.einsum("nwc,nwc->nw", off, off), radius


def mask_points(model: Model, points_m: np.ndarray, extra_m: float = 0.0) -> np.ndarray:
    """True where a point is below ground or inside a wire's exclusion distance (plus ``extra_m``)."""
    pts = np.asarray(points_m, float).reshape(-1, 3)
    masked = pts[:, 2] < 0.0 if model.ground.over_ground else np.zeros(len(pts), bool)
    for block, d2, radius in _wire_distances2(model, pts):
        masked[block] |= (d2 < (radius + extra_m) ** 2).any(axis=1)
    return masked


def wire_distance_m(model: Model, points_m: np.ndarray) -> np.ndarray:
    """Distance from each point to the nearest wire's axis [m]."""
    pts = np.asarray(points_m, float).reshape(-1, 3)
    out = np.full(len(pts), np.inf)
    for block, d2, _ in _wire_distances2(model, pts):
        out[block] = np.sqrt(d2.min(axis=1, initial=np.inf))
    return out


def wire_scales_m(model: Model, points_m: np.ndarray, directions: Sequence[np.ndarray]) -> np.ndarray:
    """The distance over which a wire's field changes, along each unit direction, at each point [m] (D, N).

    Beside a straight wire the field changes across it on the scale of the distance d to its axis, but along
    it only as the current does and as the ends come nearer: along a direction at angle phi to the wire the
    scale is d / sin(phi), at most the distance to either end of the wire; beyond an end it is d. The smallest
    over the model's wires (common practice: the near field of a line current, 1/d across it; its current
    changes along it on the scale of a wavelength, which the caller's cap in wavelengths keeps). Open ends count
    as joints do: measured, the field beside a radial 1.3 m from its open tip changed on the scale of the distance
    to the tip (H interpolated as if it did not was 2.6 % off the reference)."""
    pts = np.asarray(points_m, float).reshape(-1, 3)
    out = np.full((len(directions), len(pts)), np.inf)
    for a, b, _ in exclusion_m(model):
        ab = b - a
        length = float(np.linalg.norm(ab))
        w = ab / length
        rel = pts - a
        t = rel @ w
        # squared distances: to the axis (beside the wire), to each end
        d2_line = np.maximum(np.einsum("ij,ij->i", rel, rel) - t * t, 0.0)
        d2_a = np.einsum("ij,ij->i", rel, rel)
        d2_b = d2_a - 2.0 * t * length + length * length
        beside = (t > 0.0) & (t < length)
        d = np.sqrt(np.where(beside, d2_line, np.where(t <= 0.0, d2_a, d2_b)))
        ends = np.sqrt(np.maximum(np.minimum(d2_a, d2_b), 0.0))
        for k, u in enumerate(directions):
            sine = float(np.linalg.norm(np.cross(u, w)))
            along = np.minimum(d / sine, ends) if sine > 1e-9 else ends
            np.minimum(out[k], np.where(beside, along, d), out=out[k])
    return out


def _min_filter(a: np.ndarray, half_y: int, half_x: int) -> np.ndarray:
    """The smallest value of ``a`` (2-D) over a window of (2 half_y + 1) x (2 half_x + 1) about each entry, the
    edges extended (as scipy.ndimage.minimum_filter with mode "nearest"; tested against it)."""
    out = np.pad(a, ((half_y, half_y), (half_x, half_x)), mode="edge")
    out = np.lib.stride_tricks.sliding_window_view(out, 2 * half_y + 1, axis=0).min(axis=-1)
    return np.lib.stride_tricks.sliding_window_view(out, 2 * half_x + 1, axis=1).min(axis=-1)


def _block_min(a: np.ndarray) -> np.ndarray:
    """The smallest value of each H_BLOCK x H_BLOCK block of a plan array (the last blocks may be smaller)."""
    ny, nx = a.shape
    pad = np.pad(a, ((0, -ny % H_BLOCK), (0, -nx % H_BLOCK)), constant_values=np.inf)
    return pad.reshape(pad.shape[0] // H_BLOCK, H_BLOCK, pad.shape[1] // H_BLOCK, H_BLOCK).min(axis=(1, 3))


def default_h_method(ground_: Ground) -> str:
    return "curl" if ground_.finite else "nh"


def samples_h(model: Model) -> bool:
    """Whether H is worth sampling (:class:`SampledH`): over a finite ground, where it costs six E
    evaluations a point; elsewhere NEC's NH is exact and cheaper."""
    return default_h_method(model.ground) == "curl"


def _worker_init() -> None:
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = "1"


def _worker_ready() -> None:
    """Nothing but the imports a worker needs: handed to each worker as the pool opens, so that the workers start
    while the caller prepares its first request."""
    _pynec()


class Workers:
    """Worker processes kept for several near-field runs (use as a context manager).

    Each worker builds and solves its own PyNEC context per chunk (contexts cannot be pickled),
    with OpenMP/OpenBLAS threads set to 1. Keeping the pool for a whole assessment pays the
    process start-up (about a second: Python, numpy and PyNEC imports) once.
    """

    def __init__(self, jobs: int = 1):
        if jobs < 1:
            raise ValueError(f"jobs must be >= 1, got {jobs}")
        self.jobs = int(jobs)
        self._pool: ProcessPoolExecutor | None = None
        self._stopped = False

    def __enter__(self) -> Workers:
        if self.jobs > 1:
            import multiprocessing

            self._pool = ProcessPoolExecutor(
                self.jobs, mp_context=multiprocessing.get_context("spawn"), initializer=_worker_init
            )
            for _ in range(self.jobs):
                self._pool.submit(_worker_ready)
        return self

    def __exit__(self, exc_type, *exc) -> None:
        if exc_type is not None:
            self._stop()
        elif self._pool is not None:
            self._pool.shutdown(cancel_futures=True)
            self._pool = None

    def _stop(self) -> None:
        """Stopped (a signal, an error elsewhere): end the workers now rather than finish their chunks; any
        later run raises."""
        self._stopped = True
        if self._pool is not None:
            for proc in list(getattr(self._pool, "_processes", {}).values()):
                proc.terminate()
            self._pool.shutdown(wait=False, cancel_futures=True)
            self._pool = None

    def each(self, fn: Callable, items: Sequence) -> list:
        """``[fn(x) for x in items]``, side by side in threads of this process when there is a pool (at most
        ``jobs + 1`` at once): while one waits for a small round of its own, the workers compute another's.
        Results in order and never dependent on the threading; the first error stops the workers and is raised."""
        items = list(items)
        if self._pool is None or len(items) < 2:
            return [fn(x) for x in items]
        with ThreadPoolExecutor(min(len(items), self.jobs + 1), thread_name_prefix="nfmap") as threads:
            futures = [threads.submit(fn, x) for x in items]
            try:
                wait(futures, return_when=FIRST_EXCEPTION)
                failed = [f for f in futures if f.done() and f.exception() is not None]
                if failed:
                    raise failed[0].exception()
                return [f.result() for f in futures]
            except BaseException:
                for f in futures:
                    f.cancel()
                self._stop()  # the threads still running fail at their next round
                raise

    def run(self, fn, tasks: list[tuple], done: Callable[[int], None] | None = None) -> list:
        """``[fn(*t) for t in tasks]`` in order, in the pool when there is one (safe to call from several threads:
        their tasks share the workers)."""
        name = getattr(tasks[0][0], "name", "model") if tasks else "model"
        pool = self._pool
        if self._stopped:
            raise EngineError("near field", name, "stopped (another part of the run failed or was interrupted)")
        if pool is None:
            out = []
            for t in tasks:
                out.append(fn(*t))
                if done:
                    done(len(out) - 1)
            return out
        try:
            futures = [pool.submit(fn, *t) for t in tasks]
            out = []
            for k, f in enumerate(futures):
                out.append(f.result())
                if done:
                    done(k)
        except BrokenProcessPool:
            if self._stopped:
                raise EngineError("near field", name, "stopped (another part of the run failed or was interrupted)") from None
            raise EngineError("near field", name,
                              "a worker process died (killed, or out of memory); nothing was written") from None
        except RuntimeError:  # the pool was shut down between the check above and a submit
            if not self._stopped:
                raise
            raise EngineError("near field", name, "stopped (another part of the run failed or was interrupted)") from None
        return out


_SOLVED: list = []  # per process: the models last solved (newest last), each with its context and card counter
CACHED_MODELS = 4  # transmissions assessed side by side each keep theirs
CACHED_POINTS_MAX = 200_000  # a cached context keeps every pattern it computed: rebuilt beyond this many points
CACHED_CARDS_MAX = 4_000  # ... or cards (PyNEC finds a card's pattern by walking the list: +2.7 us a card per 1,000 held,
# measured; a rebuild costs about 30 ms: 4,000 keeps the sum near its least)


def _task(model: Model, where, h_method: str, step_m: float):
    with _NEC_LOCK:
        if isinstance(where, Lattice):
            ctx, sol = _build(model)
            counter = _Counter(ctx)
        else:
            # an adaptive lattice or a section asks the same model many times for few points: solve it once
            entry = next((en for en in _SOLVED if en[0] == model), None)
            if entry is not None:
                _SOLVED.remove(entry)
            if entry is None or entry[3][0] > CACHED_POINTS_MAX or entry[2].n > CACHED_CARDS_MAX:
                ctx, sol = _build(model)
                entry = (model, sol, _Counter(ctx), [0])
            _SOLVED.append(entry)
            del _SOLVED[:-CACHED_MODELS]
            _, sol, counter, used = entry
            used[0] += len(where.xy_m) * where.nz if isinstance(where, Columns) else len(where)
        e, h = _fields_peak(counter, where, model, h_method, step_m)
    return e, h, sol


def near_fields(
    model: Model,
    where: Lattice | np.ndarray,
    power_w: float,
    jobs: int | Workers = 1,
    h_method: str | None = None,
    step_m: float = CURL_STEP_M,
    progress: Callable[[int], None] | None = None,
) -> NearField:
    """Near E and H of ``model`` at a lattice or at points, rms at accepted power ``power_w``.

    Parameters
    ----------
    where : Lattice, Columns or array (N, 3) [m]
    power_w : float
        Accepted (input) power at the feed [W].
    jobs : int or Workers
        Worker processes (or a pool kept by the caller); each builds and solves its own
        context. Results do not depend on it.
    h_method : {"nh", "curl", "e-only"}
        H from NEC's NH card or from curl E; default "curl" over a finite ground, else "nh"; "e-only" computes
        E alone (one E evaluation per point; H is returned as zeros); "sampled" (a Lattice only): E at every
        point, H from curl E at nodes and interpolated between them (:class:`SampledH`).
    progress : callable
        Called with the number of points finished after each chunk.

    Returns
    -------
    NearField
        rms complex E [V/m] and H [A/m], NaN where masked.
    """
    if not power_w > 0 or not math.isfinite(power_w):
        raise ValueError(f"power_w must be > 0, got {power_w}")
    h_method = h_method or default_h_method(model.ground)
    if h_method not in H_METHODS:
        raise ValueError(f"h_method must be one of {', '.join(H_METHODS)}; got {h_method!r}")
    if h_method == "sampled":
        if not isinstance(where, Lattice):
            raise ValueError("h_method 'sampled' needs a Lattice")
        nx, ny, nz = where.shape
        iy, ix = np.divmod(np.arange(nx * ny), nx)
        sampler = SampledH(model, Sheet.of(where), power_w, jobs, progress)
        e, h = (v.reshape(ny, nx, nz, 3).transpose(2, 0, 1, 3).reshape(-1, 3) for v in sampler.fields(iy, ix))
        return NearField(where.points(), e, h, ~np.isfinite(e).all(axis=1), "sampled", sampler.solution or solve(model),
                         float(power_w), (f"H from curl E at {sampler.node_columns} of {nx * ny} columns",))
    return near_fields_batch(model, [(where, h_method)], power_w, jobs, step_m, progress)[0]


# E evaluations a point costs, by method (to hand the largest chunks out first)
_COST = {"e-only": 1, "nh": 2, "curl": 6, "checked": 7, "robust": 18}


def near_fields_batch(
    model: Model,
    requests: Sequence[tuple[Lattice | Columns | np.ndarray, str | None]],
    power_w: float,
    jobs: int | Workers = 1,
    step_m: float = CURL_STEP_M,
    progress: Callable[[int], None] | None = None,
) -> list[NearField]:
    """:func:`near_fields` for several (where, h_method) requests of one model at once: their chunks go to the
    workers together, the costliest first, so that no worker waits for another between them (an adaptive
    round asks for nodes and plain points together). Results do not depend on the batching."""
    if not power_w > 0 or not math.isfinite(power_w):
        raise ValueError(f"power_w must be > 0, got {power_w}")
    n_jobs = jobs.jobs if isinstance(jobs, Workers) else int(jobs)
    plans = []
    for where, h_method in requests:
        h_method = h_method or default_h_method(model.ground)
        if h_method not in H_METHODS or h_method == "sampled":
            raise ValueError(f"h_method must be one of {', '.join(m for m in H_METHODS if m != 'sampled')}; "
                             f"got {h_method!r}")
        plans.append((where, h_method, *_chunked(model, where, n_jobs)))
    tasks, owner = [], []
    for k, (_, h_method, _, _, chunks, _) in enumerate(plans):
        tasks += [(model, c, h_method, step_m) for c in chunks]
        owner += [k] * len(chunks)
    sizes = [c.size if isinstance(c, (Lattice, Columns)) else len(c) for _, c, _, _ in tasks]
    order = sorted(range(len(tasks)), key=lambda i: -sizes[i] * _COST[tasks[i][2]])
    results: list = [None] * len(tasks)
    if tasks:
        def done(k: int) -> None:
            if progress:
                progress(sizes[order[k]])

        ordered = [tasks[i] for i in order]
        if isinstance(jobs, Workers):
            got = jobs.run(_task, ordered, done)
        else:
            with Workers(jobs if len(ordered) > 1 else 1) as pool:
                got = pool.run(_task, ordered, done)
        for i, r in zip(order, got, strict=True):
            results[i] = r
    sol = results[0][2] if tasks else solve(model)
    out = []
    for k, (where, h_method, pts, masked, chunks, keep) in enumerate(plans):
        mine = [results[i] for i in range(len(tasks)) if owner[i] == k]
        e_pk = np.full((len(pts), 3), np.nan, complex)
        h_pk = np.full((len(pts), 3), np.nan, complex)
        if mine:
            e_all = np.concatenate([r[0] for r in mine])
            h_all = np.concatenate([r[1] for r in mine])
            if isinstance(where, Lattice):
                # chunks split along y: reassemble in x-fastest, y, z order
                nx, _, nz = where.shape
                e_pk = _merge_y(e_all, chunks, nx, nz)
                h_pk = _merge_y(h_all, chunks, nx, nz)
            else:
                e_pk[keep] = e_all
                h_pk[keep] = h_all
        scale = math.sqrt(power_w / sol.input_power_w) / math.sqrt(2.0)
        e, h = e_pk * scale, h_pk * scale
        e[masked] = np.nan
        h[masked] = np.nan
        finite = np.isfinite(e).all(axis=1) & (np.isfinite(h).all(axis=1) | (h_method == "e-only"))
        if np.any(~finite & ~masked):
            raise EngineError("near field", model.name, f"{int((~finite & ~masked).sum())} points gave NaN or inf")
        out.append(NearField(pts, e, h, masked, h_method, sol, float(power_w)))
    return out


def _chunked(model: Model, where, n_jobs: int):
    """The points of ``where``, their masked flags, the chunks handed to the workers and which points they hold."""
    if isinstance(where, Lattice):
        pts = where.points()
        # a multiple of the jobs, so that no worker is left alone with a last chunk (each point's field never
        # depends on the chunking)
        parts = math.ceil(where.size / LATTICE_CHUNK_POINTS)
        chunks = where.split_y(math.ceil(parts / n_jobs) * n_jobs if parts > 1 else 1)
        return pts, mask_points(model, pts), chunks, None
    pts = where.points() if isinstance(where, Columns) else np.asarray(where, float).reshape(-1, 3)
    masked = mask_points(model, pts)
    # small calls (an adaptive lattice's rounds, a section) still keep every worker busy; results never depend on it
    if isinstance(where, Columns):
        # each column from its lowest to its highest live point (a wire's exclusion near the ground masks the
        # lowest heights: no NEC work there), columns of equal reach together, a row's columns sharing cards
        nz = where.nz
        grid = ~masked.reshape(-1, nz)
        live = np.flatnonzero(grid.any(axis=1))
        low = np.argmax(grid[live], axis=1)
        high = nz - 1 - np.argmax(grid[live, ::-1], axis=1)
        per = max(1, CHUNK_POINTS // nz if n_jobs == 1 else min(CHUNK_POINTS // nz, math.ceil(len(live) / (CHUNKS_PER_JOB * n_jobs))))
        chunks, kept = [], []
        for reach in np.unique(low * nz + high):
            k0, k1 = divmod(int(reach), nz)
            same = live[low * nz + high == reach]
            part = replace(where, z0_m=where.z0_m + k0 * where.dz_m, nz=k1 - k0 + 1)
            xy = np.asarray(where.xy_m, float).reshape(-1, 2)[same]
            for idx in _card_chunks(xy, where.run_dx_m > 0, per):
                chunks.append(part.take(same[idx]))
                kept.append((same[idx, None] * nz + np.arange(k0, k1 + 1)).ravel())
        keep = np.concatenate(kept) if kept else np.zeros(0, int)
    else:
        keep = np.flatnonzero(~masked)
        per = max(1, CHUNK_POINTS if n_jobs == 1 else min(CHUNK_POINTS, math.ceil(len(keep) / (CHUNKS_PER_JOB * n_jobs))))
        chunks = [pts[keep[i : i + per]] for i in range(0, len(keep), per)]
    return pts, masked, chunks, keep


def _card_chunks(xy: np.ndarray, runs_along_x: bool, per: int) -> list[np.ndarray]:
    """Columns ``xy`` (in row order) in chunks of about ``per``, each holding whole NEC cards where it can (the
    stacks of :func:`_stacks`; a stack wider than ``per`` by rows, a run longer than ``per`` in pieces): fewer
    cards than cutting every ``per`` columns. Each chunk's indices in order."""
    runs = _runs(xy[:, 0], xy[:, 1:]) if runs_along_x else [(k, k + 1, 0.0) for k in range(len(xy))]
    pieces = []
    for rows, _, _ in _stacks(runs, xy):
        width = rows[0][1] - rows[0][0]
        if width >= per:
            pieces += [np.arange(a, min(a + per, j)) for k, j in rows for a in range(k, j, per)]
        else:
            high = max(1, per // width)
            pieces += [np.concatenate([np.arange(k, j) for k, j in rows[r : r + high]]) for r in range(0, len(rows), high)]
    pieces.sort(key=lambda p: int(p[0]))
    chunks, held, size = [], [], 0
    for p in pieces:
        if size and size + len(p) > per:
            chunks.append(np.sort(np.concatenate(held)))
            held, size = [], 0
        held.append(p)
        size += len(p)
    if held:
        chunks.append(np.sort(np.concatenate(held)))
    return chunks


def _merge_y(values: np.ndarray, chunks: list[Lattice], nx: int, nz: int) -> np.ndarray:
    blocks, i = [], 0
    for c in chunks:
        n = c.size
        blocks.append(values[i : i + n].reshape(nz, c.shape[1], nx, 3))
        i += n
    return np.concatenate(blocks, axis=1).reshape(-1, 3)


# H where it is smooth: curl E at nodes, interpolated between them (see SampledH)
H_BLOCK = 4  # plan points per block side; a block's H nodes are every s-th point, s in H_STRIDES
H_STRIDES = (1, 2, 4, 8)
H_NODE_SCALE = 0.5  # node spacing <= this times the distance from the block to the nearest wire ...
H_NODE_WAVELENGTHS = 0.125  # ... and <= this many wavelengths
H_Z_STRIDES = (2, 3)  # a node column between nodes: curl E at every kz-th height where kz dz is within the reach
H_BOUND = 0.02  # |H| between nodes is within this share of the reference (measured and tested; README)
H_STEADY = 0.01  # a node between nodes whose central H a Sommerfeld step inside its stencil could move by more than
# this share (by the Laplacian of E over the stencil, which is -k^2 E where E is smooth) takes the robust curl


def _axis_nodes(n: int, s: int) -> list[int]:
    """The node indices of an axis of ``n`` points at stride ``s`` (as :func:`_axis_table` takes them)."""
    return sorted(set(range(0, n, s)) | {n - 1})


@functools.lru_cache(maxsize=64)
def _axis_table(n: int, s: int) -> tuple[np.ndarray, np.ndarray]:
    """Interpolation along one axis of ``n`` points with nodes at the multiples of ``s`` and at n - 1.

    Returns, for every index i, the four nodes nearest i that bracket it (fewer on a short axis: repeated with
    weight 0) and their cubic Lagrange weights (``idx``, ``w``, each (n, 4)). A node is its own only node
    (weight 1).
    """
    nodes = np.array(_axis_nodes(n, s))
    i = np.arange(n)
    j = np.searchsorted(nodes, i)
    start = np.minimum(np.maximum(j - 2, 0), max(len(nodes) - 4, 0))
    m = min(4, len(nodes))
    use = nodes[start[:, None] + np.arange(m)]  # (n, m) the nodes bracketing each index
    w = np.zeros((n, 4))
    for k in range(m):
        others = np.delete(use, k, axis=1)
        w[:, k] = np.prod((i[:, None] - others) / (use[:, [k]] - others), axis=1)
    idx = np.concatenate([use, np.repeat(use[:, -1:], 4 - m, axis=1)], axis=1)
    on = np.isin(i, nodes)  # a node: itself alone
    idx[on], w[on] = i[on, None], np.array([1.0, 0.0, 0.0, 0.0])
    return idx, w


@dataclass(frozen=True)
class Sheet:
    """The points origin + ix step_x + iy step_y + k (0, 0, dz) for ix < nx, iy < ny, k < nz: a plan lattice's
    columns (``Sheet.of(lattice)``) or a vertical section (step_y upward, nz = 1)."""

    origin_m: tuple[float, float, float]
    step_x_m: tuple[float, float, float]
    step_y_m: tuple[float, float, float]
    nx: int
    ny: int
    nz: int = 1
    dz_m: float = 0.0

    @classmethod
    def of(cls, lattice: Lattice) -> Sheet:
        (dx, dy, dz), (nx, ny, nz) = lattice.step_m, lattice.shape
        return cls(lattice.origin_m, (dx, 0.0, 0.0), (0.0, dy, 0.0), nx, ny, nz, dz)

    def base(self, iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """The lowest point (k = 0) of each column (N, 3)."""
        return (np.asarray(self.origin_m) + np.outer(ix, self.step_x_m) + np.outer(iy, self.step_y_m)).reshape(-1, 3)

    def points(self, iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """Every point of the columns (N * nz, 3), heights fastest."""
        b = self.base(iy, ix)
        return np.repeat(b, self.nz, axis=0) + np.outer(np.tile(np.arange(self.nz), len(b)), (0.0, 0.0, self.dz_m))

    def where(self, iy: np.ndarray, ix: np.ndarray):
        """What :func:`near_fields` takes for these columns: Columns (a row's columns share NEC cards) when the
        sheet's rows run along x and its columns are level, else the points."""
        if self.step_x_m[1] == 0 and self.step_x_m[2] == 0 and self.step_y_m[2] == 0:
            b = self.base(iy, ix)
            return Columns(b[:, :2], float(self.origin_m[2]), float(self.dz_m), self.nz, float(self.step_x_m[0]))
        return self.points(iy, ix)


class SampledH:
    """E and H on a sheet of columns (a lattice's plan, or a vertical section) with curl E only at nodes.

    The sheet is cut into blocks of ``H_BLOCK`` x ``H_BLOCK`` columns. A block takes strides (sx, sy) of
    ``H_STRIDES``, the pair with the fewest nodes for which each stride x its step <= ``H_NODE_SCALE`` x the
    scale on which the field changes along that axis (:func:`wire_scales_m`: the distance to a wire across it,
    farther along it) and <= ``H_NODE_WAVELENGTHS`` wavelengths, the smallest over the block widened by
    (sx, sy) columns (the nodes its points interpolate from), at every height. Its nodes are the columns at
    multiples of sx and sy (global indices, so that blocks share them) and the last column.

    - sx = sy = 1, near wires: every column is a node, E and H the reference (curl E, :func:`near_fields` "curl");
      where the wires are far enough in height, checked (below) at every kz-th height, H cubic in height between.
    - A node between nodes is "checked": E at the node itself too. A smooth field's Laplacian over the seven
      points is -k^2 E however strongly it curves beside a wire; a Sommerfeld step inside the stencil (which
      would spread as a spike over the node's neighbourhood) leaves a residual that bounds how far it moved
      the central H. Where that could be more than ``H_STEADY`` H is the "robust" curl, the median of five
      slopes along each axis (two of its six offsets are the stencil's own samples).
    - Between nodes E is computed (one E evaluation) and H's complex components are interpolated, height by
      height, by cubic Lagrange polynomials on the four nearest nodes in each direction (:func:`_axis_table`).
      The components, not |H|: the magnitude has a kink at a null of the field (measured: |H| interpolated
      read 16 times the reference on a vertical's axis); the eighth-wavelength limit keeps the phase's turn
      between nodes within what a cubic follows (error (k h)^4 x 9/384: 0.9 % at lambda/8).
    - A node column (of a plan sheet) takes curl E at every kz-th height (``H_Z_STRIDES``; kz = 3 only where that
      leaves four heights or more) and the top one, where kz x dz <= ``H_NODE_SCALE`` x the scale in height and the
      eighth wavelength; E alone at the heights between, H's components cubic in height between.
    - A point whose interpolation meets a masked node takes the reference curl at that point alone.

    Nodes are kept between calls, so an adaptive lattice asking round after round pays for each node once, and a
    point asked for exactly (computed at every height) keeps its own H when asked for again.
    Accuracy against the reference: the module docstring, ``benchmarks/engine.py`` and
    ``tests/engine/test_sampled_h.py``.
    """

    def __init__(self, model: Model, sheet: Sheet | Lattice, power_w: float, jobs: int | Workers = 1,
                 progress: Callable[[int], None] | None = None):
        sheet = Sheet.of(sheet) if isinstance(sheet, Lattice) else sheet
        self.model, self.sheet, self.power_w, self.jobs, self.progress = model, sheet, power_w, jobs, progress
        nx, ny, nz = sheet.nx, sheet.ny, sheet.nz
        # the scale on which the field changes along each sheet axis and in height (wire_scales_m); a block takes
        # strides (kx, ky) when, over the block widened by (kx, ky) columns (the nodes its points interpolate
        # from), kx x step_x <= H_NODE_SCALE x the scale along x and ky x step_y likewise, at every height, and
        # both are <= H_NODE_WAVELENGTHS wavelengths; of the pairs allowed, the one with the fewest nodes
        iy, ix = np.divmod(np.arange(nx * ny), nx)
        steps = (float(np.linalg.norm(sheet.step_x_m)), float(np.linalg.norm(sheet.step_y_m)))
        along = [np.asarray(sheet.step_x_m) / steps[0], np.asarray(sheet.step_y_m) / steps[1], np.array([0.0, 0.0, 1.0])]
        scale = [v.reshape(ny, nx, nz).min(axis=2) for v in wire_scales_m(model, sheet.points(iy, ix), along)]
        cap = H_NODE_WAVELENGTHS * model.wavelength_m
        nby, nbx = -(-ny // H_BLOCK), -(-nx // H_BLOCK)
        sx, sy = np.ones((nby, nbx), int), np.ones((nby, nbx), int)
        for kx in H_STRIDES:
            for ky in H_STRIDES:
                ok = np.ones((nby, nbx), bool)
                for k, step, sc in ((kx, steps[0], scale[0]), (ky, steps[1], scale[1])):
                    if k > 1:
                        near = _block_min(_min_filter(sc, ky, kx))
                        ok &= k * step <= np.minimum(H_NODE_SCALE * near, cap)
                better = ok & (kx * ky > sx * sy)
                sx[better], sy[better] = kx, ky
        self.stride_x, self.stride_y = sx, sy
        # a node column between nodes takes curl E at every kz-th height (and the top one) and H's components by
        # cubic polynomials in height between them, where kz height steps are within the same reach in height
        # (kz = 3 only where that leaves four heights or more: a cubic)
        plan_sheet = sheet.step_x_m[1] == 0 and sheet.step_x_m[2] == 0 and sheet.step_y_m[2] == 0
        self.stride_z = np.ones((ny, nx), int)
        for kz in H_Z_STRIDES:
            if plan_sheet and nz >= 4 and (kz == 2 or len(_axis_nodes(nz, kz)) >= 4):
                self.stride_z[kz * sheet.dz_m <= np.minimum(H_NODE_SCALE * scale[2], cap)] = kz
        self._e: dict[int, np.ndarray] = {}  # node (iy * nx + ix) -> rms E (nz, 3)
        self._h: dict[int, np.ndarray] = {}  # ... -> rms H (nz, 3)
        self._full: set[int] = set()  # nodes whose H was computed at every height
        self.node_columns = 0
        self._lock = threading.Lock()  # one call at a time: its node tables are not safe to change from two threads
        self.solution: Solution | None = None

    def _nodes(self, keys: np.ndarray, reference: np.ndarray, full: np.ndarray, plain=None) -> NearField | None:
        """Evaluate the nodes ``keys`` not yet known; ``reference`` marks those to take the default stencil,
        ``full`` those whose H must be computed at every height (never interpolated in height).
        ``plain``: columns (a :meth:`Sheet.where`) whose E alone is wanted, in the same batch; returns their
        near field."""
        nx, nz = self.sheet.nx, self.sheet.nz
        keys, inverse = np.unique(keys, return_inverse=True)
        ref = np.zeros(len(keys), bool)
        np.logical_or.at(ref, inverse, reference)
        fl = np.zeros(len(keys), bool)
        np.logical_or.at(fl, inverse, full)
        known = np.isin(keys, np.fromiter(self._h.keys(), int, len(self._h)))
        whole = np.isin(keys, np.fromiter(self._full, int, len(self._full)))
        new = ~known | (fl & ~whole)
        keys, ref, fl = keys[new], ref[new], fl[new]
        iy, ix = np.divmod(keys, nx)
        zs = np.where(fl, 1, self.stride_z[iy, ix])
        # a node between nodes stands for its neighbourhood: a Sommerfeld step inside its stencil (a spike) must
        # not spread; such a node is found by the Laplacian of its stencil and takes the robust curl (median slopes)
        every = np.arange(nz)
        groups = [(np.flatnonzero(ref & (zs == 1)), "curl", every), (np.flatnonzero(~ref & (zs == 1)), "checked", every)]
        for kz in np.unique(zs[zs > 1]):
            # curl E at every kz-th height and the top one (each an equal-step run: one card a row), E alone between
            sel = np.flatnonzero(zs == kz)
            groups += [(sel, "checked", np.arange(0, nz, kz)), (sel, "checked", np.array([nz - 1]) if (nz - 1) % kz else every[:0])]
            groups += [(sel, "e-only", np.arange(r, nz - 1, kz)) for r in range(1, kz)]
        groups = [g for g in groups if len(g[0]) and len(g[2])]
        requests = []
        for sel, method, k in groups:
            cols = self.sheet.where(iy[sel], ix[sel])
            if len(k) < nz:
                cols = replace(cols, z0_m=cols.z0_m + k[0] * cols.dz_m, dz_m=(k[1] - k[0] if len(k) > 1 else 1) * cols.dz_m,
                               nz=len(k))
            requests.append((cols, method))
        if plain is not None:
            requests.append((plain, "e-only"))
        if not requests:
            return None
        got = near_fields_batch(self.model, requests, self.power_w, self.jobs, CURL_STEP_M, self.progress)
        self.solution = got[0].solution
        e = np.full((len(keys), nz, 3), np.nan, complex)
        h = np.full((len(keys), nz, 3), np.nan, complex)
        for (sel, method, k), nf in zip(groups, got, strict=False):
            e[sel[:, None], k[None, :]] = nf.e_v_per_m.reshape(len(sel), len(k), 3)
            if method != "e-only":
                h[sel[:, None], k[None, :]] = nf.h_a_per_m.reshape(len(sel), len(k), 3)
        for kz in np.unique(zs[zs > 1]):
            # H between the computed heights (masked heights stay masked: NaN spreads to their neighbours, which
            # are then computed in full below)
            idx, w = _axis_table(nz, int(kz))
            sp = np.flatnonzero(zs == kz)
            h[sp] = np.einsum("kj,nkjc->nkc", w, h[sp][:, idx, :])
        for k, ev, hv, f in zip(keys, e, h, zs == 1, strict=True):
            self._e[int(k)], self._h[int(k)] = ev, hv
            if f:
                self._full.add(int(k))
        self.node_columns += len(keys)
        return got[-1] if plain is not None else None

    def fields(self, iy: np.ndarray, ix: np.ndarray, exact: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """rms complex E and H, each (len(iy), nz, 3) [V/m, A/m], at plan points (iy, ix) of the sheet;
        NaN where masked. ``exact``: every point a node (H computed there, not interpolated)."""
        nx = self.sheet.nx
        iy, ix = np.asarray(iy, int).ravel(), np.asarray(ix, int).ravel()
        order = np.argsort(iy * nx + ix, kind="stable")  # by row, then column: a row's columns share NEC cards
        with self._lock:
            e, h = self._fields(iy[order], ix[order], exact)
        back = np.empty_like(order)
        back[order] = np.arange(len(order))
        return e[back], h[back]

    def computed(self, iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """True where H at plan point (iy, ix) was computed at every height (a node), not interpolated."""
        keys = np.asarray(iy, int) * self.sheet.nx + np.asarray(ix, int)
        full = list(self._full)  # a copy: another thread's call may add to it
        return np.isin(keys, np.array(full, int))

    def _fields(self, iy: np.ndarray, ix: np.ndarray, exact: bool) -> tuple[np.ndarray, np.ndarray]:
        nx, ny, nz = self.sheet.nx, self.sheet.ny, self.sheet.nz
        if not len(iy):
            return np.zeros((0, nz, 3), complex), np.zeros((0, nz, 3), complex)
        sx, sy = self.stride_x[iy // H_BLOCK, ix // H_BLOCK], self.stride_y[iy // H_BLOCK, ix // H_BLOCK]
        ky, wy = np.empty((len(iy), 4), int), np.empty((len(iy), 4))
        kx, wx = np.empty((len(iy), 4), int), np.empty((len(iy), 4))
        for st in np.unique(sy):
            on = sy == st
            ky[on], wy[on] = (a[iy[on]] for a in _axis_table(ny, int(st)))
        for st in np.unique(sx):
            on = sx == st
            kx[on], wx[on] = (a[ix[on]] for a in _axis_table(nx, int(st)))
        reference = (sx == 1) & (sy == 1)
        # a point computed in full before (asked for exactly: a margin's ring, a settled worst) keeps its own H
        own = (((wy[:, 0] == 1.0) & (ky[:, 0] == iy) & (wx[:, 0] == 1.0) & (kx[:, 0] == ix)) | reference | exact
               | self.computed(iy, ix))
        terms = [(a, b) for a in range(4) for b in range(4)]
        need = np.stack([np.where(wy[:, a] * wx[:, b] != 0, ky[:, a] * nx + kx[:, b], -1) for a, b in terms], axis=1)
        rest = np.flatnonzero(~own)
        keys = need[rest][need[rest] >= 0]
        # the nodes and E between them in one batch
        nf = self._nodes(np.concatenate([keys, (iy * nx + ix)[own]]),
                         np.concatenate([np.zeros(len(keys), bool), reference[own]]),
                         np.concatenate([np.zeros(len(keys), bool), np.full(int(own.sum()), exact)]),
                         self.sheet.where(iy[rest], ix[rest]) if len(rest) else None)
        e = np.empty((len(iy), nz, 3), complex)
        h = np.empty((len(iy), nz, 3), complex)
        if len(rest):
            e[rest] = nf.e_v_per_m.reshape(len(rest), nz, 3)

            def node(k: np.ndarray) -> np.ndarray:
                return np.stack([self._h[int(v)] for v in k])

            acc = np.zeros((len(rest), nz, 3), complex)
            for a, b in terms:
                w = wy[rest, a] * wx[rest, b]
                on = w != 0
                if on.any():
                    acc[on] += w[on, None, None] * node(ky[rest, a][on] * nx + kx[rest, b][on])
            h[rest] = acc
        for k in np.flatnonzero(own):
            key = int(iy[k] * nx + ix[k])
            e[k], h[k] = self._e[key], self._h[key]
        # a height whose interpolation met a masked node (beside a wire's exclusion): H by the reference curl at
        # that point alone (its E is computed; the column is not a node, so its H is not "computed" in full)
        live = np.isfinite(e).all(axis=2)
        rows, ks = np.nonzero(live & ~np.isfinite(h).all(axis=2))
        if len(rows):
            pts = self.sheet.base(iy[rows], ix[rows]) + np.outer(ks, (0.0, 0.0, self.sheet.dz_m))
            h[rows, ks] = near_fields_batch(self.model, [(pts, "curl")], self.power_w, self.jobs, CURL_STEP_M,
                                            self.progress)[0].h_a_per_m
        h[~np.isfinite(e).all(axis=2)] = np.nan  # masked, as E
        return e, h


def rms_magnitude(v: np.ndarray) -> np.ndarray:
    """|v| of complex vectors (N, 3) (already rms phasors): sqrt(sum |v_i|^2)."""
    return np.sqrt(np.sum(np.abs(v) ** 2, axis=-1))


# -- the low-wire regression check ------------------------------------------------------------

# A 10.6 m dipole, 21 segments, 1 mm radius, 0.43 m high, 14 MHz, ground eps_r 10, sigma
# 0.002 S/m. Debian's nec2c 1.3 gives 100.03 + j65.95 ohm for this deck; PyPI's pynec 2.3.4 gives
# 428 - j308 ohm (it mishandles wires lower than about 0.04 lambda over a finite ground).
LOW_WIRE_REFERENCE_OHM = complex(100.03, 65.95)


@functools.cache
def low_wire_check() -> complex:
    """Feed impedance the installed PyNEC gives for the low-wire regression deck [ohm]."""
    from antennas import Wire

    s = Structure("low-wire check", (Wire((-5.3, 0.0, 0.43), (5.3, 0.0, 0.43), 0.002, 21),), 0, 0.5)
    m = Model((s,), 0, 14.0, Ground("custom", 10.0, 0.002))
    return _build(m, check_engine=False)[1].feed_impedance_ohm


def engine_is_sound() -> bool:
    """True when the installed PyNEC passes the low-wire check within 1 %."""
    z = low_wire_check()
    return abs(z - LOW_WIRE_REFERENCE_OHM) <= 0.01 * abs(LOW_WIRE_REFERENCE_OHM)


def _require_sound_engine(model: Model) -> None:
    lowest_m = min(min(w.start_m[2], w.end_m[2]) for s in model.structures for w in s.wires)
    if lowest_m < 0.04 * model.wavelength_m and not engine_is_sound():
        raise EngineUnsoundError(
            "solve",
            model.name,
            f"the installed PyNEC gives {low_wire_check():.2f} ohm for the low-wire check deck "
            f"(reference {LOW_WIRE_REFERENCE_OHM} ohm from nec2c); it is wrong for wires below "
            "0.04 wavelength over a finite ground. Install pynec-accel (pip install pynec-accel).",
        )


# -- average gain test ------------------------------------------------------------------------


@functools.cache
def pattern_figures(structure: Structure, frequency_mhz: float, step_deg: float = 5.0) -> tuple[float, float]:
    """(Average Gain Test, maximum gain [dBi]) of a structure alone in free space, lossless.

    The AGT is the radiated power over the sphere / input power, from NEC's own averaging
    (RP card with the XNDA averaging flag) at ``step_deg``. A sound model gives 1 within about
    0.2 dB (common practice).
    """
    with _NEC_LOCK:
        return _pattern_figures(replace(structure, loads=()), frequency_mhz, step_deg)


def _pattern_figures(s: Structure, frequency_mhz: float, step_deg: float) -> tuple[float, float]:
    ctx, _ = _build(Model((s,), 0, frequency_mhz, Ground("free-space")))
    n_theta = int(round(180 / step_deg)) + 1
    n_phi = int(round(360 / step_deg)) + 1
    try:
        ctx.rp_card(0, n_theta, n_phi, 0, 0, 0, 1, 0.0, 0.0, step_deg, step_deg, 0.0, 0.0)
        rp = ctx.get_radiation_pattern(0)
        return float(rp.get_average_power_gain()), float(np.max(rp.get_gain()))
    except (RuntimeError, AttributeError) as err:
        raise EngineError("solve", s.name, str(err) or "radiation pattern failed") from err


def average_gain(structure: Structure, frequency_mhz: float) -> float:
    """Average Gain Test of a structure (see :func:`pattern_figures`)."""
    return pattern_figures(structure, frequency_mhz)[0]


# -- deck export ------------------------------------------------------------------------------


def nec_deck(model: Model, where: Lattice | None = None, comments: Sequence[str] = (), with_h: bool = True) -> str:
    """The NEC-2 card deck of a solve (CM/CE, GW, GE, GN, LD, EX, FR, NE, NH, EN).

    Runs in any NEC-2 engine (column-free format, as nec2c reads it). Excitation is 1 V peak;
    near fields are peak values at that excitation.
    """
    lines = [f"CM {c}" for c in comments] or ["CM nfmap deck"]
    lines.append(f"CM {model.name} at {model.frequency_mhz:g} MHz, ground {model.ground.describe()}")
    lines.append("CE")
    tags = _tags(model)
    for s, stags in zip(model.structures, tags, strict=True):
        for w, tag in zip(s.wires, stags, strict=True):
            coords = " ".join(f"{v:.6g}" for v in (*w.start_m, *w.end_m))
            lines.append(f"GW {tag} {w.segments} {coords} {w.radius_m:.6g}")
    lines.append(f"GE {1 if model.ground.over_ground else 0}")
    if model.ground.finite:
        lines.append(f"GN 2 0 0 0 {model.ground.permittivity:.6g} {model.ground.conductivity_s_per_m:.6g}")
    elif model.ground.kind == "perfect":
        lines.append("GN 1")
    for k, (s, stags) in enumerate(zip(model.structures, tags, strict=True)):
        for ld in s.loads:
            seg = segment_at(s.wires[ld.wire].segments, ld.at)
            lines.append(f"LD 4 {stags[ld.wire]} {seg} {seg} {ld.resistance_ohm:.6g} {ld.reactance_ohm:.6g}")
        if k != model.active:
            seg = s.feed_segment()
            lines.append(f"LD 4 {stags[s.feed_wire]} {seg} {seg} {model.passive_load_ohm:.6g} 0")
    lines.append(f"FR 0 1 0 0 {model.frequency_mhz:.9g} 0")
    active = model.structures[model.active]
    lines.append(f"EX 0 {tags[model.active][active.feed_wire]} {active.feed_segment()} 0 1 0")
    if where is not None:
        (x0, y0, z0), (dx, dy, dz), (nx, ny, nz) = where.origin_m, where.step_m, where.shape
        grid = f"0 {nx} {ny} {nz} {x0:.6g} {y0:.6g} {z0:.6g} {dx:.6g} {dy:.6g} {dz:.6g}"
        lines.append(f"NE {grid}")
        if with_h:
            lines.append(f"NH {grid}")
    else:
        lines.append("XQ")
    lines.append("EN")
    return "\n".join(lines) + "\n"
