"""Checks of Quantities given at the API boundary, with errors that name the argument."""

import astropy.units as u
import numpy as np

from .errors import InputError

__all__ = [
    "positive_scalar",
    "finite_number",
    "storage_dtype",
    "check_density_inputs",
    "parse_frequencies",
    "parse_vector3",
    "JY_PER_BEAM",
    "jy_per_beam",
    "CellTally",
    "check_cells",
]

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
                raise InputError(
                    f"{name}: needs density (the particle count that turns it into a temperature "
                    "depends on the mass density and its ionization)"
                )
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


# --------------------------------------------------------------------------------------------
# frequencies
# --------------------------------------------------------------------------------------------


def parse_frequencies(value, name="frequencies", *, scalar=False, error=InputError):
    """Frequencies (or wavelengths, or photon energies) as floats in Hz.

    The one parser of frequencies at the API boundary: a Quantity of any
    spectral unit (``u.spectral()``, so ``21 * u.cm`` is 1.43 GHz), a string
    astropy reads (``"5 GHz"``) or a sequence of either.

    Parameters
    ----------
    value : `~astropy.units.Quantity`, str or sequence of them
        e.g. ``[1, 5] * u.GHz``, ``"5 GHz"``, ``["1 GHz", "21 cm"]``.
    name : str
        The argument, for the error messages.
    scalar : bool
        Expect one frequency and return a float (else a 1D array).
    error : type
        The exception class raised (:class:`~rtrace.errors.InputError`, or
        :class:`~rtrace.errors.ConfigError` for a job file).

    Returns
    -------
    float or numpy.ndarray
        Hz; a 1D float64 array (at least one value) unless ``scalar``.

    Raises
    ------
    InputError
        (or ``error``) Not a spectral quantity, the wrong shape, none given, or
        values that are not finite and positive (counted).
    """
    q = _spectral_quantity(value, name, error)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):  # a zero wavelength: refused below
        nu = np.asarray(q.to_value(u.Hz, equivalencies=u.spectral()), dtype=float)
    if scalar:
        if nu.ndim != 0:
            raise error(f"{name}: expected a single frequency, got shape {nu.shape}")
        if not (np.isfinite(nu) and nu > 0):
            raise error(f"{name}: must be finite and positive, got {value}")
        return float(nu)
    nu = np.atleast_1d(nu)
    if nu.ndim != 1 or nu.size == 0:
        raise error(f"{name}: must be a 1D sequence of finite positive values, got shape {nu.shape}")
    bad = ~(np.isfinite(nu) & (nu > 0))
    if bad.any():
        raise error(
            f"{name}: must be a 1D sequence of finite positive values; {int(bad.sum())} of {nu.size} "
            f"are not (first: {q.ravel()[np.argmax(bad)] if q.ndim else q})"
        )
    return nu


def _spectral_quantity(value, name, error):
    """``value`` as a Quantity of a spectral unit (strings and sequences of strings or Quantities read)."""
    if isinstance(value, (list, tuple)) and any(isinstance(v, (str, u.Quantity)) for v in value):
        # items in different spectral units ("1 GHz", "21 cm"): each to Hz first
        parts = [_spectral_quantity(v, name, error) for v in value]
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            return u.Quantity([p.to(u.Hz, equivalencies=u.spectral()) for p in parts])
    try:
        q = u.Quantity(value)
    except (TypeError, ValueError, u.UnitsError):
        raise error(f"{name}: expected a frequency (or wavelength), got {value!r}") from None
    if not q.unit.is_equivalent(u.Hz, equivalencies=u.spectral()):
        raise error(f"{name}: expected a frequency (or wavelength), got unit '{q.unit}'")
    return q


# --------------------------------------------------------------------------------------------
# surface brightness: Jy/beam
# --------------------------------------------------------------------------------------------

#: Jansky per beam, the unit of an observed (beam-convolved) image.
JY_PER_BEAM = u.Jy / u.beam


def jy_per_beam(value, name, example="0.1 * u.mJy / u.beam", *, error=InputError):
    """A surface brightness in Jy/beam, as a Quantity; a bare flux density is read as per beam.

    Radio images and noise levels quoted in Jy, mJy or uJy mean per beam
    (common practice; FITS ``BUNIT`` often says ``Jy`` for ``Jy/beam``).

    Parameters
    ----------
    value : `~astropy.units.Quantity` or str
        e.g. ``50 * u.uJy / u.beam``, ``50 * u.uJy`` or ``"0.1 mJy"``.
    name : str
        The argument, for the error messages.
    example : str
        Shown in the error for a value without a unit.
    error : type
        The exception class raised.

    Returns
    -------
    `~astropy.units.Quantity`
        In the unit given, made per beam where it was a plain flux density
        (use ``.to_value(JY_PER_BEAM)`` for floats).
    """
    if isinstance(value, str):
        try:
            value = u.Quantity(value)
        except (TypeError, ValueError):
            raise error(f"{name}: cannot read '{value}' as a quantity in Jy/beam (e.g. {example})") from None
    if not isinstance(value, u.Quantity) or value.unit == u.dimensionless_unscaled:
        raise error(f"{name}: expected a Quantity in Jy/beam (e.g. {example}), got {value!r}")
    if value.unit.is_equivalent(JY_PER_BEAM):
        return value
    if value.unit.is_equivalent(u.Jy):
        return value / u.beam
    raise error(f"{name}: expected Jy/beam, got unit '{value.unit}'")


# --------------------------------------------------------------------------------------------
# per-cell validation, whole arrays or streamed block by block
# --------------------------------------------------------------------------------------------


