"""The ``nfmap`` command line: parse, call the orchestrator, print, set the exit code.

Exit codes: 0 done and every accessible area within limits; 1 done and some accessible area
over its limit; 2 bad input (one line naming the file, the key and the allowed values); 3 the
model could not be solved.
"""

from __future__ import annotations

import json
import math
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
    """Print the limits that will be applied (a band table without --mhz)."""
    from .exposure import limits as lim

    try:
        lim.check_ids(standard, exposure)
        tab = lim.table(standard, exposure)
        if not mhz:
            rows = lim.band_rows(standard, exposure)
            if as_json:
                return _json(rows)
            click.echo(f"{lim.STANDARD_TITLES[standard]}: {lim.exposure_title(standard, exposure)}")
            avg = f"{tab.averaging_min:g} min" if tab.averaging_min else "not given"
            click.echo(f"averaging time {avg}; f in MHz; edge frequencies: {_edge_text(tab.edge)}")
            click.echo(f"{'from':>9} {'to':>9}  {'E':<18} {'H':<18} S")
            for r in rows:
                click.echo(
                    f"{r['from_mhz']:>9g} {r['to_mhz']:>9g}  {r['e'] or '-':<18} {r['h'] or '-':<18} {r['s'] or '-'}"
                )
            return None
        for f in mhz:
            if not f > 0:
                raise ValueError(f"--mhz must be > 0, got {f:g}")
        res = lim.limits(standard, exposure, list(mhz))
    except ValueError as err:
        raise InputError(str(err)) from None
    out = [
        {
            "standard": standard,
            "exposure": exposure,
            "frequency_mhz": float(f),
            "e_v_per_m": _nan_to_none(float(e)),
            "h_a_per_m": _nan_to_none(float(h)),
            "s_w_per_m2": _nan_to_none(float(s)),
            "averaging_min": res.averaging_min,
        }
        for f, e, h, s in zip(res.frequency_mhz, res.e_v_per_m, res.h_a_per_m, res.s_w_per_m2, strict=True)
    ]
    if as_json:
        return _json(out)
    click.echo(f"{lim.STANDARD_TITLES[standard]}: {lim.exposure_title(standard, exposure)}")
    for r in out:
        parts = [f"{r['frequency_mhz']:g} MHz:"]
        for key, unit in (("e_v_per_m", "V/m"), ("h_a_per_m", "A/m"), ("s_w_per_m2", "W/m^2")):
            parts.append(f"{key[0].upper()} {r[key]:.4g} {unit}" if r[key] is not None else f"{key[0].upper()} -")
        avg = f"{r['averaging_min']:g} min" if r["averaging_min"] else "averaging time not given"
        click.echo("  ".join(parts) + f"  ({avg})")
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


