"""One piece of a grid through an ionization model: gas temperature, species, and the transfer's fields.

The thermal state comes as the temperature, or as what a hydrodynamics
solver writes: the pressure ``P`` or the specific internal energy ``e``
(``P = (gamma - 1) rho e``). The temperature then follows from the ideal
gas law ``P = n k T`` with ``n = n_H + n_He + n_e`` the free particles,
which depends on the ionization state, which depends on ``T``: the two are
solved together, cell by cell (:func:`temperature_from_pressure`).
"""

import numpy as np

from ...errors import InputError
from .composition import K_B, ion_term, particle_density

__all__ = ["temperature_from_pressure", "evaluate_piece", "piece_pressure", "THERMAL_INPUTS", "IonizationSummary"]

#: The ways a snapshot may give its thermal state: temperature [K], pressure [dyn cm^-2] or specific
#: internal energy [erg g^-1] (with the adiabatic index ``gamma``).
THERMAL_INPUTS = ("temperature", "pressure", "internal_energy")

#: Relative accuracy of the derived temperature.
_TOLERANCE = 1e-11
_MAX_ITERATIONS = 200


def _ln_particles(model, rho, T, fields):
    with np.errstate(divide="ignore"):
        return np.log(particle_density(model._species(rho, T, fields)))


def temperature_from_pressure(model, rho, pressure, fields=None):
    """Temperature [K] at which the model's particle count gives the pressure: ``P = n(T) k T``.

    Parameters
    ----------
    model : IonizationModel
        A local model (or a sources model with its photoionized share in ``fields``).
    rho, pressure : ndarray (float64)
        Mass density [g cm^-3] and pressure [dyn cm^-2], same shape, > 0.
    fields : dict, optional
        The model's per-cell fields for these cells.

    Returns
    -------
    ndarray
        float64 temperatures with ``|ln(n k T / P)| <= 1e-11`` where the
        model's ionization is continuous in ``T``. Where it jumps (the
        threshold model) and the pressure falls inside the jump, ``T`` is
        the jump's temperature.

    Notes
    -----
    ``T n(T)`` grows monotonically with ``T`` (more ionization never means
    fewer particles), so the root is unique and lies between the fully
    ionized (``n = 2 n_H + 3 n_He``) and the neutral (``n = n_H + n_He``)
    temperatures. A bracketing secant (Illinois) step, with every fourth step
    a bisection, finds it for all cells at once.
    """
    fields = fields or {}
    comp = model.composition
    if comp.hydrogen + comp.helium <= 0.0:
        raise InputError(
            f"pressure: the composition ({comp.describe()}) has no hydrogen or helium, so no "
            "particles to turn a pressure into a temperature (metals count as mass only)"
        )
    n_h = comp.hydrogen_number_density(rho)
    n_he = comp.helium_number_density(rho)
    ln_p = np.log(pressure)
    lo = ln_p - np.log(K_B * (2.0 * n_h + 3.0 * n_he))  # fully ionized: fewest K per unit pressure
    hi = ln_p - np.log(K_B * (n_h + n_he))  # neutral
    flat = rho.reshape(-1)
    out = np.exp(hi).reshape(-1)
    lo, hi, ln_p = lo.reshape(-1), hi.reshape(-1), ln_p.reshape(-1)
    flat_fields = {k: np.broadcast_to(v, rho.shape).reshape(-1) for k, v in fields.items()}

    def g(ln_t, idx):
        sub = {k: v[idx] for k, v in flat_fields.items()}
        return ln_t + np.log(K_B) + _ln_particles(model, flat[idx], np.exp(ln_t), sub) - ln_p[idx]

    # The root lies in [lo, hi]; at an end (neutral gas sits exactly at hi, fully ionized gas at lo)
    # rounding may give g a sign just past zero, so the ends are tested before any bracketing.
    all_cells = np.arange(flat.size)
    g_hi = g(hi, all_cells)
    g_lo = g(lo, all_cells)
    at_hi = g_hi <= _TOLERANCE
    at_lo = ~at_hi & (g_lo >= -_TOLERANCE)
    out[at_lo] = np.exp(lo[at_lo])
    idx = np.flatnonzero(~at_hi & ~at_lo & (hi - lo > _TOLERANCE))
    a, b = lo[idx], hi[idx]
    fa, fb = g_lo[idx], g_hi[idx]
    for it in range(_MAX_ITERATIONS):
        if idx.size == 0:
            break
        secant = b - fb * (b - a) / np.where(fb != fa, fb - fa, 1.0)
        mid = 0.5 * (a + b)
        use_mid = (it % 4 == 3) | ~((secant > np.minimum(a, b)) & (secant < np.maximum(a, b)))
        c = np.where(use_mid, mid, secant)
        fc = g(c, idx)
        cross = np.sign(fc) * np.sign(fb) < 0  # root between c and b: b becomes the other end
        a_new = np.where(cross, b, a)
        fa_new = np.where(cross, fb, np.where(use_mid, fa, 0.5 * fa))  # Illinois: halve the kept end
        a, fa, b, fb = a_new, fa_new, c, fc
        done = (np.abs(b - a) <= _TOLERANCE) | (fc == 0.0)
        out[idx[done]] = np.exp(b[done])
        keep = ~done
        idx, a, b, fa, fb = idx[keep], a[keep], b[keep], fa[keep], fb[keep]
    else:
        raise RuntimeError(f"temperature_from_pressure: {idx.size} cells did not converge")
    return out.reshape(rho.shape)


