"""FITS output: headers against the FITS and WCS standards, read back through astropy.

References: Pence et al. 2010, A&A 524, A42 (FITS 3.0: keywords, BUNIT
syntax, string cards); Greisen & Calabretta 2002, A&A 395, 1061 (WCS
paper I: CRPIX/CDELT/CTYPE/CUNIT, pixel centres at integers); Calabretta &
Greisen 2002, A&A 395, 1077 (paper II: RA---SIN/DEC--SIN, RADESYS);
Greisen et al. 2006, A&A 446, 747 (paper III: FREQ, FREQ-LOG, SPECSYS, -TAB).
Section and table numbers below are cited from memory.
"""

import datetime
import os
import types
import warnings

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy import constants as const
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS

import rtrace
from rtrace import demo
from rtrace.errors import InputError
from rtrace.io import atomic as atomic_module
from rtrace.io import atomic_path, sky_wcs, write_cube, write_result, write_skymap

OFF_CENTRE = SkyCoord(ra=137.25 * u.deg, dec=-41.5 * u.deg, frame="icrs")  # an arbitrary position


@pytest.fixture(scope="module")
def snap():
    return demo.scenario(24)


@pytest.fixture(scope="module")
def res(snap):
    """The tiny demo result at the default sky position (ICRS 0, 0): RA wraps at the centre."""
    return rtrace.trace(snap, rtrace.View(npix=32, distance=2 * u.kpc), [1, 10] * u.GHz)


@pytest.fixture(scope="module")
def res_offset(snap):
    """Non-square image at a real sky position, geometric frequencies (a FREQ-LOG axis)."""
    view = rtrace.View(npix=(30, 32), distance=2 * u.kpc, sky_position=OFF_CENTRE)
    return rtrace.trace(snap, view, [1, 3, 9] * u.GHz)


