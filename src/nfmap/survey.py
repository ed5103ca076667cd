"""Field readings against the model: a meter and a probe antenna at a few points, the model at the same points.

Each reading (a row of the readings CSV) is converted to the quantity its probe senses, E for an
electric probe, H for a loop (in the near field a loop does not measure E), with the conversions of
``exposure.readings``. The model gives the same quantity at the same point for the transmission's
antenna fed with the test power as a steady carrier (duty 1, fraction 1), less the site's feedline loss.

Readings CSV (header row): ``x_m,y_m,z_m,transmission,power_w,reading,unit,antenna_factor_db,
cable_loss_db,probe``; ``unit`` one of ``dbm``, ``dbuv`` (need the antenna factor), ``dbuv_per_m``,
``v_per_m`` (a field already; with a loop, its electric equivalent), ``a_per_m`` (loop only).
"""

from __future__ import annotations

import csv
import math
import statistics
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import assess, engine
from .exposure import readings
from .exposure.ratios import ETA0_OHM
from .site import Site

COLUMNS = ("x_m", "y_m", "z_m", "transmission", "power_w", "reading", "unit", "antenna_factor_db",
           "cable_loss_db", "probe")
UNITS = ("dbm", "dbuv", "dbuv_per_m", "v_per_m", "a_per_m")
PROBES = ("e", "h")
AGREE_DB = (3.0, 6.0)  # within 3 dB: agrees; within 6 dB: agrees loosely; beyond: disagrees


class SurveyError(ValueError):
    """The readings file cannot be used at all (not found, not CSV, wrong header)."""


@dataclass(frozen=True)
class Reading:
    line: int
    x_m: float
    y_m: float
    z_m: float
    transmission: str
    power_w: float
    reading: float
    unit: str
    antenna_factor_db: float | None
    cable_loss_db: float
    probe: str

    def measured(self) -> float:
        """The quantity the probe senses: E [V/m] for an electric probe, H [A/m] for a loop."""
        if self.unit in ("dbm", "dbuv"):
            dbuv = float(readings.dbm_to_dbuv(self.reading)) if self.unit == "dbm" else self.reading
            field = float(readings.db_micro_to_si(readings.dbuv_to_dbuv_per_m(dbuv, self.antenna_factor_db,
                                                                             self.cable_loss_db)))
        elif self.unit == "dbuv_per_m":
            field = float(readings.db_micro_to_si(self.reading))
        elif self.unit == "v_per_m":
            field = self.reading
        else:  # a_per_m: H itself
            return self.reading
        return field if self.probe == "e" else field / ETA0_OHM  # a loop's electric equivalent -> H


@dataclass(frozen=True)
class Comparison:
    reading: Reading
    quantity: str  # "E" or "H"
    measured: float  # V/m or A/m
    model: float
    difference_db: float  # 20 log10(measured / model)
    verdict: str  # "agrees within 3 dB" | "agrees within 6 dB" | "disagrees"


@dataclass(frozen=True)
class Survey:
    site: Site
    path: str
    rows: tuple[Comparison, ...]
    problems: tuple[str, ...]  # skipped rows, one line each with the line number

    @property
    def median_db(self) -> float | None:
        return statistics.median(c.difference_db for c in self.rows) if self.rows else None

    @property
    def max_abs_db(self) -> float | None:
        return max(abs(c.difference_db) for c in self.rows) if self.rows else None


def _number(text: str, what: str, line: int, path: str, problems: list[str], required: bool = True):
    text = (text or "").strip()
    if not text:
        if required:
            problems.append(f"{path}: line {line}: {what}: missing; allowed: a number")
        return None
    try:
        v = float(text)
    except ValueError:
        problems.append(f"{path}: line {line}: {what}: found {text!r}; allowed: a number")
        return None
    if not math.isfinite(v):
        problems.append(f"{path}: line {line}: {what}: found {text!r}; allowed: a finite number")
        return None
    return v


