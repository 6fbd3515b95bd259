"""Fuzz table for the Python API's boundary: every bad value gets a named InputError before any work.

Each case is ``(id, call, error class, text the message must contain)``. The
call runs with the tracer's per-brick work and the ionization model's grid
evaluation replaced by a function that fails the test, so a check that
only fires after tracing (or after the ionization is computed) fails here
too; cases whose problem exists only once the ionization is known are
marked ``AFTER_IONIZATION`` and run with the model.
"""

import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import rtrace
from rtrace import Snapshot, View, trace
from rtrace.errors import InputError, RtraceError
from rtrace.physics import absorption_coefficient, emission_coefficient
from rtrace.physics.ionization import IonizingSources, SuppliedFraction
from rtrace.transfer import tracer

N = 4
SHAPE = (N, N, N)
T = np.full(SHAPE, 1.0e4) * u.K
NE = np.full(SHAPE, 100.0) * u.cm**-3
RHO = np.full(SHAPE, 1.0e-22) * u.g / u.cm**3
CELL = 0.1 * u.pc


def snap():
    return Snapshot.from_arrays(temperature=T, electron_density=NE, cell_size=CELL)


def from_arrays(**kw):
    args = dict(temperature=T, electron_density=NE, cell_size=CELL)
    args.update(kw)
    return lambda: Snapshot.from_arrays(**args)


def gas(**kw):
    args = dict(temperature=T, density=RHO, cell_size=CELL)
    args.update(kw)
    return lambda: Snapshot.from_arrays(**args)


def view(**kw):
    return lambda: View(**kw)


def traced(view_kw=None, frequencies=1 * u.GHz, **kw):
    return lambda: trace(snap(), View(npix=4, **(view_kw or {})), frequencies, **kw)


def cube(value, dtype=float):
    return np.full(SHAPE, value, dtype=dtype)


OBLIQUE = {"los": (1, 1, 1)}

