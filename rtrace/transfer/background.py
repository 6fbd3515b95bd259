"""The background convention: one keyword, one meaning, declared in every product.

A trace may let a background in from the far side of the grid (the CMB with
``trace(..., background="cmb")``, another blackbody temperature, or a given
intensity). Every product can be given in one of two conventions, chosen by
the keyword ``background`` of the accessors and writers:

``"subtracted"`` (the default everywhere)
    The uniform background intensity ``I_bg`` is removed: ``I - I_bg``. This
    is what an interferometer or a differenced (switched) single-dish map
    measures. Empty sky reads 0 in every product; gas seen in absorption
    against the background is negative.
``"included"``
    The full emergent intensity ``I = I_bg e^{-tau} + I_gas``, as it would
    leave the grid toward the observer.

Brightness temperatures follow the same convention (Rybicki & Lightman 1979,
eq. 1.30 and sec. 1.5 for the optically thick limit):

* Planck: included, ``T_P(I)``; subtracted, the *difference of Planck
  temperatures* ``T_P(I_bg + dI) - T_P(I_bg)`` (not ``T_P(dI)``), so an
  optically thick isothermal source reads ``T_e - T_bg`` and empty sky 0.
* Rayleigh-Jeans is linear: ``T_RJ = c^2 I / (2 k nu^2)`` of the intensity in
  the chosen convention.

Declared in products
--------------------
FITS headers (every file rtrace writes) carry

``BKGSUB``  (logical)
    ``T``: no background in the data (empty sky reads 0), either because it
    was subtracted or because the quantity (optical depth, emission measure)
    has none; ``F``: the background intensity is included.
``BKGKIND`` (string)
    What entered from the far side: ``'NONE'``, ``'CMB'``, ``'BLACKBODY'``
    or ``'INTENSITY'`` (a given intensity, no temperature).
``BKGTEMP`` (float, K)
    Temperature of the background blackbody (0 for ``'NONE'``; absent for
    ``'INTENSITY'``).

CSV files carry one ``# background: ...`` line from :func:`describe`.
"""

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from ..errors import InputError
from ..physics.constants import K_B, C
from ..physics.planck import inverse_planck_cgs, planck_cgs

__all__ = [
    "CONVENTIONS",
    "DEFAULT_CONVENTION",
    "CMB_TEMPERATURE",
    "Background",
    "check_convention",
    "resolve_convention",
    "background_from_spec",
    "background_of",
    "header_cards",
    "describe",
    "brightness_temperature_cgs",
    "background_in_header",
    "HEADER_KEYWORDS",
]

CONVENTIONS = ("subtracted", "included")
DEFAULT_CONVENTION = "subtracted"

# Fixsen (2009), ApJ 707, 916
CMB_TEMPERATURE = 2.7255

HEADER_KEYWORDS = ("BKGSUB", "BKGKIND", "BKGTEMP")

_KINDS = ("none", "cmb", "blackbody", "intensity")


@dataclass(frozen=True)
class Background:
    """What entered the grid from the far side.

    Attributes
    ----------
    kind : {"none", "cmb", "blackbody", "intensity"}
    temperature : float or None
        Blackbody temperature in K (0 for "none", None for "intensity").
    """

    kind: str = "none"
    temperature: float = 0.0

    def label(self):
        """Short text, e.g. ``'CMB, 2.7255 K'``."""
        if self.kind == "none":
            return "none"
        if self.kind == "intensity":
            return "given intensity"
        name = "CMB" if self.kind == "cmb" else "blackbody"
        return f"{name}, {self.temperature:.6g} K"


def check_convention(value, name="background"):
    """Validate a convention keyword; returns ``"subtracted"`` or ``"included"``.

    Raises
    ------
    InputError
        Anything else, with a hint when a background *source* (``"cmb"``, a
        temperature) was passed where the convention is asked for.
    """
    if isinstance(value, str) and value.strip().lower() in CONVENTIONS:
        return value.strip().lower()
    hint = ""
    if (isinstance(value, str) and value.strip().lower() == "cmb") or isinstance(value, u.Quantity):
        hint = (
            " (the background itself is chosen when tracing: rtrace.trace(..., background='cmb'); "
            "here the keyword says whether products include or subtract it)"
        )
    raise InputError(f"{name}: expected 'subtracted' or 'included', got {value!r}{hint}")


def resolve_convention(background, subtract_background=None, name="background"):
    """The convention from ``background`` and the deprecated boolean ``subtract_background``.

    ``subtract_background=True/False`` still works (as ``"subtracted"`` /
    ``"included"``) with a DeprecationWarning; giving both with different
    meanings is an InputError.
    """
    if subtract_background is None:
        return check_convention(DEFAULT_CONVENTION if background is None else background, name)
    import warnings

    warnings.warn(
        "subtract_background= is deprecated; use background='subtracted' or 'included'",
        DeprecationWarning,
        stacklevel=3,
    )
    old = "subtracted" if subtract_background else "included"
    if background is not None and check_convention(background, name) != old:
        raise InputError(
            f"{name}: {background!r} contradicts subtract_background={subtract_background!r}; give only background="
        )
    return old


