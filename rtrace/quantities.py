"""Checks of Quantities given at the API boundary, with errors that name the argument."""

import astropy.units as u
import numpy as np

from .errors import InputError

__all__ = ["positive_scalar", "finite_number"]


def positive_scalar(value, unit, name, what, equivalencies=None):
    """``value`` as a float in ``unit``: one finite, positive Quantity of that kind.

    Parameters
    ----------
    value : `~astropy.units.Quantity` or str
        e.g. ``5 * u.GHz`` or ``"5 GHz"``.
    unit : `~astropy.units.Unit`
        The unit of the returned float.
    name : str
        The argument, for the error messages.
    what : str
        The kind expected, for the error messages ("an angle", "a frequency").
    equivalencies : list, optional
        e.g. ``u.spectral()`` to accept wavelengths for a frequency.

    Raises
    ------
    InputError
        Wrong kind of unit, not a scalar, not finite or not positive.
    """
    eq = equivalencies or []
    try:
        q = u.Quantity(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected {what}, got {value!r}") from None
    if not q.unit.is_equivalent(unit, equivalencies=eq):
        raise InputError(f"{name}: expected {what}, got unit '{q.unit}'")
    if q.ndim != 0:
        raise InputError(f"{name}: expected a single value, got shape {q.shape}")
    x = float(q.to_value(unit, equivalencies=eq))
    if not (np.isfinite(x) and x > 0):
        raise InputError(f"{name}: must be finite and positive, got {value}")
    return x


def finite_number(value, name, positive=False, what="a number"):
    """``value`` as a float: one finite number (and > 0 if ``positive``), else an error naming ``name``."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected {what}, got {value!r}") from None
    if not np.isfinite(x):
        raise InputError(f"{name}: must be finite, got {value!r}")
    if positive and not x > 0:
        raise InputError(f"{name}: must be positive, got {value!r}")
    return x