def piece_pressure(inputs):
    """The pressure [dyn cm^-2] of a piece given its pressure or internal energy: ``P = (gamma - 1) rho e``."""
    if "pressure" in inputs:
        return inputs["pressure"]
    return (inputs["gamma"] - 1.0) * inputs["density"] * inputs["internal_energy"]


def _thermal(model, inputs, fields):
    """The gas temperature of a piece, from whichever thermal input it has."""
    if "temperature" in inputs:
        return inputs["temperature"]
    return model.temperature_at_pressure(inputs["density"], piece_pressure(inputs), fields)


def evaluate_piece(model, inputs, fields=None, summary=None):
    """``(T_e, n_e, ion term)`` float64 arrays for one piece of a grid.

    Parameters
    ----------
    model : IonizationModel
    inputs : dict
        float64 cgs arrays of the piece: ``density`` and one of
        ``temperature``, ``pressure`` or ``internal_energy`` (with the
        scalar ``gamma``), already validated.
    fields : dict, optional
        The model's per-cell fields for the piece (named fields and the
        model's own arrays).
    summary : IonizationSummary, optional
        Accumulates ionized mass and volume over the pieces.
    """
    fields = fields or {}
    T = _thermal(model, inputs, fields)
    species = model._species(inputs["density"], T, fields)
    if summary is not None:
        summary.add(species)
    t_e = model.electron_temperature(T, species, fields)
    return t_e, species["n_e"], ion_term(species)


class IonizationSummary:
    """Ionized hydrogen by mass and by volume, summed over the pieces of a grid (cells weighted by volume)."""

    def __init__(self):
        self.n_h = self.n_hii = self.volume = self.ionized_volume = 0.0

    def add(self, species, cell_volume=1.0):
        """Add a piece's species densities; ``cell_volume`` weights pieces of different resolution (AMR)."""
        n_h = species["n_HI"] + species["n_HII"]
        self.n_h += cell_volume * float(np.sum(n_h))
        self.n_hii += cell_volume * float(np.sum(species["n_HII"]))
        safe = np.where(n_h > 0, n_h, 1.0)
        self.ionized_volume += cell_volume * float(np.sum(np.where(n_h > 0, species["n_HII"] / safe, 0.0)))
        self.volume += cell_volume * n_h.size

    def describe(self):
        """``"ionized H: 12.3% of the mass, 4.56% of the volume"``."""
        mass = self.n_hii / self.n_h if self.n_h > 0 else 0.0
        volume = self.ionized_volume / self.volume if self.volume else 0.0
        return f"ionized H: {100 * mass:.4g}% of the mass, {100 * volume:.4g}% of the volume"
