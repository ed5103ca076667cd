"""Meter readings to field strength: dBm, dBuV, antenna factors, loop probes.

References
----------
[1] dBuV = dBm + 10 log10(Z) + 90 (P = V^2 / Z); in 50 ohm: + 106.99 (derivation).
[2] E probe: dBuV/m = dBuV + AF [dB/m] + cable loss [dB] (definition of the electric antenna
    factor); loop: dBuA/m = dBuV + AF_H [dB S/m] + cable loss; an electric-equivalent loop
    factor gives E_eq, and H = E_eq / eta0 (plane-wave relation, valid for how the factor was
    defined; in the near field compare H with the modelled H, not E).
"""

from __future__ import annotations

import numpy as np

from .ratios import ETA0_OHM


def dbm_to_dbuv(dbm, impedance_ohm: float = 50.0):
    """Power [dBm] into ``impedance_ohm`` to voltage [dBuV]."""
    if not impedance_ohm > 0:
        raise ValueError(f"impedance must be > 0 ohm, got {impedance_ohm}")
    return np.asarray(dbm, float) + 10 * np.log10(impedance_ohm) + 90.0


def dbuv_to_dbuv_per_m(dbuv, antenna_factor_db: float, cable_loss_db: float = 0.0):
    """Voltage at the meter [dBuV] to field [dBuV/m] (or dBuA/m with a magnetic factor)."""
    return np.asarray(dbuv, float) + antenna_factor_db + cable_loss_db


def db_micro_to_si(db_micro):
    """dBuV/m to V/m, or dBuA/m to A/m."""
    return 10 ** ((np.asarray(db_micro, float) - 120.0) / 20.0)


def si_to_db_micro(value):
    """V/m to dBuV/m, or A/m to dBuA/m."""
    v = np.asarray(value, float)
    if np.any(v <= 0):
        raise ValueError("field strength must be > 0")
    return 20 * np.log10(v) + 120.0


def reading_to_field(
    dbm: float,
    antenna_factor_db: float | None = None,
    cable_loss_db: float = 0.0,
    probe: str = "e",
    magnetic_factor_db: float | None = None,
    impedance_ohm: float = 50.0,
) -> dict:
    """A meter reading as field strength.

    Parameters
    ----------
    dbm : float
        Reading [dBm] into ``impedance_ohm``.
    antenna_factor_db : float
        For ``probe = "e"`` the electric antenna factor [dB/m]; for ``probe = "h"`` the loop's
        electric-equivalent factor [dB/m].
    magnetic_factor_db : float
        For a loop, its magnetic factor [dB S/m] instead (dBuA/m = dBuV + AF_H + cable loss).
    cable_loss_db : float
        Loss between probe and meter [dB].

    Returns
    -------
    dict with dbm, dbuv, probe, e_v_per_m, h_a_per_m, s_equiv_w_per_m2
    """
    if probe not in ("e", "h"):
        raise ValueError(f"probe must be 'e' or 'h', got {probe!r}")
    if (antenna_factor_db is None) == (magnetic_factor_db is None):
        raise ValueError("give exactly one of the antenna factor and the magnetic factor")
    if magnetic_factor_db is not None and probe != "h":
        raise ValueError("a magnetic factor goes with probe 'h'")
    if cable_loss_db < 0:
        raise ValueError(f"cable loss must be >= 0 dB, got {cable_loss_db}")
    dbuv = float(dbm_to_dbuv(dbm, impedance_ohm))
    if magnetic_factor_db is not None:
        h = float(db_micro_to_si(dbuv_to_dbuv_per_m(dbuv, magnetic_factor_db, cable_loss_db)))
        e = None
        s = ETA0_OHM * h**2
    else:
        e = float(db_micro_to_si(dbuv_to_dbuv_per_m(dbuv, antenna_factor_db, cable_loss_db)))
        h = e / ETA0_OHM if probe == "h" else None
        s = e**2 / ETA0_OHM
    return {"dbm": float(dbm), "dbuv": dbuv, "probe": probe, "e_v_per_m": e, "h_a_per_m": h, "s_equiv_w_per_m2": s}