def read(path):
    """Header, data and WCS of a file, failing on any warning from astropy."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with fits.open(path) as hdul:
            hdul.verify("exception")
            header = hdul[0].header.copy()
            data = np.array(hdul[0].data)
            wcs = WCS(header, fobj=hdul)
            extra = {hdu.name: hdu.copy() for hdu in hdul[1:]}
    return header, data, wcs, extra


def offsets_arcsec(centre, other):
    """East and north offsets (arcsec) of ``other`` from ``centre``."""
    dlon, dlat = centre.spherical_offsets_to(other)
    return dlon.to_value(u.arcsec), dlat.to_value(u.arcsec)


# --------------------------------------------------------------------------------------------
# header keywords
# --------------------------------------------------------------------------------------------


def test_header_keywords_follow_the_standards(res_offset, tmp_path):
    res = res_offset
    header, data, _, _ = read(write_result(res, tmp_path / "cube.fits"))
    ny, nx = res.view.shape
    # Data axes: NAXIS1 = columns, NAXIS2 = rows, NAXIS3 = frequencies (Pence et al. 2010, sec. 3.3.2).
    assert (header["NAXIS"], header["NAXIS1"], header["NAXIS2"], header["NAXIS3"]) == (3, nx, ny, 3)
    assert header["BITPIX"] == -32 and data.dtype == np.dtype(">f4")
    # Greisen & Calabretta 2002 sec. 2; Calabretta & Greisen 2002 sec. 5.1.5 (SIN).
    assert header["CTYPE1"] == "RA---SIN" and header["CTYPE2"] == "DEC--SIN"
    assert header["CUNIT1"] == "deg" and header["CUNIT2"] == "deg" and header["CUNIT3"] == "Hz"
    scale = res.pixel_scale.to_value(u.deg)
    assert header["CDELT1"] == pytest.approx(-scale, rel=1e-14)
    assert header["CDELT2"] == pytest.approx(scale, rel=1e-14)
    # Image centre at 0-based continuous n/2 -> 1-based pixel coordinate n/2 + 0.5.
    assert header["CRPIX1"] == nx / 2 + 0.5 and header["CRPIX2"] == ny / 2 + 0.5
    assert header["CRVAL1"] == pytest.approx(OFF_CENTRE.ra.deg, abs=1e-12)
    assert header["CRVAL2"] == pytest.approx(OFF_CENTRE.dec.deg, abs=1e-12)
    assert header["RADESYS"] == "ICRS" and "EQUINOX" not in header  # ICRS has no equinox (paper II, sec. 3.1)
    assert header["SPECSYS"] == "SOURCE"  # paper III, table 12 (from memory)
    assert header["BUNIT"] == "Jy/pixel"
    assert u.Unit(header["BUNIT"], format="fits") == u.Jy / u.pix
    # Provenance.
    prov = res.provenance
    assert header["ORIGIN"] == "rtrace" and header["RTVERS"] == rtrace.__version__
    assert header["SNAPSRC"] == prov["source"] and header["SNAPSHA"] == prov["checksum"]
    assert header["VIEW"] == prov["view"] and header["IONIZ"] == prov["ionization"]
    assert header["BKGND"] == prov["background"]
    # DATE is 'YYYY-MM-DDThh:mm:ss' (Pence et al. 2010, sec. 4.4.2.1), UTC, just now.
    written = datetime.datetime.strptime(header["DATE"], "%Y-%m-%dT%H:%M:%S")
    now = datetime.datetime.now(datetime.UTC).replace(tzinfo=None)
    assert abs((now - written).total_seconds()) < 600
    assert "BMAJ" not in header  # not beam-convolved


def test_data_layout_matches_result(res_offset, tmp_path):
    # Row 0 of the file is the first FITS row, i.e. row 0 of the image (south): no flips.
    header, data, _, _ = read(write_result(res_offset, tmp_path / "i.fits", unit="Jy/sr"))
    expected = res_offset.intensity.to_value(u.Jy / u.sr)
    assert data.shape == expected.shape
    assert np.allclose(data, expected, rtol=1e-6, atol=0)


# --------------------------------------------------------------------------------------------
# WCS read back
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("which", ["res", "res_offset"])
def test_wcs_centre_and_orientation(which, request, tmp_path):
    res = request.getfixturevalue(which)
    header, _, wcs, _ = read(write_result(res, tmp_path / "cube.fits"))
    scale = res.pixel_scale.to_value(u.arcsec)
    # The image centre is at 0-based continuous coordinate (nx/2, ny/2) from the corner of
    # pixel (0, 0); astropy's 0-based pixel coordinates put pixel centres at integers,
    # so the centre is at n/2 - 0.5 (Greisen & Calabretta 2002, sec. 2.1).
    ny, nx = res.view.shape
    cx, cy = nx / 2 - 0.5, ny / 2 - 0.5
    assert (cx, cy) == (header["CRPIX1"] - 1, header["CRPIX2"] - 1)
    centre = wcs.celestial.pixel_to_world(cx, cy)
    assert centre.separation(res.sky_position).to_value(u.arcsec) < 1e-9
    # One column to the right (higher column index) is west: smaller RA, same Dec.
    east, north = offsets_arcsec(centre, wcs.celestial.pixel_to_world(cx + 1, cy))
    assert east == pytest.approx(-scale, rel=1e-6) and abs(north) < 1e-6 * scale
    # One row up is north: larger Dec.
    east, north = offsets_arcsec(centre, wcs.celestial.pixel_to_world(cx, cy + 1))
    assert north == pytest.approx(scale, rel=1e-6) and abs(east) < 1e-6 * scale


def test_galactic_sky_position_written_in_icrs(snap, tmp_path):
    pos = SkyCoord(l=30 * u.deg, b=1 * u.deg, frame="galactic")
    res = rtrace.trace(snap, rtrace.View(npix=8, distance=2 * u.kpc, sky_position=pos), [5] * u.GHz)
    header, _, wcs, _ = read(write_result(res, tmp_path / "g.fits"))
    assert header["RADESYS"] == "ICRS"
    assert header["CRVAL1"] == pytest.approx(pos.icrs.ra.deg, abs=1e-12)
    centre = wcs.celestial.pixel_to_world(header["CRPIX1"] - 1, header["CRPIX2"] - 1)
    assert centre.separation(pos).to_value(u.arcsec) < 1e-9


def test_uniform_frequency_axis(res, tmp_path):
    header, _, wcs, _ = read(write_result(res, tmp_path / "u.fits"))
    assert header["CTYPE3"] == "FREQ"
    assert header["CDELT3"] == pytest.approx(9e9, rel=1e-15)
    world = wcs.spectral.pixel_to_world_values(np.arange(header["NAXIS3"]))
    assert np.allclose(world, res.frequencies.to_value(u.Hz), rtol=1e-14, atol=0)
    # High-level API: a SpectralCoord in Hz.
    assert wcs.pixel_to_world(0, 0, 1)[1].to_value(u.Hz) == pytest.approx(10e9, rel=1e-14)


def test_uniform_linspace_frequencies_are_linear(tmp_path):
    nu = np.linspace(1, 20, 7) * u.GHz
    path = write_cube(tmp_path / "l.fits", np.ones((7, 4, 5)) * u.K, nu, 1 * u.arcsec, OFF_CENTRE)
    header, _, wcs, extra = read(path)
    assert header["CTYPE3"] == "FREQ" and not extra
    assert np.allclose(wcs.spectral.pixel_to_world_values(np.arange(7)), nu.to_value(u.Hz), rtol=1e-14, atol=0)


def test_geometric_frequency_axis_is_logarithmic(res_offset, tmp_path):
    header, _, wcs, extra = read(write_result(res_offset, tmp_path / "g.fits"))
    # Logarithmic axis (Greisen et al. 2006, A&A 446, 747, -LOG algorithm, from memory):
    # nu = CRVAL3 exp(CDELT3 (p - CRPIX3) / CRVAL3), so CDELT3 = nu_1 ln 3 for planes 1, 3, 9 GHz.
    assert header["CTYPE3"] == "FREQ-LOG" and not extra
    assert header["CRVAL3"] == 1e9 and header["CDELT3"] == pytest.approx(1e9 * np.log(3), rel=1e-15)
    p = np.arange(3) + 1.0
    by_formula = header["CRVAL3"] * np.exp(header["CDELT3"] * (p - header["CRPIX3"]) / header["CRVAL3"])
    assert np.allclose(by_formula, [1e9, 3e9, 9e9], rtol=1e-14, atol=0)
    # astropy's WCS (wcslib) evaluates the same axis from the header alone.
    assert np.allclose(WCS(header).spectral.pixel_to_world_values(np.arange(3)), [1e9, 3e9, 9e9], rtol=1e-14, atol=0)
    assert np.allclose(wcs.spectral.pixel_to_world_values(np.arange(3)), [1e9, 3e9, 9e9], rtol=1e-14, atol=0)


def test_irregular_frequencies_one_file_per_plane(tmp_path):
    nu = [1, 3, 10] * u.GHz
    cube = np.arange(3 * 4 * 5, dtype=float).reshape(3, 4, 5) * u.K
    paths = write_cube(tmp_path / "n.fits", cube, nu, 1 * u.arcsec, OFF_CENTRE)
    assert [p.name for p in paths] == ["n_01_1GHz.fits", "n_02_3GHz.fits", "n_03_10GHz.fits"]
    assert sorted(os.listdir(tmp_path)) == [p.name for p in paths]  # nothing else, names sort as planes
    for k, path in enumerate(paths):
        header, data, _, extra = read(path)
        assert header["CTYPE3"] == "FREQ" and header["NAXIS3"] == 1 and not extra
        assert (header["RTPLANE"], header["RTNPLANE"]) == (k + 1, 3)
        assert WCS(header).spectral.pixel_to_world_values(0) == pytest.approx(nu[k].to_value(u.Hz), rel=1e-15)
        assert np.array_equal(data[0], cube.value[k])


def test_plane_names_are_distinct_and_sorted(tmp_path):
    from rtrace.io.fits import plane_paths

    nu = [1.00001, 1.00002, 0.3, 100, 31.62277, 1.2e5] * u.GHz
    names = [p.name for p in plane_paths(tmp_path / "c.fits", nu)]
    assert names == [
        "c_01_1.00001GHz.fits",
        "c_02_1.00002GHz.fits",
        "c_03_0.3GHz.fits",
        "c_04_100GHz.fits",
        "c_05_31.62GHz.fits",
        "c_06_120000GHz.fits",
    ]
    assert [p.name for p in plane_paths(tmp_path / "m.v2.fits.gz", [1, 2] * u.GHz)] == [
        "m.v2_01_1GHz.fits.gz",
        "m.v2_02_2GHz.fits.gz",
    ]
    many = plane_paths(tmp_path / "c.fits", np.arange(1, 121) * u.GHz)
    assert many[0].name == "c_001_1GHz.fits" and sorted(many) == many


def test_irregular_frequencies_tabulated_on_request(tmp_path):
    nu = [1, 3, 10] * u.GHz
    path = write_cube(
        tmp_path / "n.fits", np.ones((3, 4, 5)) * u.K, nu, 1 * u.arcsec, OFF_CENTRE, spectral_axis="tabular"
    )
    header, _, wcs, extra = read(path)
    # Tabular axis (Greisen et al. 2006, sec. 6, from memory).
    assert header["CTYPE3"] == "FREQ-TAB" and header["PS3_0"] in extra
    world = wcs.spectral.pixel_to_world_values(np.arange(3))
    assert np.array_equal(world, nu.to_value(u.Hz))
    # Without the table astropy refuses rather than inventing frequencies.
    with pytest.raises(ValueError):
        WCS(header)
    # The table lists every frequency, in Hz.
    table = extra[header["PS3_0"]]
    assert u.Unit(table.columns[header["PS3_1"]].unit) == u.Hz
    assert np.array_equal(np.ravel(table.data[header["PS3_1"]]), nu.to_value(u.Hz))
    with pytest.raises(InputError, match="spectral_axis: expected one of 'auto', 'tabular', got 'table'"):
        write_cube(tmp_path / "m.fits", np.ones((3, 4, 5)) * u.K, nu, 1 * u.arcsec, OFF_CENTRE, spectral_axis="table")
    assert not (tmp_path / "m.fits").exists()


def test_single_frequency_and_2d_maps(res, tmp_path):
    # A 2D map with frequencies: a degenerate FREQ axis at frequencies[0].
    header, data, wcs, _ = read(
        write_cube(tmp_path / "one.fits", res.emission_measure, [5] * u.GHz, res.pixel_scale, res.sky_position)
    )
    assert header["NAXIS"] == 3 and header["NAXIS3"] == 1 and data.shape == (1, 32, 32)
    assert wcs.spectral.pixel_to_world_values(0) == pytest.approx(5e9, rel=1e-15)
    assert header["CDELT3"] != 0  # CDELTi must not be zero
    # The emission measure is frequency-independent: celestial axes only.
    header, data, wcs, _ = read(write_result(res, tmp_path / "em.fits", "emission_measure"))
    assert header["NAXIS"] == 2 and header["WCSAXES"] == 2 and wcs.naxis == 2
    assert u.Unit(header["BUNIT"], format="fits") == u.pc / u.cm**6
    assert np.allclose(data, res.emission_measure.to_value(u.pc / u.cm**6), rtol=1e-6, atol=0)


@pytest.mark.parametrize(
    "nu", [[1, 10] * u.GHz, [1, 3, 10] * u.GHz, [8] * u.GHz, [1, 2, 4, 8] * u.GHz, [30, 10, 20] * u.cm]
)
def test_sky_wcs_matches_written_header(nu, tmp_path):
    nu_hz = nu.to_value(u.Hz, equivalencies=u.spectral())
    w = sky_wcs((6, 7), 2 * u.arcsec, OFF_CENTRE, nu)
    _, _, read_wcs, _ = read(
        write_cube(
            tmp_path / "w.fits", np.zeros((len(nu), 6, 7)) * u.K, nu, 2 * u.arcsec, OFF_CENTRE, spectral_axis="tabular"
        )
    )
    assert w.pixel_shape == (7, 6, len(nu))
    pix = np.arange(len(nu))
    for wcs in (w, read_wcs):
        assert np.allclose(wcs.spectral.pixel_to_world_values(pix), nu_hz, rtol=1e-14, atol=0)
        ra, dec, _ = wcs.pixel_to_world_values(np.full(len(nu), 3.0), np.full(len(nu), 2.5), pix)
        assert np.allclose(ra, OFF_CENTRE.ra.deg, atol=1e-12) and np.allclose(dec, OFF_CENTRE.dec.deg, atol=1e-12)
    assert sky_wcs((6, 7), 2 * u.arcsec, OFF_CENTRE).naxis == 2


# --------------------------------------------------------------------------------------------
# quantities and units
# --------------------------------------------------------------------------------------------


def test_jy_per_pixel_sums_equal_flux_density(res, tmp_path):
    _, data, _, _ = read(write_result(res, tmp_path / "f.fits"))
    # Float32 storage and summation: agree to a few parts in 1e6.
    assert np.allclose(data.sum(axis=(1, 2), dtype=np.float64), res.flux_density().to_value(u.Jy), rtol=1e-5, atol=0)


def test_jy_per_pixel_and_the_background(snap, tmp_path):
    # By default the file holds I - I_bg, as a differential measurement sees it (common practice), so its
    # pixel sum is flux_density(); background="included" keeps the total intensity.
    res = rtrace.trace(snap, rtrace.View(npix=8, distance=2 * u.kpc), [1] * u.GHz, background="cmb")
    _, data, _, _ = read(write_result(res, tmp_path / "b.fits"))
    assert np.allclose(data.sum(axis=(1, 2), dtype=np.float64), res.flux_density().to_value(u.Jy), rtol=1e-5)
    _, data, _, _ = read(write_result(res, tmp_path / "t.fits", background="included"))
    total = res.flux_density(background="included").to_value(u.Jy)
    assert np.allclose(data.sum(axis=(1, 2), dtype=np.float64), total, rtol=1e-5, atol=0)
    assert not np.allclose(total, res.flux_density().to_value(u.Jy), rtol=1e-3)


@pytest.mark.parametrize("unit", ["Jy/sr", "erg/(s cm2 Hz sr)", "mJy/pixel"])
def test_intensity_units(res, tmp_path, unit):
    header, data, _, _ = read(write_result(res, tmp_path / "i.fits", unit=unit))
    bunit = u.Unit(header["BUNIT"], format="fits")  # FITS unit syntax (Pence et al. 2010, sec. 4.3)
    assert bunit == u.Unit(unit)
    if bunit.is_equivalent(u.Jy / u.pix):
        expected = (res.intensity * res.pixel_solid_angle).to_value(u.mJy)
    else:
        expected = res.intensity.to_value(bunit)
    # float32 storage: relative precision 1e-6 down to float32's smallest normal numbers (faint edge pixels
    # in cgs units, ~1e-38, are stored as subnormals)
    assert np.allclose(data, expected, rtol=1e-6, atol=np.finfo(np.float32).tiny)


def test_optical_depth(res, tmp_path):
    header, data, _, _ = read(write_result(res, tmp_path / "t.fits", "tau"))
    assert "BUNIT" not in header and header["RTQUANT"] == "tau"  # dimensionless
    assert np.allclose(data, res.tau, rtol=1e-6, atol=0)


def test_brightness_temperature_is_planck(res, tmp_path):
    header, data, _, _ = read(write_result(res, tmp_path / "tb.fits", "brightness_temperature"))
    assert header["BUNIT"] == "K"
    # Inverse Planck law T = (h nu / k) / ln(1 + 2 h nu^3 / (c^2 I))
    # (Rybicki & Lightman 1979, eq. 1.51, from memory), with astropy constants.
    h, k, c = const.h.cgs.value, const.k_B.cgs.value, const.c.cgs.value
    nu = res.frequencies.to_value(u.Hz)[:, None, None]
    intensity = res.intensity.value
    good = intensity > 0
    expected = (h * nu / k) / np.log1p(2 * h * nu**3 / (c**2 * np.where(good, intensity, 1.0)))
    assert good.sum() > 100
    assert np.allclose(data[good], expected[good], rtol=1e-5, atol=0)


def test_brightness_temperature_rayleigh_jeans(res, tmp_path):
    header, data, _, _ = read(write_result(res, tmp_path / "rj.fits", "brightness_temperature", kind="rayleigh-jeans"))
    # T_RJ = c^2 I / (2 k nu^2) (Rybicki & Lightman 1979, eq. 1.53, from memory).
    for plane, nu in enumerate(res.frequencies):
        expected = res.intensity[plane].to_value(u.K, u.brightness_temperature(nu))
        assert np.allclose(data[plane], expected, rtol=1e-5, atol=0)


# --------------------------------------------------------------------------------------------
# sky maps and beams
# --------------------------------------------------------------------------------------------


def skymap(beams, reference, nfreq=3, shape=(10, 12)):
    """A stand-in with the attributes of rtrace.observe.skymap.SkyMap."""
    rng = np.random.default_rng(3)
    return types.SimpleNamespace(
        data=rng.normal(size=(nfreq,) + shape) * u.Jy / u.beam,
        beams=list(beams),
        beam=reference,
        frequencies=np.linspace(2, 6, nfreq) * u.GHz,
        pixel_scale=0.5 * u.arcsec,
        sky_position=OFF_CENTRE,
        provenance={
            "source": "test",
            "checksum": "0" * 64,
            "view": "v",
            "ionization": "full",
            "background": "none",
            "beam": "gaussian, FWHM 3 arcsec",
            "noise": "rms 1e-5 Jy/beam",
        },
    )


def assert_header_beam(header, beam):
    # BMAJ/BMIN/BPA in degrees (radio common practice).
    assert header["BMAJ"] == pytest.approx(beam.major.to_value(u.deg), rel=1e-14)
    assert header["BMIN"] == pytest.approx(beam.minor.to_value(u.deg), rel=1e-14)
    assert header["BPA"] == pytest.approx(beam.pa.to_value(u.deg), rel=1e-14, abs=1e-14)


def test_skymap_common_beam(tmp_path):
    beam = radio_beam.Beam(major=3 * u.arcsec, minor=2 * u.arcsec, pa=25 * u.deg)
    sm = skymap([beam] * 3, beam)
    header, data, wcs, extra = read(write_skymap(sm, tmp_path / "sky.fits"))
    assert header["BUNIT"] == "Jy/beam" and u.Unit(header["BUNIT"], format="fits") == u.Jy / u.beam
    assert_header_beam(header, beam)
    assert radio_beam.Beam.from_fits_header(header) == beam
    assert "BEAMS" not in extra
    assert header["BEAM"] == sm.provenance["beam"] and header["NOISE"] == sm.provenance["noise"]
    assert np.allclose(data, sm.data.value, rtol=1e-6, atol=0)
    assert np.allclose(
        wcs.spectral.pixel_to_world_values(np.arange(3)), sm.frequencies.to_value(u.Hz), rtol=1e-14, atol=0
    )


def test_skymap_beams_per_channel(tmp_path):
    beams = [
        radio_beam.Beam(major=(4 - i) * u.arcsec, minor=(3 - i) * u.arcsec, pa=(10 + 20 * i) * u.deg) for i in range(3)
    ]
    sm = skymap(beams, beams[0])
    header, _, _, extra = read(write_skymap(sm, tmp_path / "sky.fits"))
    assert_header_beam(header, beams[0])
    table = extra["BEAMS"]
    assert list(table.columns.names) == ["BMAJ", "BMIN", "BPA", "CHAN", "POL"]
    assert np.array_equal(table.data["CHAN"], [0, 1, 2]) and np.array_equal(table.data["POL"], [0, 0, 0])
    assert np.allclose(table.data["BMAJ"], [4, 3, 2], rtol=1e-14)  # arcsec
    read_beams = radio_beam.Beams.from_fits_bintable(table)
    assert len(read_beams) == 3
    for got, want in zip(read_beams, beams, strict=True):
        assert got == want


def test_write_cube_single_beam_and_default_reference(tmp_path):
    small = radio_beam.Beam(2 * u.arcsec)
    large = radio_beam.Beam(major=5 * u.arcsec, minor=4 * u.arcsec, pa=0 * u.deg)
    header, _, _, extra = read(
        write_cube(
            tmp_path / "a.fits",
            np.ones((2, 4, 4)) * u.Jy / u.beam,
            [1, 2] * u.GHz,
            1 * u.arcsec,
            OFF_CENTRE,
            beams=small,
        )
    )
    assert_header_beam(header, small) and "BEAMS" not in extra
    header, _, _, extra = read(
        write_cube(
            tmp_path / "b.fits",
            np.ones((2, 4, 4)) * u.Jy / u.beam,
            [1, 2] * u.GHz,
            1 * u.arcsec,
            OFF_CENTRE,
            beams=[small, large],
        )
    )
    assert_header_beam(header, large)  # default reference: the largest beam
    assert "BEAMS" in extra


# --------------------------------------------------------------------------------------------
# long strings, bad input
# --------------------------------------------------------------------------------------------


def test_long_and_non_ascii_provenance(tmp_path):
    # No trailing blank: trailing spaces of FITS strings are not significant (Pence et al. 2010, sec. 4.2.1.1).
    long_view = " ".join(["los=(0.267261, 0.534522, 0.801784)"] * 6)
    prov = {"view": long_view, "source": "snap_α.h5", "ionization": "it's full", "custom": "kept"}
    header, _, _, _ = read(
        write_cube(tmp_path / "p.fits", np.ones((4, 4)) * u.K, None, 1 * u.arcsec, OFF_CENTRE, provenance=prov)
    )
    assert header["VIEW"] == long_view  # CONTINUE cards (Pence et al. 2010, sec. 4.2.1.2)
    # ... announced by LONGSTRN (the OGIP long-string convention, from memory), before the first of them
    assert header["LONGSTRN"] == "OGIP 1.0"
    assert list(header.keys()).index("LONGSTRN") < list(header.keys()).index("VIEW")
    assert header["SNAPSRC"] == "snap_?.h5"  # header text is printable ASCII only
    assert header["IONIZ"] == "it's full"
    assert "custom: kept" in str(header["HISTORY"])
    header, _, _, _ = read(
        write_cube(
            tmp_path / "s.fits", np.ones((4, 4)) * u.K, None, 1 * u.arcsec, OFF_CENTRE, provenance={"view": "short"}
        )
    )
    assert "LONGSTRN" not in header  # no long strings, no announcement


def test_bad_input_is_reported(res, tmp_path):
    out = tmp_path / "x.fits"
    cube = np.ones((2, 4, 4)) * u.K
    with pytest.raises(InputError, match="frequencies: 3 given for a cube of 2 planes"):
        write_cube(out, cube, [1, 2, 3] * u.GHz, 1 * u.arcsec, OFF_CENTRE)
    with pytest.raises(InputError, match="data: expected an astropy Quantity"):
        write_cube(out, np.ones((2, 4, 4)), [1, 2] * u.GHz, 1 * u.arcsec, OFF_CENTRE)
    with pytest.raises(InputError, match="data: expected a .* got shape"):
        write_cube(out, np.ones(4) * u.K, [1] * u.GHz, 1 * u.arcsec, OFF_CENTRE)
    with pytest.raises(InputError, match="frequencies: required for a 3D cube"):
        write_cube(out, cube, None, 1 * u.arcsec, OFF_CENTRE)
    with pytest.raises(InputError, match="frequencies: expected a frequency"):
        write_cube(out, cube, [1, 2] * u.s, 1 * u.arcsec, OFF_CENTRE)
    with pytest.raises(InputError, match="pixel_scale: expected an angle"):
        write_cube(out, cube, [1, 2] * u.GHz, 1 * u.pc, OFF_CENTRE)
    with pytest.raises(InputError, match="sky_position: expected an astropy SkyCoord"):
        write_cube(out, cube, [1, 2] * u.GHz, 1 * u.arcsec, (0, 0))
    with pytest.raises(InputError, match="beams: 3 beams given for 2 planes"):
        write_cube(out, cube, [1, 2] * u.GHz, 1 * u.arcsec, OFF_CENTRE, beams=[radio_beam.Beam(1 * u.arcsec)] * 3)
    with pytest.raises(InputError, match="quantity: expected one of"):
        write_result(res, out, "flux")
    with pytest.raises(InputError, match="unit: 'K' is neither"):
        write_result(res, out, unit="K")
    with pytest.raises(InputError, match="unit: 'Jy' is not a unit of emission_measure"):
        write_result(res, out, "emission_measure", unit="Jy")
    with pytest.raises(InputError, match="skymap.data: expected a Quantity in Jy/beam"):
        sm = skymap([radio_beam.Beam(1 * u.arcsec)] * 3, radio_beam.Beam(1 * u.arcsec))
        sm.data = sm.data.value * u.K
        write_skymap(sm, out)
    with pytest.raises(InputError, match="path: directory .* does not exist"):
        write_result(res, tmp_path / "nowhere" / "x.fits")
    assert not out.exists()
    out.write_bytes(b"old")
    with pytest.raises(InputError, match="exists and overwrite=False"):
        write_result(res, out, overwrite=False)
    assert out.read_bytes() == b"old"


# --------------------------------------------------------------------------------------------
# atomic writes
# --------------------------------------------------------------------------------------------


def _failing_writeto(self, fileobj, *args, **kwargs):
    """Write part of a file, then fail, as a full disk would."""
    with open(fileobj, "wb") as handle:
        handle.write(b"SIMPLE  =                    T" + b" " * 50)
    raise OSError("disk full (simulated)")


@pytest.mark.parametrize("existing", [False, True])
def test_failed_fits_write_leaves_nothing(res, tmp_path, monkeypatch, existing):
    target = tmp_path / "cube.fits"
    if existing:
        write_result(res, target, "tau")
        before = target.read_bytes()
    monkeypatch.setattr(fits.HDUList, "writeto", _failing_writeto)
    with pytest.raises(OSError, match="disk full"):
        write_result(res, target)
    assert sorted(os.listdir(tmp_path)) == (["cube.fits"] if existing else [])
    if existing:
        assert target.read_bytes() == before


def test_atomic_path_success_and_failure(tmp_path, monkeypatch):
    target = tmp_path / "table.csv.gz"
    calls = []
    real_fsync, real_replace = os.fsync, os.replace
    monkeypatch.setattr(atomic_module.os, "fsync", lambda fd: (calls.append("fsync"), real_fsync(fd))[1])
    monkeypatch.setattr(atomic_module.os, "replace", lambda a, b: (calls.append("replace"), real_replace(a, b))[1])
    with atomic_path(target) as tmp:
        assert tmp.parent == tmp_path and tmp.name.startswith(".") and tmp.name.endswith(".csv.gz")
        tmp.write_text("new")
        assert not target.exists()  # nothing visible before the end
    assert target.read_text() == "new" and os.listdir(tmp_path) == ["table.csv.gz"]
    # Data are flushed before the rename (and the directory after it).
    assert calls[:2] == ["fsync", "replace"]
    with pytest.raises(RuntimeError, match="boom"):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("boom")
    assert target.read_text() == "new" and os.listdir(tmp_path) == ["table.csv.gz"]
    # A body that writes nothing must not replace the target with nothing.
    with pytest.raises(FileNotFoundError):
        with atomic_path(target):
            pass
    assert target.read_text() == "new" and os.listdir(tmp_path) == ["table.csv.gz"]
