"""The gas a snapshot is built from: which fields were given, their checks, and the three fields the transfer needs.

A snapshot gives either the electron density (and optionally the ion term)
with the electron temperature, or the mass density with an ionization model
and a thermal state: the temperature, the pressure or the specific internal
energy. :func:`derive_fields` checks every array (shape, finite, sign; the
error names the field, the problem and the number of bad cells) before any
ionization work, then evaluates the model over the grid in pieces.
"""

import astropy.units as u
import numpy as np

from .errors import InputError
from .physics.ionization import DEFAULT_MODEL, resolve_ionization
from .physics.ionization.cells import THERMAL_INPUTS
from .physics.ionization.grid import ArrayInputs, evaluate_grid
from .quantities import check_cells, check_density_inputs

__all__ = [
    "derive_fields",
    "check_field",
    "to_array",
    "gamma_value",
    "thermal_input",
    "thermal_provenance",
    "check_real",
    "check_emission_range",
    "THERMAL_UNITS",
    "DEFAULT_GAMMA",
]

#: Thermal inputs and their units (K; dyn cm^-2; erg g^-1).
THERMAL_UNITS = {"temperature": u.K, "pressure": u.dyn / u.cm**2, "internal_energy": u.erg / u.g}
#: Adiabatic index of a monatomic ideal gas, 5/3 (common practice).
DEFAULT_GAMMA = 5.0 / 3.0


#: How a user attaches units to each physical field, for the message refusing a plain array.
_UNIT_EXAMPLES = {
    "temperature": "u.K",
    "electron_density": "u.cm**-3",
    "ion_density": "u.cm**-3",
    "density": "u.g / u.cm**3",
    "pressure": "u.dyn / u.cm**2",
    "internal_energy": "u.erg / u.g",
}


#: Largest finite float32 (numpy.finfo(numpy.float32).max).
_FLOAT32_MAX = float(np.finfo(np.float32).max)


def check_real(arr, name):
    """Refuse complex and object arrays (InputError naming ``name``); numeric real arrays pass.

    Casting a complex array to float drops its imaginary part with at most a
    numpy warning, and an object array may hold anything; neither is a field.
    """
    kind = np.asarray(arr).dtype.kind
    if kind == "c":
        raise InputError(
            f"{name}: complex values given (dtype {np.asarray(arr).dtype}); a physical field is "
            "real, and casting would silently drop the imaginary parts; pass the real part"
        )
    if kind not in "fiub":
        raise InputError(
            f"{name}: expected a real numeric array, got dtype {np.asarray(arr).dtype} "
            f"(convert with numpy.asarray(..., dtype=float))"
        )


def to_array(value, unit, name, dtype, equivalencies=None):
    """Quantity -> C-contiguous ndarray in ``unit``; a plain array is refused.

    A simulation's arrays are often in code units; taking a plain array to
    be in cgs would give wrong images without a word, so every physical
    field must carry its units (`astropy.units`).
    """
    if not isinstance(value, u.Quantity):
        if value is not None and np.ndim(value) > 0:
            hint = _UNIT_EXAMPLES.get(name, str(unit))
            raise InputError(
                f"{name}: a plain array has no units; attach them (import astropy.units as u; "
                f"{name}=array * {hint}) so that values in code units are never taken as cgs"
            )
        raise InputError(
            f"{name}: expected an array with units of {unit} (an astropy Quantity), got {type(value).__name__}"
        )
    if not value.unit.is_equivalent(unit, equivalencies=equivalencies or []):
        raise InputError(f"{name}: expected units of {unit}, got '{value.unit}'")
    value = value.to_value(unit, equivalencies=equivalencies or [])
    check_real(value, name)
    try:
        with np.errstate(over="ignore"):  # values beyond float32 are counted just below
            arr = np.ascontiguousarray(value, dtype=dtype)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a numeric array, got {type(value).__name__}") from None
    if arr.dtype == np.float32 and arr.size and np.isinf(arr).any():
        n_big = int(np.count_nonzero(np.isinf(arr) & np.isfinite(value)))
        if n_big:
            raise InputError(
                f"{name}: {n_big} of {arr.size} cells exceed the float32 range ({_FLOAT32_MAX:.3g} "
                f"{unit}); build the snapshot with dtype=numpy.float64"
            )
    return arr


