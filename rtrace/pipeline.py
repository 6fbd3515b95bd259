"""Run a validated job: build each snapshot, trace every view, observe, write every output.

Every output is planned before any work, with a key of the inputs that make
it (see :mod:`rtrace.io.manifest`). Outputs that the output folder's manifest
records as finished from the same inputs, and whose files still match the
recorded size and SHA-256, are skipped; a view is traced only when one of
its outputs has to be made. An interrupted run therefore resumes where it
stopped, and a changed setting redoes exactly the outputs it affects.

Layout: a single snapshot writes ``<directory>/<prefix><view>_<quantity>.<ext>``;
a series (``paths``, ``pattern`` or ``seeds``) writes
``<directory>/<label>/<prefix><view>_<quantity>.<ext>`` for each snapshot
label. The pictures of a series are drawn after every snapshot is traced,
with one colour scale per view and quantity for the whole series; traced
results wait for that in a hidden cache folder in the output directory
(``.rtrace-cache``, pickled results keyed by their inputs), removed when the
run completes and reused by the next run when it is interrupted. Like any
pickle, the cache is only to be read by the runs that wrote it: do not copy
it in from elsewhere.
"""

import inspect
import os
import pickle
import shutil
import time
from dataclasses import dataclass
from functools import partial
from pathlib import Path

import astropy.units as u
import numpy as np

from .errors import ConfigError
from .io.atomic import atomic_path
from .io.manifest import Manifest, inputs_key
from .job import build_views

__all__ = ["run", "build_snapshot", "Outputs", "CACHE_NAME"]

CACHE_NAME = ".rtrace-cache"

_QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature")

# (quantity, drawn from the observed SkyMap when there is one); order is the order written
_PICTURES = (("intensity", True), ("tau", False), ("brightness_temperature", False),
             ("emission_measure", False), ("spectral_index", True))

# keys of [snapshot] that say which snapshot(s), not how to read them; each output's key
# carries its own snapshot's fingerprint instead
_MEMBER_KEYS = ("path", "paths", "pattern", "seed", "seeds")


class Outputs(list):
    """The files a run wrote (``str``, in order), with the files it found finished.

    Attributes
    ----------
    skipped : list of str
        Outputs left alone because the manifest records them as finished
        from the same inputs and their size and SHA-256 still match.
    """

    def __init__(self, written=(), skipped=()):
        super().__init__(written)
        self.skipped = list(skipped)


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


def _members(job):
    """The job's snapshots; a Job built by hand without ``snapshots`` has its single one."""
    if job.snapshots:
        return job.snapshots
    snap = job.snapshot
    if snap["kind"] == "demo":
        return [{"label": "demo", "seed": snap.get("seed", 7)}]
    return [{"label": Path(snap["path"]).stem, "path": Path(snap["path"])}]


def build_snapshot(job, member=None):
    """Load (HDF5) or build (demo) one of the job's snapshots.

    Parameters
    ----------
    job : `~rtrace.job.Job`
    member : dict, optional
        An entry of ``job.snapshots``; default the first.

    Returns
    -------
    `~rtrace.Snapshot`
    """
    snap = job.snapshot
    member = member or _members(job)[0]
    if snap["kind"] == "demo":
        from .demo import scenario
        return scenario(n=snap.get("cells", 64), seed=member.get("seed", snap.get("seed", 7)))
    from .io.hdf5 import read_hdf5
    kw = {k: snap[k] for k in ("electron_density", "ion_density", "density", "cell_size", "origin", "units")
          if k in snap}
    if "subvolume" in snap:
        kw["subvolume"] = tuple(tuple(p) for p in snap["subvolume"])
    if "density" in snap:
        kw["ionization"] = _ionization_model(job)
    return read_hdf5(member["path"], temperature=snap["temperature"], **kw)


