"""Local thermodynamic (Saha) equilibrium: valid only for dense gas, and it says so.

The Saha equation holds where collisions dominate radiative processes, at
electron densities far above any interstellar gas (the McWhirter
criterion). At interstellar densities it ionizes hydrogen fully from about
5000 K, where collisional equilibrium leaves it neutral (by factors up to
1e20 in emission measure at 5000 K): the model warns when it is used there.
"""

import astropy.constants as const
import numpy as np
from scipy.special import log_expit

from ...errors import InputError
from .base import IonizationModel
from .composition import CHI_H, CHI_HE1, CHI_HE2, K_B, Composition

__all__ = ["SahaEquilibrium", "mcwhirter_density"]

_M_E = const.m_e.cgs.value
_H = const.h.cgs.value

#: Ground-state statistical weights (partition functions truncated to the
#: ground level, common practice for Saha estimates of H/He).
_G_HI, _G_HII = 2.0, 1.0
_G_HEI, _G_HEII, _G_HEIII = 1.0, 2.0, 1.0

#: ln of the Saha prefactor 2 g_{r+1} / g_r for each stage.
_LN_W_H = np.log(2.0 * _G_HII / _G_HI)
_LN_W_HE1 = np.log(2.0 * _G_HEII / _G_HEI)
_LN_W_HE2 = np.log(2.0 * _G_HEIII / _G_HEII)

#: ln(2 pi m_e k_B / h^2) [ln(cm^-2 K^-1)]; the thermal de Broglie density
#: is (2 pi m_e k T / h^2)^{3/2}.
_LN_DEBROGLIE_COEFF = np.log(2.0 * np.pi * _M_E * K_B / _H**2)

_LN2 = np.log(2.0)
_LN4 = np.log(4.0)

#: Largest gap between adjacent bound levels of hydrogen, n = 1 -> 2 (10.2 eV),
#: the one that sets the McWhirter density.
_MCWHIRTER_GAP_EV = 10.2
#: Cells count as "far below" LTE densities under this fraction of the McWhirter density.
_MCWHIRTER_MARGIN = 1e-2
#: Cells count as ionized by Saha above this fraction of the full-ionization electron density.
_IONIZED_FRACTION = 1e-3


def mcwhirter_density(T):
    """The McWhirter electron density [cm^-3] above which collisions keep hydrogen in LTE.

    ``n_e >= 1.6e12 T^{1/2} (Delta E / eV)^3`` with ``Delta E = 10.2 eV``
    (McWhirter 1965, "Spectral intensities", ch. 5 of *Plasma Diagnostic
    Techniques*, eds. Huddlestone & Leonard; cited from memory, in the form
    textbooks quote). About 1.7e17 cm^-3 at 1e4 K.
    """
    return 1.6e12 * np.sqrt(T) * _MCWHIRTER_GAP_EV**3


