"""Figures of traced and observed images: single maps, panels of maps, spectra.

Every function builds a :class:`matplotlib.figure.Figure` directly (no pyplot
state, so it works with the Agg backend, in scripts and in threads), returns
it, and when ``path`` is given saves it atomically: the format follows the
suffix (``.png``, ``.pdf``, ``.svg``, ... anything matplotlib writes), PNG
when there is none.

Sky orientation: the row index grows toward north and the column index
toward west, so maps are drawn with ``origin="lower"`` and the horizontal axis
is the offset toward east, increasing to the left (east left, as on the sky).
Pixel ``(row, col)`` is centred at ``east = -(col + 0.5 - nx/2) s`` and
``north = (row + 0.5 - ny/2) s`` for a pixel scale ``s``. Beam position angles
run from north through east, so a 45 deg beam points up and to the left.
"""

import dataclasses
import math
import os
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import matplotlib
import numpy as np
from matplotlib import colors, patheffects, ticker
from matplotlib.figure import Figure
from matplotlib.patches import Ellipse

from .analysis.spectra import (THIN_SPECTRAL_INDEX, _is_result, _is_skymap, _spectrum_arrays, frequency_index,
                               pixel_flux, spectral_index, spectral_index_map)
from .errors import InputError
from .quantities import finite_number

__all__ = ["plot_map", "plot_panels", "plot_sed", "QUANTITIES", "STRETCHES", "nice_length",
           "choose_scale_bar", "DEFAULT_SNR_THRESHOLD"]

QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature", "spectral_index")
STRETCHES = ("linear", "log", "asinh")

# Spectral-index maps of noisy SkyMaps blank pixels whose model is below this many rms in
# either plane: below ~3 sigma the index is dominated by noise (common practice).
DEFAULT_SNR_THRESHOLD = 3.0

# Perceptually uniform sequential maps, one per quantity so figures are recognisable;
# a diverging map for the spectral index, white at the optically thin value.
_CMAPS = {"intensity": "inferno", "tau": "viridis", "emission_measure": "magma",
          "brightness_temperature": "plasma", "spectral_index": "RdBu_r"}

_NAMES = {"intensity": "Intensity", "tau": "Optical depth", "emission_measure": "Emission measure",
          "brightness_temperature": "Brightness temperature", "spectral_index": "Spectral index"}

# Readable at the sizes these figures are made (about 5 inches wide), whatever the user's rcParams.
_STYLE = {"font.size": 10, "axes.titlesize": 11, "axes.labelsize": 10, "xtick.labelsize": 9,
          "ytick.labelsize": 9, "legend.fontsize": 9, "figure.titlesize": 12, "savefig.dpi": 150,
          "figure.dpi": 100, "image.interpolation": "nearest", "axes.linewidth": 0.8}

# The log stretch shows at most this dynamic range below the peak; fainter values take the
# lowest colour (a wider range spends most of the colour map on numerical dust).
_LOG_DYNAMIC_RANGE = 1.0e4

# The asinh stretch is linear within this fraction of the peak (or 3 rms for noisy maps),
# logarithmic beyond: faint extended emission and a bright core both stay visible.
_ASINH_LINEAR_FRACTION = 0.02

_SI_PREFIXES = ((1.0, ""), (1.0e-3, "m"), (1.0e-6, "\N{MICRO SIGN}"), (1.0e-9, "n"))


@dataclass
class _Plane:
    """One 2-D image ready to draw, in its plotted unit."""
    values: np.ndarray              # (ny, nx)
    quantity: str
    label: str                      # colour-bar label with unit
    tag: str                        # frequency description, e.g. "1 GHz"
    unit: object                    # astropy unit of ``values`` (for contour levels given as Quantities)
    per: object                     # u.pix or u.beam for fluxes, else None
    pixel_scale: u.Quantity         # angle
    distance: object                # Quantity or None
    pixel_size: object              # Quantity or None
    beam: object = None             # radio_beam.Beam or None
    noise: object = None            # rms in the plotted unit, or None


# --- small helpers ------------------------------------------------------------------------------

def _format_frequency(nu_hz):
    if nu_hz >= 1e9:
        return f"{nu_hz / 1e9:.4g} GHz"
    return f"{nu_hz / 1e6:.4g} MHz"


def _prefix_for(peak):
    """(factor, prefix) so that ``peak / factor`` lies in [1, 1000) where possible."""
    for factor, prefix in _SI_PREFIXES:
        if peak >= factor:
            return factor, prefix
    return _SI_PREFIXES[-1]


