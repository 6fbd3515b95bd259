"""The default ``tolerance`` (1e-2) of oblique traces, and where it falls back to one lattice.

What is checked here is the contract of the default, not the accuracy
itself (that is in ``test_pixel_accuracy.py`` and ``test_oblique_split.py``
against an independent brute-force reference): an in-memory oblique trace
without ``tolerance`` or ``supersample`` is error-controlled to 1e-2 and
says so; routes without the split (bricks, files, AMR) and grids whose
per-cell state does not fit in memory trace one lattice and warn; an
explicit ``tolerance=None`` or ``supersample`` is the fast lattice with no
warning; jobs follow the same default.
"""

import warnings

import astropy.units as u
import numpy as np
import pytest
from jobs import demo, job_text, view
from test_pixel_accuracy import CELL, _grid

import rtrace
from rtrace import amr
from rtrace.transfer import cell_cache, tracer
from rtrace.transfer.result import PixelAccuracyWarning

NU = [10.0] * u.GHz  # optically thin on this grid (tau ~ 1e-4): the first lattice meets 1e-2
VIEW = rtrace.View(
    los=(1.0, 2.0, 3.0), north=(0.3, -0.9, 0.2), npix=13, width=13 * 1.6 * CELL * u.cm, distance=1 * u.kpc
)


@pytest.fixture(scope="module")
def snap():
    ne, t = _grid()
    return rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=CELL * u.cm, electron_density=ne * u.cm**-3, dtype=np.float64
    )


def _quiet(*args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("error", PixelAccuracyWarning)
        return rtrace.trace(*args, **kwargs)


def test_default_is_the_documented_tolerance(snap):
    res = _quiet(snap, VIEW, NU)
    pe = res.pixel_error
    assert pe.tolerance == tracer.DEFAULT_TOLERANCE == 1e-2 and pe.converged and pe.max_relative <= 1e-2
    assert "tolerance 0.01 met" in res.provenance["pixel_error"]
    explicit = _quiet(snap, VIEW, NU, tolerance=1e-2)
    np.testing.assert_array_equal(res.intensity.value, explicit.intensity.value)
    np.testing.assert_array_equal(res.emission_measure.value, explicit.emission_measure.value)


def test_none_and_supersample_are_the_plain_lattice(snap):
    plain = _quiet(snap, VIEW, NU, tolerance=None)
    fixed = _quiet(snap, VIEW, NU, supersample=1)
    np.testing.assert_array_equal(plain.intensity.value, fixed.intensity.value)
    assert plain.pixel_error.tolerance is None and np.isnan(plain.pixel_error.max_relative)
    assert "pixel_error" not in plain.provenance


def test_bricks_fall_back_to_one_lattice_with_a_warning(snap):
    with pytest.warns(PixelAccuracyWarning, match=r"traced in bricks \(brick_size / max_memory\)"):
        res = rtrace.trace(snap, VIEW, NU, brick_size=5)
    same = _quiet(snap, VIEW, NU, supersample=1, brick_size=5)
    np.testing.assert_array_equal(res.intensity.value, same.intensity.value)
    assert res.pixel_error.tolerance is None and np.isnan(res.pixel_error.max_relative)


def test_explicit_tolerance_on_bricks_still_refines(snap):
    # an explicit tolerance is honoured on every route (whole-lattice doubling where there is no split)
    res = _quiet(snap, VIEW, NU, brick_size=5, tolerance=0.5)
    assert res.pixel_error.tolerance == 0.5 and res.pixel_error.supersample >= 2


def test_file_backed_snapshot_falls_back(snap, tmp_path):
    import h5py

    path = tmp_path / "grid.h5"
    with h5py.File(path, "w") as h5:
        h5.attrs["cell_size"] = CELL
        h5.attrs["length_unit"] = "cm"
        for name, unit, value in (("T", "K", snap._t), ("ne", "cm**-3", snap._ne)):
            h5[name] = value
            h5[name].attrs["units"] = unit
    lazy = rtrace.open_hdf5(path, temperature="T", electron_density="ne")
    with pytest.warns(PixelAccuracyWarning, match="read from its file in bricks"):
        rtrace.trace(lazy, VIEW, NU)


def test_amr_snapshot_falls_back(snap):
    shape = np.array(snap.shape)
    grid = amr.Grid(0, np.zeros(3, np.int64), shape.astype(np.int64), snap._ne, snap._ni, snap._t)
    amr_snap = amr.AMRSnapshot([grid], 2, shape, np.full(3, CELL), np.zeros(3), {"source": "test"})
    with pytest.warns(PixelAccuracyWarning, match="AMR snapshots are traced leaf by leaf"):
        res = rtrace.trace(amr_snap, VIEW, NU)
    np.testing.assert_allclose(res.intensity.value, _quiet(snap, VIEW, NU, supersample=1).intensity.value, rtol=1e-10)


def test_per_cell_state_too_large_falls_back(snap, monkeypatch):
    monkeypatch.setattr(tracer, "fits_in_memory", lambda need: False)
    with pytest.warns(PixelAccuracyWarning, match="even for one frequency at a time\\) does not fit in the memory"):
        res = rtrace.trace(snap, VIEW, NU)
    assert res.pixel_error.tolerance is None
    # an explicit tolerance is not silently dropped: the split's own memory check decides
    monkeypatch.undo()
    assert _quiet(snap, VIEW, NU, tolerance=1e-2).pixel_error.tolerance == 1e-2


def test_frequencies_split_in_groups_when_their_state_does_not_fit(snap, monkeypatch):
    # with room for one frequency's per-cell state at a time, each frequency is refined on its own:
    # the images are those of tracing each frequency alone (thick 0.1 GHz, thin 10 GHz)
    from rtrace.transfer.oblique_split import split_state_bytes

    both = [0.1, 10.0] * u.GHz
    one = split_state_bytes(cell_cache.emitting_blocks(snap), 1)
    monkeypatch.setattr(tracer, "fits_in_memory", lambda need: need <= one)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PixelAccuracyWarning)
        res = rtrace.trace(snap, VIEW, both, tolerance=5e-2)
        alone = [rtrace.trace(snap, VIEW, both[k : k + 1], tolerance=5e-2) for k in range(2)]
    for k in range(2):
        np.testing.assert_allclose(res.intensity.value[k], alone[k].intensity.value[0], rtol=1e-12, atol=0)
        np.testing.assert_allclose(res.tau[k], alone[k].tau[0], rtol=1e-12, atol=0)
    np.testing.assert_allclose(res.emission_measure.value, alone[0].emission_measure.value, rtol=1e-12)
    pe = res.pixel_error
    assert pe.max_relative == max(a.pixel_error.max_relative for a in alone)
    assert pe.supersample == max(a.pixel_error.supersample for a in alone)


