"""Job files: a whole study described in TOML, validated in full before any tracing starts.

A job names a snapshot (or a series of snapshots), how to ionize it, the
frequencies, one or more views, the instrument (beam, noise), the outputs and
optionally where to compute (``[parallel]``). :func:`load_job` parses and
validates everything (unknown keys get a did-you-mean suggestion, quantities
are checked for the right physical type, files for existence) and returns a
:class:`Job`; :func:`run_job` executes it. See ``examples/`` for complete
job files.
"""

import glob
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np

from ..demo import DEMO_SEED
from ..errors import ConfigError
from ..physics.ionization import DEFAULT_MODEL
from ..physics.ionization.cells import THERMAL_INPUTS
from ..transfer.result import QUANTITIES as _QUANTITIES
from .checks import (
    check_beam,
    check_frequencies,
    check_noise,
    check_output,
    check_snapshot,
    check_trace,
    check_view,
    decode_job_text,
)
from .values import _check_keys, _suggest, _typed
from .views import build_views

__all__ = ["Job", "load_job", "parse_job", "run_job", "build_views", "override_parallel",
           "check_scheduler_address", "check_workers", "SCHEMA"]

# Allowed keys of every table, with the physical type of quantity-valued keys.
SCHEMA = {
    "snapshot": {"kind": str, "path": str, "paths": list, "pattern": str, "cells": int, "seed": int,
                 "seeds": list,
                 "temperature": str, "pressure": str, "internal_energy": str, "gamma": float,
                 "electron_density": str, "ion_density": str, "density": str,
                 "cell_size": "length", "origin": "length3", "units": dict, "subvolume": list, "level": int},
    "ionization": {"model": str, "threshold": "temperature", "helium": str, "fraction": str,
                   "helium_ii": str, "helium_iii": str, "case": str, "sources": list,
                   "ionized_temperature": "temperature", "allow_outside": bool, "rays_per_cell": float,
                   "hydrogen_mass_fraction": float, "helium_mass_fraction": float},
    "source": {"position": "length3", "rate": "rate"},
    "frequencies": {"values": "frequency_list", "start": "frequency", "stop": "frequency",
                    "num": int, "spacing": str},
    "trace": {"background": str, "supersample": int, "tolerance": float},
    "view": {"name": str, "los": list, "north": list, "npix": (int, list), "width": "length",
             "distance": "length", "center": "length3", "ra": "angle", "dec": "angle"},
    "beam": {"major": "angle", "minor": "angle", "pa": "angle", "scaling": str,
             "reference_frequency": "frequency"},
    "noise": {"rms": ("flux_per_beam", "flux_per_beam_list"), "seed": int},
    "output": {"directory": str, "fits": bool, "pictures": bool, "sed": bool, "quantities": list,
               "picture_format": str, "prefix": str, "spectral_axis": str},
    "parallel": {"scheduler": str, "workers": int, "max_memory": "memory_size"},
    "synthesis": {"antennas": str, "antenna_unit": str, "latitude": "angle", "hour_angle_range": list,
                  "hour_angle_step": ("angle", "time"), "n_hour_angles": int, "min_elevation": "angle",
                  "dish_diameter": "length", "primary_beam": str, "primary_beam_fwhm_factor": float,
                  "weighting": str, "robust": float, "gain": float, "niter": int, "threshold": "flux_per_beam",
                  "pixel_scale": "angle", "image_size": int, "views": list},
    "comparison": {"observation": str, "frequency": "frequency", "beam": list, "unit": str, "apertures": list,
                   "views": list},
}
_TOP = set(SCHEMA) - {"source"}          # [[ionization.sources]] entries, not a table of their own


def _section(raw, name, where=None):
    table = raw.get(name, {})
    where = where or f"[{name}]"
    if not isinstance(table, dict):
        raise ConfigError(f"{where}: expected a table")
    _check_keys(table, SCHEMA[name], where)
    return {k: _typed(v, SCHEMA[name][k], f"{where}.{k}") for k, v in table.items()}


