"""The shared colour scales of a series' pictures.

:func:`view_ranges` measures the value range of every pictured quantity of
one traced view; :func:`series_limits` turns the ranges of all the
snapshots of a series into one ``vmin``/``vmax`` per quantity.
"""

import astropy.units as u
import numpy as np

from ..analysis.spectra import THIN_SPECTRAL_INDEX
from .products import PICTURES

__all__ = ["series_limits", "view_ranges"]


def view_ranges(res, sky, nfreq):
    """Value ranges of every pictured quantity of one view, in the unit the picture draws.

    The planes come from the plotting module's own extraction, so the ranges
    are exactly those of the drawn images (background-subtracted Jy/pixel,
    Jy/beam with noise, Planck or Rayleigh-Jeans brightness temperatures, the
    S/N-blanked spectral index).
    """
    from ..analysis.spectra import middle_frequency_index
    from ..plot.core import plane_of

    ranges = {}
    for stem, q, observed in PICTURES:
        if observed and sky is None:
            continue
        obj = sky if observed else res
        if q == "tau_unity_frequency":
            if nfreq < 2:
                continue
            # the automatic scale is the traced range (pixels outside it are named, not
            # stretched onto the scale): series sharing frequencies share it
            ghz = res.frequencies.to_value(u.GHz)
            ranges[stem] = {"min": float(ghz.min()), "max": float(ghz.max()), "unit": "GHz"}
            continue
        if q == "spectral_index":
            if nfreq < 2:
                continue
            nu = res.frequencies
            planes = [plane_of(obj, q, (nu[0], nu[-1]))]
        elif q == "tau":
            planes = [plane_of(obj, q, middle_frequency_index(res))]  # the one map the picture shows
        elif q == "emission_measure":
            planes = [plane_of(obj, q, None)]
        else:
            planes = [plane_of(obj, q, i) for i in range(nfreq)]  # every panel of the picture
        # a plane's unit is a Unit, or a Quantity such as 1e-3 Jy/beam for prefixed intensities
        unit = (1 * planes[0].unit).unit
        values = []
        for plane in planes:
            scale = (1 * plane.unit).to_value(unit)
            finite = np.asarray(plane.values, float)
            values.append(finite[np.isfinite(finite)] * scale)
        values = np.concatenate(values)
        if values.size == 0:
            continue
        if q == "spectral_index":  # the automatic index scale uses percentiles: outliers ignored
            lo, hi = np.percentile(values, 1), np.percentile(values, 99)
        else:
            lo, hi = values.min(), values.max()
        ranges[stem] = {"min": float(lo), "max": float(hi), "unit": unit.to_string()}
    return ranges


def series_limits(all_ranges):
    """``{quantity: {"vmin", "vmax", "unit"}}`` covering every snapshot's range.

    The ends follow the rules of an automatic scale applied to the union of
    the images (non-negative quantities start at zero; the spectral index is
    kept within +-4), so that a series of one gives the picture it would get
    alone. The spectral index's scale is symmetric about the thin value
    (-0.1); the tau = 1 frequency's spans the traced frequencies.
    """
    limits = {}
    for stem, q, _ in PICTURES:
        entries = [r[stem] for r in all_ranges if r and stem in r]
        if not entries:
            continue
        unit = u.Unit(entries[0]["unit"])
        lo = min(u.Quantity(e["min"], e["unit"]).to_value(unit) for e in entries)
        hi = max(u.Quantity(e["max"], e["unit"]).to_value(unit) for e in entries)
        if q == "spectral_index":
            # symmetric about the thin value, as the automatic index scale is
            half = min(max(THIN_SPECTRAL_INDEX - lo, hi - THIN_SPECTRAL_INDEX, 0.05), 4.0)
            vmin, vmax = THIN_SPECTRAL_INDEX - half, THIN_SPECTRAL_INDEX + half
        elif q == "tau_unity_frequency":
            vmin, vmax = lo, hi if hi > lo else lo * 1.01  # a log scale of frequencies: no zero
        else:
            vmin, vmax = min(0.0, lo), hi
            if vmax <= vmin:
                vmax = vmin + 1.0  # blank images everywhere still get a valid scale
        limits[stem] = {"vmin": vmin, "vmax": vmax, "unit": unit.to_string()}
    return limits
