"""One background convention in every product (rtrace.transfer.background).

References: Rybicki & Lightman (1979), "Radiative Processes in Astrophysics",
eq. 1.30 (I = I_bg e^{-tau} + S (1 - e^{-tau}) for a uniform slab with incident
intensity) and sec. 1.5 (brightness temperature; an optically thick
isothermal body has T_b = T); eq. 1.51 (Planck function) through astropy's
``BlackBody`` model; Fixsen (2009), ApJ 707, 916 (T_CMB = 2.7255 K); astropy's
``brightness_temperature`` equivalency for the Rayleigh-Jeans form. The gas
here is an invented uniform slab.
"""

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.modeling.physical_models import BlackBody
from astropy.table import Table

import rtrace
from rtrace.analysis.spectra import sed, sed_metadata, write_sed_table
from rtrace.errors import InputError
from rtrace.interferometer import synthesize
from rtrace.io.fits import write_result
from rtrace.physics.planck import planck_cgs
from rtrace.transfer.background import (
    Background,
    brightness_temperature_cgs,
    check_convention,
    header_cards,
    resolve_convention,
)
from rtrace.transfer.result import Result

T_CMB = 2.7255  # K, Fixsen (2009)
T_E = 8000.0
N_E = 1.0e4
CELLS = 8
FREQS = [0.1, 30.0] * u.GHz  # tau ~ 400 (thick) and ~ 4e-3 (thin) through 0.08 pc
SKY = SkyCoord(ra=150 * u.deg, dec=40 * u.deg)
INTENSITY = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)


def _snapshot(ne):
    shape = (CELLS, CELLS, CELLS)
    return rtrace.Snapshot.from_arrays(
        temperature=np.full(shape, T_E) * u.K,
        electron_density=np.full(shape, ne) * u.cm**-3,
        cell_size=0.01 * u.pc,
        dtype=np.float64,
    )


def _view():
    # twice the box: the 8x8 central pixels see the slab, the ring around them empty sky
    return rtrace.View(
        los=(0, 0, 1),
        north=(0, 1, 0),
        npix=2 * CELLS,
        width=2 * CELLS * 0.01 * u.pc,
        distance=1 * u.kpc,
        sky_position=SKY,
    )


@pytest.fixture(scope="module")
def slab():
    return rtrace.trace(_snapshot(N_E), _view(), FREQS, background="cmb")


@pytest.fixture(scope="module")
def empty():
    return rtrace.trace(_snapshot(0.0), _view(), FREQS, background="cmb")


def _bb(nu_hz, t):
    """B_nu(T) in cgs from astropy's BlackBody (an implementation independent of rtrace's)."""
    return BlackBody(temperature=t * u.K)(nu_hz * u.Hz).to_value(INTENSITY)


CENTRE = (slice(None), slice(6, 10), slice(6, 10))
EMPTY = (slice(None), slice(0, 2), slice(None))  # two rows of pixels that miss the box


# -- the convention keyword --------------------------------------------------------------------


def test_keyword_is_checked_with_a_hint():
    assert check_convention("Included") == "included"
    with pytest.raises(InputError, match="background: expected 'subtracted' or 'included'.*chosen when tracing"):
        check_convention("cmb")
    with pytest.raises(InputError, match="background: expected"):
        check_convention(True)


def test_old_boolean_still_works_with_a_deprecation_warning():
    with pytest.warns(DeprecationWarning, match="subtract_background"):
        assert resolve_convention(None, False) == "included"
    with pytest.warns(DeprecationWarning), pytest.raises(InputError, match="contradicts"):
        resolve_convention("subtracted", False)


def test_result_flux_keeps_the_old_keyword(slab):
    with pytest.warns(DeprecationWarning):
        old = slab.flux_density(subtract_background=False)
    np.testing.assert_array_equal(old.value, slab.flux_density(background="included").value)