def test_axis_views_are_exact_and_unchanged(snap):
    view = rtrace.View(los=(0, 0, 1), npix=13, width=13 * 1.6 * CELL * u.cm, distance=1 * u.kpc)
    a, b = _quiet(snap, view, NU), _quiet(snap, view, NU, supersample=1)
    np.testing.assert_array_equal(a.intensity.value, b.intensity.value)
    assert a.pixel_error.max_relative == 0.0


JOB = job_text(
    snapshot=demo(16),
    frequencies={"values": ["10 GHz"]},
    view=view("tilted", 12, "2 kpc", los=[1, 2, 3]),
    output={"directory": "out", "pictures": False},
)


def test_jobs_follow_the_default(tmp_path):
    from astropy.io import fits

    from rtrace.cli import EXIT_OK, main

    path = tmp_path / "job.toml"
    path.write_text(JOB)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(["run", str(path), "--quiet"]) == EXIT_OK
    header = fits.getheader(tmp_path / "out" / "tilted_intensity.fits")
    assert 0.0 <= header["RTPIXERR"] <= 1e-2
    path.write_text(JOB.replace("[[view]]", "[trace]\nsupersample = 1\n\n[[view]]").replace('"out"', '"plain"'))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(["run", str(path), "--quiet"]) == EXIT_OK
    assert "RTPIXERR" not in fits.getheader(tmp_path / "plain" / "tilted_intensity.fits")


def test_sky_maps_and_interferometer_images_carry_the_model_estimate(snap, tmp_path):
    # a map made from an error-controlled trace says how accurate its model was (the cards of the traced
    # Result, labelled as the model's: the beam averages pixel errors), and one from a plain lattice does not
    from astropy.coordinates import SkyCoord
    from astropy.io import fits
    from radio_beam import Beam

    from rtrace.interferometer import synthesize
    from rtrace.observe import observe

    view = rtrace.View(
        los=(1.0, 2.0, 3.0),
        north=(0.3, -0.9, 0.2),
        npix=13,
        width=13 * 1.6 * CELL * u.cm,
        distance=1 * u.kpc,
        sky_position=SkyCoord(ra=150 * u.deg, dec=40 * u.deg),
    )
    res = _quiet(snap, view, NU)
    beam = Beam(3 * res.pixel_scale.to(u.arcsec))
    header = fits.getheader(observe(res, beam, seed=1).write_fits(tmp_path / "observed.fits"))
    assert header["RTPIXERR"] == pytest.approx(res.pixel_error.max_relative, rel=1e-6)
    assert header["RTPIXSS"] == res.pixel_error.supersample
    assert "model" in header.comments["RTPIXERR"]
    antennas = np.array([[0, 0, 0], [610, 140, 1], [-380, 520, 2], [150, -700, 0]], float) * u.m
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # coarse sampling warnings are not the subject here
        sm = synthesize(res, antennas=antennas, latitude=35 * u.deg, n_hour_angles=8, niter=10)
    for image in ("restored", "dirty"):
        header = fits.getheader(sm.write_fits(tmp_path / f"{image}.fits", image=image))
        assert header["RTPIXERR"] == pytest.approx(res.pixel_error.max_relative, rel=1e-6)
    plain = observe(_quiet(snap, view, NU, supersample=1), beam, seed=1)
    assert "RTPIXERR" not in fits.getheader(plain.write_fits(tmp_path / "plain.fits"))
