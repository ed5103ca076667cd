"""The ``nfmap`` command line: parse, call the orchestrator, print, set the exit code.

Exit codes: 0 done and every accessible area within limits; 1 done and some accessible area
over its limit; 2 bad input (one line naming the file, the key and the allowed values); 3 the
model could not be solved.
"""

from __future__ import annotations

import json
import math
import os
import sys
import warnings
from pathlib import Path

import click

from . import __version__

EXIT_OK, EXIT_OVER, EXIT_INPUT, EXIT_ENGINE = 0, 1, 2, 3


class InputError(click.ClickException):
    exit_code = EXIT_INPUT

    def show(self, file=None):
        click.echo(f"nfmap: error: {self.message}", err=True)


class SolveError(click.ClickException):
    exit_code = EXIT_ENGINE

    def show(self, file=None):
        click.echo(f"nfmap: model could not be solved: {self.message}", err=True)


def _json(obj) -> None:
    click.echo(json.dumps(obj, indent=2, default=_jsonable, allow_nan=False))


def _jsonable(v):
    import numpy as np

    if isinstance(v, np.generic):
        return v.item()
    if isinstance(v, np.ndarray):
        return v.tolist()
    if isinstance(v, Path):
        return str(v)
    raise TypeError(type(v))


def _nan_to_none(v):
    return None if v is None or (isinstance(v, float) and not math.isfinite(v)) else v


def _show_warning(message, category, filename, lineno, file=None, line=None):
    click.echo(f"nfmap: warning: {message}", err=True)


class _Group(click.Group):
    """Turns click's usage errors into the one-line form with exit code 2."""

    def main(self, args=None, prog_name=None, **kwargs):
        # one thread per process: --jobs decides how many cores work (PyNEC is imported later)
        for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
            os.environ.setdefault(var, "1")
        try:
            rv = super().main(args, prog_name or "nfmap", standalone_mode=False, **kwargs)
        except click.exceptions.Exit as err:
            sys.exit(err.exit_code)
        except click.UsageError as err:
            hint = f" (nfmap {err.ctx.command_path.split(' ', 1)[-1]} --help)" if err.ctx and " " in err.ctx.command_path else ""
            click.echo(f"nfmap: error: {err.format_message()}{hint}", err=True)
            sys.exit(EXIT_INPUT)
        except click.ClickException as err:
            err.show()
            sys.exit(err.exit_code)
        except click.Abort:
            click.echo("nfmap: aborted", err=True)
            sys.exit(130)
        except Exception as err:  # never a traceback for the user; NFMAP_DEBUG=1 shows it
            if os.environ.get("NFMAP_DEBUG"):
                raise
            click.echo(f"nfmap: internal error (a bug: please report it with the site file): "
                       f"{type(err).__name__}: {err}", err=True)
            sys.exit(EXIT_ENGINE)
        sys.exit(rv if isinstance(rv, int) else EXIT_OK)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="nfmap")
def main() -> None:
    """Near-field RF exposure maps around small transmitting stations (NEC-2).

    A model is not a measurement: results depend on the inputs and the modelling assumptions;
    local regulations and a qualified assessment prevail.
    """
    warnings.showwarning = _show_warning


# -- limits -----------------------------------------------------------------------------------


@main.command("limits")
@click.option("--standard", "standard", default="icnirp-2020", show_default=True, help="icnirp-2020 | icnirp-1998 | fcc-1310")
@click.option("--exposure", "exposure", default="public", show_default=True, help="public | occupational")
@click.option("--mhz", "mhz", type=float, multiple=True, help="frequency [MHz]; repeat for several")
@click.option("--json", "as_json", is_flag=True, help="print one JSON document")
def limits_cmd(standard, exposure, mhz, as_json):
    """Print the limits that will be applied: every check of the standard (band tables without --mhz)."""
    from .exposure import checks
    from .exposure import limits as lim

    try:
        lim.check_ids(standard, exposure)
        if not mhz:
            return _limit_tables(standard, exposure, as_json)
        for f in mhz:
            if not f > 0:
                raise ValueError(f"--mhz must be > 0, got {f:g}")
        lim.limits(standard, exposure, list(mhz))  # refuses a frequency outside the table
        out = []
        for f in mhz:
            for c in checks.checks_for(standard, f):
                res = checks.check_limits(c, exposure, f)
                out.append({
                    "standard": standard,
                    "exposure": exposure,
                    "check": c.id,
                    "check_title": c.title,
                    "frequency_mhz": float(f),
                    "e_v_per_m": _nan_to_none(float(res.e_v_per_m[0])),
                    "h_a_per_m": _nan_to_none(float(res.h_a_per_m[0])),
                    "s_w_per_m2": _nan_to_none(float(res.s_w_per_m2[0])),
                    "s_plane_wave_equivalent_w_per_m2": _nan_to_none(float(res.s_equivalent_w_per_m2[0]))
                    if not math.isfinite(float(res.s_w_per_m2[0])) else None,
                    "averaging_min": checks.window_min(c, exposure),
                    "envelope_peak": c.envelope,
                })
    except ValueError as err:
        raise InputError(str(err)) from None
    if as_json:
        return _json(out)
    click.echo(f"{lim.STANDARD_TITLES[standard]}: {lim.exposure_title(standard, exposure)}")
    for r in out:
        parts = [f"{r['frequency_mhz']:g} MHz {r['check']}:"]
        for key, unit in (("e_v_per_m", "V/m"), ("h_a_per_m", "A/m"), ("s_w_per_m2", "W/m^2")):
            parts.append(f"{key[0].upper()} {r[key]:.4g} {unit}" if r[key] is not None else f"{key[0].upper()} -")
        if r["s_plane_wave_equivalent_w_per_m2"] is not None:
            parts.append(f"(S {r['s_plane_wave_equivalent_w_per_m2']:.4g} W/m^2 plane-wave equivalent, not applied)")
        if r["envelope_peak"]:
            avg = "at the envelope peak, not time-averaged"
        else:
            avg = f"{r['averaging_min']:g} min average" if r["averaging_min"] else "averaging time not given"
        click.echo("  ".join(parts) + f"  ({avg})")
    return None