@dataclass
class Job:
    """A validated job. Build it with :func:`load_job` or :func:`parse_job`.

    Attributes
    ----------
    snapshot : dict
        ``[snapshot]`` as validated: the settings shared by every snapshot
        (kind, dataset names, units, geometry); ``path`` is resolved for a
        single HDF5 file.
    ionization, trace, beam, noise, output : dict
        The validated tables (quantities carry units; ``output["directory"]``
        is an absolute path).
    frequencies : `~astropy.units.Quantity`
        In Hz.
    views : list of dict
        One validated ``[[view]]`` each, with a unique ``name``.
    base_dir : pathlib.Path
        Folder of the job file; relative paths are read from there.
    snapshots : list of dict
        The snapshots to process, in order: each has a ``label`` and either a
        ``path`` (HDF5) or a ``seed`` (demo). One entry for a single snapshot.
    series : bool
        True when the job names a series (``paths``, ``pattern`` or
        ``seeds``): outputs then go to one sub-folder per snapshot label and
        pictures share colour scales across the series.
    parallel : dict
        ``[parallel]`` as validated: ``scheduler`` (an address) or ``workers``
        (an int), and ``max_memory`` (bytes, an int).
    synthesis, comparison : dict
        ``[synthesis]`` and ``[comparison]`` as validated by
        :mod:`rtrace.run.study` (``kwargs``, ``views``, ``key``); empty when
        the job has none.
    text : str or None
        The job file's text (:func:`load_job`); a run keeps a copy of it
        with its outputs.
    """

    snapshot: dict
    ionization: dict
    frequencies: u.Quantity
    trace: dict
    views: list
    beam: dict
    noise: dict
    output: dict
    base_dir: Path = field(default_factory=Path.cwd)
    snapshots: list = field(default_factory=list)
    series: bool = False
    parallel: dict = field(default_factory=dict)
    synthesis: dict = field(default_factory=dict)
    comparison: dict = field(default_factory=dict)
    text: str = None


def _frequencies(spec):
    if "values" in spec:
        if set(spec) - {"values"}:
            raise ConfigError("[frequencies]: give either 'values' or 'start', 'stop', 'num', not both")
        nu = spec["values"]
    else:
        missing = [k for k in ("start", "stop", "num") if k not in spec]
        if missing:
            raise ConfigError(f"[frequencies]: missing {', '.join(missing)} (or give 'values')")
        spacing = spec.get("spacing", "log")
        if spacing not in ("log", "linear"):
            raise ConfigError(f"[frequencies].spacing: '{spacing}' is not 'log' or 'linear'")
        num = spec["num"]
        start, stop = spec["start"].to_value(u.Hz), spec["stop"].to_value(u.Hz)
        for key, value in (("start", start), ("stop", stop)):
            if not np.isfinite(value):
                raise ConfigError(f"[frequencies].{key}: must be finite, got '{spec[key]}'")
        if num < 1:
            raise ConfigError(f"[frequencies].num: expected at least 1 frequency, got {num}")
        if num == 1 and start != stop:
            raise ConfigError("[frequencies].num: one frequency between different 'start' and 'stop'; give "
                              "start = stop, or values = [...]")
        # built exactly as the FITS axis describes them, so cubes get a FREQ or FREQ-LOG axis:
        # even steps, or nu_k = start exp(k ln(stop/start) / (num - 1)) (the -LOG axis of
        # Greisen et al. 2006, A&A 446, 747, with CRVAL = start)
        k = np.arange(num, dtype=float)
        if num == 1:
            nu = np.array([start])
        elif spacing == "log":
            if start <= 0 or stop <= 0:
                raise ConfigError("[frequencies]: frequencies must be positive")
            nu = start * np.exp(k * (np.log(stop) - np.log(start)) / (num - 1))
        else:
            nu = start + k * ((stop - start) / (num - 1))
        nu = nu * u.Hz
    check_frequencies(nu, "[frequencies].values" if "values" in spec else "[frequencies]")
    return nu.to(u.Hz)


