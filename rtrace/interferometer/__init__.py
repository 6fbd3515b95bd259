"""Synthetic aperture-synthesis observations: antenna arrays, (u, v) tracks, CLEAN images.

::

    import astropy.units as u, rtrace
    sm = rtrace.interferometer.synthesize(
        result, antennas="examples/antennas/compact_y8.txt", latitude=-30 * u.deg,
        hour_angle_range=(-4, 4) * u.hourangle, weighting="robust", robust=0.5)
    sm.data                      # restored image, Jy per clean beam (a SkyMap) on the array's grid
    sm.beam                      # fitted clean beam (radio_beam.Beam)
    sm.largest_angular_scale     # 0.6 lambda / B_min per frequency
    sm.u, sm.v                   # uv coverage in wavelengths
    sm.write_fits("synth.fits")

Modules: :mod:`.array` (antenna files, baselines, (u, v, w) tracks),
:mod:`.sampling` (primary beam, exact Fourier sampling of the model),
:mod:`.grid` (the synthesized image's grid and the default hour-angle
step), :mod:`.imaging` (weights, dirty image and beam), :mod:`.clean`
(Högbom CLEAN, clean-beam fit, restoration), :mod:`.synthesis`
(``synthesize``).
"""

from .array import read_antennas, write_antennas
from .synthesis import SynthesisWarning, SynthesizedMap, synthesize

__all__ = ["synthesize", "read_antennas", "write_antennas", "SynthesizedMap", "SynthesisWarning"]