def _limit_tables(standard: str, exposure: str, as_json: bool):
    """The band tables of every check of a standard (the main table first)."""
    from .exposure import checks
    from .exposure import limits as lim

    seen, tables = set(), []
    for f in (0.1, 5.0, 50.0):  # every check of the standard applies at one of these
        for c in checks.checks_for(standard, f):
            if (c.id, c.table) not in seen:
                seen.add((c.id, c.table))
                tables.append(c)
    if as_json:
        return _json([dict(r, check=c.id) for c in tables for r in lim.band_rows(c.table, exposure)])
    for c in tables:
        tab = lim.table(c.table, exposure)
        click.echo(f"{c.id}: {c.title}; {lim.exposure_title(standard, exposure)}")
        avg = "at the envelope peak, not time-averaged" if c.envelope else (
            f"{tab.averaging_min:g} min average" if tab.averaging_min else "averaging time not given")
        click.echo(f"  {avg}; f in MHz; edge frequencies: {_edge_text(tab.edge)}")
        if c.peak_factor == "interpolated":
            click.echo("  each level is also capped at the peak factor (1.5 at 0.1 MHz to 32 at 10 MHz, linear) "
                       "times the whole-body table")
        if c.peak_factor == "32":
            click.echo("  32 x the whole-body table below, at the envelope peak")
            continue
        click.echo(f"  {'from':>9} {'to':>9}  {'E':<18} {'H':<18} S")
        for r in lim.band_rows(c.table, exposure):
            click.echo(f"  {r['from_mhz']:>9g} {r['to_mhz']:>9g}  {r['e'] or '-':<18} {r['h'] or '-':<18} {r['s'] or '-'}")
    return None


def _edge_text(edge: str) -> str:
    return "belong to the band below" if edge == "lower" else "the stricter of the two bands applies"


# -- reading ----------------------------------------------------------------------------------


@main.command("reading")
@click.option("--dbm", type=float, required=True, help="meter reading [dBm] into 50 ohm")
@click.option("--antenna-factor-db", type=float, help="electric antenna factor [dB/m] (for a loop: its E-equivalent factor)")
@click.option("--magnetic-factor-db", type=float, help="loop magnetic factor [dB S/m], instead of --antenna-factor-db")
@click.option("--cable-loss-db", type=float, default=0.0, show_default=True, help="cable loss [dB]")
@click.option("--probe", type=click.Choice(["e", "h"]), default="e", show_default=True, help="e: electric, h: loop")
@click.option("--json", "as_json", is_flag=True)
def reading_cmd(dbm, antenna_factor_db, magnetic_factor_db, cable_loss_db, probe, as_json):
    """Convert a meter reading to field strength."""
    from .exposure.readings import reading_to_field

    if magnetic_factor_db is not None and antenna_factor_db is None:
        probe = "h"
    try:
        res = reading_to_field(dbm, antenna_factor_db, cable_loss_db, probe, magnetic_factor_db)
    except ValueError as err:
        raise InputError(f"{err} (options --antenna-factor-db, --magnetic-factor-db, --cable-loss-db)") from None
    if as_json:
        return _json(res)
    click.echo(f"{res['dbm']:g} dBm = {res['dbuv']:.2f} dBuV (50 ohm)")
    from .exposure.readings import si_to_db_micro

    if res["e_v_per_m"] is not None:
        label = "E-equivalent" if probe == "h" else "E"
        click.echo(f"{label} = {res['e_v_per_m']:.4g} V/m ({float(si_to_db_micro(res['e_v_per_m'])):.2f} dBuV/m)")
    if res["h_a_per_m"] is not None:
        click.echo(f"H = {res['h_a_per_m']:.4g} A/m ({float(si_to_db_micro(res['h_a_per_m'])):.2f} dBuA/m)")
    click.echo(f"plane-wave equivalent S = {res['s_equiv_w_per_m2']:.3g} W/m^2")
    return None




