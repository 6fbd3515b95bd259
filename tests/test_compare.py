"""rtrace.compare: a model on an observed image's frequency, beam and grid; residuals, fluxes, profiles.

The synthetic observations here are made independently of the code under
test: every model pixel is a point source of its flux density, and each
observed pixel gets the sum of those point sources weighted by the Gaussian
beam evaluated at the exact sky offset between the two (a point source of S
Jy has a peak of S Jy/beam: the definition of Jy/beam for a Gaussian beam,
common practice). No beam kernel, FFT or reprojection code is shared with
rtrace.compare. All sources are invented.
"""

import math
import warnings

import astropy.units as u
import numpy as np
import pytest
import radio_beam
import regions
from astropy import constants as const
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS
from jobs import TWO_FREQUENCIES, demo, job_text, view

import rtrace
from rtrace.cli import EXIT_INPUT, EXIT_OK, main
from rtrace.comparison import ComparisonWarning, read_observation
from rtrace.errors import InputError
from rtrace.io.fits import sky_wcs

# an invented field centre
POSITION = SkyCoord(ra=150.0 * u.deg, dec=-30.0 * u.deg, frame="icrs")
FWHM_PER_SIGMA = math.sqrt(8.0 * math.log(2.0))  # Gaussian identity


def blob_snapshot(n=32, sigma_cells=4.0, ne_peak=100.0, temperature=1.0e4, cell_pc=0.005):
    """A Gaussian cloud of ionized gas, uniform temperature, optically thin at GHz frequencies."""
    x = np.indices((n, n, n)).astype(float) - (n - 1) / 2
    ne = ne_peak * np.exp(-0.5 * (x**2).sum(axis=0) / sigma_cells**2)
    return rtrace.Snapshot.from_arrays(
        temperature=np.full(ne.shape, temperature) * u.K, electron_density=ne * u.cm**-3, cell_size=cell_pc * u.pc
    )


def traced(snapshot=None, npix=64, frequencies=(1.4, 5.0) * u.GHz):
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=npix, distance=1 * u.kpc, sky_position=POSITION)
    return rtrace.trace(blob_snapshot() if snapshot is None else snapshot, view, frequencies)


@pytest.fixture(scope="module")
def result():
    return traced()


def observed_header(
    shape=(20, 20),
    scale_arcsec=1.5,
    rotation_deg=30.0,
    center=None,
    frequency=1.4e9,
    beam=None,
    bunit="Jy/beam",
    stokes=True,
):
    """FITS header of a TAN image rotated by ``rotation_deg`` (PC matrix), with FREQ (and STOKES) axes."""
    center = POSITION.directional_offset_by(60 * u.deg, 2 * u.arcsec) if center is None else center
    ny, nx = shape
    hdr = fits.Header()
    naxis = 4 if stokes else 3
    hdr["NAXIS"] = naxis
    hdr["NAXIS1"], hdr["NAXIS2"], hdr["NAXIS3"] = nx, ny, 1
    hdr["CTYPE1"], hdr["CTYPE2"], hdr["CTYPE3"] = "RA---TAN", "DEC--TAN", "FREQ"
    hdr["CUNIT1"], hdr["CUNIT2"], hdr["CUNIT3"] = "deg", "deg", "Hz"
    hdr["CRPIX1"], hdr["CRPIX2"], hdr["CRPIX3"] = (nx + 1) / 2, (ny + 1) / 2, 1.0
    hdr["CRVAL1"], hdr["CRVAL2"], hdr["CRVAL3"] = center.ra.deg, center.dec.deg, frequency
    s = scale_arcsec / 3600.0
    hdr["CDELT1"], hdr["CDELT2"], hdr["CDELT3"] = -s, s, 1.0e6
    # rotation of the pixel grid on the sky (Greisen & Calabretta 2002, sec. 2.1.2, PCi_j)
    c, sn = math.cos(math.radians(rotation_deg)), math.sin(math.radians(rotation_deg))
    hdr["PC1_1"], hdr["PC1_2"], hdr["PC2_1"], hdr["PC2_2"] = c, -sn, sn, c
    if stokes:
        hdr["NAXIS4"] = 1
        hdr["CTYPE4"], hdr["CRPIX4"], hdr["CRVAL4"], hdr["CDELT4"] = "STOKES", 1.0, 1.0, 1.0
    hdr["RADESYS"] = "ICRS"
    if beam is not None:
        hdr["BMAJ"] = beam.major.to_value(u.deg)
        hdr["BMIN"] = beam.minor.to_value(u.deg)
        hdr["BPA"] = beam.pa.to_value(u.deg)
    if bunit is not None:
        hdr["BUNIT"] = bunit
    return hdr


