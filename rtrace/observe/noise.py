"""Image-plane noise correlated over the beam.

Thermal receiver noise in a synthesised or single-dish image is Gaussian and
correlated over a beam (common practice: white noise seen through the same
beam as the sky). Here unit white Gaussian noise is drawn on the whole padded
FFT grid of a :class:`~rtrace.observe.beam.BeamKernel`, convolved circularly
with the unit-sum kernel (so it is stationary, edges included) and scaled by
``rms / sqrt(sum kernel^2)``: the variance of white noise convolved with a
kernel is the noise variance times the sum of the squared kernel weights, so
the expected mean square of every output pixel is exactly ``rms^2``.
"""

import numpy as np

from ..errors import InputError
from ..quantities import JY_PER_BEAM, jy_per_beam

__all__ = ["noise_rms_per_frequency", "make_rng", "correlated_noise", "JY_PER_BEAM", "jy_per_beam_value"]


def jy_per_beam_value(value, name, example):
    """The value(s) of a surface-brightness Quantity in Jy/beam (a plain flux density is read as per beam).

    ``example`` is shown in the error for a value without units (e.g. ``"50 * u.uJy / u.beam"``); see
    :func:`rtrace.quantities.jy_per_beam`.
    """
    return jy_per_beam(value, name, example).to_value(JY_PER_BEAM)


def noise_rms_per_frequency(noise, nfreq):
    """Validate ``noise`` and return the rms per frequency (Jy/beam, plain floats).

    Parameters
    ----------
    noise : None or `~astropy.units.Quantity`
        rms per beam, a scalar or one value per frequency, in Jy/beam (a
        plain flux density such as ``u.uJy`` is read as per beam).
    nfreq : int
        Number of frequencies.

    Returns
    -------
    ndarray (nfreq,) or None
    """
    if noise is None:
        return None
    rms = jy_per_beam_value(noise, "noise", "50 * u.uJy / u.beam")
    rms = np.atleast_1d(np.asarray(rms, float))
    if rms.ndim != 1:
        raise InputError(f"noise: expected a scalar or one value per frequency, got shape {noise.shape}")
    if rms.size == 1:
        rms = np.full(nfreq, rms[0])
    elif rms.size != nfreq:
        raise InputError(f"noise: got {rms.size} rms values for {nfreq} frequencies")
    bad = ~np.isfinite(rms) | (rms < 0)
    if bad.any():
        raise InputError(f"noise: rms must be finite and non-negative; {int(bad.sum())} value(s) are not")
    return rms


def make_rng(seed):
    """A numpy Generator from ``seed``, and the integer seed that reproduces it.

    Parameters
    ----------
    seed : None or int
        ``None`` draws fresh entropy; it is returned so the noise can be
        reproduced later from the provenance.

    Returns
    -------
    (`numpy.random.Generator`, int)
    """
    if seed is None:
        seed = int(np.random.SeedSequence().entropy)
    elif isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)):
        raise InputError(f"seed: expected None or a non-negative integer, got {seed!r}")
    elif seed < 0:
        raise InputError(f"seed: must be non-negative, got {seed}")
    seed = int(seed)
    return np.random.default_rng(seed), seed


def correlated_noise(kernel, rms, rng):
    """Gaussian noise images with the given rms, correlated by ``kernel``.

    Parameters
    ----------
    kernel : `~rtrace.observe.beam.BeamKernel`
        The beam on the image grid.
    rms : ndarray (n,)
        Target rms per image (Jy/beam).
    rng : `numpy.random.Generator`

    Returns
    -------
    ndarray (n, ny, nx)
        Noise in Jy/beam; independent between the ``n`` images (bands).
    """
    rms = np.asarray(rms, float)
    out = np.empty((len(rms),) + kernel.image_shape)
    scale = 1.0 / np.sqrt(kernel.sum_squares)
    for i, r in enumerate(rms):
        if r == 0:
            out[i] = 0.0
            continue
        white = rng.standard_normal(kernel.fft_shape)
        out[i] = kernel.convolve_periodic(white) * (r * scale)
    return out