def _finite(arrays):
    vals = np.concatenate([np.asarray(a, float).ravel() for a in arrays])
    return vals[np.isfinite(vals)]


def nice_length(target):
    """The value of the 1-2-5 sequence closest to ``target`` (in log).

    Parameters
    ----------
    target : float
        A positive number.

    Returns
    -------
    float
    """
    if not (np.isfinite(target) and target > 0):
        raise InputError(f"target: must be a positive finite number, got {target!r}")
    decade = math.floor(math.log10(target))
    candidates = [m * 10.0**k for k in (decade - 1, decade, decade + 1) for m in (1, 2, 5)]
    return min(candidates, key=lambda c: abs(math.log(c / target)))


def choose_scale_bar(field_width):
    """A scale-bar length of about a fifth of the field, rounded to 1-2-5.

    Parameters
    ----------
    field_width : `~astropy.units.Quantity`
        Physical width of the field (length).

    Returns
    -------
    `~astropy.units.Quantity`
        In AU below 0.05 pc (10^4 AU), pc below 1000 pc, kpc above, so the
        number on the bar stays short.
    """
    target = u.Quantity(field_width).to(u.pc) / 5.0
    if target < 0.05 * u.pc:
        unit = u.AU
    elif target < 1000 * u.pc:
        unit = u.pc
    else:
        unit = u.kpc
    return nice_length(target.to_value(unit)) * unit


def _axis_unit(width_arcsec):
    """Angular unit for the map axes so that tick labels stay short."""
    if width_arcsec < 600.0:
        return u.arcsec, "arcsec"
    if width_arcsec < 36000.0:
        return u.arcmin, "arcmin"
    return u.deg, "deg"


def _resolve_cmap(cmap, quantity):
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


def _check_stretch(stretch):
    if stretch not in STRETCHES:
        raise InputError(f"stretch: expected one of {', '.join(STRETCHES)}, got {stretch!r}")


def _check_quantity(quantity):
    if quantity not in QUANTITIES:
        raise InputError(f"quantity: unknown {quantity!r}; expected one of {', '.join(QUANTITIES)}")


def _check_image(obj):
    if not (_is_result(obj) or _is_skymap(obj)):
        raise InputError(f"obj: expected an rtrace Result or SkyMap, got {type(obj).__name__}")


# --- what to draw --------------------------------------------------------------------------------

def _geometry(obj):
    distance = getattr(obj, "distance", None)
    if distance is None and hasattr(obj, "view"):
        distance = obj.view.distance
    return u.Quantity(obj.pixel_scale), distance, getattr(obj, "pixel_size", None)


def _beam(obj, index):
    if not _is_skymap(obj):
        return None
    beams = getattr(obj, "beams", None)
    return beams[index] if beams is not None else obj.beam


def _noise(obj, index):
    rms = getattr(obj, "noise_rms", None) if _is_skymap(obj) else None
    if rms is None:
        return None
    value = float(np.broadcast_to(u.Quantity(rms).to_value(u.Jy / u.beam), (len(obj.frequencies),))[index])
    # a zero rms is a noiseless plane: no 3-sigma floor, no asinh width from it
    return value if value > 0 else None


def _is_pair(value):
    """A (nu1, nu2) pair: a 2-element Quantity, tuple or list (np.ndim fails on tuples of Quantities)."""
    if isinstance(value, u.Quantity):
        return value.ndim == 1 and len(value) == 2
    return isinstance(value, (tuple, list)) and len(value) == 2


def _spectral_pair(frequency):
    if not _is_pair(frequency):
        raise InputError(f"frequency: the spectral index needs two frequencies (nu1, nu2), got {frequency!r}")
    return frequency[0], frequency[1]