def test_trace_describes_its_background(slab):
    assert slab.background_info == Background("cmb", T_CMB)
    nu = FREQS.to_value(u.Hz)
    res = rtrace.trace(_snapshot(N_E), _view(), FREQS, background=20 * u.K)
    assert res.background_info == Background("blackbody", 20.0)
    np.testing.assert_allclose(res.background.value, _bb(nu, 20.0), rtol=1e-10)
    with pytest.raises(InputError, match="background: expected one temperature"):
        rtrace.trace(_snapshot(N_E), _view(), FREQS, background=[3, 4] * u.K)


# -- Planck difference ------------------------------------------------------------------------


@pytest.mark.parametrize("t_source", [30.0, 1.0, 5000.0])
def test_planck_difference_against_astropy_blackbody(t_source):
    # Delta I = B(T) - B(T_bg) (astropy BlackBody, R&L eq. 1.51) must give back T - T_bg exactly
    nu = np.array([1e9, 1e11, 3e11])
    delta = _bb(nu, t_source) - _bb(nu, T_CMB)
    bg = _bb(nu, T_CMB)
    got = brightness_temperature_cgs(nu, delta, bg, "planck", "subtracted")
    np.testing.assert_allclose(got, t_source - T_CMB, rtol=1e-9, atol=1e-9)
    full = brightness_temperature_cgs(nu, delta, bg, "planck", "included")
    np.testing.assert_allclose(full, t_source, rtol=1e-9)
    if t_source < 100:
        # the inversion of the difference alone is a different (wrong) number at 100 GHz and above
        naive = brightness_temperature_cgs(nu, delta, np.zeros(3), "planck", "included")
        assert np.all(np.abs(naive[1:] - (t_source - T_CMB)) > 0.1) or np.all(np.isnan(naive[1:]))


def test_rayleigh_jeans_is_linear_against_astropy():
    # T_RJ = c^2 I / (2 k nu^2): astropy's brightness_temperature equivalency on Jy/sr
    nu = 30e9
    delta, bg = 3e-16, _bb(np.array([nu]), T_CMB)[0]
    equiv = u.brightness_temperature(nu * u.Hz)
    expected_sub = (delta * INTENSITY).to(u.Jy / u.sr).to_value(u.K, equivalencies=equiv)
    expected_full = ((delta + bg) * INTENSITY).to(u.Jy / u.sr).to_value(u.K, equivalencies=equiv)
    assert brightness_temperature_cgs(nu, delta, bg, "rj", "subtracted") == pytest.approx(expected_sub, rel=1e-10)
    assert brightness_temperature_cgs(nu, delta, bg, "rayleigh-jeans", "included") == pytest.approx(
        expected_full, rel=1e-10
    )


# -- Result --------------------------------------------------------------------------------------


def test_thick_isothermal_slab_reads_te_minus_tcmb_or_te(slab):
    # R&L eq. 1.30 with tau ~ 400: I = B(T_e); sec. 1.5: T_b = T_e (full), T_e - T_bg (subtracted)
    sub = slab.brightness_temperature("planck").to_value(u.K)[0][CENTRE[1:]]
    full = slab.brightness_temperature("planck", background="included").to_value(u.K)[0][CENTRE[1:]]
    np.testing.assert_allclose(sub, T_E - T_CMB, rtol=1e-9)
    np.testing.assert_allclose(full, T_E, rtol=1e-9)


def test_thin_slab_against_the_formal_solution(slab):
    # R&L eq. 1.30: I - I_bg = (B(T_e) - I_bg)(1 - e^{-tau}) for a uniform slab
    nu = FREQS.to_value(u.Hz)
    tau = slab.tau[1][CENTRE[1:]]
    bg = _bb(nu[1:], T_CMB)[0]
    expected = (_bb(nu[1:], T_E)[0] - bg) * -np.expm1(-tau)
    np.testing.assert_allclose(slab.intensity.value[1][CENTRE[1:]], expected, rtol=1e-6)
    np.testing.assert_allclose(slab.specific_intensity("included").value[1][CENTRE[1:]], expected + bg, rtol=1e-6)


