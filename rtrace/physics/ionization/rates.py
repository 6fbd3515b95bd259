"""Rate coefficients of collisional ionization and recombination for hydrogen and helium (cgs).

Every function takes the temperature ``T`` in K (float64 array, > 0) and
returns the *natural logarithm* of a rate coefficient in cm^3 s^-1, so that
cold gas (rates ~ e^-150000 at 1 K) and hot gas stay finite. The fits and
their coefficients are cited beside each; all coefficients are quoted from
memory of the papers, and the tests check them against a second, independent
set of published fits.

* Collisional ionization by electron impact: Voronov (1997, At. Data Nucl.
  Data Tables 65, 1), ``C = A (1 + P U^1/2) U^K e^-U / (X + U)``,
  ``U = Delta E / kT``.
* Radiative recombination of H II and He III (hydrogenic) and of He II:
  Hui & Gnedin (1997, MNRAS 292, 27, appendix A), case A (all levels) and
  case B (excluding captures to the ground level, whose photons are
  re-absorbed on the spot).
* Dielectronic recombination of He II: the Aldrovandi & Péquignot (1973,
  A&A 25, 137) form ``A T^-3/2 exp(-T0/T) (1 + B exp(-T1/T))``.

The fits are stated for about 1e3 (recombination: 1) to 1e9 K; at 3e3 K
and below collisional ionization of hydrogen is below 1e-19 of recombination
and the exact values cease to matter.
"""

import numpy as np

from .composition import ERG_PER_EV, K_B

__all__ = [
    "ln_ionization_h",
    "ln_ionization_he1",
    "ln_ionization_he2",
    "ln_recombination_h",
    "ln_recombination_he2",
    "ln_recombination_he3",
    "ln_dielectronic_he2",
    "recombination_case_b_h",
    "CASES",
]

#: Recombination cases: "A" (optically thin to recombination photons: hot, diffuse
#: gas) and "B" (on the spot: captures to the ground state are re-absorbed nearby).
CASES = ("A", "B")

# Voronov (1997), table 1 rows (from memory): Delta E [eV], P, A [cm^3 s^-1], X, K.
_VORONOV = {
    "H": (13.6, 0.0, 2.91e-8, 0.232, 0.39),
    "He1": (24.6, 0.0, 1.75e-8, 0.180, 0.35),
    "He2": (54.4, 1.0, 2.05e-9, 0.265, 0.25),
}
_EV_OVER_K = ERG_PER_EV / K_B  # K per eV

# Hui & Gnedin (1997), appendix A: threshold temperatures T_i = chi_i / k [K] (from memory)
# and the fits' lambda = 2 T_i / T.
_T_HI = 157807.0
_T_HEI = 285335.0
_T_HEII = 631515.0


def _ln_voronov(T, row):
    """Ln C for one Voronov (1997) row: C = A (1 + P U^1/2) U^K exp(-U) / (X + U)."""
    delta_e, p, a, x, k = _VORONOV[row]
    uu = delta_e * _EV_OVER_K / T
    return np.log(a) + np.log1p(p * np.sqrt(uu)) + k * np.log(uu) - uu - np.log(x + uu)


def ln_ionization_h(T):
    """Ln of the collisional ionization rate coefficient of H I [cm^3 s^-1] (Voronov 1997)."""
    return _ln_voronov(T, "H")


def ln_ionization_he1(T):
    """Ln of the collisional ionization rate coefficient of He I [cm^3 s^-1] (Voronov 1997)."""
    return _ln_voronov(T, "He1")


def ln_ionization_he2(T):
    """Ln of the collisional ionization rate coefficient of He II [cm^3 s^-1] (Voronov 1997)."""
    return _ln_voronov(T, "He2")


def _ln_hydrogenic(lam, case):
    """Ln of the Hui & Gnedin (1997) hydrogenic radiative recombination fit at ``lam = 2 T_thr / T``.

    Case A: ``1.269e-13 lam^1.503 / [1 + (lam/0.522)^0.470]^1.923``;
    case B: ``2.753e-14 lam^1.500 / [1 + (lam/2.740)^0.407]^2.242`` (cm^3 s^-1).
    """
    ln_lam = np.log(lam)
    if case == "A":
        a, p, lam0, r, q = 1.269e-13, 1.503, 0.522, 0.470, 1.923
    else:
        a, p, lam0, r, q = 2.753e-14, 1.500, 2.740, 0.407, 2.242
    # ln(1 + (lam/lam0)^r) without overflow for cold gas
    return np.log(a) + p * ln_lam - q * np.logaddexp(0.0, r * (ln_lam - np.log(lam0)))


def ln_recombination_h(T, case="A"):
    """Ln of the radiative recombination coefficient of H II [cm^3 s^-1] (Hui & Gnedin 1997)."""
    return _ln_hydrogenic(2.0 * _T_HI / T, case)


def ln_recombination_he3(T, case="A"):
    """Ln of the radiative recombination coefficient of He III -> He II [cm^3 s^-1].

    Hydrogenic: Hui & Gnedin (1997) give it as twice the H II fit evaluated at
    ``lam = 2 T_HeII / T`` (the Z alpha(T / Z^2) scaling of hydrogenic ions, Z = 2).
    """
    return np.log(2.0) + _ln_hydrogenic(2.0 * _T_HEII / T, case)


def ln_recombination_he2(T, case="A"):
    """Ln of the radiative recombination coefficient of He II -> He I [cm^3 s^-1] (Hui & Gnedin 1997).

    Case A ``3.0e-14 lam^0.654``, case B ``1.26e-14 lam^0.750``, ``lam = 2 T_HeI / T``.
    """
    a, p = (3.0e-14, 0.654) if case == "A" else (1.26e-14, 0.750)
    return np.log(a) + p * np.log(2.0 * _T_HEI / T)


def ln_dielectronic_he2(T):
    """Ln of the dielectronic recombination coefficient of He II -> He I [cm^3 s^-1].

    Aldrovandi & Péquignot (1973): ``1.9e-3 T^-3/2 exp(-4.7e5/T) (1 + 0.3 exp(-9.4e4/T))``
    (coefficients from memory). It dominates He II recombination above ~6e4 K.
    """
    return np.log(1.9e-3) - 1.5 * np.log(T) - 4.7e5 / T + np.log1p(0.3 * np.exp(-9.4e4 / T))


def recombination_case_b_h(T):
    """Case-B recombination coefficient of H II, alpha_B(T) [cm^3 s^-1] (Hui & Gnedin 1997); 2.59e-13 at 1e4 K."""
    return np.exp(ln_recombination_h(np.asarray(T, np.float64), "B"))