def _plane(obj, quantity, frequency):
    """Extract the image to draw as a _Plane."""
    _check_image(obj)
    _check_quantity(quantity)
    if _is_skymap(obj) and quantity in ("tau", "emission_measure"):
        # optical depth and emission measure are not observed: show those of the model behind the map
        if getattr(obj, "result", None) is None:
            raise InputError(f"quantity: {quantity!r} needs the Result behind the SkyMap (obj.result is None)")
        obj = obj.result
    scale, distance, size = _geometry(obj)
    nu = u.Quantity(obj.frequencies).to_value(u.Hz, equivalencies=u.spectral())
    common = dict(quantity=quantity, pixel_scale=scale, distance=distance, pixel_size=size)

    if quantity == "spectral_index":
        f1, f2 = _spectral_pair(frequency)
        i1, i2 = frequency_index(obj, f1, "frequency"), frequency_index(obj, f2, "frequency")
        noisy = _noise(obj, i1) is not None
        alpha = spectral_index_map(obj, i1, i2, snr_threshold=DEFAULT_SNR_THRESHOLD if noisy else None)
        beam = None
        if _is_skymap(obj):
            # the index is only as sharp as the larger of the two beams
            beam = max(_beam(obj, i1), _beam(obj, i2), key=lambda b: u.Quantity(b.sr).to_value(u.sr))
        label = r"spectral index $\alpha$"
        if noisy:
            label += f" (model > {DEFAULT_SNR_THRESHOLD:g} rms)"
        return _Plane(alpha, label=label, tag=f"{_format_frequency(nu[i1])} \N{EN DASH} "
                      f"{_format_frequency(nu[i2])}", unit=u.dimensionless_unscaled, per=None, beam=beam,
                      **common)

    index = 0 if frequency is None else frequency_index(obj, frequency, "frequency")
    tag = _format_frequency(nu[index])
    if quantity == "intensity":
        if _is_skymap(obj):
            values = u.Quantity(obj.data[index]).to_value(u.Jy / u.beam)
            per, per_txt = u.beam, "beam"
        else:
            values = pixel_flux(obj)[index].to_value(u.Jy)
            per, per_txt = u.pix, "pixel"
        peak = np.nanmax(np.abs(values)) if np.isfinite(values).any() else 1.0
        factor, prefix = _prefix_for(peak)
        noise = _noise(obj, index)
        return _Plane(values / factor, label=f"intensity ({prefix}Jy {per_txt}$^{{-1}}$){_background_note(obj)}",
                      tag=tag,
                      unit=factor * u.Jy / per, per=per, beam=_beam(obj, index),
                      noise=None if noise is None else noise / factor, **common)
    if quantity == "tau":
        return _Plane(np.asarray(obj.tau[index], float), label=r"optical depth $\tau$", tag=tag,
                      unit=u.dimensionless_unscaled, per=None, **common)
    if quantity == "emission_measure":
        em = obj.emission_measure.to_value(u.pc * u.cm**-6)
        return _Plane(em, label=r"emission measure (pc cm$^{-6}$)", tag="", unit=u.pc * u.cm**-6,
                      per=None, **common)
    # brightness temperature
    if _is_skymap(obj):
        # Rayleigh-Jeans: linear in Jy/beam, so noise stays symmetric (radio convention)
        tb = obj.brightness_temperature("rayleigh-jeans")[index].to_value(u.K)
        label = "brightness temperature, R\N{EN DASH}J (K)"
        noise = _noise(obj, index)
        if noise is not None:
            # the rms in K, by the same Rayleigh-Jeans equivalency (astropy) the map uses
            noise = (noise * u.Jy / u.beam).to_value(u.K, equivalencies=u.brightness_temperature(
                nu[index] * u.Hz, beam_area=_beam(obj, index).sr))
    else:
        # Planck inversion (-> T_e where thick); its limit for zero intensity is 0 K, not NaN
        tb = obj.brightness_temperature("planck")[index].to_value(u.K)
        tb = np.where(np.asarray(obj.intensity[index].value) == 0, 0.0, tb)
        label = "brightness temperature (K)"
        noise = None
    return _Plane(tb, label=label + _background_note(obj), tag=tag, unit=u.K, per=None, beam=_beam(obj, index),
                  noise=noise, **common)


def _background_note(obj):
    """``', background subtracted'`` (or included) when a background was traced; '' otherwise."""
    from .transfer.background import background_of
    if background_of(obj).kind == "none":
        return ""
    return f", background {getattr(obj, 'background', 'subtracted') if _is_skymap(obj) else 'subtracted'}"


def _limit(value, plane, name):
    """A colour-scale end in the plotted unit of ``plane`` (a Quantity is converted), or None."""
    if value is None:
        return None
    if isinstance(value, u.Quantity):
        try:
            value = (value / (1 * plane.unit)).to_value(u.dimensionless_unscaled)
        except u.UnitsError:
            raise InputError(f"{name}: '{value}' cannot be converted to the unit of the {plane.quantity} map "
                             f"({(1 * plane.unit).unit})") from None
    return finite_number(value, name, what="a number or a Quantity")


