"""The beam chores done by radio-beam: the kernel, the header cards, equality.

References: radio-beam (``Beam.as_kernel``, ``Beam.to_header_keywords``, ``Beam.from_fits_header``,
``Beam.__eq__``) is the library checked against; the elliptical Gaussian written out below uses the
standard identity FWHM = sqrt(8 ln 2) sigma and the position angle from north (+row) through east
(-column), common practice in radio astronomy; astropy.convolution's ``mode="oversample"`` is the
midpoint rule over sub-pixels.
"""

import math

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.io import fits

from rtrace.comparison.observation import header_beam
from rtrace.errors import InputError
from rtrace.io.fits import write_cube
from rtrace.observe.beam import SAME_BEAM_RTOL, BeamKernel, beam_cards, same_beam

# (major arcsec, minor arcsec, pa deg, pixel arcsec): point-sampled and supersampled kernels,
# round and elliptical, angles in all quadrants
CASES = [
    (10, 5, 30, 1.0),
    (10, 10, 0, 1.0),
    (3, 1, 45, 2.0),
    (0.5, 0.3, 70, 1.0),
    (8, 2, -20, 0.7),
    (2, 1, 100, 1.0),
    (6, 2, 135, 1.0),
]


def _written_out(beam, pix, half, supersample):
    """The unit-sum elliptical Gaussian of ``beam`` on the grid, from its formula (the kernel before radio-beam)."""
    fwhm_per_sigma = math.sqrt(8 * math.log(2))
    s_maj = beam.major.to_value(u.arcsec) / pix / fwhm_per_sigma
    s_min = beam.minor.to_value(u.arcsec) / pix / fwhm_per_sigma
    pa = beam.pa.to_value(u.rad)
    offs = np.arange(-half, half + 1, dtype=float)
    sub = (np.arange(supersample) + 0.5) / supersample - 0.5
    kernel = np.zeros((offs.size, offs.size))
    for dr in sub:
        r = (offs + dr)[:, None]
        for dc in sub:
            c = (offs + dc)[None, :]
            along = r * math.cos(pa) - c * math.sin(pa)  # major axis along (+row, -column) rotated by pa
            across = r * math.sin(pa) + c * math.cos(pa)
            kernel += np.exp(-0.5 * ((along / s_maj) ** 2 + (across / s_min) ** 2))
    return kernel / kernel.sum()


@pytest.mark.parametrize("major, minor, pa, pix", CASES)
def test_kernel_is_radio_beam_as_kernel_and_the_gaussian_of_before(major, minor, pa, pix):
    beam = radio_beam.Beam(major=major * u.arcsec, minor=minor * u.arcsec, pa=pa * u.deg)
    k = BeamKernel(beam, pix * u.arcsec, (48, 48))
    side = 2 * k.half + 1
    assert k.kernel.shape == (side, side) and k.kernel.sum() == pytest.approx(1.0, rel=1e-12)
    # the same numbers as the Gaussian written out (the kernel rtrace sampled itself), to 1e-6 of the peak
    before = _written_out(beam, pix, k.half, k.supersample)
    assert np.max(np.abs(k.kernel - before)) <= 1e-6 * before.max()
    # radio-beam's kernel, point-sampled or averaged over sub-pixels like astropy's "oversample" mode
    kw = {"mode": "oversample", "factor": k.supersample} if k.supersample > 1 else {}
    ref = beam.as_kernel(pix * u.arcsec, x_size=side, y_size=side, **kw).array
    ref = ref / ref.sum()
    assert np.max(np.abs(k.kernel - ref)) <= 1e-6 * ref.max()


def test_kernel_fft_is_kept_and_convolves_a_point_into_the_kernel():
    beam = radio_beam.Beam(major=6 * u.arcsec, minor=3 * u.arcsec, pa=30 * u.deg)
    k = BeamKernel(beam, 1 * u.arcsec, (40, 40))
    ft = k.kernel_ft
    image = np.zeros((40, 40))
    image[20, 20] = 1.0
    out = k.convolve(image)
    assert k.kernel_ft is ft  # one transform per beam, reused by every convolution
    h = k.half
    np.testing.assert_allclose(out[20 - h : 21 + h, 20 - h : 21 + h], k.kernel, atol=1e-15)


