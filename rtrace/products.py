"""The files a run makes of one traced view, and how each is written or drawn.

:func:`data_outputs` plans a unit's FITS cubes and SED files and
:func:`picture_outputs` its pictures; each is an :class:`Output` (path,
inputs key, and the function that writes it from the traced `Result` and
the observed `SkyMap`). Files are named ``<folder>/<prefix><view>_<suffix>``.
"""

from dataclasses import dataclass
from functools import partial
from pathlib import Path

import astropy.units as u

from .batch import observing_settings, output_key

__all__ = ["PICTURES", "QUANTITIES", "Output", "data_outputs", "picture_outputs"]

QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature")

# (quantity, drawn from the observed SkyMap when there is one); order is the order written
PICTURES = (("intensity", True), ("tau", False), ("tau_unity_frequency", False),
            ("brightness_temperature", False), ("emission_measure", False), ("spectral_index", True))

# pictures that compare frequencies, left out of a single-frequency job
_MULTI_FREQUENCY = ("tau_unity_frequency", "spectral_index")


@dataclass
class Output:
    path: Path
    inputs: str
    make: object                      # make(path, res, sky) writes the file


def _write_quantity(path, res, sky, quantity):
    from .io.fits import write_result
    write_result(res, path, quantity=quantity)


def _write_sky(path, res, sky):
    sky.write_fits(path)


def _write_sed(path, res, sky, name):
    from .analysis.spectra import sed, write_sed_csv
    nu, flux = sed(sky if sky is not None else res)
    write_sed_csv(path, nu, flux, metadata={"source": res.provenance.get("source", ""), "view": name,
                                            "aperture": "whole image"})


def _draw_sed(path, res, sky, name):
    from .analysis.spectra import sed
    from .plot import plot_sed
    nu, flux = sed(sky if sky is not None else res)
    _close(plot_sed(nu, flux, path=path, label=name))


def _draw_picture(path, res, sky, quantity, observed, limits):
    from .analysis.spectra import middle_frequency_index
    from .plot import plot_map, plot_panels, plot_tau_unity
    obj = sky if observed and sky is not None else res
    kw = {}
    if limits is not None:
        kw = {"vmin": u.Quantity(limits["vmin"], limits["unit"]), "vmax": u.Quantity(limits["vmax"], limits["unit"])}
    if quantity == "emission_measure":
        fig = plot_map(obj, quantity=quantity, path=path, **kw)
    elif quantity == "spectral_index":
        nu = res.frequencies
        fig = plot_map(obj, quantity=quantity, frequency=(nu[0], nu[-1]), path=path, **kw)
    elif quantity == "tau":
        # one map at the frequency nearest the geometric middle: the others only rescale it
        # (tau ~ nu^-2.1); where each line of sight turns thin is the tau = 1 frequency picture
        fig = plot_map(obj, quantity=quantity, frequency=middle_frequency_index(obj), path=path, stretch="log",
                       **kw)
    elif quantity == "tau_unity_frequency":
        fig = plot_tau_unity(obj, path=path, **kw)
    else:
        fig = plot_panels(obj, quantity=quantity, path=path, **kw)
    _close(fig)


def _close(fig):
    import matplotlib.pyplot as plt
    plt.close(fig)


def _stem(job, unit, suffix):
    return unit.folder / f"{job.output.get('prefix', '')}{unit.name}_{suffix}"


def data_outputs(job, unit, quantities, fmt):
    """``(cubes, spectra)``: the FITS outputs and the SED outputs of one view (a `rtrace.batch.Unit`)."""
    out, obs = job.output, observing_settings(job)
    cubes, spectra = [], []
    if out.get("fits", True):
        for q in quantities:
            cubes.append(Output(_stem(job, unit, f"{q}.fits"), output_key(unit.base, f"fits:{q}"),
                                partial(_write_quantity, quantity=q)))
        if job.beam:
            cubes.append(Output(_stem(job, unit, "jy_per_beam.fits"),
                                output_key(unit.base, "fits:jy_per_beam", obs), _write_sky))
    if out.get("sed", True):
        spectra.append(Output(_stem(job, unit, "sed.csv"), output_key(unit.base, "sed:csv", obs),
                              partial(_write_sed, name=unit.name)))
        if out.get("pictures", True) and len(job.frequencies) > 1:
            spectra.append(Output(_stem(job, unit, f"sed.{fmt}"), output_key(unit.base, f"sed:{fmt}", obs),
                                  partial(_draw_sed, name=unit.name)))
    return cubes, spectra


def picture_outputs(job, unit, fmt, limits):
    """The pictures of one view; ``limits`` are the series' colour scales of that view, or None."""
    obs = observing_settings(job)
    plan = []
    for q, observed in PICTURES:
        if q in _MULTI_FREQUENCY and len(job.frequencies) < 2:
            continue
        lim = None if limits is None else limits.get(q)
        plan.append(Output(_stem(job, unit, f"{q}.{fmt}"),
                           output_key(unit.base, f"picture:{q}.{fmt}", obs if observed else None, lim),
                           partial(_draw_picture, quantity=q, observed=observed, limits=lim)))
    return plan