def _make_norm(planes, stretch, vmin=None, vmax=None):
    """Colour normalisation for one or several planes (a shared scale).

    ``vmin``/``vmax`` (plotted unit) replace the ends derived from the planes.
    """
    quantity = planes[0].quantity
    vals = _finite([p.values for p in planes])
    if vmin is not None and vmax is not None and vmax <= vmin:
        raise InputError(f"vmax: must exceed vmin ({vmax:g} <= {vmin:g})")
    if quantity == "spectral_index":
        # diverging, centred on the optically thin index; the range always covers thin (-0.1)
        # to thick (+2) and widens (up to +-4) only if the data need it
        lo = np.percentile(vals, 1) if vals.size else THIN_SPECTRAL_INDEX
        hi = np.percentile(vals, 99) if vals.size else 2.0
        lo = max(lo, -4.0) if vmin is None else vmin
        hi = min(hi, 4.0) if vmax is None else vmax
        # given ends still widen to the thin-thick range: the centre must lie inside the scale
        return colors.TwoSlopeNorm(vcenter=THIN_SPECTRAL_INDEX, vmin=min(THIN_SPECTRAL_INDEX - 0.5, lo),
                                   vmax=max(2.1, hi))
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
        hi = low + 1.0             # a constant image still gets a valid scale
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


def _extend(norm, planes):
    vals = _finite([p.values for p in planes])
    if vals.size == 0:
        return "neither"
    low, high = bool(vals.min() < norm.vmin), bool(vals.max() > norm.vmax)
    return {(False, False): "neither", (True, False): "min", (False, True): "max", (True, True): "both"}[
        (low, high)]


def _contour_levels(contours, norm, plane):
    if contours is None:
        return None
    if isinstance(contours, (int, np.integer)) and not isinstance(contours, bool):
        if contours < 1:
            raise InputError(f"contours: the number of levels must be at least 1, got {contours}")
        # evenly spaced in the colour stretch, so contours follow what the colours show
        if plane.noise is not None and _sequential(plane) and norm.vmax > 3.0 * plane.noise:
            # a noisy map: the lowest contour at 3 rms (common practice in radio maps)
            start = float(norm(3.0 * plane.noise))
            return np.asarray(norm.inverse(np.linspace(start, 1.0, int(contours) + 1)[:-1]), float)
        return np.asarray(norm.inverse(np.linspace(0.0, 1.0, int(contours) + 2)[1:-1]), float)
    if isinstance(contours, u.Quantity):
        try:
            levels = contours.to_value(plane.unit)
        except u.UnitsError:
            try:
                # a bare flux unit is taken per pixel / per beam, like the map
                levels = (contours / plane.per).to_value(plane.unit) if plane.per is not None else None
            except u.UnitsError:
                levels = None
            if levels is None:
                raise InputError(f"contours: unit '{contours.unit}' does not convert to the map unit "
                                 f"'{plane.unit}'") from None
    else:
        try:
            levels = np.asarray(contours, float)
        except (TypeError, ValueError):
            raise InputError(f"contours: expected None, a number of levels or a list of values, "
                             f"got {contours!r}") from None
    levels = np.unique(np.atleast_1d(levels).ravel())
    if levels.size == 0 or not np.all(np.isfinite(levels)):
        raise InputError(f"contours: levels must be finite numbers, got {contours!r}")
    return levels


def _sequential(plane):
    return plane.quantity != "spectral_index"


