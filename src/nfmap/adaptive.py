"""Adaptive plan lattice: NEC points only where the answer changes.

A level's plan lattice (spacing d) is first evaluated on a coarse sub-lattice (every ``stride``-th
row and column, and the last ones). Each coarse cell is then refined to the full spacing (every
plan point inside it evaluated) when

* a corner is masked (too close to a wire), or it holds ``hard`` points (the caller's choice: plan points within
  ``WIRE_REACH_M``, or two spacings, of any wire where people are judged; the field changes on the scale of the
  spacing there);
* its corners' ratios straddle a level that is drawn or judged (``levels``);
* it holds an area edge, a line or a floor edge (``soft``) and its ratio reaches ``EDGE_FLOOR``;
* the interpolation misses: the centre of every cell not refined is evaluated and compared with
  the value interpolated from the corners; more than ``TOLERANCE`` of the ratio (plus
  ``FLOOR``; ``DRAWN_TOLERANCE`` in a cell that holds no judged point, whose ratios are only drawn in bands
  and contours, which the level rule resolves) refines the cell; and after refinement a cell whose evaluated boundary points
  (shared with refined neighbours) straddle a level or miss the interpolation is refined too.

Each area's worst point is then made an evaluated one (``settle_worst``): the highest interpolated
points of an area are evaluated until its worst is a point NEC computed.

The points of cells not refined take log-bilinear interpolation of the corners' field
quantities (E and H along the body line: smooth, positive, decaying as powers of distance) about
a ``trend`` (the log of the inverse square of the distance from the fed antenna's feed, so that
the interpolated part varies slowly near the source), so tiers, areas and lines are judged on
exact geometry. ``refine`` knows nothing of antennas or
standards: it takes an evaluation function and a ratio function.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

COARSE_M = 4.0  # the coarse spacing aimed at [m]
TOLERANCE = 0.005  # interpolated ratio within 0.5 % of the evaluated one at the centres ...
FLOOR = 1e-3  # ... plus this where both read below the lowest level drawn (0.1): 1 % of it; a ratio far below
# every level needs no fine spacing (at and above it the share alone)
DRAWN_TOLERANCE = 0.05  # ... or 5 % in cells where nothing is judged (only drawn: a not-accessible area, a section)
DRAWN_FLOOR = 0.005  # ... plus this, below the lowest level drawn (5 % of it)
EDGE_FLOOR = 0.05  # area, line and floor edges are refined where the ratio reaches this
MAX_ROUNDS = 4
WIRE_REACH_M = 1.0  # plan points this close to a wire (or two spacings, if more) are evaluated in full
LEVELS = (0.1, 0.5, 1.0)  # the levels judged (1, 0.5) and the lowest drawn (0.1): their contours are resolved

Values = dict[str, np.ndarray]


@dataclass(frozen=True)
class Refined:
    """The filled plan maps (each (ny, nx); NaN masked), which plan points were evaluated, and
    how many (plan points, not heights)."""

    values: Values
    evaluated: np.ndarray
    plan_points: int
    final: np.ndarray | None = None  # the points whose values are final (settle_worst's; None: the evaluated ones)


def stride_for(spacing_m: float) -> int:
    """Coarse stride in plan points: about ``COARSE_M``, at least 2."""
    return max(2, int(round(COARSE_M / spacing_m)))


def settle_worst(got: Refined, evaluate, ratio, labels: np.ndarray, per_round: int = 8, rounds: int = 6,
                 final: np.ndarray | None = None) -> Refined:
    """Evaluate each labelled region's worst points until its worst is an evaluated point, never an
    interpolated one (``labels``: an int map, -2 outside every region). Each round evaluates a region's
    highest points not yet final that read above its highest final one, at most ``per_round`` of them, doubled
    every round, for at most ``rounds`` rounds; the filled values are updated in place. ``final``: the points whose
    values are final (default: those evaluated), when an evaluation can itself hold interpolated parts."""
    values = got.values
    done = (got.evaluated if final is None else final).copy()
    iy_all, ix_all = np.indices(done.shape)
    for round_ in range(rounds):
        r = ratio({k: v.ravel() for k, v in values.items()}, iy_all.ravel(), ix_all.ravel()).reshape(done.shape)
        flat = unsettled(r, done, labels, per_round << round_)
        if not len(flat):
            break
        iy, ix = np.divmod(flat, done.shape[1])
        new = evaluate(iy, ix)
        for name, v in new.items():
            values[name][iy, ix] = v
        done[iy, ix] = True
    evaluated = got.evaluated | done
    return Refined(values, evaluated, int(evaluated.sum()), done)


def unsettled(r: np.ndarray, done: np.ndarray, labels: np.ndarray, most: int) -> np.ndarray:
    """Flat indices of the points to evaluate next so that each labelled region's worst of ``r`` (NaN: masked)
    is a final one (``done``): in a region whose worst is not final, its highest points not final that read above
    its highest final one, at most ``most`` a region."""
    out = []
    for lab in np.unique(labels[labels > -2]):
        inside = (labels == lab) & np.isfinite(r)
        if not inside.any():
            continue
        if done[inside & (r == np.max(r[inside]))].any():
            continue
        settled = r[inside & done]
        cand = np.flatnonzero((inside & ~done & (r > (settled.max() if settled.size else -np.inf))).ravel())
        out.append(cand[np.argsort(r.ravel()[cand])[::-1][:most]])
    return np.concatenate(out) if out else np.zeros(0, int)


def inverse_square_trend(distance_m: np.ndarray, floor_m: float) -> np.ndarray:
    """The ``trend`` of a field falling off as the inverse square of the distance from its source (floored)."""
    return -2.0 * np.log(np.maximum(distance_m, floor_m))


def _blend(c: list[np.ndarray], ty: np.ndarray, tx: np.ndarray) -> np.ndarray:
    """Bilinear blend of four corner values (y0x0, y0x1, y1x0, y1x1) at fractions ``ty``, ``tx``."""
    return c[0] * (1 - ty) * (1 - tx) + c[1] * (1 - ty) * tx + c[2] * ty * (1 - tx) + c[3] * ty * tx


def _coarse(n: int, stride: int) -> np.ndarray:
    return np.unique(np.r_[np.arange(0, n, stride), n - 1])


def refine(
    shape: tuple[int, int],
    evaluate: Callable[[np.ndarray, np.ndarray], Values],
    ratio: Callable[[Values, np.ndarray, np.ndarray], np.ndarray],
    levels: tuple[float, ...],
    stride: int,
    hard: np.ndarray | None = None,
    soft: np.ndarray | None = None,
    trend: np.ndarray | None = None,
    judged: np.ndarray | None = None,
) -> Refined:
    """Evaluate a plan of ``shape`` (ny, nx) adaptively (see the module docstring).

    Parameters
    ----------
    evaluate : (iy, ix) -> {name: array (n,)}
        Field quantities (positive; NaN where masked) at plan points.
    ratio : (values, iy, ix) -> array (n,)
        The ratio judged at those points from those quantities.
    levels : ratios drawn or judged (contours must be resolved)
    stride : the coarse cells' size in plan points
    hard, soft : bool (ny, nx)
        Points that refine their cell always (wire neighbourhoods) or where the ratio reaches
        ``EDGE_FLOOR`` (area, line and floor edges).
    trend : float (ny, nx)
        The expected log of the quantities' shape (e.g. -2 log of the distance to the fed wires):
        interpolation is of log(value) - trend, which varies more slowly near a source.
    judged : bool (ny, nx)
        Points whose ratios are judged (default: all); a cell holding none is only drawn and takes
        ``DRAWN_TOLERANCE``.
    """
    ny, nx = shape
    trend = np.zeros(shape) if trend is None else np.asarray(trend, float)
    hard_sum = _prefix(np.zeros(shape, bool) if hard is None else hard)
    soft_sum = _prefix(np.zeros(shape, bool) if soft is None else soft)
    judged_sum = _prefix(np.ones(shape, bool) if judged is None else judged)
    values: Values = {}
    done = np.zeros(shape, bool)
    rmap = np.full(shape, np.nan)

    def run(iy, ix) -> None:
        iy, ix = np.asarray(iy, int), np.asarray(ix, int)
        take = ~done[iy, ix]
        iy, ix = iy[take], ix[take]
        if not len(iy):
            return
        keep = np.unique(iy * nx + ix)
        iy, ix = keep // nx, keep % nx
        got = evaluate(iy, ix)
        for name, v in got.items():
            values.setdefault(name, np.full(shape, np.nan))[iy, ix] = v
        rmap[iy, ix] = ratio(got, iy, ix)
        done[iy, ix] = True

    cy, cx = _coarse(ny, stride), _coarse(nx, stride)
    if len(cy) < 2 or len(cx) < 2:
        iy, ix = np.indices(shape)
        run(iy.ravel(), ix.ravel())
        return Refined(values, done, int(done.sum()))
    # boxes (y0, y1, x0, x1), inclusive corner indices
    active = [(cy[j], cy[j + 1], cx[i], cx[i + 1]) for j in range(len(cy) - 1) for i in range(len(cx) - 1)]
    leaves: list[tuple[int, int, int, int]] = []
    for _ in range(MAX_ROUNDS):
        while active:
            # corners and centres in one call (a centre is a corner of the quarters if the cell is split)
            run([b[k] for b in active for k in (0, 0, 1, 1)] + [(b[0] + b[1]) // 2 for b in active],
                [b[k] for b in active for k in (2, 3, 2, 3)] + [(b[2] + b[3]) // 2 for b in active])
            split, check = [], []
            for b in active:
                y0, y1, x0, x1 = b
                if y1 - y0 <= 1 and x1 - x0 <= 1:
                    continue  # every point of it is a corner: exact
                r = rmap[[y0, y0, y1, y1], [x0, x1, x0, x1]]
                if np.isnan(r).any() or _count(hard_sum, b) or _decisive(r, levels) or (
                        _count(soft_sum, b) and r.max() >= EDGE_FLOOR):
                    split.append(b)
                else:
                    check.append(b)
            for b, miss in zip(check, _misses(values, rmap, done, check, ratio, levels, trend, judged_sum), strict=True):
                (split if miss else leaves).append(b)
            active = [c for b in split for c in _quarters(b)]
        # a leaf whose points now known (on edges shared with refined neighbours) it does not reproduce
        reopen = [b for b, miss in zip(leaves, _misses(values, rmap, done, leaves, ratio, levels, trend, judged_sum), strict=True) if miss]
        if not reopen:
            break
        leaves = [b for b in leaves if b not in set(reopen)]
        active = [c for b in reopen for c in _quarters(b)]
    # cells still open after the last round are evaluated in full
    if active:
        blocks = [np.mgrid[y0 : y1 + 1, x0 : x1 + 1].reshape(2, -1) for y0, y1, x0, x1 in active]
        run(*np.concatenate(blocks, axis=1))
    _fill(values, done, leaves, trend)
    return Refined(values, done, int(done.sum()))


def _quarters(b: tuple[int, int, int, int]) -> list[tuple[int, int, int, int]]:
    y0, y1, x0, x1 = b
    ym, xm = (y0 + y1) // 2, (x0 + x1) // 2
    ys = [(y0, ym), (ym, y1)] if y1 - y0 > 1 else [(y0, y1)]
    xs = [(x0, xm), (xm, x1)] if x1 - x0 > 1 else [(x0, x1)]
    return [(a, c, d, e) for a, c in ys for d, e in xs]


def _prefix(a: np.ndarray) -> np.ndarray:
    out = np.zeros((a.shape[0] + 1, a.shape[1] + 1), int)
    out[1:, 1:] = np.cumsum(np.cumsum(a, axis=0), axis=1)
    return out


def _count(pre: np.ndarray, b: tuple[int, int, int, int]) -> int:
    """How many flagged points a box holds (from a 2-D prefix sum)."""
    y0, y1, x0, x1 = b[0], b[1] + 1, b[2], b[3] + 1
    return int(pre[y1, x1] - pre[y0, x1] - pre[y1, x0] + pre[y0, x0])


def _decisive(r: np.ndarray, levels: tuple[float, ...]) -> bool:
    """Ratios that straddle a level (NaN: never called with)."""
    lo, hi = float(np.min(r)), float(np.max(r))
    return any(lo < lv <= hi for lv in levels)


def _misses(values: Values, rmap, done, boxes: list, ratio, levels, trend, judged_sum) -> list[bool]:
    """For each box: True when its evaluated points (centre, edges shared with refined neighbours) straddle
    a level or are masked, or are not reproduced by interpolation from its corners (within ``TOLERANCE``, or
    ``DRAWN_TOLERANCE`` in a box without a judged point: ``judged_sum``, a prefix sum).
    One call of ``ratio`` for all boxes."""
    if not boxes:
        return []
    owner, iy_all, ix_all, ty_all, tx_all = [], [], [], [], []
    for k, (y0, y1, x0, x1) in enumerate(boxes):
        iy, ix = np.nonzero(done[y0 : y1 + 1, x0 : x1 + 1])
        owner.append(np.full(len(iy), k))
        iy_all.append(iy + y0)
        ix_all.append(ix + x0)
        ty_all.append(iy / (y1 - y0) if y1 > y0 else 0.0 * iy)
        tx_all.append(ix / (x1 - x0) if x1 > x0 else 0.0 * ix)
    owner, iy, ix = np.concatenate(owner), np.concatenate(iy_all), np.concatenate(ix_all)
    ty, tx = np.concatenate(ty_all), np.concatenate(tx_all)
    b = np.asarray(boxes)[owner]  # each point's box
    guess = {}
    corners = ((b[:, 0], b[:, 2]), (b[:, 0], b[:, 3]), (b[:, 1], b[:, 2]), (b[:, 1], b[:, 3]))
    for name, v in values.items():
        c = [np.log(np.maximum(v[yy, xx], 1e-300)) - trend[yy, xx] for yy, xx in corners]
        guess[name] = np.exp(_blend(c, ty, tx) + trend[iy, ix])
    r = rmap[iy, ix]
    judged = np.array([_count(judged_sum, box) > 0 for box in boxes])[owner]
    tol = np.where(judged, TOLERANCE, DRAWN_TOLERANCE)
    r_guess = ratio(guess, iy, ix)
    # the floor only where both read below every level drawn or judged: at and above the lowest, the share alone
    floor = np.where(np.fmax(r, r_guess) < min(levels), np.where(judged, FLOOR, DRAWN_FLOOR), 0.0)
    off = np.abs(r_guess - r) > tol * r + floor
    bad = np.isnan(r) | off
    n = len(boxes)
    lo = np.full(n, np.inf)
    hi = np.full(n, -np.inf)
    np.minimum.at(lo, owner, np.nan_to_num(r, nan=np.inf))
    np.maximum.at(hi, owner, np.nan_to_num(r, nan=-np.inf))
    miss = np.bincount(owner, weights=bad, minlength=n) > 0
    for lv in levels:
        miss |= (lo < lv) & (lv <= hi)
    return [bool(m) for m in miss]


def _fill(values: Values, done, leaves: list, trend: np.ndarray) -> None:
    """Log-bilinear interpolation (about the trend) of every point of the leaves not evaluated, from each
    leaf's four corners; leaves of one size at a time."""
    if not leaves:
        return
    boxes = np.asarray(leaves)
    dy, dx = boxes[:, 1] - boxes[:, 0], boxes[:, 3] - boxes[:, 2]
    for hy, wx in sorted(set(zip(dy.tolist(), dx.tolist(), strict=True))):
        b = boxes[(dy == hy) & (dx == wx)]
        oy, ox = np.mgrid[0 : hy + 1, 0 : wx + 1]
        iy, ix = b[:, 0, None, None] + oy, b[:, 2, None, None] + ox
        todo = ~done[iy, ix]
        if not todo.any():
            continue
        owner = np.broadcast_to(np.arange(len(b))[:, None, None], iy.shape)[todo]
        ty = np.broadcast_to(oy / hy if hy else 0.0 * oy, iy.shape)[todo]
        tx = np.broadcast_to(ox / wx if wx else 0.0 * ox, iy.shape)[todo]
        iy, ix, b = iy[todo], ix[todo], b[owner]
        corners = ((b[:, 0], b[:, 2]), (b[:, 0], b[:, 3]), (b[:, 1], b[:, 2]), (b[:, 1], b[:, 3]))
        for v in values.values():
            c = [np.log(np.maximum(v[yy, xx], 1e-300)) - trend[yy, xx] for yy, xx in corners]
            v[iy, ix] = np.exp(_blend(c, ty, tx) + trend[iy, ix])


def isolated_h_spike(pl, t, area) -> bool:
    """True when an area's worst point (``area`` of transmission result ``t`` on plan ``pl``) is an isolated
    spike of H: H governs there and the ratio is more than 10 % above the median of its eight neighbours.
    NEC-2's Sommerfeld interpolation steps E by up to about 1 % across its cells; the reference's 2 cm stencil
    turns a step inside it into such a spike (see :mod:`nfmap.engine`). For comparisons with
    ``exhaustive=True``: such a worst point is an artefact of the reference, not held against another answer."""
    if area.where_m is None or area.governing != "H":
        return False
    iy = int(np.argmin(np.abs(pl.y_m - area.where_m[1])))
    ix = int(np.argmin(np.abs(pl.x_m - area.where_m[0])))
    for lv in t.levels:
        r = lv.ratio
        if 0 < iy < r.shape[0] - 1 and 0 < ix < r.shape[1] - 1 and np.isclose(r[iy, ix], area.max_ratio):
            around = np.delete(r[iy - 1 : iy + 2, ix - 1 : ix + 2].ravel(), 4)
            return bool(r[iy, ix] > 1.1 * np.nanmedian(around))
    return False