def test_beam_cards_are_radio_beam_header_keywords_and_read_back():
    beam = radio_beam.Beam(major=12.5 * u.arcsec, minor=7.25 * u.arcsec, pa=-33 * u.deg)
    cards = beam_cards(beam)
    assert {k: v for k, v, _ in cards} == beam.to_header_keywords()
    assert all(c.startswith("[deg]") for _, _, c in cards)
    header = fits.Header()
    for key, value, comment in cards:
        header[key] = (value, comment)
    assert dict(header) == dict(beam.attach_to_header(fits.Header()))
    assert radio_beam.Beam.from_fits_header(header) == beam  # radio-beam's own equality


def test_written_cube_beam_reads_back_with_radio_beam(tmp_path):
    from astropy.coordinates import SkyCoord

    beam = radio_beam.Beam(major=20 * u.arcsec, minor=10 * u.arcsec, pa=15 * u.deg)
    path = write_cube(
        tmp_path / "c.fits",
        np.ones((2, 8, 8)) * u.Jy / u.beam,
        [1, 2] * u.GHz,
        2 * u.arcsec,
        SkyCoord(10 * u.deg, 20 * u.deg),
        beams=beam,
    )
    header = fits.getheader(path)
    assert radio_beam.Beam.from_fits_header(header) == beam
    assert header_beam(header, "obs") == beam  # rtrace's reader of observations agrees
    assert header.comments["BPA"].startswith("[deg]")


def test_header_beam_errors_name_the_card():
    header = fits.Header({"BMAJ": 1e-3})
    with pytest.raises(InputError, match="BMAJ but no BMIN"):
        header_beam(header, "obs")
    header["BMIN"], header["BPA"] = 2e-3, 0.0
    with pytest.raises(InputError, match="BMIN .* exceeds BMAJ"):
        header_beam(header, "obs")
    round_beam = header_beam(fits.Header({"BMAJ": 1e-3, "BMIN": 1e-3}), "obs")  # no BPA: a round beam
    assert round_beam == radio_beam.Beam(major=1e-3 * u.deg)


def test_same_beam_is_one_relative_rule():
    b = radio_beam.Beam(major=10 * u.arcsec, minor=5 * u.arcsec, pa=30 * u.deg)
    near = radio_beam.Beam(major=10 * (1 + 1e-9) * u.arcsec, minor=5 * u.arcsec, pa=(30 + 180) * u.deg)
    assert b == near and same_beam(b, near)  # radio-beam's equality (1e-10 deg) implies ours
    # beyond radio-beam's absolute 1e-10 deg but within the relative tolerance: the same beam here
    within = radio_beam.Beam(major=10 * (1 + 0.5 * SAME_BEAM_RTOL) * u.arcsec, minor=5 * u.arcsec, pa=30 * u.deg)
    assert b != within and same_beam(b, within)
    wider = radio_beam.Beam(major=10 * (1 + 2 * SAME_BEAM_RTOL) * u.arcsec, minor=5 * u.arcsec, pa=30 * u.deg)
    assert not same_beam(b, wider) and not same_beam(wider, b)
    turned = radio_beam.Beam(major=10 * u.arcsec, minor=5 * u.arcsec, pa=30.001 * u.deg)
    assert not same_beam(b, turned)
    # the position angle of a round beam is immaterial, modulo 180 deg for an elliptical one
    r1, r2 = (radio_beam.Beam(major=4 * u.arcsec, minor=4 * u.arcsec, pa=p * u.deg) for p in (0, 57))
    assert same_beam(r1, r2)
    e1, e2 = (radio_beam.Beam(major=4 * u.arcsec, minor=2 * u.arcsec, pa=p * u.deg) for p in (-89.99999999, 90))
    assert same_beam(e1, e2)
    # scale-free: milliarcsecond beams follow the same relative rule
    m1 = radio_beam.Beam(major=1 * u.mas, minor=1 * u.mas)
    m2 = radio_beam.Beam(major=1.0001 * u.mas, minor=1.0001 * u.mas)
    # radio-beam's absolute 1e-10 deg is 0.36 micro-arcsec: 1e-4 of these beams, beyond our tolerance
    assert m1 == m2 and not same_beam(m1, m2)