def _draw(ax, plane, norm, cmap, *, contours, scale_bar, title, show_beam=True):
    """Draw one plane on ``ax``; returns the AxesImage."""
    ny, nx = plane.values.shape
    width_arcsec = max(nx, ny) * plane.pixel_scale.to_value(u.arcsec)
    aunit, aname = _axis_unit(width_arcsec)
    s = plane.pixel_scale.to_value(aunit)
    half_x, half_y = nx / 2 * s, ny / 2 * s
    # left edge is column 0, the most easterly: east offsets increase to the left
    extent = (half_x, -half_x, -half_y, half_y)
    image = ax.imshow(np.ma.masked_invalid(plane.values), origin="lower", extent=extent, norm=norm, cmap=cmap,
                      interpolation="nearest")
    ax.set_xlabel(f"east offset ({aname})")
    ax.set_ylabel(f"north offset ({aname})")
    ink = "white" if _sequential(plane) else "black"
    halo = [patheffects.withStroke(linewidth=2.0, foreground="black" if ink == "white" else "white")]

    levels = _contour_levels(contours, norm, plane)
    if levels is not None:
        xc = -(np.arange(nx) + 0.5 - nx / 2) * s
        yc = (np.arange(ny) + 0.5 - ny / 2) * s
        cs = ax.contour(xc, yc, np.ma.masked_invalid(plane.values), levels=levels, colors=ink,
                        linewidths=0.7, alpha=0.8)
        cs.set_gid("contours")

    pad = 0.05 * 2 * half_x
    if show_beam and plane.beam is not None:
        major = u.Quantity(plane.beam.major).to_value(aunit)
        minor = u.Quantity(plane.beam.minor).to_value(aunit)
        pa = u.Quantity(plane.beam.pa).to_value(u.deg)
        radius = major / 2
        # Ellipse 'angle' turns the width axis anticlockwise from +x in data coordinates; with
        # x = east, width = minor and height = major, angle = -PA puts the major axis along
        # (east, north) = (sin PA, cos PA), i.e. from north through east.
        beam = Ellipse((half_x - pad - radius, -half_y + pad + radius), width=minor, height=major, angle=-pa,
                       facecolor="white" if ink == "white" else "0.35", edgecolor="black", linewidth=0.8,
                       alpha=0.85, zorder=5)
        beam.set_gid("beam")
        ax.add_patch(beam)

    if scale_bar is not False and plane.distance is not None:
        if scale_bar is None or scale_bar is True:
            size = plane.pixel_size
            field = nx * (u.Quantity(size) if size is not None
                          else plane.pixel_scale.to_value(u.rad) * u.Quantity(plane.distance))
            length = choose_scale_bar(field)
        else:
            length = u.Quantity(scale_bar)
            if not length.unit.is_equivalent(u.pc) or length.ndim != 0 or not length.value > 0:
                raise InputError(f"scale_bar: expected None, False or a positive length, got {scale_bar!r}")
        angle = (length / u.Quantity(plane.distance)).to_value(u.dimensionless_unscaled) * u.rad
        bar = angle.to_value(aunit)
        x_end = -half_x + pad                 # west end, near the right edge
        y_bar = -half_y + pad
        line, = ax.plot([x_end + bar, x_end], [y_bar, y_bar], color=ink, linewidth=2.5,
                        solid_capstyle="butt", zorder=6, path_effects=halo)
        line.set_gid("scale_bar")
        text = ax.annotate(f"{length.value:g} {length.unit.to_string()}", (x_end + bar / 2, y_bar), xytext=(0, 3),
                           textcoords="offset points", ha="center", va="bottom", color=ink, fontsize=9,
                           zorder=6, path_effects=halo)
        text.set_gid("scale_bar_label")
        # the plot call must not change the limits set by imshow
        ax.set_xlim(half_x, -half_x)
        ax.set_ylim(-half_y, half_y)
    if title is not None:
        ax.set_title(title)
    return image


def _save(fig, path):
    if path is None:
        return
    # imported here: rtrace.io gathers the file formats, none of which is needed until a write
    from .io.atomic import atomic_path

    suffix = Path(os.fspath(path)).suffix
    fmt = suffix[1:].lower() if suffix else "png"
    supported = fig.canvas.get_supported_filetypes()
    if fmt not in supported:
        raise InputError(f"path: matplotlib cannot write '.{fmt}' files; use one of "
                         f"{', '.join('.' + k for k in sorted(supported))}")
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=fmt)


def _new_figure(figsize):
    return Figure(figsize=figsize, layout="constrained")


def _tick_text(value, _pos=None):
    """Plain numbers where short (0.01 ... 10^4), else m x 10^k; a true minus sign."""
    if value == 0:
        return "0"
    if 1e-3 <= abs(value) < 1e5:
        text = f"{value:g}"
    else:
        exponent = math.floor(math.log10(abs(value)))
        mantissa = round(value / 10.0**exponent, 3)
        text = (f"$10^{{{exponent}}}$" if mantissa == 1 else
                f"$-10^{{{exponent}}}$" if mantissa == -1 else f"${mantissa:g}\\times10^{{{exponent}}}$")
    return text.replace("-", "\N{MINUS SIGN}")


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


# Colour-bar ticks of the spectral index: the thin value, half-integers near it, integers beyond
_INDEX_TICKS = (-4, -3, -2, -1, -0.5, THIN_SPECTRAL_INDEX, 0.5, 1, 1.5, 2, 3, 4)