def read(path: str | Path, site: Site) -> tuple[list[Reading], list[str]]:
    """The readings of a CSV file and the problems of the rows skipped (line numbers count the header as 1)."""
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as err:
        raise SurveyError(f"{name}: cannot read the file ({err.strerror})") from None
    except UnicodeDecodeError:
        raise SurveyError(f"{name}: not a text (UTF-8) CSV file") from None
    rows = list(csv.reader(text.splitlines()))
    if not rows:
        raise SurveyError(f"{name}: empty; allowed: a header row {','.join(COLUMNS)} and one reading a row")
    header = [h.strip() for h in rows[0]]
    missing = [c for c in COLUMNS if c not in header]
    if missing:
        raise SurveyError(f"{name}: line 1: header lacks {', '.join(missing)}; allowed: {','.join(COLUMNS)}")
    col = {c: header.index(c) for c in COLUMNS}
    names = [t.name for t in site.transmissions]
    out, problems = [], []
    for k, row in enumerate(rows[1:], start=2):
        if not any(cell.strip() for cell in row):
            continue
        cell = {c: (row[i] if i < len(row) else "") for c, i in col.items()}
        bad = len(problems)
        x = _number(cell["x_m"], "x_m", k, name, problems)
        y = _number(cell["y_m"], "y_m", k, name, problems)
        z = _number(cell["z_m"], "z_m", k, name, problems)
        p = _number(cell["power_w"], "power_w", k, name, problems)
        value = _number(cell["reading"], "reading", k, name, problems)
        unit = cell["unit"].strip().lower()
        probe = cell["probe"].strip().lower()
        tx = cell["transmission"].strip()
        af = _number(cell["antenna_factor_db"], "antenna_factor_db", k, name, problems, required=False)
        loss = _number(cell["cable_loss_db"], "cable_loss_db", k, name, problems, required=False) or 0.0
        if tx not in names:
            problems.append(f"{name}: line {k}: transmission: no transmission named {tx!r} in the site file; "
                            f"allowed: {', '.join(names)}")
        if unit not in UNITS:
            problems.append(f"{name}: line {k}: unit: found {unit!r}; allowed: {', '.join(UNITS)}")
        if probe not in PROBES:
            problems.append(f"{name}: line {k}: probe: found {probe!r}; allowed: e (electric), h (loop)")
        if unit in ("dbm", "dbuv") and af is None:
            problems.append(f"{name}: line {k}: antenna_factor_db: missing; a {unit} reading needs the probe's "
                            "antenna factor [dB/m]")
        if unit == "a_per_m" and probe == "e":
            problems.append(f"{name}: line {k}: unit: a_per_m is a loop's reading; allowed with probe h only")
        if p is not None and not p > 0:
            problems.append(f"{name}: line {k}: power_w: found {p:g}; allowed: a carrier power > 0 W")
        if unit in ("v_per_m", "a_per_m") and value is not None and not value > 0:
            problems.append(f"{name}: line {k}: reading: found {value:g}; allowed: a field strength > 0")
        if loss < 0:
            problems.append(f"{name}: line {k}: cable_loss_db: found {loss:g}; allowed: >= 0 dB")
        if len(problems) == bad:
            out.append(Reading(k, x, y, z, tx, p, value, unit, af, loss, probe))
    return out, problems


def compare(site: Site, path: str, rows: list[Reading], problems: list[str]) -> Survey:
    """The model at every reading's point and transmission, at the reading's carrier power (see the module docstring)."""
    problems = list(problems)
    out = []
    for t in site.transmissions:
        mine = [r for r in rows if r.transmission == t.name]
        if not mine:
            continue
        model = assess.model_for(site, t.name)
        pts = np.array([[r.x_m, r.y_m, r.z_m] for r in mine])
        loss = 10 ** (-t.feedline_loss_db / 10)
        unit = engine.near_fields(model, pts, 1.0)  # 1 W accepted; fields scale with sqrt(power)
        e = engine.rms_magnitude(unit.e_v_per_m)
        h = engine.rms_magnitude(unit.h_a_per_m)
        for k, r in enumerate(mine):
            if unit.masked[k]:
                problems.append(f"{path}: line {r.line}: ({r.x_m:g}, {r.y_m:g}, {r.z_m:g}) m is within a wire's "
                                "exclusion distance (or below ground): the model gives no value there; skipped")
                continue
            scale = math.sqrt(r.power_w * loss)
            quantity = "E" if r.probe == "e" else "H"
            model_value = float((e if quantity == "E" else h)[k]) * scale
            measured = r.measured()
            diff = 20 * math.log10(measured / model_value)
            verdict = ("agrees within 3 dB" if abs(diff) <= AGREE_DB[0] else
                       "agrees within 6 dB" if abs(diff) <= AGREE_DB[1] else "disagrees")
            out.append(Comparison(r, quantity, measured, model_value, diff, verdict))
    out.sort(key=lambda c: c.reading.line)
    problems.sort(key=_line_of)
    return Survey(site, path, tuple(out), tuple(problems))


def _line_of(problem: str) -> int:
    try:
        return int(problem.split(": line ", 1)[1].split(":", 1)[0])
    except (IndexError, ValueError):
        return 0


def offset_sentence(s: Survey) -> str:
    """What the spread of the differences says, in a sentence or two."""
    if not s.rows:
        return "No reading could be compared with the model."
    med, worst = s.median_db, s.max_abs_db
    text = (f"Median difference (measured - model) {med:+.1f} dB over {len(s.rows)} reading"
            f"{'s' if len(s.rows) != 1 else ''}; the largest {worst:.1f} dB. ")
    spread = max(abs(c.difference_db - med) for c in s.rows)
    if abs(med) > AGREE_DB[0] and spread <= AGREE_DB[0]:
        text += ("The readings sit off the model by about the same amount: a systematic offset usually means a wrong "
                 "antenna factor or cable loss, a transmitter power other than assumed (or not a steady carrier), "
                 "or a conductor near the point that is not in the model (gutter, fence wire, mast guy).")
    elif spread > AGREE_DB[1]:
        text += ("The differences scatter by more than 6 dB: look for readings taken very close to a wire or to metal "
                 "objects, probes held at other heights than the readings file gives, or a probe sensing the other field (E or H).")
    else:
        text += "The model and the readings agree as well as a simple meter and probe allow."
    return text


def reading_for(model_field: float, r: Reading) -> float:
    """The meter value (in the reading's own unit) a field would give: the inverse of :meth:`Reading.measured`."""
    field = model_field if r.probe == "e" or r.unit == "a_per_m" else model_field * ETA0_OHM
    if r.unit == "a_per_m" or r.unit == "v_per_m":
        return field
    db = float(readings.si_to_db_micro(field))
    if r.unit == "dbuv_per_m":
        return db
    dbuv = db - r.antenna_factor_db - r.cable_loss_db
    return dbuv if r.unit == "dbuv" else dbuv - float(readings.dbm_to_dbuv(0.0))
