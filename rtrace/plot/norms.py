"""Colour: stretches and their norms, colour maps, colour bars and their ticks.

Part of the plotting package's internal API (see :mod:`rtrace.plot.core`).
"""

import math

import matplotlib
import numpy as np
from matplotlib import colors, ticker

from ..analysis.spectra import THIN_SPECTRAL_INDEX
from ..errors import InputError
from .text import tick_text

__all__ = ["STRETCHES", "check_stretch", "resolve_cmap", "make_norm", "colorbar"]

STRETCHES = ("linear", "log", "asinh")

# Narrowest automatic spectral-index scale (half range about its centre): a uniform map
# still gets a usable scale, and thin gas (-0.08 to -0.15) spreads over the colours.
_MIN_INDEX_HALF_RANGE = 0.05

# Perceptually uniform sequential maps, one per quantity so figures are recognisable;
# a diverging map for the spectral index, white at the optically thin value.
_CMAPS = {
    "intensity": "inferno",
    "tau": "viridis",
    "emission_measure": "magma",
    "brightness_temperature": "plasma",
    "spectral_index": "RdBu_r",
}

# The log stretch shows at most this dynamic range below the peak; fainter values take the
# lowest colour (a wider range spends most of the colour map on numerical dust).
_LOG_DYNAMIC_RANGE = 1.0e4

# The asinh stretch is linear within this fraction of the peak (or 3 rms for noisy maps),
# logarithmic beyond: faint extended emission and a bright core both stay visible.
_ASINH_LINEAR_FRACTION = 0.02


def _finite(arrays):
    vals = np.concatenate([np.asarray(a, float).ravel() for a in arrays])
    return vals[np.isfinite(vals)]


def resolve_cmap(cmap, quantity):
    """The Colormap to draw ``quantity`` with (``cmap``, or the quantity's own when None), blank pixels set.

    Blank (NaN or masked) pixels take the lowest colour of a sequential map (zero emission under a log
    stretch is the faintest emission, not a hole) and neutral grey on the spectral index's diverging map.
    """
    name = _CMAPS[quantity] if cmap is None else cmap
    if isinstance(name, colors.Colormap):
        base = name
    else:
        try:
            base = matplotlib.colormaps[name]
        except KeyError:
            raise InputError(f"cmap: unknown colour map {name!r}") from None
    if quantity == "spectral_index":
        # blanked pixels (no emission, low SNR) in neutral grey, apart from the white thin value
        return base.with_extremes(bad="0.6")
    # zero emission (masked by a log stretch) looks like the faintest emission, not a hole
    return base.with_extremes(bad=base(0.0))


def check_stretch(stretch):
    """Refuse (InputError) a stretch not in STRETCHES."""
    if stretch not in STRETCHES:
        raise InputError(f"stretch: expected one of {', '.join(STRETCHES)}, got {stretch!r}")


def make_norm(planes, stretch, vmin=None, vmax=None):
    """Colour normalisation for one or several planes (a shared scale).

    ``vmin``/``vmax`` (plotted unit) replace the ends derived from the planes. The stretches:
    ``linear`` from 0 (or the lowest value, if negative) to the peak; ``log`` over at most
    ``1e4`` below the peak, raised to the noise rms where given; ``asinh`` linear within 2 % of
    the peak, or 3 rms for noisy planes. The spectral index always gets a linear scale
    symmetric about the optically thin value.
    """
    quantity = planes[0].quantity
    vals = _finite([p.values for p in planes])
    if vmin is not None and vmax is not None and vmax <= vmin:
        raise InputError(f"vmax: must exceed vmin ({vmax:g} <= {vmin:g})")
    if quantity == "spectral_index":
        return _index_norm(vals, vmin, vmax)
    if vals.size == 0 and vmin is None and vmax is None:
        return colors.Normalize(0.0, 1.0)
    lo, hi = (float(vals.min()), float(vals.max())) if vals.size else (0.0, 1.0)
    if vmin is not None:
        lo = vmin
    if vmax is not None:
        hi = vmax
    low = 0.0 if lo >= 0 and vmin is None else lo
    if hi <= low:
        if vmax is not None:
            raise InputError(f"vmax: {vmax:g} lies below the lower end of the colour scale ({low:g})")
        hi = low + 1.0  # a constant image still gets a valid scale
    noises = [p.noise for p in planes if p.noise is not None]
    if stretch == "linear":
        return colors.Normalize(vmin=low, vmax=hi)
    if stretch == "log":
        pos = vals[vals > 0]
        if pos.size == 0 and (vmax is None or vmin is None or vmin <= 0):
            raise InputError(f"stretch: 'log' needs positive values, and the {quantity} map has none")
        top = float(pos.max()) if vmax is None else vmax
        if top <= 0:
            raise InputError(f"vmax: the 'log' stretch needs a positive vmax, got {top:g}")
        if vmin is not None and vmin > 0:
            return colors.LogNorm(vmin=vmin, vmax=top)
        floor = max(float(pos.min()), top / _LOG_DYNAMIC_RANGE)
        if noises:
            floor = min(max(floor, min(noises)), top / 10.0)
        return colors.LogNorm(vmin=floor, vmax=top)
    vmin = low
    peak = max(abs(lo), abs(hi))
    width = _ASINH_LINEAR_FRACTION * peak
    if noises:
        width = 3.0 * max(noises)
    return colors.AsinhNorm(linear_width=width, vmin=vmin, vmax=hi)


