"""What a synthesis image is made of, in three frozen records: the array's track, the (u, v) data and the imaging.

:class:`~rtrace.interferometer.SynthesizedMap` takes one of each (built by
:func:`~rtrace.interferometer.synthesize`) and offers their fields as its own read-only attributes.
"""

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from ..observe.noise import JY_PER_BEAM

__all__ = ["ArrayTrack", "UVData", "Imaging"]


def _set(record, name, value):
    object.__setattr__(record, name, value)  # a frozen dataclass normalises its own fields once


@dataclass(frozen=True, eq=False)
class ArrayTrack:
    """The array and the part of the sky's track it observed.

    Attributes
    ----------
    antennas : `~astropy.units.Quantity` (n, 3)
        East, north, up positions (m).
    baselines : ndarray (nb, 2)
        Antenna indices of each baseline.
    latitude, declination : `~astropy.units.Quantity`
        The array's latitude and the source's declination.
    hour_angles : `~astropy.units.Quantity`
        Hour angles sampled (those above the minimum elevation).
    shortest_baseline, longest_baseline : `~astropy.units.Quantity`
        Extremes of the projected baseline length over the observation (m).
    largest_angular_scale : `~astropy.units.Quantity` (nfreq,)
        ``0.6 lambda / B_min`` (arcsec, common practice).
    """

    antennas: u.Quantity
    baselines: np.ndarray
    latitude: u.Quantity
    declination: u.Quantity
    hour_angles: u.Quantity
    shortest_baseline: u.Quantity
    longest_baseline: u.Quantity
    largest_angular_scale: u.Quantity


@dataclass(frozen=True, eq=False)
class UVData:
    """The samples: where, what and how much each counts.

    Attributes
    ----------
    uvw : `~astropy.units.Quantity` (nvis, 3)
        Baseline coordinates in metres: all samples (hour angle first, then baseline), then their
        mirror images ``(-u, -v, -w)``.
    visibilities : ndarray (nfreq, nvis) complex
        Model visibilities (Jy), in the order of ``uvw``.
    weights : ndarray (nfreq, nvis)
        Imaging weights, normalised to sum 1 at each frequency.
    """

    uvw: u.Quantity
    visibilities: np.ndarray
    weights: np.ndarray


@dataclass(frozen=True, eq=False)
class Imaging:
    """The images CLEAN worked on and the settings it worked with.

    Attributes
    ----------
    dirty_image, residual : ndarray (nfreq, ny, nx)
        Jy per dirty beam.
    clean_components : ndarray (nfreq, ny, nx)
        Jy/pixel.
    dirty_beam : ndarray (nfreq, 2 ny, 2 nx)
        Point-spread function, peak 1 at index ``[:, ny, nx]``.
    primary_beam : ndarray (nfreq, ny, nx) or None
        Power pattern that attenuated the model (None without a dish diameter).
    clean_iterations : ndarray (nfreq,) of int
    clean_thresholds : `~astropy.units.Quantity` (nfreq,)
        Threshold used at each frequency (Jy/beam).
    weighting : str
    robust : float or None
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a pixel of the synthesized grid.
    """

    dirty_image: np.ndarray
    residual: np.ndarray
    clean_components: np.ndarray
    dirty_beam: np.ndarray
    primary_beam: np.ndarray | None
    clean_iterations: np.ndarray
    clean_thresholds: u.Quantity
    weighting: str
    robust: float | None
    pixel_scale: u.Quantity

    def __post_init__(self):
        for name in ("dirty_image", "residual", "clean_components", "dirty_beam"):
            _set(self, name, np.asarray(getattr(self, name), float))
        _set(self, "clean_iterations", np.asarray(self.clean_iterations, int))
        _set(self, "clean_thresholds", u.Quantity(self.clean_thresholds, JY_PER_BEAM))
        _set(self, "pixel_scale", u.Quantity(self.pixel_scale).to(u.arcsec))