CASES = [
    # -- View: centre, width, distance must be finite; npix whole numbers -------------------
    ("center-nan", view(center=[np.nan, 0, 0] * u.pc), InputError, "center: 1 of 3 coordinates are not finite"),
    ("center-inf", view(center=[0, np.inf, -np.inf] * u.pc), InputError, "center: 2 of 3"),
    ("center-2vec", view(center=[0, 0] * u.pc), InputError, "center"),
    ("center-unit", view(center=[0, 0, 0] * u.K), InputError, "center"),
    ("center-text", view(center="here"), InputError, "center"),
    ("center-complex", view(center=[1j, 0, 0] * u.pc), InputError, "center"),
    ("width-inf", view(width=np.inf * u.pc), InputError, "width"),
    ("width-nan", view(width=np.nan * u.pc), InputError, "width"),
    ("width-zero", view(width=0 * u.pc), InputError, "width"),
    ("width-negative", view(width=-1 * u.pc), InputError, "width"),
    ("width-vector", view(width=[1, 2] * u.pc), InputError, "width"),
    ("width-unit", view(width=3 * u.K), InputError, "width"),
    ("distance-inf", view(distance=np.inf * u.kpc), InputError, "distance"),
    ("distance-nan", view(distance=np.nan * u.kpc), InputError, "distance"),
    ("distance-zero", view(distance=0 * u.kpc), InputError, "distance"),
    ("distance-negative", view(distance=-2 * u.kpc), InputError, "distance"),
    ("distance-time", view(distance=3 * u.s), InputError, "distance"),
    ("npix-float", view(npix=2.7), InputError, "npix"),
    ("npix-whole-float", view(npix=16.0), InputError, "npix"),
    ("npix-bool", view(npix=True), InputError, "npix"),
    ("npix-zero", view(npix=0), InputError, "npix"),
    ("npix-negative", view(npix=-3), InputError, "npix"),
    ("npix-one-element", view(npix=[16]), InputError, "npix"),
    ("npix-three", view(npix=(4, 4, 4)), InputError, "npix"),
    ("npix-pair-float", view(npix=(16, 2.5)), InputError, "npix"),
    ("npix-nested", view(npix=[[4, 4]]), InputError, "npix"),
    ("npix-text", view(npix="16"), InputError, "npix"),
    ("npix-none", view(npix=None), InputError, "npix"),
    ("los-nan", view(los=(np.nan, 0, 1)), InputError, "los"),
    ("los-zero", view(los=(0, 0, 0)), InputError, "los"),
    ("north-parallel", view(los=(0, 0, 1), north=(0, 0, 2)), InputError, "north"),
    ("sky-position-text", view(sky_position="M42"), InputError, "sky_position"),
    # -- trace: integers stay integers, backgrounds finite and >= 0 ------------------------
    ("supersample-float", traced(OBLIQUE, supersample=2.5), InputError, "supersample"),
    ("supersample-bool", traced(OBLIQUE, supersample=True), InputError, "supersample"),
    ("supersample-zero", traced(OBLIQUE, supersample=0), InputError, "supersample"),
    ("supersample-negative", traced(OBLIQUE, supersample=-1), InputError, "supersample"),
    ("supersample-text", traced(OBLIQUE, supersample="2"), InputError, "supersample"),
    ("supersample-axis-float", traced(supersample=1.5), InputError, "supersample"),
    ("background-nan", traced(background=np.nan * u.K), InputError, "background"),
    ("background-negative", traced(background=-3 * u.K), InputError, "background"),
    ("background-inf", traced(background=np.inf * u.K), InputError, "background"),
    ("background-two-temperatures", traced(background=[3, 4] * u.K), InputError, "background"),
    ("background-name", traced(background="cmbb"), InputError, "background"),
    ("emission-measure-name", traced(emission_measure="n_e^2"), InputError, "emission_measure"),
    ("emission-measure-bool", traced(emission_measure=True), InputError, "emission_measure"),
    ("frequency-zero", traced(frequencies=0 * u.GHz), InputError, "frequencies"),
    ("frequency-nan", traced(frequencies=[1, np.nan] * u.GHz), InputError, "frequencies"),
    ("frequency-negative", traced(frequencies=-1 * u.GHz), InputError, "frequencies"),
    ("frequency-unit", traced(frequencies=1 * u.K), InputError, "frequencies"),
    # -- snapshot arrays: real, non-empty, grid-shaped, within the storage type -----------
    (
        "empty-grid",
        from_arrays(temperature=np.ones((0, 8, 8)) * u.K, electron_density=np.ones((0, 8, 8)) * u.cm**-3),
        InputError,
        "temperature: the grid has no cells",
    ),
    (
        "empty-grid-gas",
        gas(temperature=np.ones((8, 0, 8)) * u.K, density=np.ones((8, 0, 8)) * u.g / u.cm**3),
        InputError,
        "no cells",
    ),
    ("complex-temperature", from_arrays(temperature=cube(1e4 + 1j, complex) * u.K), InputError, "temperature: complex"),
    (
        "complex-electron-density",
        from_arrays(electron_density=cube(10 + 2j, complex) * u.cm**-3),
        InputError,
        "electron_density: complex",
    ),
    (
        "complex-ion-density",
        from_arrays(ion_density=cube(10 + 0j, complex) * u.cm**-3),
        InputError,
        "ion_density: complex",
    ),
    ("complex-density", gas(density=cube(1e-22 + 0j, complex) * u.g / u.cm**3), InputError, "density: complex"),
    ("complex-fraction", gas(ionization=cube(0.5 + 0.1j, complex)), InputError, "complex"),
    ("fraction-1d", gas(ionization=np.full(N, 0.5)), InputError, "fraction: shape (4,) is not the grid shape"),
    ("fraction-2d", gas(ionization=np.full((N, N), 0.5)), InputError, "fraction: shape (4, 4)"),
    ("fraction-broadcastable-3d", gas(ionization=np.full((1, N, N), 0.5)), InputError, "fraction: shape (1, 4, 4)"),
    ("fraction-wrong-3d", gas(ionization=np.full((N, N, N + 1), 0.5)), InputError, "fraction"),
    (
        "helium-ii-1d",
        gas(ionization=SuppliedFraction(cube(0.5), helium_ii=np.full(N, 0.1))),
        InputError,
        "helium_ii: shape (4,)",
    ),
    (
        "field-1d",
        gas(ionization=SuppliedFraction("x_HII"), fields={"x_HII": np.full(N, 0.5)}),
        InputError,
        "fields['x_HII']: shape (4,)",
    ),
    (
        "field-complex",
        gas(ionization=SuppliedFraction("x_HII"), fields={"x_HII": cube(0.5 + 0j, complex)}),
        InputError,
        "fields['x_HII']: complex",
    ),
    (
        "field-object",
        gas(ionization=SuppliedFraction("x_HII"), fields={"x_HII": cube(None, object)}),
        InputError,
        "fields['x_HII']",
    ),
    (
        "float32-overflow-product",
        from_arrays(electron_density=cube(1e20) * u.cm**-3),
        InputError,
        "dtype=numpy.float64",
    ),
    (
        "float32-overflow-ion-term",
        from_arrays(electron_density=cube(1e19) * u.cm**-3, ion_density=cube(1e20) * u.cm**-3),
        InputError,
        "electron_density x ion_density: 64 of 64 cells",
    ),
    (
        "float32-overflow-value",
        from_arrays(electron_density=cube(1e39) * u.cm**-3),
        InputError,
        "electron_density: 64 of 64 cells exceed the float32 range",
    ),
    ("unknown-model-typo", gas(ionization="sahaa"), InputError, "did you mean 'saha'"),
    ("unknown-model-short", gas(ionization="ful"), InputError, "did you mean 'full'"),
    ("unknown-model-spelling", gas(ionization="threshhold"), InputError, "did you mean 'threshold'"),
    ("unknown-model", gas(ionization="plasma"), InputError, "ionization: unknown model 'plasma'"),
    ("helium-typo", gas(ionization="full", helium="singel"), InputError, "did you mean 'single'"),
    ("helium-unknown", gas(ionization="full", helium="triple"), InputError, "helium: 'triple'"),
    ("ionization-complex-scalar", gas(ionization=0.5 + 0.5j), InputError, "ionization"),
    ("ionization-bool", gas(ionization=True), InputError, "ionization"),
    ("dtype-half", from_arrays(dtype=np.float16), InputError, "dtype"),
    ("cell-size-nan", from_arrays(cell_size=np.nan * u.pc), InputError, "cell_size"),
    # -- models and coefficients called directly -----------------------------------------
    (
        "sources-complex-rates",
        lambda: IonizingSources(positions=[[0, 0, 0]] * u.pc, rates=[1e49 + 1j] / u.s),
        InputError,
        "rates: complex",
    ),
    (
        "sources-complex-positions",
        lambda: IonizingSources(positions=[[1j, 0, 0]] * u.pc, rates=[1e49] / u.s),
        InputError,
        "positions: complex",
    ),
    ("fraction-text", lambda: SuppliedFraction(np.array(["a"], dtype=object)), InputError, "fraction"),
    (
        "alpha-negative-temperature",
        lambda: absorption_coefficient(1 * u.GHz, [-5, 10] * u.K, 1 * u.cm**-3),
        InputError,
        "temperature: 1 of 2 value(s)",
    ),
    (
        "alpha-zero-frequency",
        lambda: absorption_coefficient(0 * u.GHz, 1e4 * u.K, 1 * u.cm**-3),
        InputError,
        "frequency",
    ),
    (
        "alpha-nan-density",
        lambda: absorption_coefficient(1 * u.GHz, 1e4 * u.K, np.nan * u.cm**-3),
        InputError,
        "electron_density",
    ),
    (
        "j-negative-ion-term",
        lambda: emission_coefficient(1 * u.GHz, 1e4 * u.K, 1 * u.cm**-3, -1 * u.cm**-3),
        InputError,
        "ion_density",
    ),
    (
        "j-complex-temperature",
        lambda: emission_coefficient(1 * u.GHz, (1e4 + 1j) * u.K, 1 * u.cm**-3),
        InputError,
        "temperature: complex",
    ),
    (
        "alpha-temperature-unit",
        lambda: absorption_coefficient(1 * u.GHz, 1e4 * u.s, 1 * u.cm**-3),
        InputError,
        "temperature",
    ),
]

