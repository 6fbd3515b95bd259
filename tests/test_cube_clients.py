"""Every cube rtrace writes opens in the usual clients with the right frequencies and beams.

Clients: spectral-cube (``SpectralCube.read``; a per-plane ``BEAMS`` table
gives a ``VaryingResolutionSpectralCube``), astropy's ``WCS(header)`` from
the primary header alone, and astropy's ``verify("exception")``.

References: Greisen et al. 2006, A&A 446, 747 (FITS WCS paper III: the
linear ``FREQ`` axis and the logarithmic ``-LOG`` algorithm,
``nu = CRVAL exp(CDELT (p - CRPIX) / CRVAL)``, from memory); Pence et al.
2010, A&A 524, A42 (FITS 3.0; the long-string convention and its
``LONGSTRN`` keyword, from memory). The ``BEAMS`` table layout (``BMAJ``,
``BMIN`` in arcsec, ``BPA`` in deg, ``CHAN``, ``POL``) is common practice for
radio cubes, read here by spectral-cube and radio-beam themselves.
"""

import copy
import textwrap
import warnings
from pathlib import Path

import astropy.units as u
import jobs
import numpy as np
import pytest
import radio_beam
import spectral_cube
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS
from spectral_cube import SpectralCube, VaryingResolutionSpectralCube

import rtrace
from rtrace import demo
from rtrace.comparison.model import model_cube
from rtrace.comparison.observation import read_observation
from rtrace.interferometer import synthesize
from rtrace.io.fits import output_paths, spectral_layout, write_result
from rtrace.observe import observe
from rtrace.run.job import load_job, run_job

# the frequency lists of the tests: even, geometric, neither, one
LISTS = {
    "even": [1, 2, 3, 4] * u.GHz,
    "geometric": 0.3 * u.GHz * (100 / 0.3) ** (np.arange(6) / 5),
    "irregular": [1, 5, 22, 90] * u.GHz,
    "single": [5] * u.GHz,
}
LAYOUT = {"even": "linear", "geometric": "log", "irregular": "irregular", "single": "linear"}
CTYPE = {"linear": "FREQ", "log": "FREQ-LOG", "irregular": "FREQ"}
RTOL = 1e-9


@pytest.fixture(scope="module")
def snap():
    return demo.scenario(8)


@pytest.fixture(scope="module")
def results(snap):
    view = rtrace.View(npix=8, distance=2 * u.kpc)
    return {name: rtrace.trace(snap, view, nu) for name, nu in LISTS.items()}


# --------------------------------------------------------------------------------------------
# the clients
# --------------------------------------------------------------------------------------------