def _observe(res, job):
    import radio_beam
    b = job.beam
    beam = radio_beam.Beam(major=b["major"], minor=b.get("minor", b["major"]), pa=b.get("pa", 0 * u.deg))
    noise = job.noise.get("rms") if job.noise else None
    kw = {}
    if b.get("scaling", "none") != "none":
        kw = {"beam_scaling": b["scaling"], "reference_frequency": b.get("reference_frequency")}
    return res.observe(beam=beam, noise=noise, seed=job.noise.get("seed") if job.noise else None, **kw)


# --- parallel settings ---------------------------------------------------------------------------

def _trace_keywords(job):
    """The keywords ``[parallel]`` needs ``rtrace.trace`` to take; ConfigError if this build lacks them.

    Checked before any work, so that a job does not fail after hours of tracing.
    """
    from . import trace
    par = job.parallel
    wanted = []
    if "scheduler" in par or "workers" in par:
        wanted.append("client")
    if "max_memory" in par:
        wanted.append("max_memory")
    if not wanted:
        return ()
    params = inspect.signature(trace).parameters
    missing = [k for k in wanted if k not in params]
    if missing:
        what = {"client": "trace on a dask cluster ('scheduler' / 'workers')",
                "max_memory": "bound its memory use ('max_memory')"}
        raise ConfigError(f"[parallel]: this rtrace build cannot {' or '.join(what[k] for k in missing)}: "
                          f"rtrace.trace takes no {' or '.join(repr(k) for k in missing)} keyword")
    return tuple(wanted)


class _Engine:
    """Traces and observes one view; starts the dask client on first use and closes it at the end."""

    def __init__(self, job, keywords):
        self.job = job
        self.keywords = keywords
        self._client = None
        self._cluster = None

    def _get_client(self):
        if self._client is None:
            # imported here: dask is needed only by jobs that ask for a cluster
            from dask.distributed import Client, LocalCluster
            par = self.job.parallel
            if "scheduler" in par:
                try:
                    self._client = Client(par["scheduler"])
                except (OSError, TimeoutError) as exc:
                    raise ConfigError(f"[parallel].scheduler: cannot connect to {par['scheduler']}: "
                                      f"{exc}") from None
            else:
                self._cluster = LocalCluster(n_workers=par["workers"], threads_per_worker=1)
                self._client = Client(self._cluster)
        return self._client

    def trace(self, snap, view):
        from . import trace
        job = self.job
        kw = {}
        if "client" in self.keywords:
            kw["client"] = self._get_client()
        if "max_memory" in self.keywords:
            kw["max_memory"] = job.parallel["max_memory"] * u.byte
        t0 = time.perf_counter()
        res = trace(snap, view, job.frequencies, background=job.trace.get("background"),
                    supersample=job.trace.get("supersample", 1), **kw)
        res.provenance["trace_seconds"] = f"{time.perf_counter() - t0:.2f}"
        sky = _observe(res, job) if job.beam else None
        return res, sky

    def close(self):
        if self._client is not None:
            self._client.close()
        if self._cluster is not None:
            self._cluster.close()
        self._client = self._cluster = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


# --- what each output is made from ---------------------------------------------------------------

def _fingerprint(job, member):
    """What identifies the snapshot's data: the demo seed, or the file's name, size and mtime.

    Size and modification time, not a checksum of the data: hashing a large
    snapshot on every run would cost as much as reading it; a rewritten file
    changes its mtime.
    """
    if job.snapshot["kind"] == "demo":
        return {"demo_seed": member.get("seed", job.snapshot.get("seed", 7))}
    st = os.stat(member["path"])
    return {"file": Path(member["path"]).name, "size": st.st_size, "mtime_ns": st.st_mtime_ns}


def _unit_inputs(job, member, spec):
    """The job settings and data every output of one (snapshot, view) depends on."""
    from . import __version__
    shared = {k: v for k, v in job.snapshot.items() if k not in _MEMBER_KEYS}
    return {"rtrace": __version__, "snapshot": shared, "source": _fingerprint(job, member),
            "ionization": job.ionization, "frequencies": job.frequencies, "trace": job.trace, "view": spec}