# -- the site commands ------------------------------------------------------------------------


def _load(path: str):
    from .site import SiteError, load

    try:
        return load(path)
    except SiteError as err:
        for p in err.problems[:-1]:
            click.echo(f"nfmap: error: {p}", err=True)
        raise InputError(err.problems[-1]) from None


def _engine_errors(fn):
    """Run ``fn``, turning engine failures into exit 3 and geometry errors into exit 2."""
    from antennas import GeometryError

    from .engine import EngineError

    try:
        return fn()
    except EngineError as err:
        raise SolveError(str(err)) from None
    except GeometryError as err:
        raise InputError(str(err)) from None


def _default_jobs(jobs: int | None) -> int:
    cores = os.cpu_count() or 1
    if jobs is not None and jobs < 1:
        raise InputError(f"--jobs must be >= 1, got {jobs}")
    if jobs is not None and jobs > cores:
        click.echo(f"nfmap: warning: --jobs {jobs} is more than the {cores} cores here; using {cores}", err=True)
        return cores
    return jobs or cores


def _budget(site, jobs: int, large: bool, quiet: bool = False):
    """Estimate the work before any solve; refuse beyond the budget unless ``--large``."""
    from . import budget

    est = _engine_errors(lambda: budget.estimate(site))
    over = est.over()
    if over and not large:
        for o in over[:-1]:
            click.echo(f"nfmap: error: {site.path}: beyond the budget: {o}", err=True)
        raise InputError(f"{site.path}: beyond the budget: {over[-1]}; give --large to run it anyway "
                         f"(estimate: {est.describe(jobs)})")
    if not quiet:
        click.echo(f"estimate: {est.describe(jobs)}", err=True)
    return est


def _on_sigterm(signum, frame):
    click.echo("nfmap: stopped by a signal; the output folder was left as it was", err=True)
    raise SystemExit(143)


@main.command("run")
@click.argument("site_file", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), help="output folder [nfmap-out/<stem>]")
@click.option("--jobs", type=int, help="worker processes [all cores]")
@click.option("--force", is_flag=True, help="replace an output folder that an earlier run wrote")
@click.option("--large", is_flag=True, help="run beyond the size budget")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True, help="report page size")
@click.option("--quiet", is_flag=True, help="no progress")
@click.option("--exhaustive", is_flag=True,
              help="evaluate every lattice point (slower; the default evaluates only where the answer changes)")
def run_cmd(site_file, out_dir, jobs, force, large, paper, quiet, exhaustive):
    """The whole assessment: fields, ratios, area verdicts, maps, sections, report, data."""
    site = _load(site_file)
    out = Path(out_dir) if out_dir else Path("nfmap-out") / Path(site_file).stem
    return _run_site(site, out, _default_jobs(jobs), force, quiet, large, paper, exhaustive)


def _run_site(site, out: Path, jobs: int, force: bool, quiet: bool, large: bool = False, paper: str = "a4",
              exhaustive: bool = False) -> int:
    import signal

    from . import assess, budget, outfolder

    est = _budget(site, jobs, large, quiet)
    previous = signal.signal(signal.SIGTERM, _on_sigterm)
    try:
        with outfolder.reserved(out, force, int(est.output_bytes)) as res:
            for n in res.notes:
                click.echo(f"nfmap: {n}", err=True)
            with _progress(est.field_points, jobs, quiet, exhaustive) as bar:
                cap = None if large else budget.FIELD_POINTS_MAX
                a = _engine_errors(lambda: assess.assess(site, jobs=jobs, progress=bar.update, max_field_points=cap,
                                                         exhaustive=exhaustive))
            res.commit(lambda folder: _write_all(a, folder, paper),
                       {"site_file": Path(site.path).name, "site_sha256": site.sha256})
    except outfolder.OutputError as err:
        raise InputError(str(err)) from None
    except OSError as err:
        raise InputError(f"{out}: could not write the record ({err.strerror or err}); nothing was replaced") from None
    finally:
        signal.signal(signal.SIGTERM, previous)
    _summary(a, out)
    return EXIT_OVER if a.over else EXIT_OK


class _Null:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def update(self, n):
        pass


class _Lines:
    """Progress without a terminal: a line every few seconds with points done and time left."""

    def __init__(self, total: int, every_s: float = 5.0):
        import time

        self.total, self.every_s, self.done, self.clock = max(total, 1), every_s, 0, time.monotonic
        self.start = self.last = self.clock()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def update(self, n: int) -> None:
        self.done += n
        self.total = max(self.total, self.done)  # a lattice grown to cover the exposure adds points
        now = self.clock()
        if now - self.last >= self.every_s or self.done >= self.total:
            self.last = now
            rate = self.done / max(now - self.start, 1e-9)
            left = (self.total - self.done) / rate if rate > 0 else float("inf")
            click.echo(f"near fields: {self.done:,} of {self.total:,} points ({100 * self.done / self.total:.0f} %), "
                       f"about {left:.0f} s left", err=True)