def _hdf5_file(value, where, base_dir, directories=False):
    """Resolve a snapshot path (relative to the job file); ``directories``: yt datasets may be folders."""
    if not isinstance(value, str):
        raise ConfigError(f"{where}: expected str, got {type(value).__name__} {value!r}")
    path = (base_dir / value).resolve()
    try:
        found = path.exists() if directories else path.is_file()
    except OSError as exc:                  # a name too long for the file system
        raise ConfigError(f"{where}: {path} cannot be used: {exc.strerror}") from None
    if not found:
        raise ConfigError(f"{where}: {'path' if directories else 'file'} not found: {path}")
    return path


def _unique_labels(members, where):
    """Outputs are named by label, so two snapshots with one label would overwrite each other."""
    seen = {}
    for m in members:
        if m["label"] in (".", ".."):         # '...h5' has the stem '..': its folder would be the parent's
            raise ConfigError(f"{where}: the snapshot {m.get('path')} is labelled '{m['label']}' by its file "
                              f"name, which cannot name its output folder; rename the file")
        if m["label"] in seen:
            first, second = seen[m["label"]], m.get("path", m.get("seed"))
            raise ConfigError(f"{where}: two snapshots share the label '{m['label']}' ({first} and {second}); "
                              f"outputs are named by label, so labels must differ")
        seen[m["label"]] = m.get("path", m.get("seed"))


def _snapshot_members(snap, base_dir):
    """``([{"label", "path" or "seed"}, ...], series)`` from ``[snapshot]`` (validated in place)."""
    sources = [k for k in ("path", "paths", "pattern") if k in snap]
    if snap["kind"] == "demo":
        for key in ("paths", "pattern"):
            if key in snap:
                raise ConfigError(f"[snapshot].{key}: only used with kind = 'hdf5' or 'yt' "
                                  f"(a series of demo snapshots takes 'seeds')")
        if "seeds" not in snap:
            return [{"label": "demo", "seed": snap.get("seed", DEMO_SEED)}], False
        if "seed" in snap:
            raise ConfigError("[snapshot]: give either 'seed' (one demo snapshot) or 'seeds' (a series), not both")
        seeds = snap["seeds"]
        if not seeds:
            raise ConfigError("[snapshot].seeds: expected a non-empty list of integers")
        for i, seed in enumerate(seeds):
            if isinstance(seed, bool) or not isinstance(seed, int):
                raise ConfigError(f"[snapshot].seeds[{i}]: expected int, got {type(seed).__name__} {seed!r}")
        members = [{"label": f"seed{seed}", "seed": seed} for seed in seeds]
        _unique_labels(members, "[snapshot].seeds")
        return members, True
    if "seeds" in snap:
        raise ConfigError("[snapshot].seeds: only used with kind = 'demo' (a series of files takes "
                          "'paths' or 'pattern')")
    kind = snap["kind"]
    dirs = kind == "yt"
    if not sources:
        raise ConfigError(f"[snapshot]: 'path' is required when kind = '{kind}' (or 'paths' / 'pattern' "
                          "for a series of files)")
    if len(sources) > 1:
        raise ConfigError(f"[snapshot]: give one of 'path', 'paths' or 'pattern', not "
                          f"{' and '.join(repr(k) for k in sources)}")
    if "path" in snap:
        snap["path"] = _hdf5_file(snap["path"], "[snapshot].path", base_dir, dirs)
        return [{"label": snap["path"].stem, "path": snap["path"]}], False
    if "paths" in snap:
        if not snap["paths"]:
            raise ConfigError("[snapshot].paths: expected a non-empty list of file names")
        files = [_hdf5_file(v, f"[snapshot].paths[{i}]", base_dir, dirs) for i, v in enumerate(snap["paths"])]
        where = "[snapshot].paths"
    else:
        pattern = snap["pattern"]
        # relative to the job file, like every other path in a job; sorted so that the series
        # order (and therefore the output layout and progress) does not depend on the file system
        full = pattern if Path(pattern).is_absolute() else str(base_dir / pattern)
        files = sorted(Path(p).resolve() for p in glob.glob(full, recursive=True)
                       if (Path(p).exists() if dirs else Path(p).is_file()))
        if not files:
            raise ConfigError(f"[snapshot].pattern: '{pattern}' matches no file (looked in "
                              f"{Path(full).parent.resolve()})")
        where = "[snapshot].pattern"
    members = [{"label": f.stem, "path": f} for f in files]
    _unique_labels(members, where)
    return members, True