# The product n_e x ion term is known only once the model has ionized the gas (1e-3 g cm^-3 of
# fully ionized gas holds ~5e20 electrons per cm^3).
AFTER_IONIZATION = [
    ("float32-overflow-after-ionization", gas(density=cube(1e-3) * u.g / u.cm**3), InputError, "dtype=numpy.float64"),
]


def _no_work(*args, **kwargs):
    raise AssertionError("expensive work started before the input was checked")


@pytest.fixture
def no_work(monkeypatch):
    """Fail if a brick is traced or the ionization of the grid is evaluated."""
    monkeypatch.setattr(tracer._AxisRoute, "trace_brick", _no_work)
    monkeypatch.setattr(tracer._ObliqueRoute, "trace_brick", _no_work)
    monkeypatch.setattr(rtrace.gas, "evaluate_grid", _no_work)


def _check(call, error, text):
    with pytest.raises(error) as info:
        call()
    assert isinstance(info.value, RtraceError)
    assert text in str(info.value), str(info.value)


@pytest.mark.parametrize("call,error,text", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_is_refused_before_work(no_work, call, error, text):
    _check(call, error, text)


@pytest.mark.parametrize("call,error,text", [c[1:] for c in AFTER_IONIZATION], ids=[c[0] for c in AFTER_IONIZATION])
def test_bad_result_of_ionization_is_refused_before_tracing(call, error, text):
    _check(call, error, text)


def test_table_size():
    assert len(CASES) + len(AFTER_IONIZATION) >= 60


def test_the_good_values_next_to_the_bad_ones_pass(no_work):
    """The same calls with sound values get through the checks (so the table tests the values, not the calls)."""
    View(npix=(16, 8), width=1 * u.pc, distance=1 * u.kpc, center=[0, 0, 0] * u.pc)
    View(npix=np.int64(16))
    Snapshot.from_arrays(temperature=T, electron_density=cube(1e18) * u.cm**-3, cell_size=CELL)
    Snapshot.from_arrays(temperature=T, electron_density=cube(1e20) * u.cm**-3, cell_size=CELL, dtype=np.float64)
    with pytest.raises(AssertionError, match="expensive work"):  # past every check, into the tracer
        trace(snap(), View(npix=4, los=(1, 1, 1)), 1 * u.GHz, supersample=np.int32(2), background=3 * u.K)


# -- generated inputs ---------------------------------------------------------------------------

_non_integer = st.floats(allow_nan=True, allow_infinity=True).filter(lambda x: not float(x).is_integer())


@settings(max_examples=40, deadline=None)
@given(value=_non_integer | st.booleans() | st.text(max_size=3) | st.integers(max_value=0))
def test_npix_only_takes_positive_ints(value):
    with pytest.raises(InputError, match="npix"):
        View(npix=value)


@settings(max_examples=40, deadline=None)
@given(
    coords=st.tuples(
        st.lists(st.floats(allow_nan=True, allow_infinity=True), min_size=3, max_size=3),
        st.integers(0, 2),
        st.sampled_from([np.nan, np.inf, -np.inf]),
    ).map(lambda c: c[0][: c[1]] + [c[2]] + c[0][c[1] + 1 :])
)  # at least one coordinate not finite
def test_a_centre_with_any_non_finite_coordinate_is_refused(coords):
    n_bad = int(np.count_nonzero(~np.isfinite(coords)))
    with pytest.raises(InputError, match=f"center: {n_bad} of 3 coordinates are not finite"):
        View(center=coords * u.cm)  # cm: no unit conversion that could overflow


@settings(max_examples=30, deadline=None)
@given(shape=st.lists(st.integers(1, 5), min_size=1, max_size=3).map(tuple).filter(lambda s: s != SHAPE))
def test_an_ionized_fraction_of_any_other_shape_is_refused(shape):
    with pytest.raises(InputError, match=r"fraction: shape .* is not the grid shape \(4, 4, 4\)"):
        gas(ionization=np.full(shape, 0.5))()
