"""Run a validated job: build the snapshot, trace every view, observe, write every output."""

import time

import astropy.units as u

from .job import build_views

__all__ = ["run", "build_snapshot"]


def _composition(ion):
    from .physics.ionization import Composition
    if "hydrogen_mass_fraction" in ion or "helium_mass_fraction" in ion:
        return Composition(hydrogen=ion.get("hydrogen_mass_fraction", 0.70),
                           helium=ion.get("helium_mass_fraction", 0.28))
    return None


def _ionization_model(job):
    from .physics.ionization import SuppliedFraction, TemperatureThreshold, resolve_ionization

    ion = job.ionization
    comp = _composition(ion)
    model = ion.get("model", "full")
    if model == "threshold":
        kw = {} if "threshold" not in ion else {"threshold": ion["threshold"]}
        return TemperatureThreshold(composition=comp, helium=ion.get("helium", "single"), **kw)
    if model == "supplied":       # the reader fetches the named dataset (same sub-volume)
        return SuppliedFraction(ion["fraction"], composition=comp, helium=ion.get("helium", "follow"))
    return resolve_ionization(model, composition=comp, helium=ion.get("helium"))


def build_snapshot(job):
    """Load (HDF5) or build (demo) the job's snapshot."""
    snap = job.snapshot
    if snap["kind"] == "demo":
        from .demo import scenario
        return scenario(n=snap.get("cells", 64), seed=snap.get("seed", 7))
    from .io.hdf5 import read_hdf5
    kw = {k: snap[k] for k in ("electron_density", "ion_density", "density", "cell_size", "origin", "units")
          if k in snap}
    if "subvolume" in snap:
        kw["subvolume"] = tuple(tuple(p) for p in snap["subvolume"])
    if "density" in snap:
        kw["ionization"] = _ionization_model(job)
    return read_hdf5(snap["path"], temperature=snap["temperature"], **kw)


def _observe(res, job):
    import radio_beam
    b = job.beam
    beam = radio_beam.Beam(major=b["major"], minor=b.get("minor", b["major"]), pa=b.get("pa", 0 * u.deg))
    noise = job.noise.get("rms") if job.noise else None
    kw = {}
    if b.get("scaling", "none") != "none":
        kw = {"beam_scaling": b["scaling"], "reference_frequency": b.get("reference_frequency")}
    return res.observe(beam=beam, noise=noise, seed=job.noise.get("seed") if job.noise else None, **kw)


def run(job, progress=None):
    """Execute ``job``; returns the paths written, in order."""
    from . import trace
    from .analysis.spectra import sed, write_sed_csv
    from .io.fits import write_result

    say = progress or (lambda step, total, message: None)
    out = job.output
    quantities = out.get("quantities", ["intensity", "tau", "emission_measure", "brightness_temperature"])
    fmt = out.get("picture_format", "png")
    views = build_views(job)
    steps_per_view = 4
    total = 1 + steps_per_view * len(views)
    say(0, total, "building the snapshot")
    snap = build_snapshot(job)
    out["directory"].mkdir(parents=True, exist_ok=True)
    written = []
    for k, (name, view) in enumerate(views):
        step = 1 + k * steps_per_view
        stem = out["directory"] / f"{out.get('prefix', '')}{name}"
        say(step, total, f"view '{name}': tracing {len(job.frequencies)} frequencies")
        t0 = time.perf_counter()
        res = trace(snap, view, job.frequencies, background=job.trace.get("background"),
                    supersample=job.trace.get("supersample", 1))
        res.provenance["trace_seconds"] = f"{time.perf_counter() - t0:.2f}"
        sky = _observe(res, job) if job.beam else None
        say(step + 1, total, f"view '{name}': writing FITS")
        if out.get("fits", True):
            for q in quantities:
                path = f"{stem}_{q}.fits"
                write_result(res, path, quantity=q)
                written.append(path)
            if sky is not None:
                path = f"{stem}_jy_per_beam.fits"
                sky.write_fits(path)
                written.append(path)
        say(step + 2, total, f"view '{name}': drawing pictures")
        if out.get("pictures", True):
            written += _pictures(res, sky, stem, fmt)
        say(step + 3, total, f"view '{name}': spectrum")
        if out.get("sed", True):
            nu, flux = sed(sky if sky is not None else res)
            path = f"{stem}_sed.csv"
            write_sed_csv(path, nu, flux, metadata={"source": res.provenance.get("source", ""),
                                                     "view": name, "aperture": "whole image"})
            written.append(path)
            if out.get("pictures", True) and len(nu) > 1:
                from .plot import plot_sed
                path = f"{stem}_sed.{fmt}"
                _close(plot_sed(nu, flux, path=path, label=name))
                written.append(path)
    say(total, total, "done")
    return [str(p) for p in written]


def _close(fig):
    import matplotlib.pyplot as plt
    plt.close(fig)


def _pictures(res, sky, stem, fmt):
    from .plot import plot_map, plot_panels
    written = []
    main = sky if sky is not None else res
    for q, obj in (("intensity", main), ("tau", res), ("brightness_temperature", res)):
        path = f"{stem}_{q}.{fmt}"
        _close(plot_panels(obj, quantity=q, path=path))
        written.append(path)
    path = f"{stem}_emission_measure.{fmt}"
    _close(plot_map(res, quantity="emission_measure", path=path))
    written.append(path)
    if len(res.frequencies) > 1:
        nu = res.frequencies
        path = f"{stem}_spectral_index.{fmt}"
        _close(plot_map(main, quantity="spectral_index", frequency=(nu[0], nu[-1]), path=path))
        written.append(path)
    return written