def check_emission_range(ne, ni, dtype):
    """InputError if ``n_e x ion term`` overflows ``dtype`` in any cell (float32: above about 3.4e38 cm^-6).

    Oblique views form that product in the storage dtype; an overflow gives
    tau = inf without a word, so it is refused before any tracing, with the
    count of cells, the largest product and the remedy (dtype=float64).
    """
    if np.dtype(dtype) != np.float32 or ne.size == 0:
        return
    if float(ne.max()) * float(ni.max()) <= _FLOAT32_MAX:
        return  # two reductions settle the common case
    n_bad, largest = 0, 0.0
    flat_ne, flat_ni = ne.reshape(-1), ni.reshape(-1)
    step = 1 << 22
    for lo in range(0, flat_ne.size, step):  # in pieces: no whole-grid float64 temporary
        prod = np.multiply(flat_ne[lo : lo + step], flat_ni[lo : lo + step], dtype=np.float64)
        n_bad += int(np.count_nonzero(prod > _FLOAT32_MAX))
        largest = max(largest, float(prod.max()))
    if n_bad:
        raise InputError(
            f"electron_density x ion_density: {n_bad} of {ne.size} cells have n_e x ion term above "
            f"the float32 range ({largest:.3g} > {_FLOAT32_MAX:.3g} cm^-6; n_e above about "
            f"{np.sqrt(_FLOAT32_MAX):.2g} cm^-3), which would give an infinite optical depth; build "
            "the snapshot with dtype=numpy.float64"
        )


def check_field(name, arr, shape, lower, strict):
    """Validate one field: shape, finiteness, lower bound. The message counts bad cells."""
    if arr.shape != shape:
        raise InputError(f"{name}: shape {arr.shape} does not match the grid shape {shape}")
    check_cells(arr, name, lower, strict)


def gamma_value(gamma):
    """The adiabatic index as a float > 1 (default 5/3), or an InputError."""
    if gamma is None:
        return DEFAULT_GAMMA
    try:
        g = float(u.Quantity(gamma).to_value(u.dimensionless_unscaled))
    except (TypeError, ValueError, u.UnitsError):
        raise InputError(f"gamma: expected a number (the adiabatic index), got {gamma!r}") from None
    if not (np.isfinite(g) and g > 1.0):
        raise InputError(f"gamma: the adiabatic index must be finite and > 1, got {gamma!r}")
    return g


def thermal_input(temperature=None, pressure=None, internal_energy=None):
    """``(name, value)`` of the one thermal input given, or an InputError."""
    given = [
        (k, v) for k, v in zip(THERMAL_INPUTS, (temperature, pressure, internal_energy), strict=True) if v is not None
    ]
    if len(given) != 1:
        names = ", ".join(k for k, _ in given) if given else "none"
        raise InputError(f"temperature / pressure / internal_energy: give exactly one thermal input (got {names})")
    return given[0]


def _grid_shape(arrays):
    for name, value in arrays:
        if value is not None:
            ndim = np.ndim(value)
            if ndim != 3:
                raise InputError(f"{name}: expected a 3D array, got {ndim} dimension(s)")
            shape = tuple(np.shape(value))
            if 0 in shape:
                raise InputError(f"{name}: the grid has no cells (shape {shape}); every axis needs at least one cell")
            return shape
    raise InputError("temperature: required (or pressure / internal_energy with density)")


