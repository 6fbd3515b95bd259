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
import warnings
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import matplotlib
import numpy as np
from matplotlib import colors, patheffects, ticker
from matplotlib.figure import Figure
from matplotlib.patches import Ellipse

from .analysis.spectra import (
    DEFAULT_SNR_THRESHOLD,
    THIN_SPECTRAL_INDEX,
    _is_result,
    _is_skymap,
    _spectrum_arrays,
    frequency_index,
    pixel_flux,
    spectral_index,
    spectral_index_map,
    tau_unity_frequency,
)
from .errors import InputError, PhysicsRangeWarning, warn_user
from .quantities import finite_number

__all__ = ["plot_map", "plot_panels", "plot_sed", "plot_tau_unity", "QUANTITIES", "STRETCHES", "nice_length",
           "choose_scale_bar", "frequency_labels", "DEFAULT_SNR_THRESHOLD", "PER_PANEL_RATIO", "BEAM_DRAW_LIMIT"]

QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature", "spectral_index")
STRETCHES = ("linear", "log", "asinh")

# Panels whose brightest values differ by more than this factor get a colour scale each
# (unless limits are given): on one shared scale the faint panels would look empty.
PER_PANEL_RATIO = 10.0

# A beam whose major axis exceeds this fraction of the field's shorter side cannot be drawn
# in a corner without covering the data: it is left out, with a warning.
BEAM_DRAW_LIMIT = 0.5

# Narrowest automatic spectral-index scale (half range about its centre): a uniform map
# still gets a usable scale, and thin gas (-0.08 to -0.15) spreads over the colours.
_MIN_INDEX_HALF_RANGE = 0.05

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
    note: str = ""                  # what blank pixels mean, written on the map


# --- small helpers ------------------------------------------------------------------------------

def _significant(value, digits):
    """``value`` rounded to ``digits`` significant figures, written without an exponent."""
    decimals = digits - 1 - math.floor(math.log10(abs(value)))
    text = f"{round(value, decimals):.{max(decimals, 0)}f}"
    # trailing zeros say nothing here: "3.6 GHz", not "3.60 GHz"
    return text.rstrip("0").rstrip(".") if "." in text else text


def _format_frequency(nu_hz, digits=3):
    if nu_hz >= 1e9:
        return f"{_significant(nu_hz / 1e9, digits)} GHz"
    return f"{_significant(nu_hz / 1e6, digits)} MHz"


# A frequency label is rounded to no more than this relative error (well inside the 1 %
# within which the plane can be asked for by that number).
_LABEL_TOLERANCE = 0.0025


def frequency_labels(frequencies):
    """Short labels for a set of frequencies: as few significant figures as tell them apart.

    Parameters
    ----------
    frequencies : `~astropy.units.Quantity` (n,)
        Spectral unit.

    Returns
    -------
    list of str
        ``"1.93 GHz"``, ``"500 MHz"``: the fewest significant figures (2 to
        6) that keep every label within 0.25 % of its frequency and the
        labels distinct.
    """
    nu = np.atleast_1d(u.Quantity(frequencies).to_value(u.Hz, equivalencies=u.spectral()))
    for digits in range(2, 7):
        labels = [_format_frequency(f, digits) for f in nu]
        close = all(abs(float(t.split()[0]) * (1e9 if t.endswith("GHz") else 1e6) - f) <= _LABEL_TOLERANCE * f
                    for t, f in zip(labels, nu, strict=True))
        if close and len(set(labels)) == len(labels):
            return labels
    return [_format_frequency(f, 6) for f in nu]


def _subject(obj):
    """One line naming the snapshot and the ionization model (from the provenance), or ''."""
    provenance = getattr(obj, "provenance", None)
    if provenance is None and getattr(obj, "result", None) is not None:
        provenance = getattr(obj.result, "provenance", None)
    provenance = provenance or {}
    parts = []
    if provenance.get("source"):
        parts.append(str(provenance["source"]))
    if provenance.get("ionization"):
        # the model's name; its whole description (arguments, arrays) is in the FITS header
        text = str(provenance["ionization"]).split("(")[0].strip()
        parts.append("ionization: " + (text if len(text) <= 40 else text[:39] + "\N{HORIZONTAL ELLIPSIS}"))
    return " \N{MIDDLE DOT} ".join(parts)