def _progress(total: int, jobs: int, quiet: bool, exhaustive: bool = True):
    if quiet:
        return _Null()
    if sys.stderr.isatty():
        label = "near fields" if exhaustive else "near fields (adaptive: ends early)"
        return click.progressbar(length=total, label=label, file=sys.stderr)
    up_to = "" if exhaustive else "up to "
    click.echo(f"computing near fields: {up_to}{total:,} points, {jobs} jobs", err=True)
    return _Lines(total)


def _write_all(a, folder: Path, paper: str = "a4") -> None:
    from . import records, report

    records.write_data(a, folder)
    report.write_maps_and_report(a, folder, paper)


def _summary(a, out: Path) -> None:
    from .assess import EDGE_RATIO

    click.echo(f"{a.site.title}: {a.site.standard}, {len(a.transmissions)} transmissions, {a.points_evaluated} points")
    for t in a.transmissions:
        ceiling = ("no limit within the lattice" if t.power_ceiling_w is None or math.isinf(t.power_ceiling_w)
                   else f"{t.power_ceiling_w:.0f} W PEP ({t.governing_check} check)")
        click.echo(f"  {t.name} ({t.frequency_mhz:g} MHz, {t.average_power_w:.1f} W average; checks "
                   f"{', '.join(t.checks)}): power ceiling alone {ceiling}")
        for ar in t.areas:
            if ar.exposure == "none":
                continue
            if ar.max_ratio is None:
                why = (f"judged with {', '.join(ar.covered_by)} (stricter tier)" if ar.covered_by else
                       "no lattice point inside it: not assessed" if ar.empty else
                       f"all {ar.masked_points} points too close to a wire")
                flag = "-" if ar.covered_by else "not shown"
                click.echo(f"    {ar.name:<28} {flag:<9} {why}")
                continue
            flag = "OVER" if ar.max_ratio >= 1 else ("not shown" if ar.masked_points else "ok")
            masked = f", {ar.masked_points} points too close to a wire (not shown compliant)" if ar.masked_points else ""
            click.echo(f"    {ar.name:<28} {flag:<9} worst {ar.max_ratio:.3g} of the limit ({ar.check}, "
                       f"{ar.governing}){masked}")
    click.echo(f"combined worst: {max((x.max_ratio or 0) for x in a.combined.areas if x.exposure != 'none'):.3g} of the limit")
    for g in a.combined.group_results:
        if len(g.members) > 1 and g.power_scale is not None:
            powers = ", ".join(f"{m} {a.site.transmission(m).power_w * g.power_scale:.0f} W" for m in g.members)
            click.echo(f"  group {g.name!r} together: power scale {g.power_scale:.3g} ({powers} PEP; "
                       f"{g.worst_check} check in {g.worst_area})")
    if a.margin_given_m is not None:
        click.echo(f"lattice grown: margin {a.site.grid.margin_m:g} m (site file {a.margin_given_m:g} m) so that its "
                   f"edge reads {a.edge_ratio:.2g} of the limit")
    if a.edge_ratio >= EDGE_RATIO:
        click.echo(f"note: the ratio on the lattice's edge is still {a.edge_ratio:.2g}: exposure continues beyond the map")
    click.echo(f"written to {out}/")
    click.echo("A model is not a measurement; local regulations and a qualified assessment prevail.")