def _observing(job):
    return {"beam": job.beam, "noise": job.noise}


def _key(base, product, observing=None, limits=None):
    parts = dict(base, product=product)
    if observing is not None:        # only observed products change with the beam and noise
        parts["observing"] = observing
    if limits is not None:           # a series picture changes when the series' colour scale does
        parts["limits"] = limits
    return inputs_key(parts)


@dataclass
class _Output:
    path: Path
    inputs: str
    make: object                      # make(path, res, sky) writes the file


@dataclass
class _Unit:
    """One snapshot seen through one view."""
    member: dict
    name: str
    view: object
    folder: Path
    base: dict
    data_key: str                     # inputs of the traced and observed images themselves
    where: str                        # for progress messages

    @property
    def label(self):
        return f"{self.member['label']}/{self.name}"


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
    from .plot import plot_map, plot_panels
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
        # optical depth spans decades between frequencies: one log scale per panel shows each of them
        # (a series still shares limits, which then apply to every panel)
        fig = plot_panels(obj, quantity=quantity, path=path, stretch="log", shared_scale=limits is not None, **kw)
    else:
        fig = plot_panels(obj, quantity=quantity, path=path, **kw)
    _close(fig)


def _close(fig):
    import matplotlib.pyplot as plt
    plt.close(fig)


def _stem(job, unit, suffix):
    return unit.folder / f"{job.output.get('prefix', '')}{unit.name}_{suffix}"


def _data_outputs(job, unit, quantities, fmt):
    """``(cubes, spectra)``: the FITS outputs and the SED outputs of one view."""
    out, obs = job.output, _observing(job)
    cubes, spectra = [], []
    if out.get("fits", True):
        for q in quantities:
            cubes.append(_Output(_stem(job, unit, f"{q}.fits"), _key(unit.base, f"fits:{q}"),
                                 partial(_write_quantity, quantity=q)))
        if job.beam:
            cubes.append(_Output(_stem(job, unit, "jy_per_beam.fits"), _key(unit.base, "fits:jy_per_beam", obs),
                                 _write_sky))
    if out.get("sed", True):
        spectra.append(_Output(_stem(job, unit, "sed.csv"), _key(unit.base, "sed:csv", obs),
                               partial(_write_sed, name=unit.name)))
        if out.get("pictures", True) and len(job.frequencies) > 1:
            spectra.append(_Output(_stem(job, unit, f"sed.{fmt}"), _key(unit.base, f"sed:{fmt}", obs),
                                   partial(_draw_sed, name=unit.name)))
    return cubes, spectra


def _picture_outputs(job, unit, fmt, limits):
    obs = _observing(job)
    plan = []
    for q, observed in _PICTURES:
        if q == "spectral_index" and len(job.frequencies) < 2:
            continue
        lim = None if limits is None else limits.get(q)
        plan.append(_Output(_stem(job, unit, f"{q}.{fmt}"),
                            _key(unit.base, f"picture:{q}.{fmt}", obs if observed else None, lim),
                            partial(_draw_picture, quantity=q, observed=observed, limits=lim)))
    return plan


# --- colour scales of a series -------------------------------------------------------------------

def _ranges(res, sky, nfreq):
    """Value ranges of every pictured quantity of one view, in the unit the picture draws.

    The planes come from the plotting module's own extraction, so the ranges
    are exactly those of the drawn images (background-subtracted Jy/pixel,
    Jy/beam with noise, Planck or Rayleigh-Jeans brightness temperatures, the
    S/N-blanked spectral index).
    """
    from .plot import _plane
    ranges = {}
    for q, observed in _PICTURES:
        obj = sky if observed and sky is not None else res
        if q == "spectral_index":
            if nfreq < 2:
                continue
            nu = res.frequencies
            planes = [_plane(obj, q, (nu[0], nu[-1]))]
        elif q == "emission_measure":
            planes = [_plane(obj, q, None)]
        else:
            planes = [_plane(obj, q, i) for i in range(nfreq)]       # every panel of the picture
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
        if q == "spectral_index":        # the automatic index scale uses percentiles: outliers ignored
            lo, hi = np.percentile(values, 1), np.percentile(values, 99)
        else:
            lo, hi = values.min(), values.max()
        ranges[q] = {"min": float(lo), "max": float(hi), "unit": unit.to_string()}
    return ranges


