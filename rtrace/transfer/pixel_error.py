"""PixelError: how accurately a trace computed each pixel's footprint mean (:func:`rtrace.trace`, ``tolerance``)."""

from collections import namedtuple

__all__ = ["PixelError"]


class PixelError(namedtuple("PixelError", "max_relative supersample tolerance floor converged")):
    """How accurately each pixel's footprint mean was computed.

    Attributes
    ----------
    max_relative : float
        Largest relative error estimate over the intensity (per frequency,
        background subtracted) and emission-measure images, over pixels whose
        absolute value is at least ``floor`` times the image's peak. On an
        oblique view traced by the split (:mod:`rtrace.transfer.oblique_split`)
        it is the remainder's estimated quadrature error (the emission
        measure and optical depth are exact there); otherwise twice
        ``|X_s - X_2s| / |X_2s|`` between the returned lattice
        (``supersample`` rays per cell, ``X_2s``) and one half as dense.
        0.0 on axis-aligned views (exact) and NaN where no estimate was
        made (an oblique view traced without ``tolerance``).
    supersample : int
        Rays per cell side of the returned image's finest lattice (with the
        split, used only in the blocks of pixels that needed it).
    tolerance : float or None
        What was asked for (None: no ``tolerance``, or ``supersample`` given explicitly).
    floor : float
        Pixels fainter than this fraction of the peak are not checked.
    converged : bool
        Whether ``max_relative <= tolerance`` was reached (True on axis-aligned views).
    """

    __slots__ = ()

    def describe(self):
        """One line for provenance and FITS headers."""
        if self.tolerance is None:
            return f"not estimated (supersample={self.supersample}, no tolerance asked)"
        state = "met" if self.converged else "NOT met"
        return (
            f"max relative {self.max_relative:.3g} at supersample={self.supersample} "
            f"(tolerance {self.tolerance:g} {state}; pixels above {self.floor:g} of the peak)"
        )
