"""The orthographic camera: where rays start, which way they go, how pixels map to the sky.

Conventions (part of the public contract): ``los`` is the direction in which
rays travel, the observer sits at +infinity along ``los``. ``north``,
projected perpendicular to ``los``, is the image's row axis (row index grows
toward north). The column axis is ``north x los``, toward sky west, so east
is on the left when the image is displayed (standard sky orientation) and a
FITS header has ``CDELT1 < 0``. Images have shape ``(nfreq, ny, nx)``;
``width`` is the extent along the column axis; pixels are square.
"""

import numbers

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord

from ..errors import InputError

__all__ = ["View"]


def _unit_vector(value, name):
    vec = np.asarray(value, dtype=float).reshape(-1)
    if vec.shape != (3,) or not np.all(np.isfinite(vec)):
        raise InputError(f"{name}: expected three finite numbers, got {value!r}")
    norm = np.linalg.norm(vec)
    if norm == 0:
        raise InputError(f"{name}: the zero vector has no direction")
    return vec / norm


def _image_size(npix):
    """``(ny, nx)`` from an int or a pair of ints; floats (2.7 would be truncated) and bools are refused."""
    values = [npix] if np.ndim(npix) == 0 else list(np.asarray(npix, dtype=object).reshape(-1))
    if np.ndim(npix) > 1 or len(values) != (1 if np.ndim(npix) == 0 else 2):
        raise InputError(f"npix: expected an int or a pair (ny, nx) of ints, got {npix!r}")
    for v in values:
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, numbers.Integral):
            raise InputError(f"npix: expected whole numbers of pixels (int), got {v!r} in {npix!r}")
        if v < 1:
            raise InputError(f"npix: image size must be positive, got {npix!r}")
    ny, nx = (int(values[0]),) * 2 if len(values) == 1 else (int(values[0]), int(values[1]))
    return ny, nx


class View:
    """An orthographic view of a snapshot.

    Parameters
    ----------
    los : sequence of 3 floats
        Direction in which rays travel (toward the observer).
    north : sequence of 3 floats
        Direction that appears as up (north) in the image; its component
        along ``los`` is discarded. Must not be parallel to ``los``.
    npix : int or (int, int)
        Image size; an int gives a square image, a pair is ``(ny, nx)``.
    width : `~astropy.units.Quantity`
        Physical extent of the image along its column axis (length).
        ``None`` (default) fits the whole projected box.
    distance : `~astropy.units.Quantity`
        Distance from the observer to the source (length).
    center : `~astropy.units.Quantity` (3,), optional
        Point of the snapshot on the image centre; defaults to the snapshot's centre.
    sky_position : `~astropy.coordinates.SkyCoord`, optional
        Sky coordinates of the image centre (used for WCS).

    Raises
    ------
    InputError
        Before any tracing: directions that are not three finite numbers,
        ``npix`` that is not a positive int or pair of ints (floats such as
        2.7 and bools are refused, not truncated), a ``width`` or
        ``distance`` that is not one finite positive length, a ``center``
        with NaN or inf coordinates.
    """

    def __init__(
        self, los=(0, 0, 1), north=(0, 1, 0), npix=256, width=None, distance=1 * u.kpc, center=None, sky_position=None
    ):
        self.los = _unit_vector(los, "los")
        north = _unit_vector(north, "north")
        perp = north - np.dot(north, self.los) * self.los
        if np.linalg.norm(perp) < 1e-8:
            raise InputError("north: parallel to los, so the image orientation is undefined")
        self.north = perp / np.linalg.norm(perp)
        self.west = np.cross(self.north, self.los)  # column axis: north x los
        self.shape = _image_size(npix)
        self.width = None if width is None else self._length(width, "width")
        if self.width is not None and not (
            self.width.ndim == 0 and np.isfinite(self.width.to_value(u.cm)) and self.width.to_value(u.cm) > 0
        ):
            raise InputError(f"width: must be one finite positive length, got {width}")
        self.distance = self._length(distance, "distance")
        if not (
            self.distance.ndim == 0 and np.isfinite(self.distance.to_value(u.cm)) and self.distance.to_value(u.cm) > 0
        ):
            raise InputError(f"distance: must be one finite positive length, got {distance}")
        if center is not None:
            center = self._length(center, "center")
            if center.shape != (3,):
                raise InputError(f"center: expected a 3-vector of lengths, got shape {center.shape}")
            n_bad = int(np.count_nonzero(~np.isfinite(center.value)))
            if n_bad:
                raise InputError(
                    f"center: {n_bad} of 3 coordinates are not finite (NaN or inf), got {center}; "
                    "a non-finite centre puts every ray off the grid"
                )
        self.center = center
        if sky_position is not None and not isinstance(sky_position, SkyCoord):
            raise InputError("sky_position: expected an astropy SkyCoord")
        self.sky_position = sky_position

    @staticmethod
    def _length(value, name):
        try:
            q = u.Quantity(value)
        except (TypeError, ValueError):
            raise InputError(
                f"{name}: expected a length (an astropy Quantity such as 3 * u.pc), got {value!r}"
            ) from None
        if not np.isrealobj(q.value) or q.dtype.kind not in "fiu":
            raise InputError(f"{name}: expected real numbers, got dtype {q.dtype}")
        if not q.unit.is_equivalent(u.cm):
            raise InputError(f"{name}: expected a length, got unit '{q.unit}'")
        return q.to(u.cm)

    def describe(self):
        """One-line description for provenance."""
        w = "fit" if self.width is None else f"{self.width.to_value(u.pc):.6g} pc"
        return (
            f"los=({', '.join(f'{v:.6g}' for v in self.los)}) "
            f"north=({', '.join(f'{v:.6g}' for v in self.north)}) "
            f"npix={self.shape[0]}x{self.shape[1]} width={w} "
            f"distance={self.distance.to_value(u.pc):.6g} pc"
        )

    def resolve(self, snapshot):
        """Pixel geometry for ``snapshot``: ``(center_cm (3,), pixel_size_cm)``.

        With ``width=None`` the image fits the box's projection on both axes.
        """
        lo = snapshot.origin
        hi = snapshot.origin + np.asarray(snapshot.shape) * snapshot.cell_size
        center = (lo + hi) / 2 if self.center is None else self.center.to_value(u.cm)
        if self.width is not None:
            return center, self.width.to_value(u.cm) / self.shape[1]
        corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])]) - center
        half_w = np.max(np.abs(corners @ self.west))
        half_n = np.max(np.abs(corners @ self.north))
        return center, max(2 * half_w / self.shape[1], 2 * half_n / self.shape[0])

    @staticmethod
    def _along_axis(vec, tol=1e-12):
        ax = int(np.argmax(np.abs(vec)))
        if abs(abs(vec[ax]) - 1.0) > tol:
            return None
        return ax, 1 if vec[ax] > 0 else -1

    def los_axis(self):
        """``(axis, sign)`` if the line of sight lies along a grid axis, else None."""
        return self._along_axis(self.los)
