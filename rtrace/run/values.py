"""Values of a job file: quantities with units ('1 GHz'), typed keys and unknown-key messages, as ConfigErrors."""

import difflib

import astropy.units as u
import numpy as np

from ..errors import ConfigError
from ..quantities import JY_PER_BEAM, jy_per_beam

_PHYSICAL = {
    "length": u.cm,
    "temperature": u.K,
    "frequency": u.Hz,
    "angle": u.deg,
    "rate": u.s**-1,
    "flux_per_beam": JY_PER_BEAM,
    "memory_size": u.byte,
    "time": u.s,
}


def _suggest(key, allowed):
    close = difflib.get_close_matches(key, sorted(allowed), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def _check_keys(table, allowed, where):
    for key in table:
        if key not in allowed:
            raise ConfigError(
                f"{where}: unknown key '{key}'{_suggest(key, allowed)}; allowed: {', '.join(sorted(allowed))}"
            )


def _a(kind):
    name = kind.replace("_", " ")
    return ("an " if name[0] in "aeiou" else "a ") + name


def _quantity(value, kind, where):
    """Parse '1 GHz' (or a number with no unit, refused) into a Quantity of the right type."""
    unit = _PHYSICAL[kind]
    try:
        q = u.Quantity(value)
    except (TypeError, ValueError):
        raise ConfigError(f"{where}: cannot read '{value}' as a quantity (write e.g. '1 GHz', '2 pc')") from None
    if q.unit == u.dimensionless_unscaled:
        raise ConfigError(f"{where}: '{value}' has no unit; expected {_a(kind)}")
    equiv = u.spectral() if kind == "frequency" else []
    if kind == "flux_per_beam" and q.unit.is_equivalent(u.Jy):
        q = jy_per_beam(q, where, error=ConfigError)  # '0.1 mJy' is read as per beam
    if not q.unit.is_equivalent(unit, equivalencies=equiv):
        raise ConfigError(f"{where}: '{value}' is not {_a(kind)} (unit '{q.unit}')")
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # a zero wavelength: refused later
        return q.to(unit, equivalencies=equiv)


def _typed(value, kind, where):
    if isinstance(kind, tuple):
        errors = []
        for k in kind:
            try:
                return _typed(value, k, where)
            except ConfigError as exc:
                errors.append(str(exc))
        raise ConfigError(errors[0])
    if kind in _PHYSICAL or kind == "flux_per_beam":
        return _quantity(value, kind, where)
    if kind == "length3":
        if not isinstance(value, list) or len(value) != 3:
            raise ConfigError(f"{where}: expected a list of three lengths, e.g. ['0 pc', '0 pc', '1 pc']")
        return u.Quantity([_quantity(v, "length", f"{where}[{i}]") for i, v in enumerate(value)])
    if kind in ("frequency_list", "flux_per_beam_list"):
        if not isinstance(value, list) or not value:
            raise ConfigError(f"{where}: expected a non-empty list")
        base = kind.replace("_list", "")
        return u.Quantity([_quantity(v, base, f"{where}[{i}]") for i, v in enumerate(value)])
    if kind is float and isinstance(value, int) and not isinstance(value, bool):
        return float(value)
    if kind is int and isinstance(value, bool) or not isinstance(value, kind):
        name = kind.__name__ if isinstance(kind, type) else str(kind)
        raise ConfigError(f"{where}: expected {name}, got {type(value).__name__} {value!r}")
    return value
