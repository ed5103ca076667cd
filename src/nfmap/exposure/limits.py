"""Reference levels (limits) of ICNIRP 2020, ICNIRP 1998 and US FCC 47 CFR 1.1310.

The tables are data: ``data/<standard>-<exposure>.csv``, one row a frequency band with the
formula of each quantity as ``coef * f^exp`` (f in MHz), and a header naming the document,
edition and table, the averaging time and which band owns an edge frequency.
"""

from __future__ import annotations

import csv
import functools
from dataclasses import dataclass
from importlib import resources

import numpy as np

STANDARDS = ("icnirp-2020", "icnirp-1998", "fcc-1310")
EXPOSURES = ("public", "occupational")
STANDARD_TITLES = {
    "icnirp-2020": "ICNIRP 2020 (Health Phys. 118(5):483-524), Tables 5 and 6, with the ICNIRP 2010 levels to 10 MHz",
    "icnirp-1998": "ICNIRP 1998 (Health Phys. 74(4):494-522), Tables 6 and 7",
    "fcc-1310": "US FCC 47 CFR 1.1310, Table 1",
}


def exposure_title(standard: str, exposure: str) -> str:
    """The tier's name as the standard writes it."""
    if standard == "fcc-1310":
        return {"public": "general population / uncontrolled", "occupational": "occupational / controlled"}[exposure]
    return {"public": "general public", "occupational": "occupational"}[exposure]


@dataclass(frozen=True)
class Band:
    from_mhz: float
    to_mhz: float
    e: tuple[float, float] | None  # (coef, exp): E = coef f^exp [V/m]
    h: tuple[float, float] | None  # [A/m]
    s: tuple[float, float] | None  # [W/m^2]
    s_equivalent: bool = False  # S is a plane-wave equivalent only (not applied)


@dataclass(frozen=True)
class Table:
    standard: str
    exposure: str
    source: str
    averaging_min: float | None
    edge: str  # "lower": an edge belongs to the band below; "stricter": the stricter value applies
    bands: tuple[Band, ...]

    @property
    def from_mhz(self) -> float:
        return self.bands[0].from_mhz

    @property
    def to_mhz(self) -> float:
        return self.bands[-1].to_mhz


@dataclass(frozen=True)
class Limits:
    """Limits at frequencies (arrays; NaN where the standard gives no value)."""

    frequency_mhz: np.ndarray
    e_v_per_m: np.ndarray
    h_a_per_m: np.ndarray
    s_w_per_m2: np.ndarray  # applied S (NaN where S is only a plane-wave equivalent)
    s_equivalent_w_per_m2: np.ndarray  # S as printed, including plane-wave equivalents
    averaging_min: float | None


def check_ids(standard: str, exposure: str) -> None:
    if standard not in STANDARDS:
        raise ValueError(f"unknown standard {standard!r}; valid: {', '.join(STANDARDS)}")
    if exposure not in EXPOSURES:
        raise ValueError(f"unknown exposure {exposure!r}; valid: {', '.join(EXPOSURES)}")


# Tables of the standards' other checks (see ``checks.py``), beside each standard's main table.
EXTRA_TABLES = ("icnirp-2020-local", "icnirp-2010-stimulation", "icnirp-1998-stimulation")


@functools.cache
def table(standard: str, exposure: str) -> Table:
    """The band table of a standard (or of one of ``EXTRA_TABLES``) and tier, from the package data."""
    if standard not in EXTRA_TABLES:
        check_ids(standard, exposure)
    elif exposure not in EXPOSURES:
        check_ids("icnirp-2020", exposure)
    text = resources.files("nfmap.exposure").joinpath(f"data/{standard}-{exposure}.csv").read_text()
    header = [line[1:].strip() for line in text.splitlines() if line.startswith("#")]
    meta = {k.strip(): v.strip() for k, _, v in (h.partition(":") for h in header if ":" in h)}
    averaging = (meta.get("averaging_min") or "").split()
    edge = meta.get("edge", "stricter").split()[0]
    rows = csv.DictReader(line for line in text.splitlines() if not line.startswith("#"))

    def pair(row, q):
        c, e = row[f"{q}_coef"], row[f"{q}_exp"]
        return (float(c), float(e)) if c else None

    bands = tuple(
        Band(
            float(r["from_mhz"]),
            float(r["to_mhz"]),
            pair(r, "e"),
            pair(r, "h"),
            pair(r, "s"),
            r.get("s_equivalent", "0") == "1",
        )
        for r in rows
    )
    return Table(standard, exposure, " ".join(header[:2]), float(averaging[0]) if averaging else None, edge, bands)