@main.command("check")
@click.argument("site_file", type=click.Path(dir_okay=False))
@click.option("--plan", "plan_png", type=click.Path(dir_okay=False), help="draw the plan to this PNG")
@click.option("--large", is_flag=True, help="check a site beyond the size budget")
@click.option("--json", "as_json", is_flag=True)
def check_cmd(site_file, plan_png, large, as_json):
    """Validate the file and the NEC rules, run the average gain test; no field solve."""
    from . import assess, engine
    from .site import SiteError, load

    try:
        site = load(site_file)
    except SiteError as err:
        if as_json:
            _json({"ok": False, "errors": err.problems, "warnings": [], "antennas": []})
            return EXIT_INPUT
        for p in err.problems[:-1]:
            click.echo(f"nfmap: error: {p}", err=True)
        raise InputError(err.problems[-1]) from None
    warns: list[str] = list(site.warnings)
    est = _budget(site, _default_jobs(None), large, quiet=True)
    ants = []
    txs = []
    for t in site.transmissions:
        model = _engine_errors(lambda t=t: assess.model_for(site, t.name, warns))
        z = _engine_errors(lambda m=model: engine.solve(m)).feed_impedance_ohm
        txs.append({"name": t.name, "frequency_mhz": t.frequency_mhz, "feed_impedance_ohm": [z.real, z.imag]})
        design = _design_mhz(site.antenna(t.antenna))
        if design and abs(t.frequency_mhz - design) > 0.1 * design:
            warns.append(f"transmission {t.name!r}: {t.frequency_mhz:g} MHz into {t.antenna!r}, designed for "
                         f"{design:g} MHz; feed impedance {_z_text(z)}: check the antenna and the frequency")
    for spec in site.antennas:
        s = assess._structure(site, spec.name, assess.highest_any(site))
        f = max(tr.frequency_mhz for tr in site.transmissions if tr.antenna == spec.name) if any(
            tr.antenna == spec.name for tr in site.transmissions) else assess.highest_any(site)
        agt, gain = _engine_errors(lambda s=s, f=f: engine.pattern_figures(s, f))
        if abs(10 * math.log10(agt)) > 0.2:
            warns.append(f"antenna {spec.name!r}: average gain test {agt:.3f} ({10 * math.log10(agt):+.2f} dB), beyond 0.2 dB")
        ants.append({"name": spec.name, "kind": spec.kind, "wires": len(s.wires), "segments": s.segment_count,
                     "agt": round(agt, 4), "agt_db": round(10 * math.log10(agt), 3), "max_gain_dbi": round(gain, 2),
                     "trimmed_length_m": round(spec.trim.length_m, 4) if spec.trim else None})
    if plan_png:
        from . import maps

        maps.save_plan(site, plan_png)
    jobs = _default_jobs(None)
    cost = {"field_points": est.field_points, "plan_points": est.plan_points, "segments_max": est.segments_max,
            "memory_bytes": round(est.memory_bytes), "seconds_estimate": round(est.seconds(jobs), 1), "jobs": jobs,
            "over_budget": est.over()}
    if as_json:
        _json({"ok": True, "errors": [], "warnings": warns, "antennas": ants, "transmissions": txs, "estimate": cost})
        return EXIT_OK
    for w in warns[len(site.warnings):]:  # the site file's own warnings were shown as it was read
        click.echo(f"nfmap: warning: {w}", err=True)
    click.echo(f"{site.path}: valid ({len(site.antennas)} antennas, {len(site.transmissions)} transmissions)")
    for a in ants:
        click.echo(f"  {a['name']}: {a['kind']}, {a['wires']} wires, {a['segments']} segments, "
                   f"AGT {a['agt']:.3f} ({a['agt_db']:+.2f} dB), max gain {a['max_gain_dbi']:.2f} dBi (free space)")
    for spec in site.antennas:
        if spec.trim:
            tr = spec.trim
            click.echo(f"  {spec.name}: resonant_mhz {tr.resonant_mhz:g} trimmed in the model to length_m "
                       f"{tr.length_m:.3f} (rule of thumb {tr.rule_length_m:.3f}; alone {_z_text(tr.feed_impedance_ohm)})")
    for t in txs:
        click.echo(f"  {t['name']}: {t['frequency_mhz']:g} MHz, feed impedance "
                   f"{_z_text(complex(*t['feed_impedance_ohm']))} (with the other antennas passive)")
    click.echo(f"  run estimate: {est.describe(jobs)}")
    for o in est.over():
        click.echo(f"  beyond the budget (run needs --large): {o}")
    if plan_png:
        click.echo(f"plan drawn to {plan_png}")
    return EXIT_OK


def _z_text(z: complex) -> str:
    return f"{z.real:.1f} {'+' if z.imag >= 0 else '-'} j{abs(z.imag):.1f} ohm"


def _design_mhz(spec) -> float | None:
    """The frequency an antenna is built for, where its file says one."""
    if spec.trim:
        return spec.trim.resonant_mhz
    return spec.param("resonant_mhz") or spec.param("design_mhz")