def test_empty_sky_is_zero_in_every_subtracted_result_product(slab):
    assert np.all(slab.intensity.value[EMPTY] == 0)
    for kind in ("planck", "rayleigh-jeans"):
        assert np.all(slab.brightness_temperature(kind).value[EMPTY] == 0)
    # included: the CMB itself, T_P = 2.7255 K at every frequency
    np.testing.assert_allclose(slab.brightness_temperature(background="included").value[EMPTY], T_CMB, rtol=1e-10)
    from rtrace.analysis.spectra import pixel_flux

    assert np.all(pixel_flux(slab).value[EMPTY] == 0)


def test_result_without_background_is_the_same_either_way():
    res = rtrace.trace(_snapshot(N_E), _view(), FREQS)
    np.testing.assert_array_equal(res.intensity.value, res.specific_intensity("included").value)
    np.testing.assert_array_equal(
        res.brightness_temperature().value, res.brightness_temperature(background="included").value
    )


def test_empty_grid_has_zero_flux_and_sed(empty, tmp_path):
    assert np.all(empty.flux_density().value == 0)
    nu, flux = sed(empty)
    assert np.all(flux.value == 0)
    # included: the CMB over the field, B(T_cmb) Omega_pix per pixel
    expected = _bb(nu.value, T_CMB) * empty.pixel_solid_angle.to_value(u.sr) * 256 / 1e-23
    np.testing.assert_allclose(empty.flux_density(background="included").to_value(u.Jy), expected, rtol=1e-9)
    path = tmp_path / "sed.ecsv"
    write_sed_table(path, nu, flux, metadata=sed_metadata(empty))
    table = Table.read(path)  # astropy ECSV reader
    assert table.meta["background"] == "subtracted (CMB, 2.7255 K): empty sky reads 0"
    assert np.all(table["flux_density"] == 0)
    meta = sed_metadata(empty, background="included")
    assert meta["background"].startswith("included (CMB, 2.7255 K)")


# -- SkyMap ----------------------------------------------------------------------------------------


def test_skymap_empty_sky_and_thick_centre(slab, empty):
    beam = radio_beam.Beam(2.0 * u.arcsec)  # ~1 pixel FWHM: the slab centre is 8 sigma from its edge
    sky = empty.observe(beam)
    assert sky.background == "subtracted"
    assert np.all(sky.model.value == 0) and np.all(sky.flux_density(noiseless=True).value == 0)
    for kind in ("planck", "rayleigh-jeans"):
        assert np.all(sky.brightness_temperature(kind, noiseless=True).value == 0)
    full = empty.observe(beam, background="included")
    np.testing.assert_allclose(full.brightness_temperature("planck").value, T_CMB, rtol=1e-9)
    # mean intensity in the beam of the thick slab: T_e - T_cmb (subtracted) or T_e (included)
    obs = slab.observe(beam)
    tb = obs.brightness_temperature("planck", noiseless=True).to_value(u.K)[0, 7:9, 7:9]
    np.testing.assert_allclose(tb, T_E - T_CMB, rtol=1e-6)
    tb_full = obs.brightness_temperature("planck", noiseless=True, background="included").to_value(u.K)
    np.testing.assert_allclose(tb_full[0, 7:9, 7:9], T_E, rtol=1e-6)
    # RJ of the subtracted map is astropy's equivalency on the map in Jy/beam
    equiv = u.brightness_temperature(FREQS[1], beam_area=obs.beams[1].sr)
    np.testing.assert_allclose(
        obs.brightness_temperature("rayleigh-jeans", noiseless=True).value[1],
        obs.model[1].to_value(u.K, equivalencies=equiv),
        rtol=1e-10,
    )


def test_skymap_included_is_subtracted_plus_the_background_per_beam(slab):
    beam = radio_beam.Beam(3.0 * u.arcsec)
    sub, full = slab.observe(beam), slab.observe(beam, background="included")
    level = planck_cgs(FREQS.to_value(u.Hz), np.full(2, T_CMB)) * sub.beam_solid_angle.to_value(u.sr) / 1e-23
    np.testing.assert_allclose(
        (full.model - sub.model).value, np.broadcast_to(level[:, None, None], sub.shape), rtol=1e-9
    )
    np.testing.assert_allclose(full.flux_density(background="subtracted").value, sub.flux_density().value, rtol=1e-12)