def _series_limits(all_ranges):
    """``{quantity: {"vmin", "vmax", "unit"}}`` covering every snapshot's range.

    The ends follow the rules of an automatic scale applied to the union of
    the images (non-negative quantities start at zero; the spectral index is
    kept within +-4), so that a series of one gives the picture it would get
    alone.
    """
    limits = {}
    for q, _ in _PICTURES:
        entries = [r[q] for r in all_ranges if r and q in r]
        if not entries:
            continue
        unit = u.Unit(entries[0]["unit"])
        lo = min(u.Quantity(e["min"], e["unit"]).to_value(unit) for e in entries)
        hi = max(u.Quantity(e["max"], e["unit"]).to_value(unit) for e in entries)
        if q == "spectral_index":
            vmin, vmax = max(lo, -4.0), min(hi, 4.0)
        else:
            vmin, vmax = min(0.0, lo), hi
            if vmax <= vmin:
                vmax = vmin + 1.0          # blank images everywhere still get a valid scale
        limits[q] = {"vmin": vmin, "vmax": vmax, "unit": unit.to_string()}
    return limits


class _Cache:
    """Traced results of a series, kept on disk between tracing and drawing.

    Memory holds one view's result at a time however long the series; the
    files are keyed by the inputs, so a resumed run reuses what an
    interrupted one traced, and stale files are never read.
    """

    def __init__(self, folder):
        self.folder = Path(folder)

    def _file(self, unit):
        return self.folder / unit.member["label"] / f"{unit.name}-{unit.data_key[:20]}.pickle"

    def put(self, unit, value):
        path = self._file(unit)
        try:
            payload = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
        except (pickle.PicklingError, TypeError, AttributeError):
            return                          # not cacheable: the pictures retrace this view instead
        path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(path) as tmp:
            tmp.write_bytes(payload)

    def get(self, unit):
        path = self._file(unit)
        try:
            return pickle.loads(path.read_bytes())
        except (OSError, pickle.UnpicklingError, EOFError, AttributeError, ImportError):
            return None

    def clear(self):
        shutil.rmtree(self.folder, ignore_errors=True)


# --- the run -------------------------------------------------------------------------------------

class _Snapshots:
    """Builds a member's snapshot on first need and keeps only the current one."""

    def __init__(self, job, say):
        self.job, self.say = job, say
        self.label, self.snap = None, None

    def get(self, member, step, total):
        if self.label != member["label"]:
            self.snap = None                 # release the previous snapshot before reading the next
            where = f"snapshot '{member['label']}'" if self.job.series else "the snapshot"
            self.say(step, total, f"building {where}")
            self.snap = build_snapshot(self.job, member)
            self.label = member["label"]
        return self.snap

    def release(self):
        self.label, self.snap = None, None


def _make(todo, res, sky, manifest, written):
    for output in todo:
        output.path.parent.mkdir(parents=True, exist_ok=True)
        output.make(output.path, res, sky)
        manifest.record(output.path, output.inputs)
        written.append(str(output.path))


