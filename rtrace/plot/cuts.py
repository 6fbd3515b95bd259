"""A cut's profiles: full and unabsorbed intensity, and optical depth, along the line (:func:`plot_cut`)."""

import astropy.units as u
import numpy as np

from .core import format_frequency, new_figure, save

__all__ = ["plot_cut"]


def plot_cut(cut, path=None, frequencies=None):
    """Full (solid) and unabsorbed (dashed) intensity profiles, and tau, along a cut.

    The gap between the solid and dashed lines of a frequency is the absorption alone
    (both profiles are in the cut's background convention, named in the title).

    Parameters
    ----------
    cut : `~rtrace.analysis.cuts.Cut`
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    frequencies : sequence of int, optional
        Indices of the traced frequencies to show (default all).

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    idx = range(len(cut.frequencies)) if frequencies is None else list(frequencies)
    fig = new_figure((7.0, 6.0))
    ax_i, ax_t = fig.subplots(2, 1, sharex=True)
    x = cut.offset.to_value(u.arcsec)
    full = cut.intensity.value
    thin = cut.unabsorbed_intensity.value
    for k in idx:
        nu = float(cut.frequencies[k].to_value(u.Hz))
        (line,) = ax_i.plot(x, full[k], label=f"{format_frequency(nu)}")
        ax_i.plot(x, thin[k], ls="--", color=line.get_color())
        ax_t.plot(x, cut.tau[k], color=line.get_color())
    if np.any(full[list(idx)] > 0):
        ax_i.set_yscale("log")
        ax_t.set_yscale("log")
    ax_t.axhline(1.0, color="0.4", lw=0.8, ls=":")
    ax_i.set_ylabel(r"$I_\nu$ (erg s$^{-1}$ cm$^{-2}$ Hz$^{-1}$ sr$^{-1}$)")
    ax_i.set_title(
        f"solid: with absorption, dashed: emission only\nbackground {cut.describe_background()}", fontsize="small"
    )
    ax_i.legend(fontsize="small")
    ax_t.set_ylabel(r"$\tau_\nu$")
    ax_t.set_xlabel("offset along the cut (arcsec)")
    save(fig, path)
    return fig