@main.command("probe")
@click.argument("site_file", type=click.Path(dir_okay=False))
@click.option("--at", "at", multiple=True, required=True, help="X,Y,Z in site metres; repeat")
@click.option("--exposure", type=click.Choice(["public", "occupational"]), help="tier to judge against [the area's]")
@click.option("--transmission", "only", multiple=True, help="only these transmissions")
@click.option("--json", "as_json", is_flag=True)
def probe_cmd(site_file, at, exposure, only, as_json):
    """Fields and exposure ratio at given points, per transmission."""
    import numpy as np

    from . import assess

    site = _load(site_file)
    pts = []
    for a in at:
        try:
            xyz = [float(v) for v in a.split(",")]
            assert len(xyz) == 3 and all(math.isfinite(v) for v in xyz)
        except (ValueError, AssertionError):
            raise InputError(f"--at {a!r}: allowed: X,Y,Z in metres, e.g. --at 3,4,1.5") from None
        pts.append(xyz)
    pts = np.array(pts)
    # a point in a "none" area is still judged (against public): somebody asked about it
    tiers = [exposure or {"none": "public"}.get(t, t) for t in (assess.tier_at(site, x, y) for x, y, _ in pts)]
    txs, rows = [], []
    for t in site.transmissions:
        if only and t.name not in only:
            continue
        # fields at the envelope power; each check scales them to its own time base; a beam on a rotator
        # gives its worst over every heading (the full solves and the envelope about the mast)
        e, h, masked_pts, nf = _engine_errors(lambda t=t: assess.point_fields(site, t, pts))
        avg = math.sqrt(t.average_power_w / t.envelope_power_w)
        z = nf.solution.feed_impedance_ohm
        txs.append({"name": t.name, "frequency_mhz": t.frequency_mhz, "feed_impedance_ohm": [z.real, z.imag],
                    "input_power_w": t.average_power_w, "average_power_w": t.average_power_w,
                    "envelope_power_w": t.envelope_power_w})
        for k, (x, y, zz) in enumerate(pts):
            masked = bool(masked_pts[k])
            by_check = {cid: None if masked else float(r[0])
                        for cid, (r, _) in t.check_ratios(site.standard, tiers[k], e[k : k + 1], h[k : k + 1]).items()}
            worst = None if masked else max(by_check, key=by_check.get)
            rows.append({"x_m": x, "y_m": y, "z_m": zz, "transmission": t.name,
                         "e_rms_v_per_m": None if masked else float(e[k]) * avg,
                         "h_rms_a_per_m": None if masked else float(h[k]) * avg,
                         "ratio": None if masked else by_check[worst], "check": worst,
                         "ratio_by_check": by_check, "exposure": tiers[k], "masked": masked})
    if only and not txs:
        raise InputError(f"--transmission: none of {', '.join(only)}; allowed: {', '.join(t.name for t in site.transmissions)}")
    if as_json:
        return _json({"transmissions": txs, "points": rows})
    for r in rows:
        where = f"({r['x_m']:g}, {r['y_m']:g}, {r['z_m']:g}) m"
        if r["masked"]:
            click.echo(f"{r['transmission']}: {where}: masked (below ground or too close to a wire)")
        else:
            each = ", ".join(f"{c} {v:.3g}" for c, v in r["ratio_by_check"].items())
            click.echo(f"{r['transmission']}: {where}: E {r['e_rms_v_per_m']:.3g} V/m, H {r['h_rms_a_per_m']:.3g} A/m "
                       f"(30-minute average), {r['ratio']:.3g} of the {r['exposure']} limit ({r['check']} check; {each})")
    return EXIT_OK


@main.command("compare")
@click.argument("site_files", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), help="output folder [nfmap-out/compare]")
@click.option("--jobs", type=int, help="worker processes [all cores]")
@click.option("--force", is_flag=True, help="replace an output folder that an earlier compare wrote")
@click.option("--large", is_flag=True, help="run beyond the size budget")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True)
@click.option("--json", "as_json", is_flag=True, help="print one JSON document (the files are written too)")
def compare_cmd(site_files, out_dir, jobs, force, large, paper, as_json):
    """The same site with different layouts, side by side."""
    from . import assess, budget, compare, outfolder, report

    if len(site_files) < 2:
        raise InputError("compare needs at least two site files (layouts of one site)")
    sites = [_load(p) for p in site_files]
    try:
        compare.same_site(sites)
    except compare.NotSameSite as err:
        raise InputError(str(err)) from None
    jobs = _default_jobs(jobs)
    for s in sites:
        _budget(s, jobs, large, quiet=True)
    stems = [Path(p).stem for p in site_files]
    names = stems if len(set(stems)) == len(stems) else list(site_files)
    out = Path(out_dir) if out_dir else Path("nfmap-out") / "compare"
    try:
        with outfolder.reserved(out, force) as res:
            layouts = []
            cap = None if large else budget.FIELD_POINTS_MAX
            for name, s in zip(names, sites, strict=True):
                a = _engine_errors(lambda s=s: assess.assess(s, jobs=jobs, max_field_points=cap))
                layouts.append(compare.Layout(name, a))
            res.commit(lambda folder: report.write_compare(layouts, folder, paper),
                       {"site_files": [Path(p).name for p in site_files]})
    except outfolder.OutputError as err:
        raise InputError(str(err)) from None
    if as_json:
        _json({"best": compare.best_lines(layouts), "layouts": compare.table_rows(layouts)})
        return EXIT_OK
    for row in compare.table_rows(layouts):
        click.echo(f"{row['layout']}: worst {row['worst_ratio']:.3g} of the limit, {row['exceedance_area_m2']:.1f} m^2 "
                   f"at or above it, {row['crossings']} crossings")
    for line in compare.best_lines(layouts):
        click.echo(f"  {line}")
    click.echo(f"written to {out}/ (compare.pdf, compare.png, compare.json)")
    click.echo("A model is not a measurement; local regulations and a qualified assessment prevail.")
    return EXIT_OK