def _angle_text(angle):
    """A beam axis in the unit that keeps the number short (arcsec, arcmin or deg)."""
    arcsec = u.Quantity(angle).to_value(u.arcsec)
    unit, name = _axis_unit(arcsec)
    sym = {"arcsec": "\N{DOUBLE PRIME}", "arcmin": "\N{PRIME}", "deg": "\N{DEGREE SIGN}"}[name]
    return f"{u.Quantity(angle).to_value(unit):.3g}{sym}"


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
        # both planes at one resolution (smoothed to a common beam where they differ), faint or
        # noisy pixels blanked (see spectral_index_map)
        alpha = spectral_index_map(obj, i1, i2)
        t1, t2 = frequency_labels(nu[[i1, i2]] * u.Hz)
        tag = f"{t1} \N{EN DASH} {t2}"
        if alpha.smoothed:
            b = alpha.beam
            tag += f"\nbeams matched: {_angle_text(b.major)}\N{MULTIPLICATION SIGN}{_angle_text(b.minor)}"
        plane = _Plane(np.asarray(alpha), label=r"spectral index $\alpha$", tag=tag, unit=u.dimensionless_unscaled,
                       per=None, beam=alpha.beam, **common)
        reason = alpha.masking.replace("blank where ", "")
        plane.note = ("grey: " if np.isfinite(alpha).any() else "every pixel blank: ") + reason
        return plane

    index = 0 if frequency is None else frequency_index(obj, frequency, "frequency")
    tag = frequency_labels(nu[index] * u.Hz)[0]
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
        what = (r"$\int n_e \sum Z^2 n_i\,dl$" if getattr(obj, "em_definition", "electrons") == "ion_term"
                else r"$\int n_e^2\,dl$")
        return _Plane(em, label=f"emission measure {what} (pc cm$^{{-6}}$)", tag="", unit=u.pc * u.cm**-6,
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
    """A second label line ``background subtracted`` (or included) when a background was traced; '' otherwise."""
    from .transfer.background import background_of
    if background_of(obj).kind == "none":
        return ""
    # on a line of its own: colour-bar labels of stacked panels must stay shorter than a panel
    return f"\nbackground {getattr(obj, 'background', 'subtracted') if _is_skymap(obj) else 'subtracted'}"


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


def _draw(ax, plane, norm, cmap, *, contours, scale_bar, title, show_beam=True, show_note=True):
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
    if show_beam and plane.beam is not None and not _beam_fits(plane, aunit, 2 * min(half_x, half_y)):
        show_beam = False
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
    if plane.note and show_note:
        # inside the frame, top left (usually empty sky), on a light box so it reads over any colour
        note = ax.annotate(plane.note, (0.0, 1.0), xycoords="axes fraction", xytext=(3, -3),
                           textcoords="offset points", ha="left", va="top", fontsize=7, color="0.15",
                           bbox={"boxstyle": "round,pad=0.2", "facecolor": "white", "edgecolor": "none", "alpha": 0.75},
                           zorder=7)
        note.set_gid("note")
    return image


def _map_figsize(shape):
    """Figure size for one map.

    The height follows the image's aspect, never so short that the
    vertical axis label (about 1.6 inches) would be cut off, nor taller than 9 inches.
    """
    ny, nx = shape
    aspect = min(max(ny / nx, 0.3), 2.0)
    return 5.6, max(2.6, 3.8 * aspect + 0.9)


def _beam_fits(plane, aunit, field):
    """False (with a warning) when the beam is too large to draw in a corner of the field."""
    major = u.Quantity(plane.beam.major).to_value(aunit)
    if major <= BEAM_DRAW_LIMIT * field:
        return True
    warn_user(f"the beam ({_angle_text(plane.beam.major)} FWHM) is larger than {BEAM_DRAW_LIMIT:g} of the "
              f"field ({_angle_text(field * aunit)}): the map shows mostly the beam's shape, and its ellipse "
              f"is not drawn over the data", UserWarning)
    return False


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


def _colorbar(fig, image, ax, plane, norm, planes, **kw):
    cbar = fig.colorbar(image, ax=ax, extend=_extend(norm, planes), **kw)
    cbar.set_label(plane.label)
    axis = cbar.ax.yaxis
    if plane.quantity == "spectral_index":
        axis.set_major_locator(ticker.MaxNLocator(nbins=7, steps=[1, 2, 2.5, 5, 10]))
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
        planes (see `rtrace.analysis.spectral_index_map`): both planes at
        one resolution (smoothed to a common beam where the beams differ,
        said in the title), pixels blanked (grey, said on the map) below
        ``DEFAULT_SNR_THRESHOLD`` rms for a noisy SkyMap, below 1e-3 of
        the peak without noise.
        ``tau`` and ``emission_measure`` of a SkyMap are those of its Result.
    frequency : `~astropy.units.Quantity`, int or pair, optional
        Plane by frequency (within 1 % of a traced one) or index; default
        the first. ``spectral_index`` needs a pair ``(nu1, nu2)``.
    stretch : {"asinh", "log", "linear"}
        Colour stretch (``AsinhNorm``, linear within 2 % of the peak or 3 rms;
        ``LogNorm`` over at most 4 decades; ``Normalize``). The spectral
        index always uses a linear diverging scale.
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
        Default: the quantity and frequency, with a line above naming the
        snapshot and the ionization model (from the provenance).
    vmin, vmax : float or `~astropy.units.Quantity`, optional
        Ends of the colour scale in place of those derived from this image
        (a float in the plotted unit, a Quantity is converted to it; e.g.
        Jy/beam for the intensity of a SkyMap), so that several figures can
        share one scale. The stretch keeps its rules otherwise (the asinh
        linear range follows the larger end; a ``log`` vmin <= 0 takes the
        automatic floor). The spectral index's automatic scale is symmetric
        about the thin value (-0.1) and reaches the 1st/99th percentiles;
        given ends are used as they are.

    Notes
    -----
    A beam whose major axis exceeds ``BEAM_DRAW_LIMIT`` (half) of the field
    is not drawn (a warning says so): such a map mostly shows the beam.

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    _check_stretch(stretch)
    plane = _plane(obj, quantity, frequency)
    vmin, vmax = _limit(vmin, plane, "vmin"), _limit(vmax, plane, "vmax")
    with matplotlib.rc_context(_STYLE):
        own = ax is None
        if own:
            fig = _new_figure(_map_figsize(plane.values.shape))
            ax = fig.add_subplot()
        else:
            fig = ax.figure
        norm = _make_norm([plane], stretch, vmin, vmax)
        cmap_obj = _resolve_cmap(cmap, quantity)
        subject = _subject(obj) if title is None else ""
        if title is None:
            title = _NAMES[quantity] + (f", {plane.tag}" if plane.tag else "")
        image = _draw(ax, plane, norm, cmap_obj, contours=contours, scale_bar=scale_bar, title=title)
        _colorbar(fig, image, ax, plane, norm, [plane])
        if own and subject:
            fig.suptitle(subject, fontsize=8, color="0.3")
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
        return list(zip(chosen[:-1], chosen[1:], strict=True))
    return chosen


def plot_panels(obj, quantity="intensity", frequencies=None, path=None, *, shared_scale=None,
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
    shared_scale : bool or None
        True: one colour scale and colour bar for all panels; False: one per
        panel. None (default): shared, unless the panels' brightest values
        differ by more than ``PER_PANEL_RATIO`` (10), where one scale would
        leave the faint panels blank; given ``vmin``/``vmax`` (e.g. a
        series' shared limits) always give one shared scale.
    stretch, contours, scale_bar, cmap
        As in :func:`plot_map`; the scale bar is drawn in the first panel only.
    title : str, optional
        Figure title; default the quantity, with a line naming the snapshot
        and the ionization model (from the provenance).
    ncols : int, optional
        Panels per row; default the layout with the fewest empty cells
        (at most 4 across up to 8 panels, about sqrt(n) beyond). Unused
        cells are left empty, without axes.
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
    limits = [(_limit(vmin, p, "vmin"), _limit(vmax, p, "vmax")) for p in planes]
    if shared_scale is None:
        shared_scale = vmin is not None or vmax is not None or not _panels_differ(planes)
    if quantity == "intensity":
        # one unit for every panel, also with a scale each: a row's colour bars share one label
        planes = _common_prefix(planes)
        limits = [(_limit(vmin, p, "vmin"), _limit(vmax, p, "vmax")) for p in planes]
    n = len(planes)
    if ncols is None:
        ncols = _default_columns(n)
    elif not (isinstance(ncols, (int, np.integer)) and ncols >= 1):
        raise InputError(f"ncols: expected a positive integer, got {ncols!r}")
    ncols = min(int(ncols), n)
    nrows = math.ceil(n / ncols)
    with matplotlib.rc_context(_STYLE):
        extra = 0.9 if shared_scale else 1.3
        fig = _new_figure((2.9 * ncols + extra, 2.75 * nrows + 0.7))
        axes = fig.subplots(nrows, ncols, sharex=True, sharey=True, squeeze=False).ravel()
        for spare in axes[n:]:
            fig.delaxes(spare)
        axes = axes[:n]
        cmap_obj = _resolve_cmap(cmap, quantity)
        shared = _make_norm(planes, stretch, *limits[0]) if shared_scale else None
        image = None
        for k, (ax, plane) in enumerate(zip(axes, planes, strict=True)):
            norm = shared if shared_scale else _make_norm([plane], stretch, *limits[k])
            image = _draw(ax, plane, norm, cmap_obj, contours=contours,
                          scale_bar=scale_bar if k == 0 else False, title=plane.tag or None, show_note=False)
            # one x and one y label for the whole grid (below); tick labels on the bottom
            # panel of every column and the first panel of every row
            xlabel, ylabel = ax.get_xlabel(), ax.get_ylabel()
            ax.set_xlabel("")
            ax.set_ylabel("")
            ax.xaxis.set_tick_params(labelbottom=k + ncols >= n)
            ax.yaxis.set_tick_params(labelleft=k % ncols == 0)
            if not shared_scale:
                cbar = _colorbar(fig, image, ax, plane, norm, [plane], shrink=0.9)
                if k % ncols != ncols - 1 and k != n - 1:
                    cbar.set_label("")          # one label per row, on its last colour bar
        if shared_scale:
            _colorbar(fig, image, list(axes), planes[0], shared, planes, shrink=0.9 if nrows > 1 else 1.0)
        fig.supxlabel(xlabel, fontsize=_STYLE["axes.labelsize"])
        fig.supylabel(ylabel, fontsize=_STYLE["axes.labelsize"])
        heading = _NAMES[quantity] if title is None else title
        subject = _subject(obj) if title is None else ""
        # what blanked pixels mean, once for the figure (the panels are too small to carry it)
        notes = list(dict.fromkeys(p.note for p in planes if p.note))
        lines = [heading] + ([subject] if subject else []) + notes
        fig.suptitle("\n".join(lines))
        _save(fig, path)
    return fig


def _default_columns(n):
    """Columns for ``n`` panels: the fewest empty cells, then the squarest grid (wider than tall)."""
    if n <= 3:
        return n
    widest = 4 if n <= 8 else math.ceil(math.sqrt(n)) + 1
    best = min(range(2, widest + 1),
               key=lambda c: (c * math.ceil(n / c) - n, abs(c - math.ceil(n / c) - 0.5), -c))
    return best


def _panels_differ(planes):
    """True when the panels' brightest values differ by more than PER_PANEL_RATIO."""
    if planes[0].quantity == "spectral_index":
        return False
    peaks = []
    for p in planes:
        finite = np.abs(np.asarray(p.values, float))
        finite = finite[np.isfinite(finite)]
        peaks.append(float(finite.max()) * (1 * p.unit).value if finite.size else 0.0)
    peaks = [v for v in peaks if v > 0]
    return len(peaks) > 1 and max(peaks) > PER_PANEL_RATIO * min(peaks)


def _common_prefix(planes):
    """Re-express intensity planes in one SI prefix (that of the brightest): one unit for every panel."""
    per_txt = "beam" if planes[0].per == u.beam else "pixel"
    base = u.Jy / planes[0].per
    to_base = [u.Quantity(p.unit).to_value(base) for p in planes]   # unit holds e.g. 1e-3 Jy/beam
    peak = max(float(np.nanmax(np.abs(p.values))) * f if np.isfinite(p.values).any() else 0.0
               for p, f in zip(planes, to_base, strict=True))
    factor, prefix = _prefix_for(peak if peak > 0 else 1.0)
    out = []
    for p, f in zip(planes, to_base, strict=True):
        scale = f / factor
        out.append(dataclasses.replace(
            p, values=p.values * scale, unit=factor * base,
            label=f"intensity ({prefix}Jy {per_txt}$^{{-1}}$)" + p.label.partition(")")[2],   # keeps the note
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
    labels = []
    for k, a in enumerate(alpha):
        if not np.isfinite(a):
            continue
        dx, dy = pts[k + 1] - pts[k]
        norm = math.hypot(dx, dy) or 1.0
        nx, ny = -dy / norm, dx / norm
        if ny < 0:
            nx, ny = -nx, -ny
        text = ax.annotate(rf"$\alpha$ = {a:+.2f}".replace("-", "\N{MINUS SIGN}"),
                           (math.sqrt(x[k] * x[k + 1]), math.sqrt(y[k] * y[k + 1])), xytext=(0, 0),
                           textcoords="offset points", fontsize=8, color=color, gid="spectral_index")
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
    fig.draw_without_rendering()               # runs the layout: the axes' final position
    frame = ax.get_window_extent()
    scale = fig.dpi / 72.0                     # pixels per point

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
    axis.set_major_formatter(ticker.FuncFormatter(_tick_text))
    if hi / lo < 10:
        axis.set_major_locator(ticker.MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
        axis.set_minor_locator(ticker.NullLocator())
        axis.set_minor_formatter(ticker.NullFormatter())
        return
    axis.set_major_locator(ticker.LogLocator())
    axis.set_minor_locator(ticker.LogLocator(subs="auto"))
    axis.set_minor_formatter(ticker.FuncFormatter(_two_five) if hi / lo < 300 else ticker.NullFormatter())


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
        _save(fig, path)
    return fig


# Colours of the pixels whose tau = 1 frequency lies outside the traced range (kept out of
# the colour map's own range of colours: near-black, a red, and a light grey for no gas).
_BELOW_COLOUR, _ABOVE_COLOUR, _NO_GAS_COLOUR = "0.1", "#d0312d", "0.85"


def plot_tau_unity(obj, path=None, *, ax=None, cmap="cividis", title=None, vmin=None, vmax=None,
                   scale_bar=None):
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

    result = obj.result if (_is_skymap(obj) and getattr(obj, "result", None) is not None) else obj
    if not _is_result(result):
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
    above = missing & (tau[order[-1]] >= 1.0)          # thick even at the highest frequency
    below = missing & ~above                             # thin even at the lowest
    scale, distance, size = _geometry(result)
    plane = _Plane(ghz, quantity="tau", label=r"frequency where $\tau$ = 1 (GHz)", tag="",
                   unit=u.GHz, per=None, pixel_scale=scale, distance=distance, pixel_size=size)
    lo = nu.min() / 1e9 if vmin is None else _limit(vmin, plane, "vmin")
    hi = nu.max() / 1e9 if vmax is None else _limit(vmax, plane, "vmax")
    if not (lo > 0 and hi > lo):
        raise InputError(f"vmax: the frequency scale needs 0 < vmin < vmax, got {lo:g} and {hi:g} GHz")
    norm = colors.LogNorm(vmin=lo, vmax=hi)
    values = np.clip(ghz, lo, hi)
    values[below] = lo / 10.0                 # under: drawn in the "below" colour
    values[above] = hi * 10.0                 # over: drawn in the "above" colour
    values[no_gas] = np.nan
    plane.values = values
    base = matplotlib.colormaps[cmap] if isinstance(cmap, str) else cmap
    if not isinstance(base, colors.Colormap):
        raise InputError(f"cmap: unknown colour map {cmap!r}")
    cmap_obj = base.with_extremes(under=_BELOW_COLOUR, over=_ABOVE_COLOUR, bad=_NO_GAS_COLOUR)
    with matplotlib.rc_context(_STYLE):
        own = ax is None
        if own:
            width, height = _map_figsize(ghz.shape)
            fig = _new_figure((width, height + 0.6))          # room for the legend below
            ax = fig.add_subplot()
        else:
            fig = ax.figure
        subject = _subject(result) if title is None else ""
        if title is None:
            whole_ghz = whole.to_value(u.GHz)
            title = (r"Frequency where $\tau$ = 1" + (f" (whole source: {frequency_labels(whole)[0]})"
                                                       if np.isfinite(whole_ghz) else ""))
        image = _draw(ax, plane, norm, cmap_obj, contours=None, scale_bar=scale_bar, title=title)
        cbar = fig.colorbar(image, ax=ax, extend="both")
        cbar.set_label(plane.label)
        cbar.ax.yaxis.set_major_formatter(ticker.FuncFormatter(_tick_text))
        cbar.ax.yaxis.set_minor_formatter(ticker.FuncFormatter(_two_five) if hi / lo < 300
                                          else ticker.NullFormatter())
        lo_txt, hi_txt = frequency_labels([lo, hi] * u.GHz)
        handles = []
        if below.any():
            handles.append(Patch(facecolor=_BELOW_COLOUR, edgecolor="0.4",
                                 label=f"below the traced range (thin at {lo_txt} and above)"))
        if above.any():
            handles.append(Patch(facecolor=_ABOVE_COLOUR, edgecolor="0.4",
                                 label=f"above the traced range (thick at {hi_txt} and below)"))
        if no_gas.any():
            handles.append(Patch(facecolor=_NO_GAS_COLOUR, edgecolor="0.4", label="no absorbing gas"))
        if handles:
            legend = (fig.legend(handles=handles, loc="outside lower center", frameon=False, fontsize=8)
                      if own else ax.legend(handles=handles, loc="lower left", fontsize=7))
            legend.set_gid("categories")
        if own and subject:
            fig.suptitle(subject, fontsize=8, color="0.3")
        _save(fig, path)
    return fig