def _colorbar(fig, image, ax, plane, norm, planes, **kw):
    cbar = fig.colorbar(image, ax=ax, extend=_extend(norm, planes), **kw)
    cbar.set_label(plane.label)
    axis = cbar.ax.yaxis
    if isinstance(norm, colors.TwoSlopeNorm):
        cbar.set_ticks([t for t in _INDEX_TICKS if norm.vmin <= t <= norm.vmax])
        axis.set_major_formatter(ticker.FuncFormatter(_tick_text))
    elif isinstance(norm, colors.AsinhNorm):
        cbar.set_ticks(_asinh_ticks(norm))
        axis.set_major_formatter(ticker.FuncFormatter(_tick_text))
        axis.set_minor_locator(ticker.NullLocator())
    elif isinstance(norm, colors.LogNorm) and norm.vmax / norm.vmin > 30:
        # two decades or more have enough labelled powers of ten; unlabelled minor ticks
        axis.set_major_formatter(ticker.FuncFormatter(_tick_text))
        axis.set_minor_formatter(ticker.NullFormatter())
    return cbar


# --- public functions ----------------------------------------------------------------------------

def plot_map(obj, quantity="intensity", frequency=None, *, stretch="asinh", contours=None, scale_bar=None,
             path=None, ax=None, cmap=None, title=None, vmin=None, vmax=None):
    """Draw one image of a Result or SkyMap.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    quantity : {"intensity", "tau", "emission_measure", "brightness_temperature", "spectral_index"}
        ``intensity``: a Result in Jy/pixel (background subtracted), a
        SkyMap in Jy/beam (observed data), each with the SI prefix (Jy, mJy,
        uJy, nJy) that puts the peak between 1 and 1000. ``tau``: optical
        depth. ``emission_measure``: pc cm-6. ``brightness_temperature``: K,
        Planck inversion for a Result (-> T_e where thick), Rayleigh-Jeans
        for a SkyMap. ``spectral_index``: ``d ln I / d ln nu`` between two
        planes (see `rtrace.analysis.spectral_index_map`); for a noisy
        SkyMap pixels below ``DEFAULT_SNR_THRESHOLD`` rms are blanked.
        ``tau`` and ``emission_measure`` of a SkyMap are those of its Result.
    frequency : `~astropy.units.Quantity`, int or pair, optional
        Plane by frequency (within 1 % of a traced one) or index; default
        the first. ``spectral_index`` needs a pair ``(nu1, nu2)``.
    stretch : {"asinh", "log", "linear"}
        Colour stretch (``AsinhNorm``, linear within 2 % of the peak or 3 rms;
        ``LogNorm`` over at most 4 decades; ``Normalize``). The spectral
        index always uses a linear diverging scale centred on -0.1.
    contours : None, int or sequence of float or Quantity
        An int: that many levels evenly spaced in the stretch; values: levels
        in the plotted unit (a Quantity is converted).
    scale_bar : None, False or `~astropy.units.Quantity`
        Physical scale bar in the lower right: automatic (about 1/5 of the
        field, 1-2-5 rounded, AU/pc/kpc) by default, ``False`` for none, or
        a given length.
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    ax : `~matplotlib.axes.Axes`, optional
        Draw into this axes (a colour bar is added next to it).
    cmap : str or `~matplotlib.colors.Colormap`, optional
    title : str, optional
        Default: the quantity and frequency.
    vmin, vmax : float or `~astropy.units.Quantity`, optional
        Ends of the colour scale in place of those derived from this image
        (a float in the plotted unit, a Quantity is converted to it; e.g.
        Jy/beam for the intensity of a SkyMap), so that several figures can
        share one scale. The stretch keeps its rules otherwise (the asinh
        linear range follows the larger end; a ``log`` vmin <= 0 takes the
        automatic floor); a spectral-index scale still covers -0.6 to +2.1.

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    _check_stretch(stretch)
    plane = _plane(obj, quantity, frequency)
    vmin, vmax = _limit(vmin, plane, "vmin"), _limit(vmax, plane, "vmax")
    with matplotlib.rc_context(_STYLE):
        if ax is None:
            fig = _new_figure((5.6, 4.5))
            ax = fig.add_subplot()
        else:
            fig = ax.figure
        norm = _make_norm([plane], stretch, vmin, vmax)
        cmap_obj = _resolve_cmap(cmap, quantity)
        if title is None:
            title = _NAMES[quantity] + (f", {plane.tag}" if plane.tag else "")
        image = _draw(ax, plane, norm, cmap_obj, contours=contours, scale_bar=scale_bar, title=title)
        _colorbar(fig, image, ax, plane, norm, [plane])
        _save(fig, path)
    return fig


def _panel_selection(obj, quantity, frequencies):
    n = len(u.Quantity(obj.frequencies))
    if quantity == "emission_measure":
        return [None]                         # the same at every frequency: one panel
    if frequencies is None:
        chosen = list(range(n))
    elif isinstance(frequencies, u.Quantity):
        chosen = list(np.atleast_1d(frequencies))
    else:
        try:
            chosen = list(frequencies)
        except TypeError:
            raise InputError(f"frequencies: expected a sequence of frequencies or indices, "
                             f"got {frequencies!r}") from None
    if not chosen:
        raise InputError("frequencies: selects no plane")
    if quantity == "spectral_index":
        if all(_is_pair(c) for c in chosen):
            return [tuple(c) for c in chosen]
        if len(chosen) < 2:
            raise InputError("frequencies: spectral-index panels need at least two frequencies")
        return list(zip(chosen[:-1], chosen[1:]))
    return chosen


def plot_panels(obj, quantity="intensity", frequencies=None, path=None, *, shared_scale=True,
                stretch="asinh", contours=None, scale_bar=None, cmap=None, title=None, ncols=None,
                vmin=None, vmax=None):
    """One map per frequency on a grid.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    quantity : str
        As in :func:`plot_map`.
    frequencies : sequence of `~astropy.units.Quantity` or int, optional
        Planes to show (default all). For ``spectral_index`` a sequence of
        pairs, or of frequencies taken as consecutive pairs (default: all
        consecutive pairs). ``emission_measure`` gives one panel.
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    shared_scale : bool
        One colour scale and colour bar for all panels (default), else one per panel.
    stretch, contours, scale_bar, cmap
        As in :func:`plot_map`; the scale bar is drawn in the first panel only.
    title : str, optional
        Figure title; default the quantity.
    ncols : int, optional
        Panels per row; default up to 3 for 6 panels or fewer, about sqrt(n) beyond.
    vmin, vmax : float or `~astropy.units.Quantity`, optional
        As in :func:`plot_map`, for every panel (with ``shared_scale=False``
        too).

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    _check_image(obj)
    _check_quantity(quantity)
    _check_stretch(stretch)
    planes = [_plane(obj, quantity, f) for f in _panel_selection(obj, quantity, frequencies)]
    if shared_scale and quantity == "intensity":
        planes = _common_prefix(planes)
    # per plane: without a shared scale, intensity panels may each have their own SI prefix
    limits = [(_limit(vmin, p, "vmin"), _limit(vmax, p, "vmax")) for p in planes]
    n = len(planes)
    if ncols is None:
        ncols = n if n <= 3 else (3 if n <= 9 else math.ceil(math.sqrt(n)))
    elif not (isinstance(ncols, (int, np.integer)) and ncols >= 1):
        raise InputError(f"ncols: expected a positive integer, got {ncols!r}")
    ncols = min(int(ncols), n)
    nrows = math.ceil(n / ncols)
    with matplotlib.rc_context(_STYLE):
        extra = 0.9 if shared_scale else 1.3
        fig = _new_figure((2.9 * ncols + extra, 2.75 * nrows + 0.45))
        axes = fig.subplots(nrows, ncols, sharex=True, sharey=True, squeeze=False).ravel()
        for spare in axes[n:]:
            fig.delaxes(spare)
        axes = axes[:n]
        cmap_obj = _resolve_cmap(cmap, quantity)
        shared = _make_norm(planes, stretch, *limits[0]) if shared_scale else None
        image = None
        for k, (ax, plane) in enumerate(zip(axes, planes)):
            norm = shared if shared_scale else _make_norm([plane], stretch, *limits[k])
            image = _draw(ax, plane, norm, cmap_obj, contours=contours,
                          scale_bar=scale_bar if k == 0 else False, title=plane.tag or None)
            row, col = divmod(k, ncols)
            if row < nrows - 1 and k + ncols < n:
                ax.set_xlabel("")
            else:
                ax.xaxis.set_tick_params(labelbottom=True)
            if col > 0:
                ax.set_ylabel("")
            if not shared_scale:
                _colorbar(fig, image, ax, plane, norm, [plane], shrink=0.9)
        if shared_scale:
            _colorbar(fig, image, list(axes), planes[0], shared, planes, shrink=0.9 if nrows > 1 else 1.0)
        fig.suptitle(_NAMES[quantity] if title is None else title)
        _save(fig, path)
    return fig