def _index_norm(vals, vmin, vmax):
    """A linear scale for the spectral index, symmetric about its centre (the diverging map's white).

    Automatic: centred on the optically thin index, reaching the farther of the 1st and
    99th percentiles (within +-4). Given ends are used as they are (the centre is then
    their middle); one given end is mirrored about the thin index when that gives a
    valid scale.
    """
    c = THIN_SPECTRAL_INDEX
    if vals.size:
        lo, hi = np.percentile(vals, 1), np.percentile(vals, 99)
        half = min(max(abs(lo - c), abs(hi - c), _MIN_INDEX_HALF_RANGE), 4.0)
    else:
        half = 2.0
    if vmin is None and vmax is None:
        return colors.Normalize(c - half, c + half)
    if vmin is not None and vmax is not None:
        return colors.Normalize(vmin, vmax)
    if vmin is not None:
        top = 2 * c - vmin if vmin < c else max(c + half, vmin + 2 * _MIN_INDEX_HALF_RANGE)
        return colors.Normalize(vmin, top)
    bottom = 2 * c - vmax if vmax > c else min(c - half, vmax - 2 * _MIN_INDEX_HALF_RANGE)
    return colors.Normalize(bottom, vmax)


def _extend(norm, planes):
    vals = _finite([p.values for p in planes])
    if vals.size == 0:
        return "neither"
    low, high = bool(vals.min() < norm.vmin), bool(vals.max() > norm.vmax)
    return {(False, False): "neither", (True, False): "min", (False, True): "max", (True, True): "both"}[(low, high)]


def _asinh_ticks(norm, min_gap=0.08):
    """Round ticks for an asinh colour bar, at least ``min_gap`` of its length apart.

    Candidates in order of preference: 0, powers of ten (largest first), then 5x and 2x
    multiples; each is kept if it does not crowd one already kept (matplotlib's own
    locator can put +-1 on top of 0 when the linear width is large).
    """
    vmin, vmax = float(norm.vmin), float(norm.vmax)
    top = math.floor(math.log10(max(abs(vmin), abs(vmax))))
    decades = range(top, top - 9, -1)
    candidates = [0.0] + [sign * 10.0**k for k in decades for sign in (1, -1)]
    candidates += [sign * m * 10.0**k for k in decades for m in (5, 2) for sign in (1, -1)]
    chosen = []
    for value in candidates:
        if vmin <= value <= vmax:
            pos = float(norm(value))
            if all(abs(pos - float(norm(t))) >= min_gap for t in chosen):
                chosen.append(value)
    return sorted(chosen)


def colorbar(fig, image, ax, plane, norm, planes, **kw):
    """A colour bar for ``image`` beside ``ax`` (an axes or a list), labelled with ``plane.label``.

    It extends with arrows where any of ``planes`` runs past the norm's ends; its ticks are round
    values in plain numbers or ``m x 10^k`` (asinh and log stretches) with a true minus sign;
    ``kw`` go to :meth:`matplotlib.figure.Figure.colorbar`.
    """
    cbar = fig.colorbar(image, ax=ax, extend=_extend(norm, planes), **kw)
    cbar.set_label(plane.label)
    axis = cbar.ax.yaxis
    if plane.quantity == "spectral_index":
        axis.set_major_locator(ticker.MaxNLocator(nbins=7, steps=[1, 2, 2.5, 5, 10]))
        axis.set_major_formatter(ticker.FuncFormatter(tick_text))
    elif isinstance(norm, colors.AsinhNorm):
        cbar.set_ticks(_asinh_ticks(norm))
        axis.set_major_formatter(ticker.FuncFormatter(tick_text))
        axis.set_minor_locator(ticker.NullLocator())
    elif isinstance(norm, colors.LogNorm) and norm.vmax / norm.vmin > 30:
        # two decades or more have enough labelled powers of ten; unlabelled minor ticks
        axis.set_major_formatter(ticker.FuncFormatter(tick_text))
        axis.set_minor_formatter(ticker.NullFormatter())
    return cbar
