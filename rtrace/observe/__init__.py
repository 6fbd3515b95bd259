"""From traced intensity to what a telescope records: beam convolution, noise, the SkyMap.

::

    from rtrace.observe import observe
    sky = observe(result, beam=radio_beam.Beam(major=2 * u.arcsec, minor=1 * u.arcsec, pa=30 * u.deg),
                  noise=20 * u.uJy / u.beam, seed=1)
    sky.data, sky.model          # Jy/beam
"""

from .beam import BeamKernel, beams_for_frequencies
from .noise import correlated_noise
from .skymap import SkyMap, observe

__all__ = ["observe", "SkyMap", "BeamKernel", "beams_for_frequencies", "correlated_noise"]