def _value(pair, f):
    return np.nan if pair is None else pair[0] * f ** pair[1]


def limits(standard: str, exposure: str, frequency_mhz) -> Limits:
    """Reference levels at ``frequency_mhz`` (scalar or array).

    Parameters
    ----------
    standard : {"icnirp-2020", "icnirp-1998", "fcc-1310"}
    exposure : {"public", "occupational"}
    frequency_mhz : float or array [MHz]

    Returns
    -------
    Limits
        E [V/m], H [A/m], S [W/m^2] (NaN where not given) and the averaging time [min].

    Raises
    ------
    ValueError
        Unknown ids, or a frequency outside the table (never extrapolated).

    Notes
    -----
    At an edge frequency shared by two bands, a table with ``edge: lower`` takes the band below
    (ICNIRP 2020 writes ">30-400 MHz"); ``edge: stricter`` takes, per quantity, the smaller of
    the two bands' values (the document does not say; conservative).
    """
    return table_limits(table(standard, exposure), frequency_mhz)


def table_limits(tab: Table, frequency_mhz) -> Limits:
    """Levels of one band table at ``frequency_mhz`` (see :func:`limits`)."""
    standard, exposure = tab.standard, tab.exposure
    f = np.atleast_1d(np.asarray(frequency_mhz, float))
    bad = ~((f >= tab.from_mhz) & (f <= tab.to_mhz)) | ~np.isfinite(f)
    if bad.any():
        raise ValueError(
            f"{standard} {exposure}: {f[bad][0]:g} MHz is outside the table "
            f"({tab.from_mhz:g} to {tab.to_mhz:g} MHz); limits are never extrapolated"
        )
    out = {q: np.full(f.shape, np.nan) for q in ("e", "h", "s", "seq")}
    for k, fk in enumerate(f):
        matches = [b for b in tab.bands if b.from_mhz <= fk <= b.to_mhz]
        if len(matches) > 1 and tab.edge == "lower":
            matches = [b for b in matches if b.to_mhz == fk]
        vals = {q: [] for q in out}
        for b in matches:
            vals["e"].append(_value(b.e, fk))
            vals["h"].append(_value(b.h, fk))
            vals["seq"].append(_value(b.s, fk))
            vals["s"].append(np.nan if b.s_equivalent else _value(b.s, fk))
        for q, v in vals.items():
            v = [x for x in v if np.isfinite(x)]
            if v:
                out[q][k] = min(v)
    return Limits(f, out["e"], out["h"], out["s"], out["seq"], tab.averaging_min)


def band_rows(standard: str, exposure: str) -> list[dict]:
    """The band table as text formulas, for printing."""
    tab = table(standard, exposure)

    def text(pair, unit):
        if pair is None:
            return None
        c, e = pair
        coef = f"{c:.6g}"
        if e == 0:
            return f"{coef} {unit}"
        if e == 1:
            return f"{coef} f {unit}" if c != 1 else f"f {unit}"
        if e < 0:
            return f"{coef}/f^{-e:g} {unit}".replace("^1 ", " ")
        return f"{coef} f^{e:g} {unit}"

    rows = []
    for b in tab.bands:
        s = text(b.s, "W/m^2")
        if s and b.s_equivalent:
            s = f"({s}, plane-wave equivalent)"
        rows.append(
            {
                "standard": standard,
                "exposure": exposure,
                "from_mhz": b.from_mhz,
                "to_mhz": b.to_mhz,
                "e": text(b.e, "V/m"),
                "h": text(b.h, "A/m"),
                "s": s,
            }
        )
    return rows