@main.command("place")
@click.argument("site_file", type=click.Path(dir_okay=False))
@click.option("--antenna", "antenna", required=True, help="the antenna to place")
@click.option("--within", "within", help="the area it may stand in [the area it stands in now]")
@click.option("--heights", "heights", help="heights to try, comma-separated [m]")
@click.option("--headings", "headings", help="headings to try, comma-separated [deg]")
@click.option("--step", "step_m", type=float, help="candidate spacing [m; default max(grid spacing, 1 m)]")
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), help="output folder [nfmap-out/<stem>-place]")
@click.option("--jobs", type=int, help="worker processes [all cores]")
@click.option("--force", is_flag=True, help="replace an output folder that an earlier place wrote")
@click.option("--json", "as_json", is_flag=True, help="print one JSON document (the files are written too)")
def place_cmd(site_file, antenna, within, heights, headings, step_m, out_dir, jobs, force, as_json):
    """Search positions for one antenna; rank them by allowed power; write the winner's site file."""
    from . import engine, outfolder, place, report
    from .site import SiteError

    site = _load(site_file)
    if antenna not in [a.name for a in site.antennas]:
        raise InputError(f"--antenna: no antenna named {antenna!r}; allowed: {', '.join(a.name for a in site.antennas)}")

    def numbers(text, opt):
        if not text:
            return None
        try:
            vals = [float(v) for v in text.split(",")]
        except ValueError:
            raise InputError(f"{opt} {text!r}: allowed: numbers separated by commas, e.g. {opt} 6,8,10") from None
        if not all(math.isfinite(v) for v in vals):
            raise InputError(f"{opt} {text!r}: allowed: finite numbers")
        return vals

    hs, hds = numbers(heights, "--heights"), numbers(headings, "--headings")
    if step_m is not None and not 0.05 <= step_m <= 10:
        raise InputError(f"--step {step_m:g}: allowed: 0.05 to 10 m")
    jobs = _default_jobs(jobs)
    out = Path(out_dir) if out_dir else Path("nfmap-out") / f"{Path(site_file).stem}-place"
    try:
        with outfolder.reserved(out, force) as res:
            with engine.Workers(jobs) as workers:
                result = _engine_errors(lambda: place.search(site, antenna, within, hs, hds, step_m, workers))
            if not result.candidates:
                raise InputError(f"{site_file}: {antenna!r} fits nowhere in {result.within!r} (its wires must lie "
                                 "inside the area and clear of the other antennas)")
            result, full = _engine_errors(lambda: place.recheck(result, 3, jobs))
            text = Path(site_file).read_text()
            spec = site.antenna(antenna)
            res.commit(lambda folder: report.write_place(result, full, folder,
                                                         place.winner_toml(text, antenna, result.candidates[0],
                                                                           spec.kind)),
                       {"site_file": Path(site_file).name, "site_sha256": site.sha256})
    except SiteError as err:
        raise InputError(err.problems[0]) from None
    except outfolder.OutputError as err:
        raise InputError(str(err)) from None
    doc = report.place_doc(result)
    if as_json:
        _json(doc)
        return EXIT_OK
    for k, c in enumerate(result.candidates[:10], 1):
        extra = "".join([f", height {c.height_m:g} m" if c.height_m is not None else "",
                         f", heading {c.heading_deg:g}" if c.heading_deg is not None else ""])
        ceil = ", ".join(f"{n} {'no limit' if math.isinf(v) else f'{v:.0f} W'}" for n, v in c.ceilings_w.items())
        flag = f" ({c.masked_points} points too close to its wires)" if c.masked_points else ""
        click.echo(f"{k:>3}. ({c.x_m:g}, {c.y_m:g}){extra}: {c.scale:.3g} x the planned power; {ceil}{flag}")
    for c, sc in result.rechecks:
        click.echo(f"  full solve at ({c.x_m:g}, {c.y_m:g}): {sc:.3g} x the planned power (search {c.scale:.3g})")
    click.echo(f"{len(result.candidates)} positions ranked, {result.rejected} where it does not fit; written to {out}/ "
               "(place.pdf, place-map.png, place.json, winner.toml)")
    click.echo("A model is not a measurement; local regulations and a qualified assessment prevail.")
    return EXIT_OK