def background_from_spec(spec, nu):
    """Intensity (nfreq,) entering from the far side and its :class:`Background`.

    Parameters
    ----------
    spec : None, "cmb", `~astropy.units.Quantity`
        ``None`` (nothing), ``"cmb"`` (2.7255 K blackbody, Fixsen 2009), a
        blackbody temperature, or a specific intensity (scalar or one per
        frequency).
    nu : ndarray (nfreq,)
        Hz.
    """
    if spec is None:
        return np.zeros_like(nu), Background("none", 0.0)
    if isinstance(spec, str):
        if spec.strip().lower() != "cmb":
            raise InputError(f"background: unknown name '{spec}' (use 'cmb', a temperature or an intensity)")
        return planck_cgs(nu, np.full_like(nu, CMB_TEMPERATURE)), Background("cmb", CMB_TEMPERATURE)
    q = u.Quantity(spec)
    if q.unit.is_equivalent(u.K):
        t = q.to_value(u.K)
        if np.ndim(t) != 0:
            raise InputError(f"background: expected one temperature, got {np.size(t)}")
        if not (np.isfinite(t) and t >= 0):
            raise InputError(f"background: the temperature must be finite and >= 0 K, got {t} K")
        t = float(t)
        if t == 0.0:
            return np.zeros_like(nu), Background("none", 0.0)
        return planck_cgs(nu, np.full_like(nu, t)), Background("blackbody", t)
    unit = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)
    if not q.unit.is_equivalent(unit):
        raise InputError(f"background: expected a temperature or a specific intensity, got '{q.unit}'")
    try:
        values = np.broadcast_to(q.to_value(unit), nu.shape).astype(float)
    except ValueError:
        raise InputError(f"background: {np.size(q)} intensities given for {nu.size} frequencies") from None
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        raise InputError(f"background: {int(bad.sum())} intensity value(s) negative or not finite")
    return values, Background("intensity", None)


def background_of(obj):
    """The :class:`Background` of a Result, or of the Result under a SkyMap (``none`` if unknown)."""
    result = getattr(obj, "result", obj)
    info = getattr(result, "background_info", None)
    return info if isinstance(info, Background) else Background("none", 0.0)


def header_cards(convention, background):
    """FITS cards ``(keyword, value, comment)`` declaring the convention.

    Parameters
    ----------
    convention : {"subtracted", "included"}
        For quantities the background does not enter (optical depth,
        emission measure) pass ``"subtracted"``: their data hold no
        background either.
    background : `Background`, or an object with one (Result, SkyMap)
    """
    convention = check_convention(convention)
    if not isinstance(background, Background):
        background = background_of(background)
    cards = [
        ("BKGSUB", convention == "subtracted", "T: no background in data (empty sky reads 0)"),
        ("BKGKIND", background.kind.upper(), "what is behind: NONE,CMB,BLACKBODY,INTENSITY"),
    ]
    if background.temperature is not None:
        cards.append(("BKGTEMP", float(background.temperature), "[K] background blackbody temperature"))
    return cards


def describe(convention, background):
    """One line for a CSV header, e.g. ``'subtracted (CMB, 2.7255 K): empty sky reads 0'``."""
    convention = check_convention(convention)
    if not isinstance(background, Background):
        background = background_of(background)
    what = "empty sky reads 0" if convention == "subtracted" else "values include the background intensity"
    return f"{convention} ({background.label()}): {what}"


def brightness_temperature_cgs(nu, delta, bg, kind, convention):
    """Brightness temperature (K) of a background-subtracted intensity ``delta`` in a convention.

    Parameters
    ----------
    nu : ndarray broadcastable to ``delta``
        Hz.
    delta : ndarray
        ``I - I_bg`` (erg s-1 cm-2 Hz-1 sr-1).
    bg : ndarray broadcastable to ``delta``
        ``I_bg``, same unit.
    kind : {"planck", "rayleigh-jeans", "rj"}
    convention : {"subtracted", "included"}

    Returns
    -------
    ndarray
        Planck: ``T_P(I_bg + dI) - T_P(I_bg)`` (subtracted) or
        ``T_P(I_bg + dI)`` (included); NaN where ``I_bg + dI < 0``.
        Rayleigh-Jeans: ``c^2 X / (2 k nu^2)`` with ``X = dI`` or ``I_bg + dI``.
    """
    convention = check_convention(convention)
    if kind == "planck":
        full = inverse_planck_cgs(nu, bg + delta)
        if convention == "included":
            return full
        return full - inverse_planck_cgs(nu, bg + np.zeros_like(delta))
    if kind in ("rayleigh-jeans", "rj"):
        value = delta if convention == "subtracted" else bg + delta
        return C**2 * value / (2.0 * K_B * nu**2)
    raise InputError(f"kind: expected 'planck' or 'rayleigh-jeans', got {kind!r}")


def background_in_header(header, nu, unit_solid_angle, name="model"):
    """Per-plane background (in the data's unit) that a FITS image written with BKGSUB = F holds.

    Parameters
    ----------
    header : `~astropy.io.fits.Header`
    nu : ndarray (nfreq,)
        Hz.
    unit_solid_angle : ndarray (nfreq,) or float
        Solid angle (sr) of the data's "per" unit: a pixel (Jy/pixel) or
        each plane's beam (Jy/beam).
    name : str
        Parameter name for errors.

    Returns
    -------
    ndarray (nfreq,)
        Jy per pixel or per beam to subtract: zeros when the header says
        ``BKGSUB = T`` or has no BKGSUB (not written by rtrace).

    Raises
    ------
    InputError
        ``BKGSUB = F`` with a background of no known temperature.
    """
    nu = np.asarray(nu, float)
    if bool(header.get("BKGSUB", True)):
        return np.zeros_like(nu)
    kind = str(header.get("BKGKIND", "")).strip().upper()
    if kind == "NONE":
        return np.zeros_like(nu)
    temperature = header.get("BKGTEMP")
    if kind not in ("CMB", "BLACKBODY") or temperature is None:
        raise InputError(
            f"{name}: the header says BKGSUB = F (background included) but gives no background "
            f"temperature (BKGKIND = {kind or 'missing'!r}); write the model with "
            f"background='subtracted'"
        )
    intensity = planck_cgs(nu, np.full_like(nu, float(temperature)))
    return intensity * np.asarray(unit_solid_angle, float) / 1.0e-23