# scheme://host:port, the host a name, an IPv4 address or a bracketed IPv6 address
_ADDRESS = re.compile(r"^[A-Za-z][A-Za-z0-9+.-]*://(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+):(\d{1,5})$")


def check_scheduler_address(value, where="[parallel].scheduler"):
    """Return ``value`` if it looks like ``scheme://host:port``, else raise ConfigError naming ``where``.

    Parameters
    ----------
    value : str
        E.g. ``"tcp://10.0.0.5:8786"``.
    where : str
        The key or option reported in the error message.

    Returns
    -------
    str

    Raises
    ------
    ConfigError
    """
    match = _ADDRESS.match(value) if isinstance(value, str) else None
    if match is None or not 1 <= int(match.group(2)) <= 65535:
        raise ConfigError(f"{where}: {value!r} is not a scheduler address of the form scheme://host:port "
                          f"(e.g. 'tcp://10.0.0.5:8786')")
    return value


def check_workers(value, where="[parallel].workers"):
    """Return ``value`` if it is a positive int, else raise ConfigError naming ``where``.

    Parameters
    ----------
    value : int
        Number of local worker processes.
    where : str
        The key or option reported in the error message.

    Returns
    -------
    int

    Raises
    ------
    ConfigError
    """
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise ConfigError(f"{where}: expected a positive number of workers, got {value!r}")
    return value


def _parallel(spec):
    if "scheduler" in spec and "workers" in spec:
        raise ConfigError("[parallel]: give either 'scheduler' (the address of a running cluster) or "
                          "'workers' (the size of a local one), not both")
    if "scheduler" in spec:
        check_scheduler_address(spec["scheduler"])
    if "workers" in spec:
        check_workers(spec["workers"])
    if "max_memory" in spec:
        nbytes = spec["max_memory"].to_value(u.byte)
        if not np.isfinite(nbytes) or nbytes < 1:
            raise ConfigError(f"[parallel].max_memory: must be a positive amount of memory, got "
                              f"'{spec['max_memory']}'")
        spec["max_memory"] = int(nbytes)
    return spec


def override_parallel(job, workers=None, scheduler=None):
    """Replace the job's cluster choice (``--workers`` / ``--scheduler`` on the command line).

    Either argument replaces both ``scheduler`` and ``workers`` of ``[parallel]``;
    ``max_memory`` is kept.

    Parameters
    ----------
    job : Job
    workers : int, optional
        Size of a local cluster.
    scheduler : str, optional
        Address of a running scheduler.

    Raises
    ------
    ConfigError
        If both are given or either is malformed.
    """
    if workers is not None and scheduler is not None:
        raise ConfigError("--workers and --scheduler: give one or the other")
    if workers is None and scheduler is None:
        return
    kept = {k: v for k, v in job.parallel.items() if k == "max_memory"}
    if workers is not None:
        kept["workers"] = check_workers(workers, "--workers")
    else:
        kept["scheduler"] = check_scheduler_address(scheduler, "--scheduler")
    job.parallel = kept


def _thermal(snap, kind):
    """``[snapshot]``: one thermal input; pressure and internal energy need the mass density."""
    thermal = [k for k in THERMAL_INPUTS if k in snap]
    if len(thermal) != 1:
        raise ConfigError(f"[snapshot]: give exactly one of 'temperature', 'pressure' or 'internal_energy' when "
                          f"kind = '{kind}' (got {', '.join(repr(k) for k in thermal) or 'none'})")
    if ("electron_density" in snap) == ("density" in snap):
        raise ConfigError("[snapshot]: give exactly one of 'electron_density' or 'density'")
    if thermal[0] != "temperature" and "density" not in snap:
        raise ConfigError(f"[snapshot].{thermal[0]}: needs 'density' (the temperature is derived from it with the "
                          "ionization model's particle count)")
    if "gamma" in snap:
        if thermal[0] == "temperature":
            raise ConfigError("[snapshot].gamma: only used with 'pressure' or 'internal_energy'")
        if not (np.isfinite(snap["gamma"]) and snap["gamma"] > 1):
            raise ConfigError(f"[snapshot].gamma: the adiabatic index must be > 1, got {snap['gamma']}")