# -- synthesized map ------------------------------------------------------------------------------

# an invented 10-dish layout (as in test_interferometer.py)
ANTENNAS = (
    np.array(
        [
            [0, 0, 0],
            [610, 140, 1],
            [-380, 520, 2],
            [150, -700, 0],
            [-900, -300, 1],
            [1200, 800, 3],
            [-200, 1500, 2],
            [1700, -600, 0],
            [-1500, 1100, 1],
            [500, 1900, 2],
        ],
        float,
    )
    * u.m
)


def _point(flux_jy, with_cmb):
    """A 64x64 Result of 1 arcsec pixels at 5 GHz: one pixel of ``flux_jy`` on the CMB (or on nothing)."""
    nu = np.array([5e9])
    pix = (1 * u.arcsec).to_value(u.rad)
    img = np.zeros((1, 64, 64))
    img[0, 30, 34] = flux_jy * 1e-23 / pix**2  # 1 Jy = 1e-23 cgs (definition)
    bg = planck_cgs(nu, np.full(1, T_CMB)) if with_cmb else np.zeros(1)
    view = rtrace.View(npix=64, distance=1 * u.kpc, sky_position=SKY)
    return Result(
        img + bg[:, None, None],
        np.zeros_like(img),
        np.zeros((64, 64)),
        nu,
        view,
        pix * (1 * u.kpc).to_value(u.cm),
        np.zeros(3),
        {"source": "test"},
        background=bg,
        background_info=Background("cmb", T_CMB) if with_cmb else None,
    )


def _synth(res, **kw):
    return synthesize(
        res,
        antennas=ANTENNAS,
        latitude=35 * u.deg,
        hour_angle_range=(-4, 4) * u.hourangle,
        hour_angle_step=4 * u.min,
        **kw,
    )


def test_synthesized_map_convention():
    on_cmb, alone, blank = _synth(_point(1.0, True)), _synth(_point(1.0, False)), _synth(_point(0.0, True))
    # subtracted: the CMB leaves no trace, and empty sky is 0
    np.testing.assert_allclose(on_cmb.data.value, alone.data.value, rtol=0, atol=1e-12)
    assert np.all(blank.data.value == 0)
    assert np.all(blank.brightness_temperature("planck").value == 0)
    full = _synth(_point(1.0, True), background="included")
    level = planck_cgs(np.array([5e9]), np.array([T_CMB]))[0] * full.beam_solid_angle[0].to_value(u.sr) / 1e-23
    np.testing.assert_allclose((full.data - on_cmb.data).value, level, rtol=1e-9)


# -- cuts -------------------------------------------------------------------------------------------


def test_cut_profiles_share_one_convention(slab):
    sub = slab.cut((0, 8), (15, 8), num=16)  # empty -> slab -> empty along a row
    full = slab.cut((0, 8), (15, 8), num=16, background="included")
    nu = FREQS.to_value(u.Hz)
    bg = _bb(nu, T_CMB)
    # empty end: 0 in every subtracted profile; the CMB, unattenuated, in the included ones
    assert sub.intensity.value[:, 0].tolist() == [0, 0]
    assert sub.unabsorbed_intensity.value[:, 0].tolist() == [0, 0]
    assert sub.brightness_temperature.value[:, 0].tolist() == [0, 0]
    np.testing.assert_allclose(full.intensity.value[:, 0], bg, rtol=1e-12)
    np.testing.assert_allclose(full.unabsorbed_intensity.value[:, 0], bg, rtol=1e-12)
    np.testing.assert_allclose(full.brightness_temperature.value[:, 0], T_CMB, rtol=1e-9)
    # thick centre: T_e - T_cmb and T_e (R&L eq. 1.30, sec. 1.5)
    assert sub.brightness_temperature.value[0, 8] == pytest.approx(T_E - T_CMB, rel=1e-9)
    assert full.brightness_temperature.value[0, 8] == pytest.approx(T_E, rel=1e-9)
    # the gap between full and unabsorbed is the absorption alone, the same in both conventions:
    # (B - I_bg)(1 - e^{-tau}) - B tau for a uniform slab, B tau = int j ds (R&L eq. 1.30)
    gap_sub = (sub.intensity - sub.unabsorbed_intensity).value
    gap_full = (full.intensity - full.unabsorbed_intensity).value
    np.testing.assert_allclose(gap_full, gap_sub, rtol=1e-9, atol=1e-30)
    tau = sub.tau[1, 8]
    b = _bb(nu[1:], T_E)[0]
    assert gap_sub[1, 8] == pytest.approx((b - bg[1]) * -np.expm1(-tau) - b * tau, rel=2e-3)
    assert "empty sky reads 0" in sub.describe_background()