def point_source_sum(res, plane, beam, header):
    """Jy/beam on the observed grid: every model pixel a point source seen through a Gaussian beam.

    Offsets are measured on the model's tangent plane (north = +row, east = -column,
    the orientation rtrace's sky_wcs writes); the beam PA runs from north through east
    (common practice in radio astronomy).
    """
    wcs = WCS(header).celestial
    ny, nx = header["NAXIS2"], header["NAXIS1"]
    rows, cols = np.mgrid[0:ny, 0:nx]
    model_wcs = sky_wcs(res.shape[1:], res.pixel_scale, res.sky_position)
    mx, my = model_wcs.world_to_pixel(wcs.pixel_to_world(cols, rows))
    flux = (res.intensity[plane] * res.pixel_solid_angle).to_value(
        u.erg / (u.s * u.cm**2 * u.Hz) * u.sr / u.sr
    ) / 1.0e-23
    mrow, mcol = np.mgrid[0 : res.shape[1], 0 : res.shape[2]]
    s = res.pixel_scale.to_value(u.arcsec)
    north = (my.ravel()[:, None] - mrow.ravel()[None, :]) * s
    east = -(mx.ravel()[:, None] - mcol.ravel()[None, :]) * s
    pa = beam.pa.to_value(u.rad)
    along = north * math.cos(pa) + east * math.sin(pa)
    across = -north * math.sin(pa) + east * math.cos(pa)
    smaj = beam.major.to_value(u.arcsec) / FWHM_PER_SIGMA
    smin = beam.minor.to_value(u.arcsec) / FWHM_PER_SIGMA
    weights = np.exp(-0.5 * ((along / smaj) ** 2 + (across / smin) ** 2))
    return (weights @ flux.ravel()).reshape(ny, nx)


def observation_hdu(res, plane=0, beam=None, **kw):
    beam = BEAM if beam is None else beam
    nu = res.frequencies[plane].to_value(u.Hz)
    hdr = observed_header(beam=beam, frequency=nu, **kw)
    data = point_source_sum(res, plane, beam, hdr)
    shape = (1,) * (hdr["NAXIS"] - 2) + data.shape
    return fits.PrimaryHDU(data.reshape(shape), header=hdr)


BEAM = radio_beam.Beam(major=6 * u.arcsec, minor=4 * u.arcsec, pa=30 * u.deg)