# The ionization models a job may name, and which [ionization] keys each one takes.
_MODEL_KEYS = {
    "full": {"helium"}, "threshold": {"threshold", "helium"}, "saha": set(), "collisional": {"case"},
    "supplied": {"fraction", "helium", "helium_ii", "helium_iii"},
    "sources": {"sources", "ionized_temperature", "helium", "allow_outside", "rays_per_cell"},
}
_HELIUM_CHOICES = {"full": ("single", "double"), "threshold": ("single", "double"),
                   "supplied": ("single", "double", "none", "follow"), "sources": ("single", "none")}
_COMMON_IONIZATION = {"model", "hydrogen_mass_fraction", "helium_mass_fraction"}


def _sources(entries):
    """``[[ionization.sources]]``: a position (three lengths) and a photon rate each."""
    if not entries:
        raise ConfigError("[ionization].sources: expected a non-empty list of sources, each "
                          "{ position = ['1 pc', '2 pc', '3 pc'], rate = '1e49 / s' }")
    out = []
    for i, entry in enumerate(entries):
        where = f"[ionization].sources[{i}]"
        if not isinstance(entry, dict):
            raise ConfigError(f"{where}: expected a table with 'position' and 'rate'")
        _check_keys(entry, SCHEMA["source"], where)
        for key in ("position", "rate"):
            if key not in entry:
                raise ConfigError(f"{where}: '{key}' is required")
        spec = {k: _typed(v, SCHEMA["source"][k], f"{where}.{k}") for k, v in entry.items()}
        bad = int(np.sum(~np.isfinite(spec["position"].value)))
        if bad:
            raise ConfigError(f"{where}.position: {bad} of 3 coordinates are not finite ({entry['position']})")
        rate = spec["rate"].to_value(u.s**-1)
        if not (np.isfinite(rate) and rate >= 0):
            raise ConfigError(f"{where}.rate: must be finite and >= 0, got '{entry['rate']}'")
        out.append(spec)
    return out


def _ionization(raw, snap, kind):
    """``[ionization]``, validated against the model it names."""
    ion = _section(raw, "ionization")
    if ion and (kind == "demo" or "electron_density" in snap):
        raise ConfigError("[ionization]: only used with [snapshot].density (the demo scenario and "
                          "snapshots with electron_density carry their own ionization)")
    model = ion.get("model", DEFAULT_MODEL)
    if model not in _MODEL_KEYS:
        raise ConfigError(f"[ionization].model: '{model}'{_suggest(model, _MODEL_KEYS)} is not one of "
                          f"{', '.join(_MODEL_KEYS)}")
    for key in sorted(set(ion) - _COMMON_IONIZATION - _MODEL_KEYS[model]):
        users = [m for m, keys in _MODEL_KEYS.items() if key in keys]
        raise ConfigError(f"[ionization].{key}: not used by model = '{model}' (it belongs to "
                          f"{' or '.join(repr(m) for m in users)})")
    if "helium" in ion and ion["helium"] not in _HELIUM_CHOICES.get(model, ()):
        raise ConfigError(f"[ionization].helium: '{ion['helium']}' is not valid for model = '{model}'; choose "
                          f"one of {', '.join(_HELIUM_CHOICES[model])}")
    if "case" in ion and ion["case"] not in ("A", "B"):
        raise ConfigError(f"[ionization].case: '{ion['case']}' is not 'A' or 'B'")
    if model == "supplied" and "fraction" not in ion:
        raise ConfigError("[ionization]: model = 'supplied' needs 'fraction' (the dataset with the hydrogen "
                          "ionized fraction)")
    if model == "supplied" and "helium" in ion and ({"helium_ii", "helium_iii"} & set(ion)):
        raise ConfigError("[ionization].helium: not used when 'helium_ii' / 'helium_iii' datasets are given")
    if model == "sources":
        if "sources" not in ion:
            raise ConfigError("[ionization]: model = 'sources' needs 'sources', e.g. [[ionization.sources]] "
                              "position = ['1 pc', '2 pc', '3 pc'], rate = '1e49 / s'")
        ion["sources"] = _sources(ion["sources"])
    for key in ("threshold", "ionized_temperature"):
        if key in ion and not ion[key].to_value(u.K) > 0:
            raise ConfigError(f"[ionization].{key}: must be a positive temperature, got '{ion[key]}'")
    for key in ("hydrogen_mass_fraction", "helium_mass_fraction"):
        if key in ion and not 0 <= ion[key] <= 1:
            raise ConfigError(f"[ionization].{key}: a mass fraction lies in [0, 1], got {ion[key]}")
    if ion.get("hydrogen_mass_fraction", 0.70) + ion.get("helium_mass_fraction", 0.28) > 1:
        raise ConfigError(f"[ionization].helium_mass_fraction: hydrogen_mass_fraction + helium_mass_fraction = "
                          f"{ion.get('hydrogen_mass_fraction', 0.70) + ion.get('helium_mass_fraction', 0.28):.6g} "
                          f"exceeds 1 (the defaults are 0.70 and 0.28)")
    if "rays_per_cell" in ion and not 4 <= ion["rays_per_cell"] <= 64:
        raise ConfigError(f"[ionization].rays_per_cell: expected a number from 4 to 64, got {ion['rays_per_cell']}")
    return ion


