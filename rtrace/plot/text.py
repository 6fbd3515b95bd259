"""Words and numbers on figures: frequency labels, SI prefixes, angles, tick labels, scale-bar lengths.

Part of the plotting package's internal API (see :mod:`rtrace.plot.core`).
"""

import math

import astropy.units as u
import numpy as np

from ..errors import InputError

__all__ = [
    "significant",
    "format_frequency",
    "frequency_labels",
    "angle_text",
    "prefix_for",
    "nice_length",
    "choose_scale_bar",
    "axis_unit",
    "tick_text",
    "two_five",
]

_SI_PREFIXES = ((1.0, ""), (1.0e-3, "m"), (1.0e-6, "\N{MICRO SIGN}"), (1.0e-9, "n"))


# --- small helpers ------------------------------------------------------------------------------


def significant(value, digits):
    """``value`` rounded to ``digits`` significant figures, written without an exponent."""
    decimals = digits - 1 - math.floor(math.log10(abs(value)))
    text = f"{round(value, decimals):.{max(decimals, 0)}f}"
    # trailing zeros say nothing here: "3.6 GHz", not "3.60 GHz"
    return text.rstrip("0").rstrip(".") if "." in text else text


def format_frequency(nu_hz, digits=3):
    """A frequency in Hz as ``"3.6 GHz"`` or ``"500 MHz"``, to ``digits`` significant figures."""
    if nu_hz >= 1e9:
        return f"{significant(nu_hz / 1e9, digits)} GHz"
    return f"{significant(nu_hz / 1e6, digits)} MHz"


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
        labels = [format_frequency(f, digits) for f in nu]
        close = all(
            abs(float(t.split()[0]) * (1e9 if t.endswith("GHz") else 1e6) - f) <= _LABEL_TOLERANCE * f
            for t, f in zip(labels, nu, strict=True)
        )
        if close and len(set(labels)) == len(labels):
            return labels
    return [format_frequency(f, 6) for f in nu]


def angle_text(angle):
    """A beam axis in the unit that keeps the number short (arcsec, arcmin or deg)."""
    arcsec = u.Quantity(angle).to_value(u.arcsec)
    unit, name = axis_unit(arcsec)
    sym = {"arcsec": "\N{DOUBLE PRIME}", "arcmin": "\N{PRIME}", "deg": "\N{DEGREE SIGN}"}[name]
    return f"{u.Quantity(angle).to_value(unit):.3g}{sym}"


def prefix_for(peak):
    """(factor, prefix) so that ``peak / factor`` lies in [1, 1000) where possible."""
    for factor, prefix in _SI_PREFIXES:
        if peak >= factor:
            return factor, prefix
    return _SI_PREFIXES[-1]


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


def axis_unit(width_arcsec):
    """Angular unit for the map axes so that tick labels stay short."""
    if width_arcsec < 600.0:
        return u.arcsec, "arcsec"
    if width_arcsec < 36000.0:
        return u.arcmin, "arcmin"
    return u.deg, "deg"


def tick_text(value, _pos=None):
    """Plain numbers where short (0.01 ... 10^4), else m x 10^k; a true minus sign."""
    if value == 0:
        return "0"
    if 1e-3 <= abs(value) < 1e5:
        text = f"{value:g}"
    else:
        exponent = math.floor(math.log10(abs(value)))
        mantissa = round(value / 10.0**exponent, 3)
        text = (
            f"$10^{{{exponent}}}$"
            if mantissa == 1
            else f"$-10^{{{exponent}}}$"
            if mantissa == -1
            else f"${mantissa:g}\\times10^{{{exponent}}}$"
        )
    return text.replace("-", "\N{MINUS SIGN}")


def two_five(value, _pos=None):
    """Label minor log ticks at 2 and 5 times a power of ten, leave the others blank."""
    if value <= 0:
        return ""
    mantissa = round(value / 10.0 ** math.floor(math.log10(value)), 6)
    return tick_text(value) if mantissa in (2.0, 5.0) else ""