@main.command("survey")
@click.argument("site_file", type=click.Path(dir_okay=False))
@click.argument("readings_file", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), help="output folder [nfmap-out/<stem>-survey]")
@click.option("--force", is_flag=True, help="replace an output folder that an earlier survey wrote")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True)
@click.option("--json", "as_json", is_flag=True, help="print one JSON document (the files are written too)")
def survey_cmd(site_file, readings_file, out_dir, force, paper, as_json):
    """Measured readings against the model: a table, a map and a PDF page."""
    from . import outfolder, report, survey

    site = _load(site_file)
    try:
        rows, problems = survey.read(readings_file, site)
    except survey.SurveyError as err:
        raise InputError(str(err)) from None
    for p in problems:
        click.echo(f"nfmap: skipped: {p}", err=True)
    sv = _engine_errors(lambda: survey.compare(site, readings_file, rows, problems))
    for p in sv.problems[len(problems):]:
        click.echo(f"nfmap: skipped: {p}", err=True)
    out = Path(out_dir) if out_dir else Path("nfmap-out") / f"{Path(site_file).stem}-survey"
    try:
        with outfolder.reserved(out, force) as res:
            res.commit(lambda folder: report.write_survey(sv, folder, paper),
                       {"site_file": Path(site.path).name, "site_sha256": site.sha256})
    except outfolder.OutputError as err:
        raise InputError(str(err)) from None
    doc = {"site_sha256": site.sha256, "readings_file": Path(readings_file).name,
           "median_difference_db": sv.median_db, "max_abs_difference_db": sv.max_abs_db,
           "summary": survey.offset_sentence(sv), "skipped": list(sv.problems),
           "readings": [{"line": c.reading.line, "x_m": c.reading.x_m, "y_m": c.reading.y_m, "z_m": c.reading.z_m,
                         "transmission": c.reading.transmission, "probe": c.reading.probe, "quantity": c.quantity,
                         "measured": c.measured, "model": c.model, "difference_db": c.difference_db,
                         "verdict": c.verdict} for c in sv.rows]}
    if as_json:
        _json(doc)
        return EXIT_OK if sv.rows else EXIT_INPUT
    for c in sv.rows:
        r = c.reading
        unit = "V/m" if c.quantity == "E" else "A/m"
        click.echo(f"line {r.line}: ({r.x_m:g}, {r.y_m:g}, {r.z_m:g}) m {r.transmission}: {c.quantity} measured "
                   f"{c.measured:.3g} {unit}, model {c.model:.3g} {unit}: {c.difference_db:+.1f} dB, {c.verdict}")
    click.echo(survey.offset_sentence(sv))
    click.echo(f"written to {out}/ (survey.csv, survey-map.png, survey.pdf)")
    click.echo("A model is not a measurement, and a reading is not an assessment; a qualified assessment prevails.")
    return EXIT_OK if sv.rows else EXIT_INPUT


@main.command("deck")
@click.argument("site_file", type=click.Path(dir_okay=False))
@click.option("--transmission", "name", required=True, help="the transmission's name")
def deck_cmd(site_file, name):
    """Print the NEC-2 card deck of one transmission, for checking in any NEC engine."""
    from . import assess, engine
    from .site import SiteError

    site = _load(site_file)
    try:
        t = site.transmission(name)
    except SiteError as err:
        raise InputError(err.problems[0]) from None
    model = assess.model_for(site, t.name)
    lat = assess._lattices(site, assess.plan(site))[0]
    comments = [f"nfmap {__version__}: {site.title}",
                f"transmission {t.name!r}: excitation 1 V peak, P_in = 0.5 Re(V I*); NEC prints peak phasors:",
                f"E_rms = |E_peak| * sqrt(P / P_in) / sqrt(2), P = {t.average_power_w:.6g} W (30-minute average)",
                f"or {t.envelope_power_w:.6g} W (envelope peak: PEP x feedline loss); H likewise"]
    click.echo(engine.nec_deck(model, lat, comments), nl=False)
    return EXIT_OK


@main.command("demo")
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), default="nfmap-demo", show_default=True)
@click.option("--jobs", type=int)
@click.option("--force", is_flag=True, help="replace a demo folder that an earlier demo wrote")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True, help="report page size")
@click.option("--quiet", is_flag=True)
@click.option("--exhaustive", is_flag=True,
              help="evaluate every lattice point (slower; the default evaluates only where the answer changes)")
def demo_cmd(out_dir, jobs, force, paper, quiet, exhaustive):
    """Write the bundled example site into the output folder and run it."""
    from importlib import resources

    from . import outfolder

    out = Path(out_dir)
    site_path = out / "demo.toml"
    text = resources.files("nfmap").joinpath("examples/demo.toml").read_text()
    if out.exists():
        if not force:
            raise InputError(f"{out} exists; give --force to replace it (or -o another folder)")
        mine = {"demo.toml", "results"}
        foreign = sorted(p.name for p in out.iterdir() if p.name not in mine and not p.name.startswith(".results."))
        if foreign or (out / "results").exists() and not outfolder.is_record(out / "results"):
            held = ", ".join(foreign) or "a results folder nfmap did not write"
            raise InputError(f"{out} is not a folder nfmap demo wrote (it holds {held}); --force never deletes other "
                             "files: give another -o")
        if site_path.exists() and site_path.read_text() != text:
            raise InputError(f"{site_path} was edited; --force never overwrites it: run it with "
                             f"nfmap run {site_path}, or give another -o")
    out.mkdir(parents=True, exist_ok=True)
    site_path.write_text(text)
    click.echo(f"example site written to {site_path}")
    site = _load(str(site_path))
    return _run_site(site, out / "results", _default_jobs(jobs), True, quiet, paper=paper, exhaustive=exhaustive)
