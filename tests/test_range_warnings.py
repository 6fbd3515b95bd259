"""Physics-range warnings: the Gaunt table's temperatures, the plasma frequency, an unbracketed tau = 1.

Each warning must say what is wrong with numbers (cells, extremes); where a
number comes from physics it is checked against a published formula.
"""

import re
import warnings

import astropy.units as u
import numpy as np
import pytest

from rtrace import Snapshot, View, trace
from rtrace.errors import PhysicsRangeWarning
from rtrace.physics.freefree import plasma_frequency_cgs

SHAPE = (4, 4, 4)
CELL = 0.1 * u.pc


def snapshot(ne, t=1.0e4):
    ne = np.broadcast_to(np.asarray(ne, float), SHAPE)
    t = np.broadcast_to(np.asarray(t, float), SHAPE)
    return Snapshot.from_arrays(temperature=t * u.K, electron_density=ne * u.cm**-3, cell_size=CELL, dtype=np.float64)


def range_warnings(record):
    return [str(w.message) for w in record if issubclass(w.category, PhysicsRangeWarning)]


def mezger_henderson_tau(nu_ghz, t_k, em_pc_cm6):
    """Free-free optical depth, Mezger & Henderson (1967), ApJ 147, 471 (as usually quoted, from memory):
    tau = 8.235e-2 (T_e / K)^-1.35 (nu / GHz)^-2.1 (EM / pc cm^-6)."""
    return 8.235e-2 * t_k**-1.35 * nu_ghz**-2.1 * em_pc_cm6


# -- plasma frequency -------------------------------------------------------------------------


@pytest.mark.parametrize("ne", [1.0, 1.0e4, 1.0e10])
def test_plasma_frequency_matches_the_handbook(ne):
    # NRL Plasma Formulary (Huba), electron plasma frequency f_pe = 8.98e3 n_e^1/2 Hz (from memory)
    assert plasma_frequency_cgs(ne) == pytest.approx(8.98e3 * np.sqrt(ne), rel=1e-3)


def test_tracing_below_the_plasma_frequency_warns_with_the_cells_and_the_highest_frequency():
    ne = np.ones(SHAPE)
    ne[:2] = 100.0  # 32 of 64 cells with nu_p = 89.8 kHz; the rest 8.98 kHz
    with pytest.warns(PhysicsRangeWarning) as record:
        trace(snapshot(ne), View(npix=4), 60 * u.kHz)
    text = " ".join(range_warnings(record))
    assert "32 of 64 cells have a plasma frequency at or above it" in text
    assert "6e+04 Hz" in text
    nu_p = float(re.search(r"highest nu_p ([0-9.e+]+) Hz", text).group(1))
    assert nu_p == pytest.approx(8.98e3 * np.sqrt(100.0), rel=1e-3)  # NRL Plasma Formulary, as above


def test_a_frequency_near_the_plasma_frequency_warns_and_counts_no_cell_below():
    with pytest.warns(
        PhysicsRangeWarning, match="0 of 64 cells have a plasma frequency at or above it and 64 lie within a factor 2"
    ):
        trace(snapshot(100.0), View(npix=4), 150 * u.kHz)  # nu_p = 89.8 kHz: above it, by less than 2x


def test_radio_frequencies_far_above_the_plasma_frequency_do_not_warn():
    snap = snapshot(1.0e4)  # nu_p = 0.9 MHz
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        trace(snap, View(npix=4), [0.1, 1.0] * u.GHz)
    assert range_warnings(record) == []


# -- Gaunt table range --------------------------------------------------------------------------


def test_temperatures_below_the_gaunt_table_warn_with_the_count_and_the_lowest():
    t = np.full(SHAPE, 1.0e4)
    t[0, 0, :3] = 0.5
    with pytest.warns(PhysicsRangeWarning) as record:
        snapshot(10.0, t)
    text = " ".join(range_warnings(record))
    assert "3 of 64 cell(s) lie outside the Gaunt factor table" in text
    assert "3 below 1 K (lowest 0.5 K)" in text


def test_temperatures_above_the_gaunt_table_warn_with_the_count_and_the_highest():
    t = np.full(SHAPE, 1.0e4)
    t[1, 1, :2] = 3.0e10
    with pytest.warns(PhysicsRangeWarning) as record:
        snapshot(10.0, t)
    text = " ".join(range_warnings(record))
    assert "2 of 64 cell(s) lie outside the Gaunt factor table" in text
    assert "2 above 1e+10 K (highest 3e+10 K)" in text