def run(job, progress=None, restart=False):
    """Execute ``job``; returns the paths written, in order.

    Parameters
    ----------
    job : `~rtrace.job.Job`
    progress : callable, optional
        ``progress(step, total, message)``, called as work proceeds;
        messages say which outputs were up to date and skipped.
    restart : bool, optional
        Ignore the manifest of the output folder: make every output again
        (and start a new manifest).

    Returns
    -------
    Outputs
        A list of the paths written (str); ``.skipped`` lists the outputs
        found finished.

    Raises
    ------
    ConfigError
        If ``[parallel]`` asks for something this rtrace build cannot do, or
        the scheduler cannot be reached.
    """
    say = progress or (lambda step, total, message: None)
    out = job.output
    quantities = out.get("quantities", list(_QUANTITIES))
    fmt = out.get("picture_format", "png")
    pictures = out.get("pictures", True)
    keywords = _trace_keywords(job)
    views = build_views(job)
    specs = {spec["name"]: spec for spec in job.views}
    members = _members(job)
    directory = out["directory"]
    directory.mkdir(parents=True, exist_ok=True)
    manifest = Manifest(directory) if restart else Manifest.load(directory)
    later = job.series and pictures           # series pictures wait for the whole series' ranges
    cache = _Cache(directory / CACHE_NAME) if later else None
    if cache is not None and restart:
        cache.clear()
    obs = _observing(job)
    units = []
    for member in members:
        for name, view in views:
            base = _unit_inputs(job, member, specs[name])
            where = f"{member['label']} / view '{name}'" if job.series else f"view '{name}'"
            folder = directory / member["label"] if job.series else directory
            units.append(_Unit(member, name, view, folder, base, _key(base, "images", obs), where))
    total = len(units) * (2 if later else 1)
    written, skipped = [], []
    snapshots = _Snapshots(job, say)

    def split(plan):
        todo, done = [], []
        for o in plan:
            if manifest.is_current(o.path, o.inputs):
                done.append(str(o.path))
            else:
                todo.append(o)
        skipped.extend(done)
        return todo, done

    with _Engine(job, keywords) as engine:
        for step, unit in enumerate(units):
            cubes, spectra = _data_outputs(job, unit, quantities, fmt)
            # a single snapshot's pictures need no other snapshot: drawn now, on their own scales
            drawn_now = _picture_outputs(job, unit, fmt, None) if pictures and not later else []
            plan = cubes + drawn_now + spectra
            todo, done = split(plan)
            need_ranges = later and manifest.get_ranges(unit.label, unit.data_key) is None
            if done:
                say(step, total, f"{unit.where}: {len(done)} of {len(plan)} outputs up to date, skipped")
            if not todo and not need_ranges:
                continue
            snap = snapshots.get(unit.member, step, total)
            say(step, total, f"{unit.where}: tracing {len(job.frequencies)} frequencies")
            res, sky = engine.trace(snap, unit.view)
            if todo:
                say(step, total, f"{unit.where}: writing {len(todo)} outputs")
            _make(todo, res, sky, manifest, written)
            if later:
                manifest.set_ranges(unit.label, unit.data_key, _ranges(res, sky, len(job.frequencies)))
                cache.put(unit, (res, sky))
            del res, sky
        if later:
            snapshots.release()
            limits = {name: _series_limits([manifest.get_ranges(v.label, v.data_key)
                                            for v in units if v.name == name]) for name, _ in views}
            for k, unit in enumerate(units):
                step = len(units) + k
                plan = _picture_outputs(job, unit, fmt, limits[unit.name])
                todo, done = split(plan)
                if done:
                    say(step, total, f"{unit.where}: {len(done)} of {len(plan)} pictures up to date, skipped")
                if not todo:
                    continue
                cached = cache.get(unit)
                if cached is None:
                    snap = snapshots.get(unit.member, step, total)
                    say(step, total, f"{unit.where}: tracing {len(job.frequencies)} frequencies again "
                                     f"for its pictures")
                    cached = engine.trace(snap, unit.view)
                say(step, total, f"{unit.where}: drawing {len(todo)} pictures on the series' colour scales")
                _make(todo, *cached, manifest, written)
                del cached
    if cache is not None:
        cache.clear()
    say(total, total, f"done: {len(written)} written, {len(skipped)} up to date (skipped)")
    return Outputs(written, skipped)