def _common_prefix(planes):
    """Re-express intensity planes in one SI prefix (that of the brightest), for a shared scale."""
    per_txt = "beam" if planes[0].per == u.beam else "pixel"
    base = u.Jy / planes[0].per
    to_base = [u.Quantity(p.unit).to_value(base) for p in planes]   # unit holds e.g. 1e-3 Jy/beam
    peak = max(float(np.nanmax(np.abs(p.values))) * f if np.isfinite(p.values).any() else 0.0
               for p, f in zip(planes, to_base))
    factor, prefix = _prefix_for(peak if peak > 0 else 1.0)
    out = []
    for p, f in zip(planes, to_base):
        scale = f / factor
        out.append(dataclasses.replace(
            p, values=p.values * scale, unit=factor * base, label=f"intensity ({prefix}Jy {per_txt}$^{{-1}}$)",
            noise=None if p.noise is None else p.noise * scale))
    return out


def _two_five(value, _pos=None):
    """Label minor log ticks at 2 and 5 times a power of ten, leave the others blank."""
    if value <= 0:
        return ""
    mantissa = round(value / 10.0 ** math.floor(math.log10(value)), 6)
    return _tick_text(value) if mantissa in (2.0, 5.0) else ""


def _annotate_indices(ax, x, y, color):
    """Write the spectral index beside each segment, on the side away from the curve.

    The label is pushed along the segment's normal in screen space (up-left of a rising
    segment, up-right of a falling one) so it never sits on the line.
    """
    alpha = spectral_index(x * u.GHz, y)
    pts = ax.transData.transform(np.column_stack([x, y]))
    for k, a in enumerate(alpha):
        if not np.isfinite(a):
            continue
        dx, dy = pts[k + 1] - pts[k]
        norm = math.hypot(dx, dy) or 1.0
        nx, ny = -dy / norm, dx / norm
        if ny < 0:
            nx, ny = -nx, -ny
        ha = "right" if nx < -0.35 else "left" if nx > 0.35 else "center"
        ax.annotate(rf"$\alpha$ = {a:+.2f}".replace("-", "\N{MINUS SIGN}"),
                    (math.sqrt(x[k] * x[k + 1]), math.sqrt(y[k] * y[k + 1])),
                    xytext=(7 * nx, 7 * ny), textcoords="offset points", ha=ha, va="bottom" if ny > 0.35
                    else "center", fontsize=8, color=color, gid="spectral_index")


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
    nu, _, _ = _spectrum_arrays(frequencies, flux)
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
    with matplotlib.rc_context(_STYLE):
        if ax is None:
            fig = _new_figure((5.4, 4.0))
            ax = fig.add_subplot()
            factor, prefix = _prefix_for(float(s_pos.max()))
            ax._rtrace_flux_unit = (factor, prefix)
        else:
            fig = ax.figure
            factor, prefix = getattr(ax, "_rtrace_flux_unit", None) or _prefix_for(float(s_pos.max()))
            ax._rtrace_flux_unit = (factor, prefix)
        y = s_pos / factor
        line, = ax.plot(nu_ghz, y, marker="o", markersize=5, linewidth=1.5, label=label)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("frequency (GHz)")
        ax.set_ylabel(f"flux density ({prefix}Jy)")
        ax.margins(x=0.08, y=0.15)
        ax.autoscale_view()
        if annotate_index and nu_ghz.size > 1:
            _annotate_indices(ax, nu_ghz, y, line.get_color())
        for axis, (lo, hi) in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):
            axis.set_major_formatter(ticker.FuncFormatter(_tick_text))
            # under ~2.5 decades the powers of ten alone are too few labels: add 2x and 5x
            axis.set_minor_formatter(ticker.FuncFormatter(_two_five) if hi / lo < 300 else ticker.NullFormatter())
        ax.grid(True, which="major", alpha=0.35, linewidth=0.6)
        ax.grid(True, which="minor", alpha=0.12, linewidth=0.5)
        if label is not None:
            ax.legend(frameon=False)
        _save(fig, path)
    return fig