def recorded_compare(*args, **kwargs):
    """compare() and the messages of the ComparisonWarnings it issued."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ComparisonWarning)
        cmp = rtrace.compare(*args, **kwargs)
    return cmp, [str(w.message) for w in caught if issubclass(w.category, ComparisonWarning)]


def quiet_compare(*args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ComparisonWarning)
        return rtrace.compare(*args, **kwargs)


def interior(mask, width=1):
    """Footprint pixels at least ``width`` pixels from its edge (no neighbour outside it)."""
    out = mask.copy()
    for _ in range(width):
        shrunk = out.copy()
        shrunk[1:, :] &= out[:-1, :]
        shrunk[:-1, :] &= out[1:, :]
        shrunk[:, 1:] &= out[:, :-1]
        shrunk[:, :-1] &= out[:, 1:]
        shrunk[[0, -1], :] = False
        shrunk[:, [0, -1]] = False
        out = shrunk
    return out


# ---------------------------------------------------------------------------------------------
# 1. a model against its own synthetic observation
# ---------------------------------------------------------------------------------------------


def test_model_matches_its_own_observation_on_a_rotated_coarser_grid(result):
    hdu = observation_hdu(result)
    cmp, messages = recorded_compare(result, hdu)
    assert any("common footprint" in m for m in messages)  # rotated corners fall off the model
    assert messages == cmp.notes
    assert cmp.frequency.to_value(u.GHz) == pytest.approx(1.4, rel=1e-12)
    assert cmp.beam == BEAM
    assert cmp.model.unit == u.Jy / u.beam and cmp.residual.shape == (20, 20)
    obs = cmp.observation.to_value(u.Jy / u.beam)
    peak = obs.max()
    inner = interior(cmp.footprint, 1)
    assert inner.sum() > 200
    assert np.max(np.abs(cmp.residual.value[inner])) < 0.01 * peak
    # the beam-convolved model spans ~9 model pixels per sigma: a cubic spline reproduces it far
    # better than that (measured ~6e-6 of the peak; a beam PA of the wrong sign gives ~9e-2)
    assert np.max(np.abs(cmp.residual.value[inner])) < 1e-4 * peak
    assert np.all(np.isnan(cmp.residual.value[~cmp.footprint]))
    assert cmp.flux_ratio == pytest.approx(1.0, abs=0.01)
    np.testing.assert_allclose(cmp.residual.value[cmp.footprint], (cmp.observation - cmp.model).value[cmp.footprint])
    # bilinear interpolation is coarser than the default bicubic one but still within 1 %
    lin = quiet_compare(result, hdu, order="bilinear")
    assert np.max(np.abs(lin.residual.value[inner])) < 0.01 * peak
    assert np.max(np.abs(lin.residual.value[inner])) > np.max(np.abs(cmp.residual.value[inner]))


def test_skymap_model_is_convolved_by_the_beam_difference(result):
    hdu = observation_hdu(result)
    small = result.observe(beam=radio_beam.Beam(major=3 * u.arcsec, minor=2 * u.arcsec, pa=-20 * u.deg))
    cmp = quiet_compare(small, hdu)
    peak = np.max(cmp.observation.value)
    assert np.max(np.abs(cmp.residual.value[interior(cmp.footprint)])) < 0.01 * peak
    assert cmp.flux_ratio == pytest.approx(1.0, abs=0.01)
    # a SkyMap at the observed beam itself needs no further convolution
    same = quiet_compare(result.observe(beam=BEAM), hdu)
    np.testing.assert_allclose(
        same.model.value[same.footprint], cmp.model.value[cmp.footprint], rtol=0, atol=0.01 * peak
    )


def test_model_fits_cubes_give_the_same_comparison(result, tmp_path):
    hdu = observation_hdu(result)
    direct = quiet_compare(result, hdu)
    path = result.write_fits(tmp_path / "model.fits")  # Jy/pixel cube with a FREQ axis
    from_file = quiet_compare(path, hdu)
    scale = np.max(direct.observation.value)
    # float32 storage of the model: agreement to ~1e-7 of the peak
    np.testing.assert_allclose(
        from_file.model.value[direct.footprint], direct.model.value[direct.footprint], rtol=0, atol=1e-6 * scale
    )
    with fits.open(path) as hdul:
        flipped = hdul[0].copy()
    flipped.header["CDELT1"] = -flipped.header["CDELT1"]  # east to the right: not rtrace's grid
    with pytest.raises(InputError, match="north up and east left"):
        rtrace.compare(flipped, hdu)
    sky = result.observe(beam=radio_beam.Beam(major=3 * u.arcsec, minor=2 * u.arcsec, pa=10 * u.deg))
    sky_path = sky.write_fits(tmp_path / "sky.fits")  # Jy/beam cube with BMAJ/BMIN/BPA
    np.testing.assert_allclose(
        quiet_compare(sky_path, hdu).model.value[direct.footprint],
        quiet_compare(sky, hdu).model.value[direct.footprint],
        rtol=0,
        atol=1e-6 * scale,
    )


# ---------------------------------------------------------------------------------------------
# 2. frequency: where it is read, interpolation between traced planes
# ---------------------------------------------------------------------------------------------


def test_frequency_from_freq_axis_or_restfrq(result):
    hdu = observation_hdu(result, stokes=False)
    from_axis = quiet_compare(result, hdu)
    assert from_axis.frequency_source == "FREQ axis"
    # the same image as a 2D map whose frequency is only in RESTFRQ (Hz, Greisen et al. 2006)
    hdr2 = WCS(hdu.header).celestial.to_header()
    for key in ("BMAJ", "BMIN", "BPA", "BUNIT"):
        hdr2[key] = hdu.header[key]
    hdr2["RESTFRQ"] = 1.4e9
    from_key = quiet_compare(result, fits.PrimaryHDU(hdu.data[0], header=hdr2))
    assert from_key.frequency_source == "RESTFRQ"
    assert from_key.frequency == from_axis.frequency
    np.testing.assert_allclose(from_key.model.value, from_axis.model.value, rtol=1e-7)  # header round trip
    # an axis in GHz is converted by the WCS (CUNIT3, Greisen et al. 2006)
    ghz = hdu.header.copy()
    ghz["CUNIT3"], ghz["CRVAL3"], ghz["CDELT3"] = "GHz", 1.4, 0.001
    assert read_observation(fits.PrimaryHDU(hdu.data, header=ghz)).frequency.to_value(u.Hz) == pytest.approx(
        1.4e9, rel=1e-12
    )
    # nothing at all: the error lists what was looked for; frequency= supplies it
    del hdr2["RESTFRQ"]
    bare = fits.PrimaryHDU(hdu.data[0], header=hdr2)
    with pytest.raises(InputError, match="CTYPE 'FREQ'.*RESTFRQ, RESTFREQ, FREQ"):
        rtrace.compare(result, bare)
    given = quiet_compare(result, bare, frequency=1.4 * u.GHz)
    assert given.frequency_source == "frequency=" and given.frequency == from_axis.frequency


def power_law_result(base, frequencies, nu0=1.0e9):
    """A Result whose every pixel is an exact power law I = I0 (nu / nu0)^alpha, alpha varying over the image."""
    i0 = base.intensity.value[0]
    ny, nx = i0.shape
    yy, xx = np.mgrid[0:ny, 0:nx]
    alpha = -0.1 + 2.1 * (xx / (nx - 1)) * (yy / (ny - 1))  # from thin (-0.1) to thick (+2)
    nu = u.Quantity(frequencies).to_value(u.Hz)
    cube = i0[None] * (nu[:, None, None] / nu0) ** alpha[None]
    return rtrace.Result(
        cube,
        np.zeros_like(cube),
        base._em,
        nu,
        base.view,
        base.pixel_size.to_value(u.cm),
        base.center.to_value(u.cm),
        base.provenance,
    )


def test_power_law_interpolation_is_exact_in_log_log(result):
    pair = power_law_result(result, [1.0, 4.0] * u.GHz)
    exact = power_law_result(result, [2.0] * u.GHz)  # the power law evaluated at 2 GHz itself
    hdu = observation_hdu(exact, plane=0)
    cmp, messages = recorded_compare(pair, hdu)
    assert any("interpolated between the traced 1 and 4 GHz planes" in m for m in messages)
    assert any("log I linear in log nu" in n for n in cmp.notes)
    ref = quiet_compare(exact, hdu)
    assert not any("interpolated" in n for n in ref.notes)
    np.testing.assert_allclose(cmp.model.value[cmp.footprint], ref.model.value[ref.footprint], rtol=1e-9)
    # outside the traced range: an error naming the frequencies
    far = observation_hdu(power_law_result(result, [8.0] * u.GHz), plane=0)
    with pytest.raises(InputError, match="outside the traced frequencies"):
        rtrace.compare(pair, far)


def test_frequency_match_uses_the_traced_plane_without_a_note(result):
    hdu = observation_hdu(result, plane=1)  # 5 GHz, the second traced plane
    cmp = quiet_compare(result, hdu)
    assert cmp.frequency.to_value(u.GHz) == pytest.approx(5.0)
    assert not any("interpolated" in n for n in cmp.notes)
    assert cmp.flux_ratio == pytest.approx(1.0, abs=0.01)


def test_coarse_model_pixels_are_noted(result):
    # an observed beam of 1.2 arcsec is sampled by only ~2.3 of the model's 0.52 arcsec pixels
    fine = radio_beam.Beam(major=1.2 * u.arcsec, minor=1.2 * u.arcsec, pa=0 * u.deg)
    cmp, messages = recorded_compare(result, observation_hdu(result, beam=fine, scale_arcsec=0.4))
    assert any("fewer than 3 pixels across its minor axis" in m for m in messages)


# ---------------------------------------------------------------------------------------------
# 3. errors
# ---------------------------------------------------------------------------------------------


def test_model_beam_larger_than_observed_is_an_error(result):
    hdu = observation_hdu(result)
    big = result.observe(beam=radio_beam.Beam(major=8 * u.arcsec, minor=3 * u.arcsec, pa=0 * u.deg))
    with pytest.raises(
        InputError,
        match=r"model's beam \(major=8 arcsec.*larger than the observed beam "
        r"\(major=6 arcsec",
    ):
        rtrace.compare(big, hdu)


def test_missing_beam_and_bad_units_are_errors(result):
    hdu = observation_hdu(result)
    for key in ("BMAJ", "BMIN"):
        hdr = hdu.header.copy()
        del hdr[key]
        with pytest.raises(InputError, match=key):
            rtrace.compare(result, fits.PrimaryHDU(hdu.data, header=hdr))
    hdr = hdu.header.copy()
    del hdr["BMAJ"], hdr["BMIN"], hdr["BPA"]
    with pytest.raises(InputError, match="BMAJ and BMIN .* missing; pass beam="):
        rtrace.compare(result, fits.PrimaryHDU(hdu.data, header=hdr))
    assert quiet_compare(result, fits.PrimaryHDU(hdu.data, header=hdr), beam=BEAM).beam == BEAM
    for bunit in ("MJy/sr", "W/m2"):
        hdr = hdu.header.copy()
        hdr["BUNIT"] = bunit
        with pytest.raises(InputError, match=f"BUNIT is '{bunit}'"):
            rtrace.compare(result, fits.PrimaryHDU(hdu.data, header=hdr))
    hdr = hdu.header.copy()
    hdr["BUNIT"] = "JY/BEAM"  # upper case, as some writers spell it
    assert quiet_compare(result, fits.PrimaryHDU(hdu.data, header=hdr)).flux_ratio == pytest.approx(1, abs=0.01)
    hdr["BUNIT"] = "not a unit"
    with pytest.raises(InputError, match="BUNIT = 'not a unit'"):
        rtrace.compare(result, fits.PrimaryHDU(hdu.data, header=hdr))


def test_unusable_inputs_are_errors(result, tmp_path):
    hdu = observation_hdu(result)
    cube = hdu.header.copy()
    cube["NAXIS3"] = 2
    with pytest.raises(InputError, match="axis 3 \\(FREQ\\) has 2 planes"):
        rtrace.compare(result, fits.PrimaryHDU(np.concatenate([hdu.data, hdu.data], axis=1), header=cube))
    with pytest.raises(InputError, match="observation: file .* not found"):
        rtrace.compare(result, tmp_path / "missing.fits")
    with pytest.raises(InputError, match="result: expected an rtrace Result"):
        rtrace.compare(42, hdu)
    with pytest.raises(InputError, match="order: expected one of"):
        rtrace.compare(result, hdu, order="spline")
    away = observation_hdu(result, center=POSITION.directional_offset_by(0 * u.deg, 5 * u.arcmin))
    with pytest.raises(InputError, match="do not overlap"):
        rtrace.compare(result, away)


# ---------------------------------------------------------------------------------------------
# 4. aperture fluxes, brightness temperature, profiles
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def point():
    """A compact source (sigma ~ 1 arcsec on the sky) in a 49 arcsec field, seen with a 4 arcsec beam."""
    res = traced(blob_snapshot(n=48, sigma_cells=1.5), npix=48)
    beam = radio_beam.Beam(major=4 * u.arcsec, minor=4 * u.arcsec, pa=0 * u.deg)
    hdu = observation_hdu(res, beam=beam, shape=(36, 36), scale_arcsec=1.2, center=POSITION)
    return res, beam, hdu


def test_aperture_flux_of_a_point_source_is_its_total_flux(point):
    res, beam, hdu = point
    cmp = quiet_compare(res, hdu)
    total = res.flux_density()[0]
    circle = regions.CircleSkyRegion(center=POSITION, radius=12 * u.arcsec)  # 3 FWHM
    ap = cmp.aperture_flux(circle)
    assert ap.complete
    assert ap.model.to_value(u.Jy) == pytest.approx(total.to_value(u.Jy), rel=0.02)
    assert ap.observation.to_value(u.Jy) == pytest.approx(total.to_value(u.Jy), rel=0.02)
    assert ap.ratio == pytest.approx(1.0, abs=0.01)
    # the same circle given in pixels of the observed grid
    pix = circle.to_pixel(cmp.wcs)
    assert cmp.aperture_flux(pix).model.to_value(u.Jy) == pytest.approx(ap.model.to_value(u.Jy), rel=1e-9)
    with pytest.raises(InputError, match="region: expected a regions"):
        cmp.aperture_flux((10, 10, 3))


def test_flux_table_round_trips_as_ecsv_with_units(point, tmp_path):
    from astropy.table import Table

    from rtrace.io.tables import write_ecsv

    res, beam, hdu = point
    cmp = quiet_compare(res, hdu)
    circle = regions.CircleSkyRegion(center=POSITION, radius=12 * u.arcsec)
    table = cmp.flux_table([("core", circle), circle.to_pixel(cmp.wcs)])
    path = write_ecsv(tmp_path / "cmp.ecsv", table)
    # astropy's ECSV reader (astropy proposal APE 6, from memory) gives units, descriptions and meta back
    back = Table.read(path)
    assert list(back["aperture"]) == ["common footprint", "core", "aperture 2"]
    assert back["model"].unit == u.Jy and back["observed"].unit == u.Jy and back["pixels"].unit == u.pix
    assert "observed - model" in back["residual"].description
    assert back.meta["background"].startswith("subtracted from the model")
    assert back.meta["frequency"] == f"{cmp.frequency.to_value(u.GHz):.8g} GHz"
    # the numbers are those of the measurements, to the last bit
    ap = cmp.aperture_flux(circle)
    assert back["model"][0] == cmp.model_flux.to_value(u.Jy) and back["ratio"][0] == cmp.flux_ratio
    assert back["model"][1] == ap.model.to_value(u.Jy) and back["observed"][1] == ap.observation.to_value(u.Jy)
    assert back["pixels"][1] == ap.pixels and bool(back["complete"][1]) is ap.complete
    assert back["model"][2] == pytest.approx(ap.model.to_value(u.Jy), rel=1e-9)
    assert [p.name for p in tmp_path.iterdir()] == ["cmp.ecsv"]


def test_observation_in_kelvin_is_converted(point):
    res, beam, hdu = point
    jyb = quiet_compare(res, hdu)
    # Rayleigh-Jeans brightness temperature of S Jy/beam: T = c^2 S / (2 k nu^2 Omega_beam)
    # (Rybicki & Lightman 1979, eq. 1.60), the relation astropy's brightness_temperature
    # equivalency implements; Omega_beam = pi bmaj bmin / (4 ln 2) for a Gaussian beam.
    nu = 1.4e9 * u.Hz
    omega = math.pi * beam.major * beam.minor / (4 * math.log(2))
    kelvin = (const.c**2 * (hdu.data * u.Jy) / (2 * const.k_B * nu**2 * omega.to(u.sr) / u.sr)).to_value(u.K)
    hdr = hdu.header.copy()
    hdr["BUNIT"] = "K"
    cmp, messages = recorded_compare(res, fits.PrimaryHDU(kelvin, header=hdr))
    assert any("brightness_temperature equivalency" in m for m in messages)
    assert any("converted to Jy/beam" in n for n in cmp.notes)
    np.testing.assert_allclose(cmp.observation.value, jyb.observation.value, rtol=1e-9)
    assert cmp.flux_ratio == pytest.approx(jyb.flux_ratio, rel=1e-9)


def test_radial_profile_of_a_point_source(point):
    res, beam, hdu = point
    cmp = quiet_compare(res, hdu)
    prof = cmp.radial_profile()
    assert prof.center.separation(POSITION) < 0.01 * u.arcsec
    assert (prof.outer[0] - prof.inner[0]).to_value(u.arcsec) == pytest.approx(2.0)  # half the FWHM
    peak = np.max(cmp.observation.value)
    assert np.nanmax(np.abs(prof.residual.value)) < 0.01 * peak
    # The source: emission ~ n_e^2 of a Gaussian cloud of sigma 1.5 cells is a Gaussian of sigma
    # 1.5/sqrt(2) cells on the sky, sampled one ray per cell column. Through the Gaussian beam
    # the image is the Gaussian of summed variances, peak S sigma_b^2 / sigma^2 Jy/beam
    # (Jy/beam definition, common practice). Its mean over the pixels of each ring:
    total = res.flux_density()[0].to_value(u.Jy)
    cell = res.pixel_scale.to_value(u.arcsec)  # one cell per pixel here
    var_b = (4.0 / FWHM_PER_SIGMA) ** 2
    var = var_b + 1.5**2 / 2 * cell**2
    rows, cols = np.mgrid[0:36, 0:36]
    r = POSITION.separation(cmp.wcs.pixel_to_world(cols, rows)).to_value(u.arcsec)
    analytic = total * var_b / var * np.exp(-(r**2) / (2 * var))
    ring = (r[cmp.footprint] // 2.0).astype(int)
    expected = [analytic[cmp.footprint][ring == k].mean() for k in range(5)]
    np.testing.assert_allclose(prof.model.value[:5], expected, rtol=0, atol=0.01 * peak)
    np.testing.assert_array_equal(prof.pixels[:5], [np.sum(ring == k) for k in range(5)])
    assert np.all(np.diff(prof.model.value[:6]) < 0)
    assert prof.pixels.sum() == cmp.footprint.sum()
    narrow = cmp.radial_profile(center=regions.PixCoord(17.5, 17.5), bin_width=1 * u.arcsec, max_radius=5 * u.arcsec)
    assert len(narrow.radius) == 5
    with pytest.raises(InputError, match="bin_width"):
        cmp.radial_profile(bin_width=2 * u.m)


# ---------------------------------------------------------------------------------------------
# outputs: figure, FITS, command line
# ---------------------------------------------------------------------------------------------


def test_figure_scales_and_orientation(result, tmp_path):
    cmp = quiet_compare(result, observation_hdu(result))
    fig = cmp.plot(tmp_path / "cmp.png")
    assert (tmp_path / "cmp.png").stat().st_size > 10000
    assert [p.name for p in tmp_path.iterdir()] == ["cmp.png"]  # no temporary file left
    images = [ax.images[0] for ax in fig.axes if ax.images]
    assert len(images) == 3
    assert images[0].norm is images[1].norm  # matched obs / model scale
    rnorm = images[2].norm
    assert rnorm.vmin == pytest.approx(-rnorm.vmax)  # symmetric residual scale
    assert sum(1 for ax in fig.axes for p in ax.patches if p.get_gid() == "beam") == 3
    # east on the left: right ascension decreases from the left edge to the right edge
    ax = fig.axes[0]
    (x0, x1), y = ax.get_xlim(), np.mean(ax.get_ylim())
    left, right = cmp.wcs.pixel_to_world([x0 + 1, x1 - 1], [y, y])
    assert (left.ra - right.ra).wrap_at(180 * u.deg) > 0


def test_write_fits_on_the_observed_grid(result, tmp_path):
    hdu = observation_hdu(result)
    cmp = quiet_compare(result, hdu)
    path = cmp.write_fits(tmp_path / "res.fits")
    with fits.open(path) as hdul:
        assert [h.name for h in hdul] == ["RESIDUAL", "MODEL", "OBSERVED"]
        assert hdul[0].header["BUNIT"] == "Jy/beam" and hdul[0].header["FLUXRAT"] == pytest.approx(cmp.flux_ratio)
        np.testing.assert_allclose(hdul["MODEL"].data[0], cmp.model.value, rtol=1e-6)
        resid = hdul["RESIDUAL"].data[0]
        assert np.array_equal(np.isfinite(resid), cmp.footprint)
        w = WCS(hdul["OBSERVED"].header).celestial
        np.testing.assert_allclose(w.pixel_scale_matrix, WCS(hdu.header).celestial.pixel_scale_matrix)
        # the written observation reads back as one: frequency axis and beam
        back = read_observation(hdul["OBSERVED"])
        assert back.frequency == cmp.frequency and back.beam == cmp.beam
    assert [p.name for p in tmp_path.iterdir()] == ["res.fits"]


def test_command_line_compare(result, tmp_path, capsys):
    model = result.write_fits(tmp_path / "model.fits")
    hdu = observation_hdu(result)
    hdu.writeto(tmp_path / "obs.fits")
    assert main(["compare", str(model), str(tmp_path / "obs.fits"), "--output", str(tmp_path / "out")]) == EXIT_OK
    out = capsys.readouterr().out
    assert "frequency    1.4 GHz (from FREQ axis)" in out
    assert "flux ratio   model / observed = 1.00" in out
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["obs_comparison.png", "obs_residual.fits"]
    # no beam in the header: exit code 4 naming BMAJ, and --beam supplies it
    del hdu.header["BMAJ"], hdu.header["BMIN"], hdu.header["BPA"]
    hdu.writeto(tmp_path / "nobeam.fits")
    assert main(["compare", str(model), str(tmp_path / "nobeam.fits"), "--output", str(tmp_path)]) == EXIT_INPUT
    assert "BMAJ" in capsys.readouterr().err
    assert (
        main(
            [
                "compare",
                str(model),
                str(tmp_path / "nobeam.fits"),
                "--output",
                str(tmp_path),
                "--beam",
                "6 arcsec, 4 arcsec, 30 deg",
            ]
        )
        == EXIT_OK
    )
    for argv in (["--beam", "6 arcsec"], ["--frequency", "1 GHz, 2 GHz"], ["--help"]):
        with pytest.raises(SystemExit) as exc:
            main(["compare", str(model), str(tmp_path / "obs.fits"), *argv])
        assert exc.value.code == (0 if argv == ["--help"] else 2)


JOB = job_text(
    snapshot=demo(16), frequencies=TWO_FREQUENCIES, view=view("small", 24, "2 kpc"), output={"directory": "out"}
)


def test_command_line_compare_traces_a_job_at_the_observed_frequency(tmp_path, capsys):
    from rtrace.run.job import build_views, load_job
    from rtrace.run.pipeline import build_snapshot

    job_path = tmp_path / "job.toml"
    job_path.write_text(JOB)
    job = load_job(job_path)
    # the invented observation: the job's view traced at 3 GHz (between the job's frequencies)
    res = rtrace.trace(build_snapshot(job), dict(build_views(job))["small"], [3.0] * u.GHz)
    field = res.pixel_scale * 24
    beam = radio_beam.Beam(major=field / 5, minor=field / 6, pa=10 * u.deg)
    hdr = observed_header(
        shape=(16, 16),
        scale_arcsec=(field / 20).to_value(u.arcsec),
        rotation_deg=-15,
        center=res.sky_position,
        frequency=3e9,
        beam=beam,
        stokes=False,
    )
    fits.PrimaryHDU(point_source_sum(res, 0, beam, hdr)[None], header=hdr).writeto(tmp_path / "obs.fits")
    assert main(["compare", str(job_path), str(tmp_path / "obs.fits"), "--output", str(tmp_path)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "frequency    3 GHz" in out and "flux ratio   model / observed = 1.00" in out
    assert "interpolated" not in out  # traced at 3 GHz itself
