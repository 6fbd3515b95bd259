"""Rate fits tabulated in ln T, for evaluating every cell of a large grid quickly (numba).

The collisional-equilibrium ratios ``ln(n_{r+1}/n_r) = ln C_r - ln alpha_{r+1}``
and ``ln alpha_B`` of hydrogen are smooth in ``ln T``; tabulated at
``_POINTS`` points uniformly in ``ln T`` from 100 K to 1e10 K and
interpolated linearly, they differ from the fits themselves by at most
``h^2 U / 8`` in the logarithm (``h`` the step in ``ln T``, ``U`` the
ionization energy over kT): 2e-6 for hydrogen and 1.2e-5 for He III at
3000 K, where ionization is negligible anyway, and below 3e-6 above 3e4 K
(checked in ``tests/test_collisional.py``). Outside the table the end values are used:
below 100 K every ratio is below e^-1500 (neutral), above 1e10 K the gas is
fully ionized.
"""

import functools

import numba
import numpy as np

from .rates import (
    ln_dielectronic_he2,
    ln_ionization_h,
    ln_ionization_he1,
    ln_ionization_he2,
    ln_recombination_h,
    ln_recombination_he2,
    ln_recombination_he3,
)

__all__ = [
    "collisional_fractions",
    "case_b_coefficient",
    "fill_demand",
    "collisional_table",
    "case_b_table",
    "interpolate",
    "LN_T_MIN",
    "LN_T_STEP",
]

LN_T_MIN = np.log(100.0)
_LN_T_MAX = np.log(1e10)
_POINTS = 1 << 15
LN_T_STEP = (_LN_T_MAX - LN_T_MIN) / (_POINTS - 1)


def _ln_t_grid():
    return LN_T_MIN + LN_T_STEP * np.arange(_POINTS)


@functools.cache
def collisional_table(case):
    """``(points, 3)`` table of ``ln r_H``, ``ln r_HeI->II``, ``ln r_HeII->III`` against ``ln T`` (read-only)."""
    T = np.exp(_ln_t_grid())
    table = np.empty((_POINTS, 3))
    table[:, 0] = ln_ionization_h(T) - ln_recombination_h(T, case)
    table[:, 1] = ln_ionization_he1(T) - np.logaddexp(ln_recombination_he2(T, case), ln_dielectronic_he2(T))
    table[:, 2] = ln_ionization_he2(T) - ln_recombination_he3(T, case)
    table.flags.writeable = False
    return table


@functools.cache
def case_b_table():
    """``(points, 1)`` table of ``ln alpha_B`` of H II [cm^3 s^-1] against ``ln T`` (read-only)."""
    table = ln_recombination_h(np.exp(_ln_t_grid()), "B").reshape(-1, 1)
    table.flags.writeable = False
    return table


@numba.njit(cache=True)
def interpolate(table, column, ln_t):
    """Linear interpolation of ``table[:, column]`` at ``ln_t`` (end values outside the table)."""
    u = (ln_t - LN_T_MIN) / LN_T_STEP
    last = table.shape[0] - 1
    if u <= 0.0:
        return table[0, column]
    if u >= last:
        return table[last, column]
    i = int(u)
    w = u - i
    return table[i, column] * (1.0 - w) + table[i + 1, column] * w


@numba.njit(cache=True, parallel=True)
def fill_collisional_fractions(T, table, x_h, y1, y2, y3):
    """Collisional-equilibrium fractions of every cell (flat float64 arrays; ``T = 0`` is neutral)."""
    for n in numba.prange(T.size):
        t = T[n]
        if not t > 0.0:
            x_h[n], y1[n], y2[n], y3[n] = 0.0, 1.0, 0.0, 0.0
            continue
        ln_t = np.log(t)
        x_h[n] = 1.0 / (1.0 + np.exp(-interpolate(table, 0, ln_t)))
        a = interpolate(table, 1, ln_t)
        b = a + interpolate(table, 2, ln_t)
        top = max(0.0, a, b)
        w0, w1, w2 = np.exp(-top), np.exp(a - top), np.exp(b - top)
        s = w0 + w1 + w2
        y1[n], y2[n], y3[n] = w0 / s, w1 / s, w2 / s


@numba.njit(cache=True, parallel=True)
def fill_case_b(T, table, out):
    """``alpha_B(T)`` of H II [cm^3 s^-1] for every cell (flat float64 arrays)."""
    for n in numba.prange(T.size):
        out[n] = np.exp(interpolate(table, 0, np.log(T[n])))


def collisional_fractions(T, case="A"):
    """Ionized fractions in collisional equilibrium at temperatures ``T`` (K).

    Returns
    -------
    x_h, y1, y2, y3 : ndarray
        float64 arrays of ``T``'s shape: ``n_HII / n_H`` and the He I, He II,
        He III fractions of helium (summing to 1). ``T = 0`` is neutral.
    """
    T = np.ascontiguousarray(T, np.float64)
    out = [np.empty(T.shape) for _ in range(4)]
    fill_collisional_fractions(T.reshape(-1), collisional_table(case), *(a.reshape(-1) for a in out))
    return tuple(out)


def case_b_coefficient(T):
    """Case-B recombination coefficient of H II [cm^3 s^-1] at temperatures ``T`` (K, > 0)."""
    T = np.ascontiguousarray(T, np.float64)
    out = np.empty(T.shape)
    fill_case_b(T.reshape(-1), case_b_table(), out.reshape(-1))
    return out


@numba.njit(cache=True, parallel=True)
def fill_demand(T, rho, t_floor, per_mass_h, per_mass_e, table, out):
    """Recombinations per unit volume if fully photoionized, ``alpha_B(T_e) n_H n_e`` [s^-1 cm^-3].

    ``T_e = max(T, t_floor)``; ``n_H = per_mass_h rho``, ``n_e = per_mass_e rho``
    (flat float64 inputs; ``out`` float32, flat).
    """
    for n in numba.prange(T.size):
        t = max(T[n], t_floor)
        r = rho[n]
        out[n] = np.exp(interpolate(table, 0, np.log(t))) * (per_mass_h * r) * (per_mass_e * r)
