"""Spectra: a log-log SED with the spectral index written between neighbouring points (:func:`plot_sed`)."""

import math

import astropy.units as u
import matplotlib
import numpy as np
from matplotlib import ticker

from ..analysis.spectra import spectral_index, spectrum_arrays
from ..errors import InputError
from .core import STYLE, new_figure, prefix_for, save, tick_text, two_five

__all__ = ["plot_sed"]


def _annotate_indices(ax, x, y, color):
    """Write the spectral index beside each segment, on the side away from the curve.

    The label is pushed along the segment's normal in screen space (up-left of a rising
    segment, up-right of a falling one) so it never sits on the line.
    """
    alpha = spectral_index(x * u.GHz, y)
    pts = ax.transData.transform(np.column_stack([x, y]))
    labels = []
    for k, a in enumerate(alpha):
        if not np.isfinite(a):
            continue
        dx, dy = pts[k + 1] - pts[k]
        norm = math.hypot(dx, dy) or 1.0
        nx, ny = -dy / norm, dx / norm
        if ny < 0:
            nx, ny = -nx, -ny
        text = ax.annotate(
            rf"$\alpha$ = {a:+.2f}".replace("-", "\N{MINUS SIGN}"),
            (math.sqrt(x[k] * x[k + 1]), math.sqrt(y[k] * y[k + 1])),
            xytext=(0, 0),
            textcoords="offset points",
            fontsize=8,
            color=color,
            gid="spectral_index",
        )
        _place_label(text, nx, ny)
        labels.append((text, nx, ny))
    if labels:
        _keep_inside(ax, labels)


def _place_label(text, nx, ny):
    """Offset a label 7 points along the normal (nx, ny), aligned so it grows away from the curve."""
    text.xyann = (7 * nx, 7 * ny)
    text.set_ha("right" if nx < -0.35 else "left" if nx > 0.35 else "center")
    text.set_va("bottom" if ny > 0.35 else "top" if ny < -0.35 else "center")


def _keep_inside(ax, labels):
    """Put each index label on the side of its segment where it stays inside the axes.

    A label outside the frame would sit on the tick labels; the other side of the
    segment is tried, then the label is pulled into the frame along the vertical.
    """
    fig = ax.figure
    fig.draw_without_rendering()  # runs the layout: the axes' final position
    frame = ax.get_window_extent()
    scale = fig.dpi / 72.0  # pixels per point

    def outside(text):
        box = text.get_window_extent()
        return max(frame.x0 - box.x0, box.x1 - frame.x1, frame.y0 - box.y0, box.y1 - frame.y1, 0.0)

    for text, nx, ny in labels:
        first = outside(text)
        if first == 0:
            continue
        _place_label(text, -nx, -ny)
        second = outside(text)
        if second == 0:
            continue
        if second > first:
            _place_label(text, nx, ny)
        box = text.get_window_extent()
        dy = max(frame.y0 + 2 - box.y0, 0.0) - max(box.y1 - (frame.y1 - 2), 0.0)
        dx = max(frame.x0 + 2 - box.x0, 0.0) - max(box.x1 - (frame.x1 - 2), 0.0)
        text.xyann = (text.xyann[0] + dx / scale, text.xyann[1] + dy / scale)


def _log_ticks(axis, lo, hi):
    """Labelled ticks on a log axis from ``lo`` to ``hi``, however short the range.

    Over ~2.5 decades the powers of ten suffice; down to one decade the 2x and 5x
    minor ticks are labelled too; under a decade none of those may fall inside, so
    round values (1-2-2.5-5 steps) are placed and labelled instead.
    """
    axis.set_major_formatter(ticker.FuncFormatter(tick_text))
    if hi / lo < 10:
        axis.set_major_locator(ticker.MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
        axis.set_minor_locator(ticker.NullLocator())
        axis.set_minor_formatter(ticker.NullFormatter())
        return
    axis.set_major_locator(ticker.LogLocator())
    axis.set_minor_locator(ticker.LogLocator(subs="auto"))
    axis.set_minor_formatter(ticker.FuncFormatter(two_five) if hi / lo < 300 else ticker.NullFormatter())


def plot_sed(frequencies, flux, path=None, ax=None, label=None, annotate_index=True):
    """Log-log spectrum with the spectral index written between neighbouring points.

    Parameters
    ----------
    frequencies : `~astropy.units.Quantity` (n,)
        Spectral unit; plotted in GHz.
    flux : `~astropy.units.Quantity` (n,)
        Flux density (convertible to Jy); plotted with the SI prefix that
        suits its peak. Points <= 0 cannot be drawn on a log axis and are left out.
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    ax : `~matplotlib.axes.Axes`, optional
        Draw into this axes (several spectra on one figure share its flux
        unit only if they have similar peaks: pass the same ``ax``).
    label : str, optional
        Legend entry.
    annotate_index : bool
        Write ``alpha = d ln S / d ln nu`` at the middle of each segment.

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    nu, _, _ = spectrum_arrays(frequencies, flux)
    try:
        s_jy = np.atleast_1d(u.Quantity(flux).to_value(u.Jy))
    except u.UnitsError:
        raise InputError(f"flux: expected a flux density (Jy), got unit '{u.Quantity(flux).unit}'") from None
    order = np.argsort(nu)
    nu, s_jy = nu[order], s_jy[order]
    good = np.isfinite(s_jy) & (s_jy > 0)
    if not good.any():
        raise InputError("flux: no positive values to draw on a log axis")
    nu_ghz, s_pos = nu[good] / 1e9, s_jy[good]
    with matplotlib.rc_context(STYLE):
        if ax is None:
            fig = new_figure((5.4, 4.0))
            ax = fig.add_subplot()
            factor, prefix = prefix_for(float(s_pos.max()))
            ax._rtrace_flux_unit = (factor, prefix)
        else:
            fig = ax.figure
            factor, prefix = getattr(ax, "_rtrace_flux_unit", None) or prefix_for(float(s_pos.max()))
            ax._rtrace_flux_unit = (factor, prefix)
        y = s_pos / factor
        (line,) = ax.plot(nu_ghz, y, marker="o", markersize=5, linewidth=1.5, label=label)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("frequency (GHz)")
        ax.set_ylabel(f"flux density ({prefix}Jy)")
        ax.margins(x=0.08, y=0.2)
        ax.autoscale_view()
        for axis, (lo, hi) in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):
            _log_ticks(axis, lo, hi)
        if annotate_index and nu_ghz.size > 1:
            _annotate_indices(ax, nu_ghz, y, line.get_color())
        ax.grid(True, which="major", alpha=0.35, linewidth=0.6)
        ax.grid(True, which="minor", alpha=0.12, linewidth=0.5)
        if label is not None:
            ax.legend(frameon=False)
        save(fig, path)
    return fig
