"""Snapshot construction and validation: errors name the field, the problem and the cell count."""

import astropy.units as u
import numpy as np
import pytest

import rtrace
from rtrace.errors import InputError, PhysicsRangeWarning


def arrays(shape=(4, 5, 6), t=1e4, ne=10.0):
    return np.full(shape, t), np.full(shape, ne)


def test_from_arrays_stores_float32_and_shares_the_ion_term():
    t, ne = arrays()
    snap = rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.au, electron_density=ne * u.cm**-3)
    assert snap.shape == (4, 5, 6)
    assert snap._ne.dtype == np.float32
    assert snap._ni is snap._ne  # ion term defaults to n_e without a copy
    assert np.allclose(snap.cell_size, (1 * u.au).to_value(u.cm))
    assert snap.temperature.unit == u.K and snap.electron_density.unit == u.cm**-3


def test_cell_size_per_axis_and_origin():
    t, ne = arrays()
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=[1, 2, 3] * u.pc, electron_density=ne * u.cm**-3, origin=[-1, 0, 1] * u.pc
    )
    lo, hi = snap.extent
    assert np.allclose(hi - lo, (np.array([4, 10, 18]) * u.pc).to_value(u.cm))
    assert np.allclose(lo, ([-1, 0, 1] * u.pc).to_value(u.cm))


@pytest.mark.parametrize(
    "field,bad,message",
    [
        ("temperature", np.nan, r"temperature: 2 of 120 cells are not finite"),
        ("temperature", 0.0, r"temperature: 2 of 120 cells violate temperature > 0"),
        ("temperature", -5.0, r"temperature: 2 of 120 cells violate temperature > 0"),
        ("electron_density", np.inf, r"electron_density: 2 of 120 cells are not finite"),
        ("electron_density", -1.0, r"electron_density: 2 of 120 cells violate electron_density >= 0"),
    ],
)
def test_bad_values_are_counted(field, bad, message):
    t, ne = arrays()
    target = t if field == "temperature" else ne
    target[0, 0, :2] = bad
    with pytest.raises(InputError, match=message):
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.pc, electron_density=ne * u.cm**-3)


def test_shape_mismatch_and_units():
    t, ne = arrays()
    with pytest.raises(InputError, match=r"ion_density: shape \(4, 5\) does not match the grid shape \(4, 5, 6\)"):
        rtrace.Snapshot.from_arrays(
            temperature=t * u.K, cell_size=1 * u.pc, electron_density=ne * u.cm**-3, ion_density=ne[:, :, 0] * u.cm**-3
        )
    with pytest.raises(InputError, match="electron_density: expected units of 1 / cm3"):
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.pc, electron_density=ne * u.g)
    with pytest.raises(InputError, match="cell_size: expected a length"):
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.s, electron_density=ne * u.cm**-3)
    with pytest.raises(InputError, match="cell_size: must be finite and positive"):
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=[1, 0, 1] * u.pc, electron_density=ne * u.cm**-3)
    with pytest.raises(InputError, match="electron_density: required"):
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.pc)


@pytest.mark.parametrize(
    "field", ["temperature", "electron_density", "ion_density", "density", "pressure", "internal_energy"]
)
def test_plain_arrays_without_units_are_refused(field):
    # A simulation's code units must never be taken silently as cgs: the error names the field and
    # shows how to attach units, before any ionization or tracing work.
    t, ne = arrays()
    if field in ("temperature", "electron_density", "ion_density"):
        kw = {"temperature": t * u.K, "electron_density": ne * u.cm**-3, "ion_density": ne * u.cm**-3}
    else:
        kw = {"density": np.full(t.shape, 1e-22) * u.g / u.cm**3}
        if field == "density":
            kw["temperature"] = t * u.K
        else:
            kw[field] = np.full(t.shape, 1.0) * (u.dyn / u.cm**2 if field == "pressure" else u.erg / u.g)
    kw[field] = kw[field].value  # the same numbers, units dropped
    with pytest.raises(InputError, match=rf"{field}: a plain array has no units; attach them .*{field}=array \* u\."):
        rtrace.Snapshot.from_arrays(cell_size=1 * u.pc, **kw)


def test_density_with_ionization_models():
    # Fully ionized H + singly ionized He: n_e = n_H + n_He (hand calculation, common practice).
    t, _ = arrays()
    rho = np.full(t.shape, 1e-21)
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=1 * u.pc, density=rho * u.g / u.cm**3, ionization="full"
    )
    from rtrace.physics.ionization import Composition

    comp = Composition()
    expected = comp.hydrogen_number_density(1e-21) + comp.helium_number_density(1e-21)
    assert np.allclose(snap._ne, expected, rtol=1e-6)
    assert "full" in snap.provenance["ionization"]
    cold = rtrace.Snapshot.from_arrays(
        temperature=np.full(t.shape, 100.0) * u.K,
        cell_size=1 * u.pc,
        density=rho * u.g / u.cm**3,
        ionization="threshold",
    )
    assert cold._ne.max() == 0
    with pytest.raises(InputError, match="density: 1 of 120 cells violate density >= 0"):
        bad = rho.copy()
        bad[1, 1, 1] = -1
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.pc, density=bad * u.g / u.cm**3)
    with pytest.raises(InputError, match="not both"):
        rtrace.Snapshot.from_arrays(
            temperature=t * u.K, cell_size=1 * u.pc, density=rho * u.g / u.cm**3, electron_density=rho * u.cm**-3
        )


def test_validation_happens_before_ionization_work():
    # A NaN temperature is reported before the (expensive) Saha solve runs.
    t, _ = arrays()
    t[2, 2, 2] = np.nan
    with pytest.raises(InputError, match="temperature: 1 of 120 cells are not finite"):
        rtrace.Snapshot.from_arrays(
            temperature=t * u.K, cell_size=1 * u.pc, density=np.full(t.shape, 1e-22) * u.g / u.cm**3, ionization="saha"
        )


def test_relativistic_temperature_warns():
    t, ne = arrays()
    t[0, 0, 0] = 3e9
    with pytest.warns(PhysicsRangeWarning, match="temperature: 1 cell"):
        rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.pc, electron_density=ne * u.cm**-3)


def test_view_validation():
    with pytest.raises(InputError, match="north: parallel to los"):
        rtrace.View(los=(0, 0, 1), north=(0, 0, 2))
    with pytest.raises(InputError, match="los: the zero vector"):
        rtrace.View(los=(0, 0, 0))
    with pytest.raises(InputError, match="width: expected a length"):
        rtrace.View(width=3 * u.s)
    v = rtrace.View(npix=(10, 20), width=1 * u.pc)
    assert v.shape == (10, 20)


def test_trace_validation():
    t, ne = arrays()
    snap = rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=1 * u.pc, electron_density=ne * u.cm**-3)
    view = rtrace.View(npix=4)
    with pytest.raises(InputError, match="frequencies: expected a frequency"):
        rtrace.trace(snap, view, [1, 2] * u.K)
    with pytest.raises(InputError, match="frequencies: must be a 1D sequence of finite positive"):
        rtrace.trace(snap, view, [1, -2] * u.GHz)
    with pytest.raises(InputError, match="background: unknown name"):
        rtrace.trace(snap, view, [1] * u.GHz, background="sky")
    res = rtrace.trace(snap, view, 21 * u.cm)  # wavelengths are accepted
    assert res.frequencies.to_value(u.GHz) == pytest.approx(1.4275, rel=1e-4)