def derive_fields(
    cell,
    origin,
    *,
    temperature=None,
    electron_density=None,
    ion_density=None,
    density=None,
    pressure=None,
    internal_energy=None,
    gamma=None,
    ionization=None,
    composition=None,
    helium=None,
    fields=None,
    dtype=np.float32,
):
    """``(T_e, n_e, ion term, provenance)`` of a grid from the fields a snapshot was given.

    See :meth:`rtrace.Snapshot.from_arrays` for the combinations accepted.
    ``cell`` and ``origin`` are 3-vectors in cm. Arrays come back as
    C-contiguous ``dtype`` arrays (K, cm^-3, cm^-3); ``provenance`` holds
    ``ionization`` and, with mass density, ``ionization_state`` and what the
    model adds.
    """
    check_density_inputs(density, electron_density, ion_density, pressure, internal_energy)
    if density is None:
        for name, value in (
            ("ionization", ionization),
            ("composition", composition),
            ("helium", helium),
            ("gamma", gamma),
        ):
            if value is not None:
                raise InputError(f"{name}: only used with density; electron_density was given directly")
        return _supplied_electrons(temperature, electron_density, ion_density, dtype)
    thermal, value = thermal_input(temperature, pressure, internal_energy)
    shape = _grid_shape([(thermal, value), ("density", density)])
    model = resolve_ionization(
        DEFAULT_MODEL if ionization is None else ionization, composition=composition, helium=helium
    )
    inputs = _mass_density_inputs(density, thermal, value, gamma, shape)
    merged = model.with_fields(_model_fields(model, fields, shape), shape)
    model.validate_fields(merged)  # whole-grid counts, before any evaluation
    grid = ArrayInputs(inputs, merged, shape, cell, origin)
    t, ne, ni, provenance = evaluate_grid(model, grid, dtype)
    check_emission_range(ne, ni, dtype)
    if thermal != "temperature":
        provenance["temperature"] = thermal_provenance(thermal, inputs["gamma"])
    return t, ne, ni, provenance


def _supplied_electrons(temperature, electron_density, ion_density, dtype):
    """:func:`derive_fields` for a snapshot that gives the electron density (and ion term) itself."""
    if temperature is None:
        raise InputError("temperature: required with electron_density")
    shape = _grid_shape([("temperature", temperature)])
    t = to_array(temperature, u.K, "temperature", dtype, u.temperature())
    check_field("temperature", t, shape, 0.0, strict=True)
    ne = to_array(electron_density, u.cm**-3, "electron_density", dtype)
    check_field("electron_density", ne, shape, 0.0, strict=False)
    if ion_density is None:
        check_emission_range(ne, ne, dtype)
        return t, ne, ne, {"ionization": "supplied n_e; ion term = n_e"}
    ni = to_array(ion_density, u.cm**-3, "ion_density", dtype)
    check_field("ion_density", ni, shape, 0.0, strict=False)
    check_emission_range(ne, ni, dtype)
    return t, ne, ni, {"ionization": "supplied n_e and ion term"}


def _mass_density_inputs(density, thermal, value, gamma, shape):
    """The checked mass density and thermal field (and gamma where a temperature is derived), by name."""
    rho = to_array(density, u.g / u.cm**3, "density", np.float64)
    check_field("density", rho, shape, 0.0, strict=False)
    heat = to_array(
        value, THERMAL_UNITS[thermal], thermal, np.float64, u.temperature() if thermal == "temperature" else None
    )
    check_field(thermal, heat, shape, 0.0, strict=True)
    inputs = {"density": rho, thermal: heat}
    if thermal == "temperature":
        if gamma is not None:
            raise InputError("gamma: only used with pressure or internal_energy")
        return inputs
    n_empty = int(np.count_nonzero(rho <= 0.0))
    if n_empty:
        raise InputError(
            f"density: {n_empty} of {rho.size} cells are empty (density 0), where a temperature "
            f"cannot be derived from the {thermal.replace('_', ' ')}"
        )
    inputs["gamma"] = gamma_value(gamma)
    return inputs


def _model_fields(model, fields, shape):
    """The user's per-cell fields for the ionization model, checked; InputError naming any the model lacks."""
    user_fields = {}
    for name, arr in (fields or {}).items():
        arr = np.asarray(arr)
        check_real(arr, f"fields[{name!r}]")
        if arr.ndim and arr.shape != shape:
            raise InputError(
                f"fields[{name!r}]: shape {arr.shape} is not the grid shape {shape} "
                "(give one value per cell, or a single number for the whole grid)"
            )
        user_fields[name] = arr
    missing = [n for n in model.field_names() if n not in user_fields]
    if missing:
        raise InputError(
            f"fields: the ionization model reads {', '.join(repr(n) for n in missing)}, not given "
            f"(fields given: {sorted(user_fields) or 'none'})"
        )
    return user_fields


def thermal_provenance(thermal, gamma):
    """How the temperature was derived, for the provenance of a snapshot built from pressure or energy."""
    if thermal == "pressure":
        return "from the pressure: P = (n_H + n_He + n_e) k T with the model's ionization, solved per cell"
    return (
        f"from the internal energy: P = (gamma - 1) rho e, gamma = {gamma:.6g}, and P = (n_H + n_He + n_e) k T "
        "with the model's ionization, solved per cell"
    )