def test_temperatures_inside_the_table_do_not_warn_about_it():
    t = np.full(SHAPE, 1.0e4)
    t[0, 0, 0], t[0, 0, 1] = 1.5, 5.0e7  # inside 1 K .. 1e10 K and below 1e8 K
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        snapshot(10.0, t)
    assert range_warnings(record) == []


# -- tau = 1 not bracketed ------------------------------------------------------------------------


def test_turnover_of_thin_gas_warns_that_everything_is_thin():
    depth_pc = SHAPE[2] * CELL.to_value(u.pc)
    em = 100.0**2 * depth_pc  # 4000 pc cm^-6 on every line of sight
    result = trace(snapshot(100.0), View(npix=4), [1.0, 2.0] * u.GHz)
    with pytest.warns(PhysicsRangeWarning, match="everything is optically thin") as record:
        per_pixel, whole = result.turnover_frequency()
    assert np.all(np.isnan(per_pixel)) and np.isnan(whole)
    text = " ".join(range_warnings(record))
    assert "trace lower frequencies" in text
    largest = float(re.search(r"largest tau ([0-9.e+-]+)\)", text).group(1))
    assert largest == pytest.approx(mezger_henderson_tau(1.0, 1.0e4, em), rel=0.05)


def test_turnover_of_thick_gas_warns_that_everything_is_thick():
    result = trace(snapshot(1.0e5), View(npix=4), [1.0, 2.0] * u.GHz)  # tau(2 GHz) ~ 300 (Mezger & Henderson)
    with pytest.warns(PhysicsRangeWarning, match="everything is optically thick") as record:
        per_pixel, _ = result.turnover_frequency()
    assert np.all(np.isnan(per_pixel))
    assert "trace higher frequencies" in " ".join(range_warnings(record))


def test_a_bracketed_turnover_does_not_warn_and_agrees_with_the_published_approximation():
    ne, depth_pc = 3.0e3, SHAPE[2] * CELL.to_value(u.pc)
    em = ne**2 * depth_pc
    result = trace(snapshot(ne), View(npix=4), [1.0, 1.5] * u.GHz)
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        per_pixel, whole = result.turnover_frequency()
    assert range_warnings(record) == []
    # tau = 1 of Mezger & Henderson (1967): nu = (8.235e-2 T^-1.35 EM)^(1/2.1) GHz
    expected = (mezger_henderson_tau(1.0, 1.0e4, em)) ** (1 / 2.1) * 1e9
    assert whole.to_value(u.Hz) == pytest.approx(expected, rel=0.03)
    assert np.nanmax(per_pixel.to_value(u.Hz)) == pytest.approx(expected, rel=0.03)


def test_a_whole_source_without_a_bracket_warns_even_when_some_pixels_have_one():
    ne = np.full(SHAPE, 3.0e3)  # tau(1 GHz) ~ 1.2, tau(1.5 GHz) ~ 0.5 (Mezger & Henderson): bracketed
    ne[:2] = 1.0e5  # half the pixels thick at both frequencies, and the brightest
    result = trace(snapshot(ne), View(npix=4), [1.0, 1.5] * u.GHz)
    with pytest.warns(PhysicsRangeWarning, match="the whole source is thick") as record:
        per_pixel, whole = result.turnover_frequency()
    assert np.isnan(whole) and np.isfinite(per_pixel).any()
    assert not any("no traced frequency pair" in m for m in range_warnings(record))


def test_a_file_backed_snapshot_warns_from_its_recorded_range_without_reading(tmp_path):
    import h5py

    from rtrace import open_hdf5

    path = tmp_path / "dense.h5"
    with h5py.File(path, "w") as f:
        f.attrs["cell_size"] = 0.1
        f.attrs["length_unit"] = "pc"
        f.create_dataset("T", data=np.full(SHAPE, 1.0e4)).attrs["units"] = "K"
        f.create_dataset("ne", data=np.full(SHAPE, 1.0e4)).attrs["units"] = "cm**-3"
    snap = open_hdf5(path, temperature="T", electron_density="ne")
    with pytest.warns(PhysicsRangeWarning, match="not counted: file-backed") as record:
        trace(snap, View(npix=4), 0.5 * u.MHz)  # nu_p = 0.898 MHz (NRL Plasma Formulary, as above)
    nu_p = float(re.search(r"highest nu_p ([0-9.e+]+) Hz", " ".join(range_warnings(record))).group(1))
    assert nu_p == pytest.approx(8.98e3 * np.sqrt(1.0e4), rel=1e-3)
