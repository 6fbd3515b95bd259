"""The files a run makes of one traced view, and how each is written or drawn.

:func:`data_outputs` plans a unit's FITS cubes and SED files and
:func:`picture_outputs` its pictures; each is an :class:`Output` (path,
inputs key, and the function that writes it from the traced `Result` and
the observed `SkyMap`). Files are named ``<folder>/<prefix><view>_<suffix>``.

Names say what a file holds, and a picture and a FITS file of the same stem
hold the same product: the model (the traced `Result`: unconvolved,
noiseless, Jy/pixel) is ``<view>_intensity``, ``_tau``,
``_emission_measure``, ``_brightness_temperature``, ``_sed`` and
``_spectral_index``; the observed map (the `SkyMap`: beam-convolved, with
noise, Jy/beam) is ``<view>_observed``, ``_observed_sed`` and
``_observed_spectral_index``, made only when the job has a ``[beam]``.
"""

from dataclasses import dataclass
from functools import partial
from pathlib import Path

import astropy.units as u

from ..transfer.result import QUANTITIES
from .batch import observing_settings, output_key

__all__ = ["PICTURES", "QUANTITIES", "Output", "data_outputs", "picture_outputs"]


# (file stem, quantity drawn, drawn from the observed SkyMap); order is the order written.
# Observed pictures are made only when the job has a beam.
PICTURES = (
    ("intensity", "intensity", False),
    ("tau", "tau", False),
    ("tau_unity_frequency", "tau_unity_frequency", False),
    ("brightness_temperature", "brightness_temperature", False),
    ("emission_measure", "emission_measure", False),
    ("spectral_index", "spectral_index", False),
    ("observed", "intensity", True),
    ("observed_spectral_index", "spectral_index", True),
)

# pictures that compare frequencies, left out of a single-frequency job
_MULTI_FREQUENCY = ("tau_unity_frequency", "spectral_index")

#: What each SED file is computed from, written into its header.
SED_SOURCES = {
    False: "model: the traced image, unconvolved and noiseless (exact flux within the field)",
    True: "observed map: beam-convolved, with noise (a field-filling image loses flux at its edges)",
}


@dataclass
class Output:
    """One output of a view: where it goes, what it is made from and how it is written.

    Attributes
    ----------
    path : Path
        The output's file; for a cube written one file per plane, the path handed to the writer,
        from which the planes' names are derived.
    inputs : str
        Key of the inputs the output is made from, recorded in the manifest with each file (resume
        keeps a file only when it is unchanged and was written from the same inputs).
    make : callable
        ``make(path, res, sky)`` writes the file(s).
    files : list of Path, optional
        Every file ``make`` writes; default ``[path]``.
    """

    path: Path
    inputs: str
    make: object  # make(path, res, sky) writes the file(s)
    files: list = None  # every file make writes (a cube one file per plane); default [path]

    def __post_init__(self):
        self.files = [Path(f) for f in (self.files or [self.path])]


def _write_quantity(path, res, sky, quantity, spectral_axis="auto"):
    from ..io.fits import write_result

    write_result(res, path, quantity=quantity, spectral_axis=spectral_axis)


def _write_sky(path, res, sky, spectral_axis="auto"):
    sky.write_fits(path, spectral_axis=spectral_axis)


def _cube_files(job, path, frequencies=True):
    """The files a cube output writes: one, or one per plane for an irregular frequency list."""
    from ..io.fits import output_paths

    return output_paths(path, job.frequencies if frequencies else None, job.output.spectral_axis)


def _write_sed(path, res, sky, name, observed):
    from ..analysis.spectra import describe_background, sed, write_sed_table

    obj = sky if observed else res
    nu, flux = sed(obj)
    write_sed_table(
        path,
        nu,
        flux,
        metadata={
            "source": res.provenance.get("source", ""),
            "view": name,
            "computed from": SED_SOURCES[observed],
            "aperture": "whole image",
            "background": describe_background(obj),
        },
    )


def _draw_sed(path, res, sky, name, observed):
    from ..analysis.spectra import sed
    from ..plot import plot_sed

    nu, flux = sed(sky if observed else res)
    _close(plot_sed(nu, flux, path=path, label=f"{name} ({'observed map' if observed else 'model'})"))


def _draw_picture(path, res, sky, quantity, observed, limits):
    from ..analysis.spectra import middle_frequency_index
    from ..plot import plot_map, plot_panels, plot_tau_unity

    obj = sky if observed else res
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
        fig = plot_map(obj, quantity=quantity, frequency=middle_frequency_index(obj), path=path, stretch="log", **kw)
    elif quantity == "tau_unity_frequency":
        fig = plot_tau_unity(obj, path=path, **kw)
    else:
        fig = plot_panels(obj, quantity=quantity, path=path, **kw)
    _close(fig)


def _close(fig):
    import matplotlib.pyplot as plt

    plt.close(fig)


def _stem(job, unit, suffix):
    """``<folder>/<prefix><view>_<suffix>``, refused (OutputError) unless it lies inside the output folder."""
    from ..io.outdir import check_inside

    path = unit.folder / f"{job.output.prefix}{unit.name}_{suffix}"
    label = f", snapshot label '{unit.member.label}'" if job.series else ""
    return check_inside(path, job.output.directory, f"[output].prefix, [[view]].name '{unit.name}'{label}")


def data_outputs(job, unit, quantities, fmt):
    """``(cubes, spectra)``: the FITS outputs and the SED outputs of one view (a `rtrace.run.batch.Unit`)."""
    out, obs = job.output, observing_settings(job)
    cubes, spectra = [], []
    if out.fits:
        axis = out.spectral_axis
        for q in quantities:
            path = _stem(job, unit, f"{q}.fits")
            cubes.append(
                Output(
                    path,
                    output_key(unit.base, f"fits:{q}"),
                    partial(_write_quantity, quantity=q, spectral_axis=axis),
                    _cube_files(job, path, q != "emission_measure"),
                )
            )
        if job.beam is not None:
            path = _stem(job, unit, "observed.fits")
            cubes.append(
                Output(
                    path,
                    output_key(unit.base, "fits:observed", obs),
                    partial(_write_sky, spectral_axis=axis),
                    _cube_files(job, path),
                )
            )
    if out.sed:
        for observed in (False, True) if job.beam is not None else (False,):
            stem, settings = ("observed_sed", obs) if observed else ("sed", None)
            spectra.append(
                Output(
                    _stem(job, unit, f"{stem}.ecsv"),
                    output_key(unit.base, f"{stem}:ecsv", settings),
                    partial(_write_sed, name=unit.name, observed=observed),
                )
            )
            if out.pictures and len(job.frequencies) > 1:
                spectra.append(
                    Output(
                        _stem(job, unit, f"{stem}.{fmt}"),
                        output_key(unit.base, f"{stem}:{fmt}", settings),
                        partial(_draw_sed, name=unit.name, observed=observed),
                    )
                )
    return cubes, spectra


def picture_outputs(job, unit, fmt, limits):
    """The pictures of one view; ``limits`` are the series' colour scales of that view, or None."""
    obs = observing_settings(job)
    plan = []
    for stem, q, observed in PICTURES:
        if (q in _MULTI_FREQUENCY and len(job.frequencies) < 2) or (observed and job.beam is None):
            continue
        lim = None if limits is None else limits.get(stem)
        plan.append(
            Output(
                _stem(job, unit, f"{stem}.{fmt}"),
                output_key(unit.base, f"picture:{stem}.{fmt}", obs if observed else None, lim),
                partial(_draw_picture, quantity=q, observed=observed, limits=lim),
            )
        )
    return plan
