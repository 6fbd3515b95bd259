"""Invented gas scenes shared by the reader and job-file tests (demo data: the references are elsewhere).

Masses and constants from scipy.constants (CODATA): the hydrogen atom m_p + m_e, as rtrace's
Composition documents.
"""

import numpy as np
import scipy.constants as sc

K_B = sc.k * 1e7  # erg/K
M_H = (sc.m_p + sc.m_e) * 1e3  # g


def warm_sphere_in_cool_gas(shape, cell_pc, centre_pc, seed, gamma, he2_max, he3_max, hydrogen_fraction=0.70):
    """Cool neutral gas (n_H ~ 20 cm^-3, ~100 K) around a warm sphere (1.5e4 .. 1e6 K, thinner, radius 1.6 pc)
    in rough pressure balance, with random fraction fields; cgs float64 arrays.

    Keys: ``rho``, ``T``, ``P``, ``e`` (specific internal energy for ``gamma``), ``warm`` (the sphere),
    ``x``, ``he2``, ``he3`` (uniform in [0, 1], [0, he2_max], [0, he3_max]).
    """
    rng = np.random.default_rng(seed)
    idx = np.indices(shape).astype(float)
    centre = np.asarray(centre_pc) / cell_pc - 0.5
    r = np.sqrt(sum((idx[i] - centre[i]) ** 2 for i in range(3))) * cell_pc
    warm = r < 1.6
    n_h = 20.0 * rng.lognormal(0.0, 0.1, shape)
    pressure = 22.0 * K_B * 100.0 * rng.lognormal(0.0, 0.05, shape)
    temperature = np.where(warm, 1.5e4 * (1e6 / 1.5e4) ** (1.0 - r / 1.6), pressure / (1.1 * n_h * K_B))
    rho = np.where(warm, pressure / (K_B * temperature) * 0.6 * M_H, n_h * M_H / hydrogen_fraction)
    return {
        "rho": rho,
        "T": temperature,
        "P": pressure,
        "e": pressure / ((gamma - 1.0) * rho),
        "warm": warm,
        "x": rng.uniform(0.0, 1.0, shape),
        "he2": rng.uniform(0.0, he2_max, shape),
        "he3": rng.uniform(0.0, he3_max, shape),
    }
