r"""Collisional ionization equilibrium of hydrogen and helium: shock-heated and hot gas.

In a low-density plasma with no ionizing radiation every ionization is by
electron impact and every recombination is radiative (or dielectronic), both
proportional to ``n_e``; the balance of stage ``r`` against ``r+1``,

.. math:: n_{r+1} / n_r = C_r(T) / \alpha_{r+1}(T),

therefore does not depend on the density (the coronal approximation). The
rates are those of :mod:`rtrace.physics.ionization.rates`, evaluated
through the tables of :mod:`rtrace.physics.ionization.tables`.
"""

import astropy.units as u

from .base import IonizationModel
from .composition import Composition, as_float_array, check_choice, check_finite_nonnegative
from .rates import CASES
from .tables import collisional_fractions

__all__ = ["CollisionalEquilibrium", "collisional_fractions", "VALID_TEMPERATURES"]

#: Temperatures [K] over which the rate fits are used as published (see the module notes of ``rates``).
VALID_TEMPERATURES = (3.0e3, 1.0e9)


class CollisionalEquilibrium(IonizationModel):
    """Collisional ionization equilibrium (CIE) for H I/H II and He I/He II/He III.

    For shock-heated and hot gas: supernova remnants, wind bubbles, the
    galaxy-scale ISM above about 1.5e4 K. The ionization state depends on
    the temperature only: with case A, hydrogen is half ionized at 1.57e4 K,
    He I and He II are equal at 2.9e4 K, He II and He III at 7.9e4 K
    (another published set of fits, Cen 1992, puts them 4-5 % higher).

    Parameters
    ----------
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    case : {"A", "B"}
        Radiative recombination case: ``"A"`` (default) counts captures to
        every level, right for hot, diffuse gas that is optically thin to
        its own recombination radiation; ``"B"`` leaves out captures to the
        ground level (their photons ionize again on the spot).

    Notes
    -----
    Rates: collisional ionization from Voronov (1997), radiative
    recombination from Hui & Gnedin (1997), dielectronic recombination of
    He II from Aldrovandi & Péquignot (1973) (see
    :mod:`rtrace.physics.ionization.rates`). Valid from 3e3 to 1e9 K; below
    3e3 K hydrogen is neutral to better than 1e-19, which is the answer.
    Not included: photoionization (see :class:`IonizingSources`), charge
    exchange, non-equilibrium ionization behind fast shocks (the gas may lag
    the equilibrium state by a cooling time), and metals.
    """

    def __init__(self, composition: Composition | None = None, case: str = "A"):
        super().__init__(composition)
        self.case = check_choice(case, CASES, "case", "CollisionalEquilibrium")

    def fractions(self, T):
        """``(x_H, y_HeI, y_HeII, y_HeIII)`` at temperatures ``T`` (K, finite, >= 0).

        See :func:`~rtrace.physics.ionization.tables.collisional_fractions`.
        """
        T = as_float_array(T, u.K, "T", equivalencies=u.temperature())
        check_finite_nonnegative(T, "T", "K")
        return collisional_fractions(T, self.case)

    def _species(self, rho, T, fields):
        x_h, y1, y2, y3 = collisional_fractions(T, self.case)
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        n_hii = x_h * n_h
        return {
            "n_e": n_hii + (y2 + 2.0 * y3) * n_he,
            "n_HI": (1.0 - x_h) * n_h,
            "n_HII": n_hii,
            "n_HeI": y1 * n_he,
            "n_HeII": y2 * n_he,
            "n_HeIII": y3 * n_he,
        }

    def describe(self) -> str:
        """One-line description for provenance headers: case, rate sources and composition."""
        return (
            f"collisional(case {self.case}; ionization Voronov 1997, recombination Hui & Gnedin 1997 + "
            f"dielectronic Aldrovandi & Pequignot 1973; {self.composition.describe()})"
        )
