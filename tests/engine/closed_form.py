"""Closed-form fields of a centre-fed thin dipole with a sinusoidal current.

Balanis, Antenna Theory: Analysis and Design, 3rd ed. (2005), ch. 8, eqs. (8-55a)-(8-55c)
(finite dipole, sinusoidal current, exact near fields); also Jordan & Balmain, Electromagnetic
Waves and Radiating Systems, 2nd ed. (1968), ch. 14. Signs and factors were checked numerically
here: curl E of these E fields reproduces H, and far out |E| / |H| -> eta0.
"""

import numpy as np
from scipy import constants

ETA0 = constants.mu_0 * constants.c


def dipole_fields(points_m, half_length_m, wavelength_m, i0_peak_a):
    """E (rho, z) and H_phi peak phasors of a z-directed dipole centred at the origin.

    I(z) = I0 sin(k (h - |z|)); exp(+j omega t). Returns e_rho, e_z [V/m], h_phi [A/m].
    """
    p = np.asarray(points_m, float)
    rho = np.hypot(p[:, 0], p[:, 1])
    z = p[:, 2]
    k = 2 * np.pi / wavelength_m
    h = half_length_m
    r1 = np.sqrt(rho**2 + (z - h) ** 2)
    r2 = np.sqrt(rho**2 + (z + h) ** 2)
    r0 = np.sqrt(rho**2 + z**2)
    c = 30.0 * ETA0 / (120 * np.pi)  # = 30 ohm with eta0 = 120 pi; exact eta0 / (4 pi)
    e1, e2, e0 = np.exp(-1j * k * r1), np.exp(-1j * k * r2), np.exp(-1j * k * r0)
    ez = -1j * c * i0_peak_a * (e1 / r1 + e2 / r2 - 2 * np.cos(k * h) * e0 / r0)
    erho = 1j * c * i0_peak_a / rho * ((z - h) * e1 / r1 + (z + h) * e2 / r2 - 2 * z * np.cos(k * h) * e0 / r0)
    hphi = 1j * i0_peak_a / (4 * np.pi * rho) * (e1 + e2 - 2 * np.cos(k * h) * e0)
    return erho, ez, hphi
