"""The frequency at which each line of sight turns optically thin (:func:`plot_tau_unity`)."""

import warnings

import astropy.units as u
import matplotlib
import numpy as np
from matplotlib import colors, ticker

from ..analysis.spectra import is_result, is_skymap, tau_unity_frequency
from ..errors import InputError, PhysicsRangeWarning
from .core import (
    STYLE,
    Plane,
    draw_plane,
    frequency_labels,
    geometry,
    limit,
    map_figsize,
    new_figure,
    save,
    subject_line,
    tick_text,
    two_five,
)

__all__ = ["plot_tau_unity"]

# Colours of the pixels whose tau = 1 frequency lies outside the traced range (kept out of
# the colour map's own range of colours: near-black, a red, and a light grey for no gas).
_BELOW_COLOUR, _ABOVE_COLOUR, _NO_GAS_COLOUR = "0.1", "#d0312d", "0.85"


def plot_tau_unity(obj, path=None, *, ax=None, cmap="cividis", title=None, vmin=None, vmax=None, scale_bar=None):
    """Map of the frequency at which each line of sight turns from optically thick to thin.

    One picture in place of a panel of optical-depth maps that all look alike
    (free-free ``tau ~ nu^-2.1`` only rescales the map): each pixel shows
    the frequency where its ``tau`` falls through 1
    (:func:`rtrace.analysis.tau_unity_frequency`, interpolated between the
    traced frequencies), on a logarithmic scale. Pixels where ``tau`` never
    crosses 1 within the traced frequencies are not left blank: they are
    drawn in their own colours and named in the legend, "below the traced
    range" (thin at every traced frequency), "above the traced range"
    (thick at every traced frequency) and "no absorbing gas" (``tau = 0``
    everywhere).

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
        A SkyMap is drawn from the Result behind it. Needs two frequencies or more.
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    ax : `~matplotlib.axes.Axes`, optional
        Draw into this axes.
    cmap : str or `~matplotlib.colors.Colormap`
        Colour map for the frequencies inside the range.
    title : str, optional
        Default names the picture and the whole source's tau = 1 frequency,
        with a line naming the snapshot and the ionization model.
    vmin, vmax : `~astropy.units.Quantity` or float, optional
        Ends of the colour scale (a float is in GHz); default the lowest and
        highest traced frequencies. Frequencies outside given ends take the
        colour of the nearer end.
    scale_bar : None, False or `~astropy.units.Quantity`
        As in :func:`plot_map`.

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    from matplotlib.patches import Patch

    result = obj.result if (is_skymap(obj) and getattr(obj, "result", None) is not None) else obj
    if not is_result(result):
        raise InputError(f"obj: expected an rtrace Result or a SkyMap with its Result, got {type(obj).__name__}")
    nu = u.Quantity(result.frequencies).to_value(u.Hz, equivalencies=u.spectral())
    if nu.size < 2:
        raise InputError("obj: the tau = 1 frequency needs at least two traced frequencies")
    with warnings.catch_warnings():
        # the picture names lines of sight thin or thick over the whole traced range in its legend
        warnings.simplefilter("ignore", PhysicsRangeWarning)
        per_pixel, whole = tau_unity_frequency(result)
    ghz = per_pixel.to_value(u.GHz)
    tau = np.asarray(result.tau, float)
    order = np.argsort(nu)
    no_gas = np.all(tau <= 0, axis=0)
    missing = ~np.isfinite(ghz) & ~no_gas
    above = missing & (tau[order[-1]] >= 1.0)  # thick even at the highest frequency
    below = missing & ~above  # thin even at the lowest
    scale, distance, size = geometry(result)
    plane = Plane(
        ghz,
        quantity="tau",
        label=r"frequency where $\tau$ = 1 (GHz)",
        tag="",
        unit=u.GHz,
        per=None,
        pixel_scale=scale,
        distance=distance,
        pixel_size=size,
    )
    lo = nu.min() / 1e9 if vmin is None else limit(vmin, plane, "vmin")
    hi = nu.max() / 1e9 if vmax is None else limit(vmax, plane, "vmax")
    if not (lo > 0 and hi > lo):
        raise InputError(f"vmax: the frequency scale needs 0 < vmin < vmax, got {lo:g} and {hi:g} GHz")
    norm = colors.LogNorm(vmin=lo, vmax=hi)
    values = np.clip(ghz, lo, hi)
    values[below] = lo / 10.0  # under: drawn in the "below" colour
    values[above] = hi * 10.0  # over: drawn in the "above" colour
    values[no_gas] = np.nan
    plane.values = values
    base = matplotlib.colormaps[cmap] if isinstance(cmap, str) else cmap
    if not isinstance(base, colors.Colormap):
        raise InputError(f"cmap: unknown colour map {cmap!r}")
    cmap_obj = base.with_extremes(under=_BELOW_COLOUR, over=_ABOVE_COLOUR, bad=_NO_GAS_COLOUR)
    with matplotlib.rc_context(STYLE):
        own = ax is None
        if own:
            width, height = map_figsize(ghz.shape)
            fig = new_figure((width, height + 0.6))  # room for the legend below
            ax = fig.add_subplot()
        else:
            fig = ax.figure
        subject = subject_line(result) if title is None else ""
        if title is None:
            whole_ghz = whole.to_value(u.GHz)
            title = r"Frequency where $\tau$ = 1" + (
                f" (whole source: {frequency_labels(whole)[0]})" if np.isfinite(whole_ghz) else ""
            )
        image = draw_plane(ax, plane, norm, cmap_obj, contours=None, scale_bar=scale_bar, title=title)
        cbar = fig.colorbar(image, ax=ax, extend="both")
        cbar.set_label(plane.label)
        cbar.ax.yaxis.set_major_formatter(ticker.FuncFormatter(tick_text))
        cbar.ax.yaxis.set_minor_formatter(ticker.FuncFormatter(two_five) if hi / lo < 300 else ticker.NullFormatter())
        lo_txt, hi_txt = frequency_labels([lo, hi] * u.GHz)
        handles = []
        if below.any():
            handles.append(
                Patch(
                    facecolor=_BELOW_COLOUR,
                    edgecolor="0.4",
                    label=f"below the traced range (thin at {lo_txt} and above)",
                )
            )
        if above.any():
            handles.append(
                Patch(
                    facecolor=_ABOVE_COLOUR,
                    edgecolor="0.4",
                    label=f"above the traced range (thick at {hi_txt} and below)",
                )
            )
        if no_gas.any():
            handles.append(Patch(facecolor=_NO_GAS_COLOUR, edgecolor="0.4", label="no absorbing gas"))
        if handles:
            legend = (
                fig.legend(handles=handles, loc="outside lower center", frameon=False, fontsize=8)
                if own
                else ax.legend(handles=handles, loc="lower left", fontsize=7)
            )
            legend.set_gid("categories")
        if own and subject:
            fig.suptitle(subject, fontsize=8, color="0.3")
        save(fig, path)
    return fig
