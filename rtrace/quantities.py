"""Checks of Quantities given at the API boundary, with errors that name the argument."""

import astropy.units as u
import numpy as np

from .errors import InputError

__all__ = ["positive_scalar", "finite_number", "storage_dtype", "check_density_inputs"]

#: The field types a snapshot stores (the kernels are compiled for these two).
STORAGE_DTYPES = (np.dtype(np.float32), np.dtype(np.float64))


def storage_dtype(dtype):
    """``dtype`` as a numpy dtype a snapshot can store its fields in (float32 or float64); InputError otherwise."""
    try:
        dtype = np.dtype(dtype)
    except TypeError:
        raise InputError(f"dtype: not a numpy dtype: {dtype!r}") from None
    if dtype not in STORAGE_DTYPES:
        raise InputError(f"dtype: must be float32 or float64, got {dtype}")
    return dtype


def check_density_inputs(density, electron_density, ion_density, pressure, internal_energy):
    """Refuse the combinations of density inputs no reader accepts, naming the field.

    A snapshot gives either ``electron_density`` (and optionally ``ion_density``), or the mass ``density``
    with an ionization model; a ``pressure`` or ``internal_energy`` needs ``density`` (the particle count
    that turns it into a temperature depends on the mass density and its ionization).
    """
    if density is not None and (electron_density is not None or ion_density is not None):
        raise InputError("density: give either density (with ionization) or electron_density, not both")
    if density is None:
        for name, value in (("pressure", pressure), ("internal_energy", internal_energy)):
            if value is not None:
                raise InputError(f"{name}: needs density (the particle count that turns it into a temperature "
                                 "depends on the mass density and its ionization)")
        if electron_density is None:
            raise InputError("electron_density: required unless density and ionization are given")


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