class SahaEquilibrium(IonizationModel):
    r"""Local thermodynamic (Saha) equilibrium for hydrogen and helium.

    For each stage ``r -> r+1`` (H I->H II, He I->He II, He II->He III)

    .. math::
        \frac{n_{r+1} n_e}{n_r} = S_r(T) = \frac{2 g_{r+1}}{g_r}
        \left(\frac{2\pi m_e k T}{h^2}\right)^{3/2} e^{-\chi_r / kT},

    with ground-state weights g(H I)=2, g(H II)=1, g(He I)=1, g(He II)=2,
    g(He III)=1 and ionization energies 13.598434, 24.587389 and
    54.417765 eV. The electron density closes the system through charge
    conservation ``n_e = n_HII + n_HeII + 2 n_HeIII``, solved per cell.

    Parameters
    ----------
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    tolerance : float
        Convergence tolerance on ``ln n_e`` (i.e. relative on ``n_e``),
        scaled by ``|ln n_e|`` where that exceeds 1. Default 1e-12.
    max_iterations : int
        Iteration cap of the safeguarded Newton solver. Default 200.

    Notes
    -----
    The right-hand side of charge conservation decreases monotonically with
    ``n_e`` (each ion's mean charge falls as ``n_e`` rises), so the root is
    unique. The solver works on ``u = ln n_e`` with all Saha factors kept
    as logarithms, which is what keeps 1 K (``exp(-chi/kT)`` ~ 1e-68500)
    and 1e9 K finite. The bracket is ``[ln g(N), ln N]``, where
    ``N = n_H + 2 n_He`` is the electron density of complete ionization
    and ``g`` is the right-hand side of charge conservation: since ``g``
    decreases, the root ``n_e* <= N`` obeys ``n_e* = g(n_e*) >= g(N)``.
    Newton steps that leave the current bracket are replaced by bisection,
    and all cells are updated together (no loop over cells).

    In the deep neutral limit the true ``n_e`` can be below the smallest
    float64 (e.g. ~1e-34000 cm^-3 at 1 K); it is then returned as 0.

    Validity: the Saha equation holds only where collisions dominate
    radiative processes, at electron densities near or above the McWhirter
    density (:func:`mcwhirter_density`, ~1e17 cm^-3 at 1e4 K): stellar
    interiors and atmospheres, dense disc midplanes. Cells that it ionizes
    (``n_e`` above 1e-3 of full ionization) at under 1 % of that density
    are counted and reported in one :class:`~rtrace.PhysicsRangeWarning`
    per model; for them use :class:`CollisionalEquilibrium`,
    :class:`IonizingSources` or a supplied state.

    Not included: pressure ionization and partition-function truncation at
    high density, molecules, pair creation above ~1e9 K, and
    non-equilibrium or photoionization effects.
    """

    def __init__(self, composition: Composition | None = None, tolerance: float = 1e-12, max_iterations: int = 200):
        super().__init__(composition)
        tolerance = float(tolerance)
        if not np.isfinite(tolerance) or tolerance <= 0.0:
            raise InputError(f"tolerance: must be finite and > 0, got {tolerance!r}")
        if int(max_iterations) < 1:
            raise InputError(f"max_iterations: must be >= 1, got {max_iterations!r}")
        self.tolerance = tolerance
        self.max_iterations = int(max_iterations)

    # -- Saha factors -------------------------------------------------------

    @staticmethod
    def _log_saha_factors(T):
        """Natural logs of S_H, S_He1, S_He2 [ln cm^-3] for ``T > 0`` (K)."""
        kT = K_B * T
        ln_lambda = 1.5 * (_LN_DEBROGLIE_COEFF + np.log(T))
        return (
            _LN_W_H + ln_lambda - CHI_H / kT,
            _LN_W_HE1 + ln_lambda - CHI_HE1 / kT,
            _LN_W_HE2 + ln_lambda - CHI_HE2 / kT,
        )

    @staticmethod
    def _log_charge_supply(uu, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2):
        """Ln g(u), d ln g / du and the pieces needed for species fractions.

        ``g(n_e) = n_H x_H(n_e) + n_He zbar(n_e)``: electrons released by the
        ions when the electron density is ``n_e = exp(u)``.
        """
        # Hydrogen: x_H = S_H / (S_H + n_e) = expit(ln S_H - u).
        ln_xh = log_expit(ln_sh - uu)
        ln_h = ln_nh + ln_xh
        # Helium stage populations ∝ 1, S1/n_e, S1 S2/n_e^2; multiply by n_e^2
        # to get log-weights that never need a division.
        w0 = 2.0 * uu
        w1 = ln_s1 + uu
        w2 = ln_s1 + ln_s2
        ln_den = np.logaddexp(np.logaddexp(w0, w1), w2)
        ln_q1 = np.logaddexp(w1, _LN2 + w2)  # ln sum k p_k (unnormalised)
        ln_q2 = np.logaddexp(w1, _LN4 + w2)  # ln sum k^2 p_k (unnormalised)
        ln_zbar = ln_q1 - ln_den
        ln_he = ln_nhe + ln_zbar
        ln_g = np.logaddexp(ln_h, ln_he)
        # d g/du: hydrogen -h (1 - x_H); helium -n_He Var(k), where
        # Var(k)/zbar = <k^2>/<k> - <k> is bounded by 2 (k in {0, 1, 2}).
        one_minus_xh = np.exp(log_expit(uu - ln_sh))
        var_over_mean = np.exp(ln_q2 - ln_q1) - np.exp(ln_zbar)
        frac_h = np.exp(ln_h - ln_g)
        frac_he = np.exp(ln_he - ln_g)
        dlng = -(frac_h * one_minus_xh + frac_he * var_over_mean)
        return ln_g, dlng, ln_xh, (w0, w1, w2, ln_den)

    def _solve(self, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2):
        """Solve ``ln g(u) = u`` for every cell; returns ``u = ln n_e``."""
        ln_ntot = np.logaddexp(ln_nh, _LN2 + ln_nhe)  # ln N, full ionization
        hi = ln_ntot.copy()
        lo, _, _, _ = self._log_charge_supply(hi, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
        lo = np.minimum(lo, hi)
        uu = hi.copy()
        for _ in range(self.max_iterations):
            ln_g, dlng, _, _ = self._log_charge_supply(uu, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
            resid = ln_g - uu  # decreasing in u
            deriv = dlng - 1.0  # <= -1, never zero
            # Shrink the bracket with the sign of the residual at the current point.
            pos = resid > 0.0
            lo = np.where(pos, uu, lo)
            hi = np.where(pos, hi, uu)
            delta = resid / deriv
            newton = uu - delta
            inside = (newton > lo) & (newton < hi)
            # Absolute tolerance on u is a relative one on n_e. Far in the
            # neutral limit |u| reaches ~1e5, where float64 spacing of u alone
            # exceeds 1e-12, so scale by |u| there (n_e underflows to 0 anyway).
            tol = self.tolerance * np.maximum(1.0, np.abs(uu))
            # A Newton step below tolerance means u is already the root; test it
            # before the bracket check, because such a step can round onto a
            # bracket end and would otherwise trigger needless bisection.
            converged = (np.abs(delta) <= tol) | (hi - lo <= tol)
            uu = np.where(converged, np.clip(newton, lo, hi), np.where(inside, newton, 0.5 * (lo + hi)))
            if np.all(converged):
                break
        else:
            raise RuntimeError(f"SahaEquilibrium: n_e did not converge in {self.max_iterations} iterations")
        return uu

    def _species(self, rho, T, fields):
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        shape = rho.shape
        out = {k: np.zeros(shape) for k in ("n_e", "n_HII", "n_HeII", "n_HeIII")}
        out["n_HI"] = np.array(n_h, dtype=np.float64, copy=True)
        out["n_HeI"] = np.array(n_he, dtype=np.float64, copy=True)
        # Cells with no gas or T = 0 stay neutral (the T -> 0 limit) and are
        # kept out of the solver, whose logs need n > 0 and T > 0.
        active = (T > 0.0) & ((n_h > 0.0) | (n_he > 0.0))
        if not np.any(active):
            return out
        # log(0) = -inf is intended for a missing element; logaddexp handles it.
        with np.errstate(divide="ignore"):
            ln_nh = np.log(n_h[active])
            ln_nhe = np.log(n_he[active])
        ln_sh, ln_s1, ln_s2 = self._log_saha_factors(T[active])
        with np.errstate(under="ignore", invalid="ignore"):
            uu = self._solve(ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
            _, _, ln_xh, (w0, w1, w2, ln_den) = self._log_charge_supply(uu, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
            nh_a, nhe_a = n_h[active], n_he[active]
            n_hii = np.exp(ln_nh + ln_xh)
            out["n_e"][active] = np.exp(uu)
            out["n_HII"][active] = n_hii
            # Neutral H via 1 - x_H = expit(u - ln S_H), exact even when x_H ~ 1.
            out["n_HI"][active] = nh_a * np.exp(log_expit(uu - ln_sh))
            out["n_HeI"][active] = nhe_a * np.exp(w0 - ln_den)
            out["n_HeII"][active] = nhe_a * np.exp(w1 - ln_den)
            out["n_HeIII"][active] = nhe_a * np.exp(w2 - ln_den)
        self._count_outside_lte(out["n_e"], n_h + 2.0 * n_he, T)
        return out

    def _count_outside_lte(self, n_e, n_full, T):
        """Count cells that Saha ionizes at electron densities far below where LTE holds."""
        with np.errstate(invalid="ignore"):
            ionized = n_e > _IONIZED_FRACTION * n_full
            thin = n_e < _MCWHIRTER_MARGIN * mcwhirter_density(T)
        self._count_range("lte", np.count_nonzero(ionized & thin), n_e.size)

    def _range_message(self, key, affected, total):
        return (
            f"saha: {affected} of {total} cells ({100.0 * affected / total:.3g}%) are ionized by the Saha "
            f"equation at electron densities far below where it holds (under {_MCWHIRTER_MARGIN:g} of the "
            "McWhirter density 1.6e12 T^1/2 (10.2 eV)^3 cm^-3, 1.7e15 cm^-3 at 1e4 K); LTE overestimates "
            "their ionization, by orders of magnitude below ~1.5e4 K at interstellar densities. Use "
            "'collisional' for shocked or hot gas, 'sources' for gas photoionized by stars, or a supplied "
            "ionization state"
        )

    def describe(self) -> str:
        """One-line description for provenance headers."""
        return f"saha({self.composition.describe()})"