class CellTally:
    """Counts of the bad cells of one field over one array or the blocks of a streaming pass.

    Feed it blocks with :meth:`add` (the whole array is one block); it counts
    the cells that are not finite and, among the finite ones, those below
    ``lower`` (or at it, if ``strict``) or above ``upper``, and keeps the
    finite range. :meth:`raise_if_bad` then raises one
    :class:`~rtrace.errors.InputError` naming the field, each problem and
    its count, e.g. ``"temperature: 2 of 4522 cells are not finite (NaN or
    inf) and 1 violate temperature > 0 (minimum -3)"``.

    Parameters
    ----------
    name : str
        The field, first word of the message.
    lower, upper : float, optional
        Bounds of the valid values (None: no bound).
    strict : bool
        ``lower`` itself is invalid (``> lower`` rather than ``>= lower``).
    rule : str, optional
        How the bounds read in the message; default ``"name >= lower"``
        (``>`` if strict), ``"lower <= name <= upper"`` with both bounds.
    where : str, optional
        Words after "cells" (e.g. ``"of brick [0:4, 0:4, 0:4]"``).
    context : str, optional
        Appended to the message (e.g. the dataset and file).
    ranges : bool
        Keep the finite range (``min``, ``max``; two more passes over each
        block). :func:`check_cells` skips it unless a cell is bad.

    Attributes
    ----------
    size, nonfinite, low, high : int
        Cells seen, not finite, below and above the bounds.
    min, max : float
        Range of the finite cells (``inf``/``-inf`` before any).
    """

    def __init__(self, name, lower=None, strict=False, upper=None, *, rule=None, where="", context="", ranges=True):
        self.name, self.lower, self.strict, self.upper = name, lower, strict, upper
        self.rule, self.where, self.context = rule or _rule_text(name, lower, strict, upper), where, context
        self.ranges = ranges
        self.size = self.nonfinite = self.low = self.high = 0
        self.min, self.max = np.inf, -np.inf

    def add(self, arr):
        """Count one block (any shape); True while every cell seen so far is valid."""
        arr = np.asarray(arr)
        finite = np.isfinite(arr)
        n_finite = int(np.count_nonzero(finite))
        all_finite = n_finite == arr.size
        self.size += arr.size
        self.nonfinite += arr.size - n_finite
        if n_finite and self.ranges:
            where = True if all_finite else finite
            self.min = min(self.min, float(np.min(arr, where=where, initial=np.inf)))
            self.max = max(self.max, float(np.max(arr, where=where, initial=-np.inf)))
        with np.errstate(invalid="ignore"):
            if self.lower is not None:
                below = (arr <= self.lower) if self.strict else (arr < self.lower)
                self.low += int(np.count_nonzero(below if all_finite else below & finite))
            if self.upper is not None:
                above = arr > self.upper
                self.high += int(np.count_nonzero(above if all_finite else above & finite))
        return self.ok

    @property
    def ok(self):
        """Whether no bad cell was seen."""
        return self.nonfinite == 0 and self.low == 0 and self.high == 0

    @property
    def bad(self):
        """Number of bad cells seen (not finite, or outside the bounds)."""
        return self.nonfinite + self.low + self.high

    def message(self):
        """The error message, or None when every cell was valid."""
        if self.ok:
            return None
        cells = f"{self.size} cells" + (f" {self.where}" if self.where else "")
        problems = []
        if self.nonfinite:
            problems.append((self.nonfinite, "are not finite (NaN or inf)"))
        if self.low or self.high:
            extreme = ", ".join(
                ([f"minimum {self.min:.6g}"] if self.low else []) + ([f"maximum {self.max:.6g}"] if self.high else [])
            )
            problems.append((self.low + self.high, f"violate {self.rule} ({extreme})"))
        first, text = problems[0]
        words = f"{first} of {cells} {text}"
        for count, text in problems[1:]:
            words += f" and {count} {text}"
        return f"{self.name}: {words}" + (f"{self.context}" if self.context else "")

    def raise_if_bad(self):
        """Raise one InputError naming the field, each problem and its count; nothing if all were valid."""
        text = self.message()
        if text is not None:
            raise InputError(text)


def _rule_text(name, lower, strict, upper):
    if lower is not None and upper is not None:
        return f"{lower:g} {'<' if strict else '<='} {name} <= {upper:g}"
    if lower is not None:
        return f"{name} {'>' if strict else '>='} {lower:g}"
    if upper is not None:
        return f"{name} <= {upper:g}"
    return f"{name} finite"


def check_cells(arr, name, lower=None, strict=False, upper=None, **kwargs):
    """Check one whole array with a :class:`CellTally`: one InputError naming the field, problem and count.

    Parameters are those of :class:`CellTally`; the range (for the message) is found only when a cell is bad.
    """
    if CellTally(name, lower, strict, upper, ranges=False, **kwargs).add(arr):
        return
    tally = CellTally(name, lower, strict, upper, **kwargs)
    tally.add(arr)
    tally.raise_if_bad()


def parse_vector3(value, name, unit):
    """A length given as a scalar or a 3-vector (any length unit) as a float64 ``(3,)`` array in ``unit``."""
    q = u.Quantity(value)
    if not q.unit.is_equivalent(unit):
        raise InputError(f"{name}: expected a length, got unit '{q.unit}'")
    vec = (
        np.broadcast_to(np.asarray(q.to_value(unit), float), (3,)).copy()
        if q.ndim == 0
        else np.asarray(q.to_value(unit), float).reshape(-1)
    )
    if vec.shape != (3,):
        raise InputError(f"{name}: expected a scalar or a 3-vector, got shape {q.shape}")
    return vec