# -- headers ---------------------------------------------------------------------------------------


def _cards(path, ext=0):
    with fits.open(path) as hdul:
        h = hdul[ext].header
        return h.get("BKGSUB"), h.get("BKGKIND"), h.get("BKGTEMP")


def test_every_fits_product_declares_the_background(slab, tmp_path):
    beam = radio_beam.Beam(2.0 * u.arcsec)
    files = {}
    for quantity in ("intensity", "tau", "emission_measure", "brightness_temperature"):
        files[quantity] = write_result(slab, tmp_path / f"{quantity}.fits", quantity=quantity)
    files["intensity_full"] = write_result(slab, tmp_path / "full.fits", background="included")
    files["tb_full"] = write_result(
        slab, tmp_path / "tbf.fits", quantity="brightness_temperature", background="included"
    )
    files["sky"] = slab.observe(beam).write_fits(tmp_path / "sky.fits")
    files["sky_full"] = slab.observe(beam, background="included").write_fits(tmp_path / "skyf.fits")
    for name, path in files.items():
        sub, kind, temp = _cards(path)
        assert kind == "CMB" and temp == pytest.approx(T_CMB, rel=1e-12), name
        assert sub is (not name.endswith("_full")), name
    # the included T_b file reads T_e at the thick centre and T_cmb on empty sky; the subtracted one 0
    with fits.open(files["tb_full"]) as hdul:
        np.testing.assert_allclose(hdul[0].data[1, 0, :], T_CMB, rtol=1e-6)
    with fits.open(files["brightness_temperature"]) as hdul:
        assert np.all(hdul[0].data[:, 0, :] == 0)


def test_synthesis_and_comparison_files_declare_it(tmp_path):
    sm = _synth(_point(1.0, True))
    for image in ("restored", "dirty", "residual", "components"):
        assert _cards(sm.write_fits(tmp_path / f"{image}.fits", image=image)) == (True, "CMB", T_CMB)
    # a comparison against the map itself: its file carries the model's background
    cmp = rtrace.compare(_point(1.0, True), sm.write_fits(tmp_path / "obs.fits"))
    assert _cards(cmp.write_fits(tmp_path / "cmp.fits")) == (True, "CMB", T_CMB)


def test_included_model_file_is_read_back_subtracted(slab, tmp_path):
    # a model written with the background in it is compared without it (BKGSUB = F, BKGTEMP)
    from rtrace.comparison.model import model_cube

    a = model_cube(write_result(slab, tmp_path / "s.fits"))
    b = model_cube(write_result(slab, tmp_path / "f.fits", background="included"))
    np.testing.assert_allclose(b.data, a.data, rtol=1e-5, atol=1e-7 * np.abs(a.data).max())
    assert b.background == Background("cmb", T_CMB)


def test_header_cards_without_a_temperature():
    cards = header_cards("included", Background("intensity", None))
    assert [c[0] for c in cards] == ["BKGSUB", "BKGKIND"] and cards[0][1] is False
    assert all(len(c[0]) <= 8 for c in header_cards("subtracted", Background("cmb", T_CMB)))
