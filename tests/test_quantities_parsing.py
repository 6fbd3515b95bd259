"""The parsing layer at the API boundary (rtrace.quantities) and Result's one Jy-per-pixel conversion."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from rtrace.errors import ConfigError, InputError
from rtrace.quantities import JY_PER_BEAM, CellTally, check_cells, jy_per_beam, parse_frequencies
from rtrace.transfer.result import Result
from rtrace.transfer.view import View

# ---------------------------------------------------------------------------------------------
# frequencies
# ---------------------------------------------------------------------------------------------


def test_frequencies_in_any_spectral_unit():
    # Units and the spectral equivalency from astropy (common practice): nu = c / lambda, nu = E / h.
    nu = parse_frequencies([1, 5] * u.GHz)
    assert nu.dtype == np.float64 and nu.shape == (2,)
    np.testing.assert_array_equal(nu, [1e9, 5e9])
    lam = parse_frequencies(21 * u.cm)
    np.testing.assert_allclose(lam, [const.c.to_value(u.cm / u.s) / 21.0], rtol=1e-15)
    energy = parse_frequencies(1 * u.eV, scalar=True)
    assert energy == pytest.approx((1 * u.eV).to_value(u.J) / const.h.to_value(u.J * u.s), rel=1e-15)
    assert parse_frequencies("5 GHz", scalar=True) == 5e9
    # a list mixing units, as a command line or job file gives it: each item converted on its own
    np.testing.assert_allclose(
        parse_frequencies(["1 GHz", "21 cm", 3 * u.MHz]), [1e9, const.c.to_value(u.cm / u.s) / 21.0, 3e6], rtol=1e-15
    )


@pytest.mark.parametrize(
    "value, words",
    [
        (5 * u.K, "expected a frequency (or wavelength), got unit 'K'"),
        ("not a frequency", "expected a frequency"),
        (np.ones((2, 2)) * u.GHz, "1D sequence"),
        ([] * u.GHz, "1D sequence"),
        ([1.0, 0.0, -2.0] * u.GHz, "2 of 3 are not"),
        ([1.0, np.nan] * u.GHz, "1 of 2 are not"),
        (0 * u.cm, "1 of 1 are not"),
    ],
)
def test_bad_frequencies_name_the_argument_and_count(value, words):
    with pytest.raises(InputError, match="^nu: ") as err:
        parse_frequencies(value, "nu")
    assert words in str(err.value)


def test_one_frequency():
    with pytest.raises(InputError, match="reference_frequency: expected a single frequency"):
        parse_frequencies([1, 2] * u.GHz, "reference_frequency", scalar=True)
    with pytest.raises(InputError, match="reference_frequency: must be finite and positive"):
        parse_frequencies(-1 * u.GHz, "reference_frequency", scalar=True)
    with pytest.raises(InputError, match="reference_frequency: must be finite and positive"):
        parse_frequencies(np.inf * u.GHz, "reference_frequency", scalar=True)


def test_frequency_errors_take_the_callers_class():
    with pytest.raises(ConfigError, match=r"\[frequencies\]"):
        parse_frequencies(3 * u.m / u.s, "[frequencies]", error=ConfigError)


# ---------------------------------------------------------------------------------------------
# Jy/beam
# ---------------------------------------------------------------------------------------------


def test_a_bare_jansky_means_per_beam():
    # Common practice: a radio image's or noise level's "Jy" means Jy per beam (FITS BUNIT often omits it).
    assert jy_per_beam(50 * u.uJy, "noise").to_value(JY_PER_BEAM) == pytest.approx(5e-5, rel=1e-15)
    assert jy_per_beam(2 * u.mJy / u.beam, "noise").to_value(JY_PER_BEAM) == pytest.approx(2e-3, rel=1e-15)
    assert jy_per_beam("0.1 mJy", "noise").unit == u.mJy / u.beam
    np.testing.assert_allclose(jy_per_beam([1, 2] * u.Jy, "rms").to_value(JY_PER_BEAM), [1, 2])


@pytest.mark.parametrize(
    "value, words",
    [
        (0.1, "expected a Quantity in Jy/beam (e.g. 1 * u.mJy / u.beam)"),
        (0.1 * u.dimensionless_unscaled, "expected a Quantity in Jy/beam"),
        (3 * u.K, "expected Jy/beam, got unit 'K'"),
        (1 * u.Jy / u.sr, "expected Jy/beam, got unit 'Jy / sr'"),
        ("loud", "cannot read 'loud'"),
    ],
)
def test_bad_surface_brightness(value, words):
    with pytest.raises(InputError, match="^threshold: ") as err:
        jy_per_beam(value, "threshold", "1 * u.mJy / u.beam")
    assert words in str(err.value)
    with pytest.raises(ConfigError, match="threshold"):
        jy_per_beam(value, "threshold", error=ConfigError)


# ---------------------------------------------------------------------------------------------
# per-cell validation
# ---------------------------------------------------------------------------------------------


def _bad_field(rng):
    arr = rng.uniform(1.0, 2.0, (6, 7, 8))
    arr.flat[[3, 50, 200]] = [np.nan, np.inf, -np.inf]
    arr.flat[[10, 11]] = [-3.0, 0.0]
    return arr


def test_streamed_blocks_count_as_the_whole_array():
    arr = _bad_field(np.random.default_rng(1))
    whole = CellTally("temperature", 0.0, strict=True)
    assert not whole.add(arr)
    streamed = CellTally("temperature", 0.0, strict=True)
    for block in np.array_split(arr.ravel(), 7):
        streamed.add(block)
    for tally in (whole, streamed):
        # counted directly here: 3 not finite, and -3 and 0 violate T > 0
        assert (tally.size, tally.nonfinite, tally.low, tally.high, tally.bad) == (336, 3, 2, 0, 5)
        assert tally.min == -3.0 and tally.max == np.max(arr[np.isfinite(arr)])
    assert (
        whole.message()
        == streamed.message()
        == ("temperature: 3 of 336 cells are not finite (NaN or inf) and 2 violate temperature > 0 (minimum -3)")
    )
    with pytest.raises(InputError, match=r"^temperature: 3 of 336 cells"):
        streamed.raise_if_bad()


def test_bounds_rules_and_context():
    arr = np.array([0.0, 0.5, 1.0, 1.5, -0.25, np.nan])
    # 0 is allowed (not strict), 1.5 and -0.25 are outside, the NaN is counted apart
    tally = CellTally("fraction", 0.0, upper=1.0, where="of brick [0:6]", context=", in dataset 'x'")
    assert not tally.add(arr)
    assert (tally.low, tally.high, tally.nonfinite) == (1, 1, 1)
    assert tally.message() == (
        "fraction: 1 of 6 cells of brick [0:6] are not finite (NaN or inf) and 2 violate "
        "0 <= fraction <= 1 (minimum -0.25, maximum 1.5), in dataset 'x'"
    )
    good = CellTally("density", 0.0)
    assert good.add(np.zeros(4)) and good.ok and good.message() is None
    good.raise_if_bad()  # nothing to report


def test_check_cells_whole_arrays():
    check_cells(np.ones(5), "density", 0.0)
    with pytest.raises(InputError, match=r"^density: 1 of 5 cells violate density >= 0 \(minimum -1\)$"):
        check_cells(np.array([1.0, 2.0, -1.0, 0.0, 3.0]), "density", 0.0)
    with pytest.raises(InputError, match=r"^pressure: 1 of 3 cells violate pressure > 0 \(minimum 0\)$"):
        check_cells(np.array([1.0, 0.0, 2.0]), "pressure", 0.0, strict=True)
    with pytest.raises(InputError, match=r"^x: 2 of 3 cells are not finite \(NaN or inf\)$"):
        check_cells(np.array([np.nan, 1.0, np.inf]), "x")
    with pytest.raises(InputError, match=r"^T: 1 of 2 cells violate T >= 0 K"):
        check_cells(np.array([1.0, -5.0]), "T", 0.0, rule="T >= 0 K")


def test_an_empty_block_changes_nothing():
    tally = CellTally("density", 0.0)
    assert tally.add(np.zeros(0))
    assert (tally.size, tally.min, tally.max) == (0, np.inf, -np.inf)


# ---------------------------------------------------------------------------------------------
# Result.jy_per_pixel
# ---------------------------------------------------------------------------------------------


def _result(background=None):
    rng = np.random.default_rng(4)
    nu = np.array([1e9, 5e9])
    img = rng.uniform(0.0, 1e-15, (2, 3, 4))
    view = View(npix=(3, 4), width=0.4 * u.pc, distance=2 * u.kpc)
    return Result(
        img,
        np.zeros_like(img),
        np.zeros((3, 4)),
        nu,
        view,
        0.1 * u.pc.to(u.cm),
        np.zeros(3),
        {"source": "test"},
        background=background,
    )


def test_jy_per_pixel_is_intensity_times_pixel_solid_angle():
    # S = I Omega_pix, converted by astropy (definition of the jansky, 1e-26 W m-2 Hz-1).
    res = _result(background=np.array([1e-17, 2e-17]))
    for convention in ("subtracted", "included"):
        expected = (res.specific_intensity(convention) * res.pixel_solid_angle).to(u.Jy)
        got = res.jy_per_pixel(convention)
        assert got.unit == u.Jy and got.shape == (2, 3, 4)
        np.testing.assert_allclose(got.value, expected.value, rtol=1e-14)
        np.testing.assert_allclose(res.flux_density(convention).value, got.value.sum(axis=(1, 2)), rtol=1e-14)
    # the background is I_bg Omega_pix on each pixel
    delta = res.jy_per_pixel("included") - res.jy_per_pixel("subtracted")
    np.testing.assert_allclose(
        delta.value[:, 0, 0],
        ([1e-17, 2e-17] * u.erg / (u.s * u.cm**2 * u.Hz * u.sr) * res.pixel_solid_angle).to_value(u.Jy),
        rtol=1e-12,
    )


def test_jy_per_pixel_refuses_non_finite_pixels_on_request():
    res = _result()
    res._intensity[1, 2, 3] = np.nan
    assert np.isnan(res.jy_per_pixel().value[1, 2, 3])
    with pytest.raises(InputError, match=r"result: intensity has 1 non-finite pixel value"):
        res.jy_per_pixel(require_finite=True)