def verified_header(path):
    """The primary header after astropy's strictest check; any warning fails."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with fits.open(path) as hdul:
            hdul.verify("exception")
            return hdul[0].header.copy(), [h.name for h in hdul[1:]]


def check_clients(path, frequencies, beams=None, ctype="FREQ"):
    """Open ``path`` with astropy verify, WCS(header) alone and spectral-cube; check frequencies and beams.

    ``beams``: None (no beam), one Beam, or a list of one Beam per plane.
    """
    header, extensions = verified_header(path)
    nu = u.Quantity(frequencies).to_value(u.Hz)
    assert header["CTYPE3"] == ctype
    # astropy.wcs from the header alone (no extension needed)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        wcs = WCS(header)
    world = wcs.spectral.pixel_to_world_values(np.arange(header["NAXIS3"]))
    assert np.allclose(world, nu, rtol=RTOL, atol=0)
    if ctype == "FREQ-LOG":
        # Greisen et al. 2006, -LOG algorithm (from memory): nu = CRVAL exp(CDELT (p - CRPIX) / CRVAL)
        p = np.arange(1, nu.size + 1)
        formula = header["CRVAL3"] * np.exp(header["CDELT3"] * (p - header["CRPIX3"]) / header["CRVAL3"])
        assert np.allclose(formula, nu, rtol=RTOL, atol=0)
    # spectral-cube
    cube = SpectralCube.read(path)
    assert cube.shape[0] == nu.size
    assert np.allclose(cube.spectral_axis.to_value(u.Hz), nu, rtol=RTOL, atol=0)
    per_plane = isinstance(beams, (list, tuple)) and not all(b == beams[0] for b in beams)
    if per_plane:
        assert isinstance(cube, VaryingResolutionSpectralCube) and "BEAMS" in extensions
        assert len(cube.beams) == len(beams)
        for got, want in zip(cube.beams, beams, strict=True):
            assert got == want
    else:
        assert not isinstance(cube, VaryingResolutionSpectralCube) and "BEAMS" not in extensions
        if beams is not None:
            want = beams[0] if isinstance(beams, (list, tuple)) else beams
            assert cube.beam == want
            assert radio_beam.Beam.from_fits_header(header) == want
        else:
            assert "BMAJ" not in header
    return header, cube


def check_written(written, path, frequencies, beams=None):
    """``written`` is what a writer returned for ``path``: one cube, or one file per plane."""
    layout = spectral_layout(frequencies)
    files = output_paths(path, frequencies)
    if layout == "irregular":
        assert [str(f) for f in written] == [str(f) for f in files] and len(files) == len(frequencies)
        for k, f in enumerate(files):
            plane_beam = None if beams is None else (beams[k] if isinstance(beams, list) else beams)
            header, _ = check_clients(f, frequencies[k : k + 1], plane_beam)
            assert (header["RTPLANE"], header["RTNPLANE"]) == (k + 1, len(frequencies))
    else:
        assert str(written) == str(path) and files == [path]
        check_clients(path, frequencies, beams, CTYPE[layout])


# --------------------------------------------------------------------------------------------
# Result quantities
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", list(LISTS))
@pytest.mark.parametrize("quantity", ["intensity", "tau", "brightness_temperature"])
def test_result_cubes_open_everywhere(results, tmp_path, name, quantity):
    res = results[name]
    assert spectral_layout(res.frequencies) == LAYOUT[name]
    path = tmp_path / f"v_{quantity}.fits"
    check_written(write_result(res, path, quantity), path, res.frequencies)


def test_emission_measure_map(results, tmp_path):
    # frequency-independent: a 2D celestial image, no spectral axis, one file whatever the list
    path = tmp_path / "em.fits"
    assert write_result(results["irregular"], path, "emission_measure") == path
    header, _ = verified_header(path)
    assert header["NAXIS"] == 2 and WCS(header).naxis == 2
    with fits.open(path) as hdul:
        proj = spectral_cube.Projection.from_hdu(hdul[0])
        assert u.Unit(proj.unit) == u.pc / u.cm**6 and proj.shape == (8, 8)


# --------------------------------------------------------------------------------------------
# observed and synthesized maps
# --------------------------------------------------------------------------------------------

BEAM = radio_beam.Beam(major=70 * u.arcsec, minor=50 * u.arcsec, pa=30 * u.deg)


@pytest.mark.parametrize("name", list(LISTS))
@pytest.mark.parametrize("scaling", [None, "inverse-frequency"])
def test_skymap_cubes_open_everywhere(results, tmp_path, name, scaling):
    res = results[name]
    sky = observe(
        res,
        BEAM,
        noise=1e-4 * u.Jy / u.beam,
        seed=1,
        beam_scaling=scaling,
        reference_frequency=res.frequencies[0] if scaling else None,
    )
    beams = list(sky.beams)
    if scaling and len(beams) > 1:
        # the beam scales as 1/nu from the reference frequency (the meaning of the option)
        ratio = (res.frequencies[0] / res.frequencies).to_value(u.one)
        assert np.allclose([b.major.to_value(u.arcsec) for b in beams], 70 * ratio, rtol=1e-12)
    path = tmp_path / "v_observed.fits"
    check_written(sky.write_fits(path), path, res.frequencies, beams if scaling else BEAM)


def test_synthesized_cubes_open_everywhere(snap, tmp_path):
    # a compact invented array at 35 deg latitude (beam ~ 6 arcsec at 5 GHz); the demo at 10 kpc on 32
    # pixels of 1.3 arcsec puts several pixels across the synthesized beam
    antennas = (
        np.array([[0, 0, 0], [610, 140, 1], [-380, 520, 2], [150, -700, 0], [-900, -300, 1], [1200, 800, 3]], float)
        * u.m
    )
    view = rtrace.View(npix=32, distance=10 * u.kpc, sky_position=SkyCoord(ra=150 * u.deg, dec=40 * u.deg))
    for name, nu in (("geometric", [4, 6, 9] * u.GHz), ("irregular", [4, 5, 7] * u.GHz)):
        res = rtrace.trace(snap, view, nu)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # coarse sampling warnings are not the subject here
            sm = synthesize(res, antennas=antennas, latitude=35 * u.deg, n_hour_angles=16, niter=50)
        path = tmp_path / f"{name}_synthesized.fits"
        check_written(sm.write_fits(path), path, nu, list(sm.beams))
        resid = tmp_path / f"{name}_residual.fits"
        check_written(sm.write_fits(resid, image="residual"), resid, nu, list(sm.beams))


def test_tabular_axis_on_request_is_valid_fits(results, tmp_path):
    # one FREQ-TAB file: valid FITS, frequencies through WCS(header, fobj=hdulist) (Greisen et al. 2006,
    # sec. 6, from memory); header-only clients cannot read it, which is why it is not the default
    res = results["irregular"]
    path = write_result(res, tmp_path / "tab.fits", spectral_axis="tabular")
    header, extensions = verified_header(path)
    assert header["CTYPE3"] == "FREQ-TAB" and "WCS-TAB" in extensions
    with fits.open(path) as hdul:
        world = WCS(hdul[0].header, fobj=hdul).spectral.pixel_to_world_values(np.arange(4))
    assert np.allclose(world, res.frequencies.to_value(u.Hz), rtol=RTOL, atol=0)


def test_long_strings_are_announced(results, tmp_path):
    # provenance longer than one card continues on CONTINUE cards, announced by LONGSTRN
    # (the long-string convention, Pence et al. 2010, from memory)
    res = copy.copy(results["geometric"])
    res.provenance = dict(res.provenance, view="los=(0.267261, 0.534522, 0.801784) " * 4)
    path = write_result(res, tmp_path / "long.fits")
    header, _ = verified_header(path)
    assert header["LONGSTRN"] == "OGIP 1.0" and header["VIEW"] == res.provenance["view"].rstrip()


# --------------------------------------------------------------------------------------------
# rtrace's own readers
# --------------------------------------------------------------------------------------------


def test_comparison_reads_log_axis_and_plane_files(results, tmp_path):
    for name in ("geometric", "irregular"):
        res = results[name]
        path = tmp_path / f"{name}_intensity.fits"
        written = write_result(res, path)
        direct = model_cube(res)
        readers = [model_cube(written)]
        if name == "irregular":
            readers.append(model_cube(path))  # the cube's own name finds its plane files
            readers.append(model_cube([str(p) for p in reversed(written)]))  # any order: by frequency below
        for cube in readers:
            order = np.argsort(cube.frequencies)
            assert np.allclose(cube.frequencies[order], res.frequencies.to_value(u.Hz), rtol=RTOL, atol=0)
            # float32 storage (FITS BITPIX = -32)
            assert np.allclose(cube.data[order], direct.data, rtol=1e-6, atol=1e-6 * np.abs(direct.data).max())


def test_observation_reader_reads_a_plane_file(results, tmp_path):
    res = results["irregular"]
    sky = observe(res, BEAM, beam_scaling="inverse-frequency", reference_frequency=1 * u.GHz)
    files = sky.write_fits(tmp_path / "obs.fits")
    obs = read_observation(files[2])
    assert obs.frequency.to_value(u.Hz) == pytest.approx(22e9, rel=RTOL)
    assert obs.beam == sky.beams[2]
    planes = model_cube(tmp_path / "obs.fits")
    assert planes.beams is not None and all(a == b for a, b in zip(planes.beams, sky.beams, strict=True))


# --------------------------------------------------------------------------------------------
# a job run with an irregular list
# --------------------------------------------------------------------------------------------

JOB = jobs.job_text(
    snapshot=jobs.demo(8),
    frequencies={"values": ["1 GHz", "5 GHz", "22 GHz"]},
    view=jobs.view("face", 8, "2 kpc"),
    beam={"major": "70 arcsec", "scaling": "inverse-frequency", "reference_frequency": "1 GHz"},
    output={"directory": "out", "pictures": False, "sed": False},
)


def test_job_with_irregular_frequencies_writes_plane_files_and_resumes(tmp_path):
    job_path = tmp_path / "job.toml"
    job_path.write_text(textwrap.dedent(JOB))
    written = run_job(load_job(job_path))
    fits_files = sorted(p for p in written if p.endswith(".fits"))
    planes, maps = {}, []
    for f in fits_files:
        header, _ = verified_header(f)
        if header["NAXIS"] == 2:
            maps.append(f)  # the emission measure: no spectral axis
            continue
        planes.setdefault(header["RTNPLANE"], []).append(header["RTPLANE"])
        nu = WCS(header).spectral.pixel_to_world_values(0)
        assert nu == pytest.approx([1e9, 5e9, 22e9][header["RTPLANE"] - 1], rel=RTOL)
        cube = SpectralCube.read(f)
        assert cube.spectral_axis.to_value(u.Hz)[0] == pytest.approx(nu, rel=RTOL)
        if header.get("BUNIT") == "Jy/beam":
            # the beam of this plane: 70 arcsec at 1 GHz, scaled as 1/nu
            assert cube.beam.major.to_value(u.arcsec) == pytest.approx(70e9 / nu, rel=1e-9)
    assert len(maps) == 1
    # intensity, tau, brightness temperature and the observed map: each three planes 1..3
    assert sorted(planes) == [3] and sorted(planes[3]) == [1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3]
    # the manifest knows every file: a second run writes nothing
    again = run_job(load_job(job_path))
    assert list(again) == [] and sorted(again.skipped) == sorted(written)
    # a lost plane file makes its cube again, and only that one
    lost = next(f for f in fits_files if f.endswith("_02_5GHz.fits"))
    stem = lost[: -len("_02_5GHz.fits")]
    Path(lost).unlink()
    third = run_job(load_job(job_path))
    assert sorted(third) == [f"{stem}_01_1GHz.fits", lost, f"{stem}_03_22GHz.fits"]