def parse_job(raw, base_dir="."):
    """Validate a job given as a dict (the parsed TOML). Raises ConfigError on the first problem."""
    base_dir = Path(base_dir)
    if not isinstance(raw, dict):
        raise ConfigError(f"job: expected a table of tables, got {type(raw).__name__}")
    unknown = set(raw) - _TOP
    for key in sorted(unknown):
        raise ConfigError(f"job: unknown table '[{key}]'{_suggest(key, _TOP)}; allowed: {', '.join(sorted(_TOP))}")
    if "snapshot" not in raw:
        raise ConfigError("job: the [snapshot] table is required (kind = 'hdf5' or 'yt' with a path, or "
                          "kind = 'demo' for the built-in scenario)")
    snap = _section(raw, "snapshot")
    check_snapshot(snap, raw["snapshot"])
    kind = snap.get("kind", "demo")
    if kind not in ("demo", "hdf5", "yt"):
        raise ConfigError(f"[snapshot].kind: '{kind}' is not 'demo', 'hdf5' or 'yt'")
    snap["kind"] = kind
    if kind == "yt":
        for key in ("cell_size", "origin", "units", "subvolume"):
            if key in snap:
                raise ConfigError(f"[snapshot].{key}: not used with kind = 'yt' (yt reads the geometry and "
                                  "units from the dataset)")
    elif "level" in snap:
        raise ConfigError("[snapshot].level: only used with kind = 'yt'")
    if kind in ("hdf5", "yt"):
        _thermal(snap, kind)
    members, series = _snapshot_members(snap, base_dir)
    ion = _ionization(raw, snap, kind)
    if "frequencies" not in raw:
        raise ConfigError("job: the [frequencies] table is required")
    nu = _frequencies(_section(raw, "frequencies"))
    trace = _section(raw, "trace")
    check_trace(trace)
    views_raw = raw.get("view", [])
    if isinstance(views_raw, dict):
        views_raw = [views_raw]
    if not views_raw:
        raise ConfigError("job: at least one [[view]] is required")
    views = []
    names = set()
    for i, v in enumerate(views_raw):
        where = f"[[view]] #{i + 1}"
        if not isinstance(v, dict):
            raise ConfigError(f"{where}: expected a table")
        _check_keys(v, SCHEMA["view"], where)
        spec = {k: _typed(val, SCHEMA["view"][k], f"{where}.{k}") for k, val in v.items()}
        check_view(spec, v, where)
        spec.setdefault("name", f"view{i + 1}")
        if spec["name"] in names:
            raise ConfigError(f"{where}.name: '{spec['name']}' is used by another view")
        same = [n for n in names if n.lower() == spec["name"].lower()]
        if same:
            raise ConfigError(f"{where}.name: '{spec['name']}' differs from view '{same[0]}' only in case; their "
                              f"files would overwrite each other on case-insensitive file systems")
        names.add(spec["name"])
        if ("ra" in spec) != ("dec" in spec):
            raise ConfigError(f"{where}: give both 'ra' and 'dec' or neither")
        views.append(spec)
    beam = _section(raw, "beam")
    if beam:
        for key in ("major",):
            if key not in beam:
                raise ConfigError(f"[beam]: '{key}' is required")
        if beam.get("scaling", "none") not in ("none", "inverse-frequency"):
            raise ConfigError(f"[beam].scaling: '{beam['scaling']}' is not 'none' or 'inverse-frequency'")
        if "reference_frequency" in beam and beam.get("scaling", "none") == "none":
            raise ConfigError("[beam].reference_frequency: only used with scaling = 'inverse-frequency'")
        check_beam(beam, raw["beam"])
    noise = _section(raw, "noise")
    if noise and not beam:
        raise ConfigError("[noise]: noise is defined per beam, so it needs a [beam]")
    if noise and "rms" not in noise:
        raise ConfigError("[noise]: 'rms' is required")
    if noise:
        check_noise(noise, raw["noise"])
    if noise and noise["rms"].ndim == 1 and len(noise["rms"]) != len(nu):
        raise ConfigError(f"[noise].rms: {len(noise['rms'])} values for {len(nu)} frequencies")
    out = _section(raw, "output")
    for q in out.get("quantities", []):
        if not isinstance(q, str):
            raise ConfigError(f"[output].quantities: expected names such as 'intensity', got {q!r}")
        if q not in _QUANTITIES:
            raise ConfigError(f"[output].quantities: unknown '{q}'{_suggest(q, _QUANTITIES)}")
    out.setdefault("spectral_axis", "auto")
    if out["spectral_axis"] not in ("auto", "tabular"):
        raise ConfigError(f"[output].spectral_axis: '{out['spectral_axis']}' is not 'auto' (FREQ or FREQ-LOG "
                          "cubes, one file per frequency for other lists) or 'tabular' (one FREQ-TAB cube)")
    out.setdefault("directory", "rtrace-output")
    out["directory"] = (base_dir / out["directory"]).resolve()
    check_output(out)
    par = _parallel(_section(raw, "parallel"))
    from .study import comparison_section, synthesis_section
    view_names = [v["name"] for v in views]
    synthesis = synthesis_section(_section(raw, "synthesis"), base_dir, view_names)
    comparison = comparison_section(_section(raw, "comparison"), base_dir, view_names, nu)
    job = Job(snap, ion, nu, trace, views, beam, noise, out, base_dir, members, series, par,
              synthesis=synthesis, comparison=comparison)
    built = build_views(job)      # the View constructor validates geometry now, not after tracing
    from .engine import check_sizes
    check_sizes(job, built)       # images and beam kernels fit in memory; beam narrower than the field
    from .study import check_synthesis_grids
    check_synthesis_grids(job, built)
    from .inputs import check_datasets, check_ionization
    check_ionization(job)         # the model's values, and sources against the grid, before any field is read
    check_datasets(job)           # the named datasets exist, numeric, 3-D, one shape (metadata only)
    return job


def load_job(path):
    """Read and validate a TOML job file."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"job file not found: {path}")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ConfigError(f"job file {path}: cannot be read: {exc}") from None
    text = decode_job_text(data, path)
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    job = parse_job(raw, base_dir=path.parent)
    job.text = text
    return job


def run_job(job, progress=None, restart=False):
    """Execute a validated job; returns the list of files written.

    ``progress(step, total, message)`` is called before each step (the command
    line draws a progress bar from it). Outputs recorded as finished in the
    output folder's manifest are skipped unless ``restart`` (see
    :func:`rtrace.run.pipeline.run`).
    """
    from .pipeline import run
    return run(job, progress=progress, restart=restart)
