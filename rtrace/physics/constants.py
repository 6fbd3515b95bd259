"""Physical constants as plain cgs floats, taken once from astropy (CODATA).

Kernels and array code use these; public functions take and return
astropy Quantities.
"""

import math

import astropy.constants as const
import astropy.units as u

__all__ = [
    "C",
    "H",
    "K_B",
    "M_E",
    "E_CHARGE",
    "RYDBERG_ENERGY",
    "EULER_GAMMA",
    "PC",
    "ALPHA_FF_PREFACTOR",
    "EMISSIVITY_FF_PREFACTOR",
    "H_OVER_K",
    "JANSKY",
]

C = const.c.cgs.value  # cm s-1
H = const.h.cgs.value  # erg s
K_B = const.k_B.cgs.value  # erg K-1
M_E = const.m_e.cgs.value  # g
E_CHARGE = const.e.gauss.value  # statcoulomb (Gaussian units)
RYDBERG_ENERGY = (const.Ryd * const.h * const.c).cgs.value  # erg, 13.6057 eV (infinite nuclear mass)
PC = u.pc.to(u.cm)  # cm
H_OVER_K = H / K_B  # K s
EULER_GAMMA = 0.57721566490153286
JANSKY = u.Jy.to(u.erg / (u.s * u.cm**2 * u.Hz))  # erg s-1 cm-2 Hz-1 per Jy, 1e-23 (definition of the jansky)

_THERMAL = math.sqrt(2.0 * math.pi / (3.0 * K_B * M_E))

# Rybicki & Lightman (1979), eq. 5.18b: alpha_nu = A T^-1/2 Z^2 n_e n_i nu^-3 (1 - e^{-h nu/kT}) g_ff,
# A = (4 e^6 / 3 m_e h c) (2 pi / 3 k m_e)^{1/2} = 3.692e8 (cgs).
ALPHA_FF_PREFACTOR = 4.0 * E_CHARGE**6 / (3.0 * M_E * H * C) * _THERMAL

# Rybicki & Lightman (1979), eq. 5.14b: 4 pi j_nu = E T^-1/2 Z^2 n_e n_i e^{-h nu/kT} g_ff,
# E = (2^5 pi e^6 / 3 m_e c^3) (2 pi / 3 k m_e)^{1/2} = 6.84e-38 (cgs).
EMISSIVITY_FF_PREFACTOR = 2.0**5 * math.pi * E_CHARGE**6 / (3.0 * M_E * C**3) * _THERMAL
