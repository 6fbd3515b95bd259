"""The snapshots a job names, and how each one is loaded (HDF5, yt) or built (demo).

:func:`job_members` lists the job's snapshots (one entry per member of a
series); :func:`build_snapshot` turns one of them into a `~rtrace.Snapshot`,
with the ionization model of ``[ionization]`` when the file holds mass
density rather than electron and ion densities.
"""

from pathlib import Path

import astropy.units as u

from ..demo import DEMO_SEED
from ..physics.ionization import DEFAULT_MODEL
from ..physics.ionization.cells import THERMAL_INPUTS

__all__ = ["build_snapshot", "job_members", "ionization_model", "check_ionization", "check_datasets"]


def _composition(ion):
    from ..physics.ionization import DEFAULT_HELIUM_MASS_FRACTION, DEFAULT_HYDROGEN_MASS_FRACTION, Composition
    if "hydrogen_mass_fraction" in ion or "helium_mass_fraction" in ion:
        return Composition(hydrogen=ion.get("hydrogen_mass_fraction", DEFAULT_HYDROGEN_MASS_FRACTION),
                           helium=ion.get("helium_mass_fraction", DEFAULT_HELIUM_MASS_FRACTION))
    return None


def ionization_model(job):
    """The ionization model ``[ionization]`` describes (for snapshots holding mass density).

    A supplied fraction names datasets (or yt fields, ``"gas/x_HII"``) the
    reader fetches, over the same sub-volume.
    """
    from ..physics.ionization import (
        CollisionalEquilibrium,
        FullyIonized,
        IonizingSources,
        SahaEquilibrium,
        SuppliedFraction,
        TemperatureThreshold,
    )
    ion = job.ionization
    comp = _composition(ion)
    model = ion.get("model", DEFAULT_MODEL)
    if model == "threshold":
        kw = {} if "threshold" not in ion else {"threshold": ion["threshold"]}
        return TemperatureThreshold(composition=comp, helium=ion.get("helium", "single"), **kw)
    if model == "supplied":
        return SuppliedFraction(ion["fraction"], composition=comp, helium=ion.get("helium"),
                                helium_ii=ion.get("helium_ii"), helium_iii=ion.get("helium_iii"))
    if model == "sources":
        sources = ion["sources"]
        return IonizingSources(positions=u.Quantity([s["position"].to(u.cm) for s in sources]),
                               rates=u.Quantity([s["rate"].to(u.s**-1) for s in sources]), composition=comp,
                               ionized_temperature=ion.get("ionized_temperature"), helium=ion.get("helium", "single"),
                               allow_outside=ion.get("allow_outside", False),
                               rays_per_cell=ion.get("rays_per_cell", 4.0))
    if model == "saha":
        return SahaEquilibrium(comp)
    if model == "collisional":
        return CollisionalEquilibrium(comp, case=ion.get("case", "A"))
    return FullyIonized(comp, helium=ion.get("helium", "single"))


# [snapshot] keys that name fields, and those read_hdf5 takes as they are.
_FIELD_KEYS = THERMAL_INPUTS + ("electron_density", "ion_density", "density")
_HDF5_KEYS = _FIELD_KEYS + ("gamma", "cell_size", "origin", "units")


def check_ionization(job):
    """Build ``[ionization]``'s model now (a bad value is a ConfigError), and check sources against the grid.

    Sources outside an HDF5 snapshot's grid are an error before any field is
    read: only the shape and geometry of every member file (the sub-volume
    applied) are read here. yt datasets are checked when they are loaded,
    before any ray is cast.
    """
    import numpy as np

    from ..errors import ConfigError, InputError
    from ..io.hdf5 import _subvolume, file_geometry, open_file
    from ..snapshot import _vector3
    if "density" not in job.snapshot:
        return
    try:
        model = ionization_model(job)
    except InputError as exc:
        raise ConfigError(f"[ionization]: {exc}") from None
    if job.ionization.get("model") != "sources" or job.snapshot["kind"] != "hdf5":
        return
    snap = job.snapshot
    thermal = next(k for k in THERMAL_INPUTS if k in snap)
    for member in job_members(job):
        try:
            with open_file(member["path"]) as handle:
                if snap[thermal] not in handle:
                    return                      # the reader names the missing dataset
                shape = handle[snap[thermal]].shape
                cell_size, origin = file_geometry(handle, snap.get("cell_size"), snap.get("origin"),
                                                  member["path"])
            cell = _vector3(cell_size, "cell_size", u.cm)
            org = np.zeros(3) if origin is None else _vector3(origin, "origin", u.cm)
            if "subvolume" in snap:
                slices, starts = _subvolume(tuple(tuple(p) for p in snap["subvolume"]), shape)
                shape = tuple(sl.stop - sl.start for sl in slices)
                org = org + starts * cell
            model.check_geometry(shape, cell, org)
        except InputError as exc:
            raise ConfigError(f"[ionization].sources: {exc} (snapshot '{member['path']}')") from None


def _job_key(job, message):
    """``"[snapshot].temperature: ..."`` from a reader's ``"temperature: ..."`` (the key the job wrote)."""
    from ..io.hdf5 import MODEL_FIELD
    param, sep, rest = message.partition(": ")
    if sep and param in job.snapshot:
        return f"[snapshot].{param}: {rest}"
    if sep and param.startswith(MODEL_FIELD):
        name = param[len(MODEL_FIELD):]
        keys = [k for k in ("fraction", "helium_ii", "helium_iii") if job.ionization.get(k) == name]
        return f"[ionization].{keys[0] if keys else 'fraction'}: {rest}"
    return f"[snapshot]: {message}"


def check_datasets(job):
    """Check, before any field is read, that every HDF5 snapshot of the job holds the datasets it names.

    Only metadata is read: each named dataset (thermal input, densities,
    supplied ionized fractions) must exist, be numeric and 3-D, share one
    shape and have a known unit; a ``subvolume`` must lie inside that shape.
    For a series, every member file is checked. yt datasets are checked
    when they are loaded.

    Raises
    ------
    ConfigError
        Naming the job key (``[snapshot].temperature``), the dataset and the file.
    """
    from ..errors import ConfigError, InputError
    from ..io.hdf5 import _subvolume, checked_names, file_geometry, open_fields, open_file, wanted_fields

    snap = job.snapshot
    if snap["kind"] != "hdf5":
        return
    model = ionization_model(job) if "density" in snap else None
    kw = {k: snap.get(k) for k in _FIELD_KEYS}
    for member in job_members(job):
        try:
            wanted, _ = wanted_fields(**kw, ionization=model, composition=None, helium=None)
            wanted = checked_names(wanted, snap.get("units") or {})
            with open_file(member["path"]) as handle:
                _, shape, _ = open_fields(handle, wanted, snap.get("units") or {}, member["path"])
                file_geometry(handle, snap.get("cell_size"), snap.get("origin"), member["path"])
            if "subvolume" in snap:
                _subvolume(tuple(tuple(p) for p in snap["subvolume"]), shape)
        except InputError as exc:
            raise ConfigError(f"{_job_key(job, str(exc))} (snapshot '{member['path']}')") from None


def job_members(job):
    """The job's snapshots; a Job built by hand without ``snapshots`` has its single one."""
    if job.snapshots:
        return job.snapshots
    snap = job.snapshot
    if snap["kind"] == "demo":
        return [{"label": "demo", "seed": snap.get("seed", DEMO_SEED)}]
    return [{"label": Path(snap["path"]).stem, "path": Path(snap["path"])}]


def build_snapshot(job, member=None):
    """Load (HDF5) or build (demo) one of the job's snapshots.

    Parameters
    ----------
    job : `~rtrace.run.job.Job`
    member : dict, optional
        An entry of ``job.snapshots``; default the first.

    Returns
    -------
    `~rtrace.Snapshot`
    """
    snap = job.snapshot
    member = member or job_members(job)[0]
    if snap["kind"] == "demo":
        from ..demo import scenario
        return scenario(n=snap.get("cells", 64), seed=member.get("seed", snap.get("seed", DEMO_SEED)))
    if snap["kind"] == "yt":
        return _from_yt(job, snap, member)
    from ..io.hdf5 import read_hdf5
    kw = {k: snap[k] for k in _HDF5_KEYS if k in snap}
    if "subvolume" in snap:
        kw["subvolume"] = tuple(tuple(p) for p in snap["subvolume"])
    if "density" in snap:
        kw["ionization"] = ionization_model(job)
    return read_hdf5(member["path"], **kw)


def _yt_field(name):
    """A job's field name: ``"density"`` or ``"gas/density"`` (yt's (type, name))."""
    return tuple(name.split("/", 1)) if "/" in name else name


def _from_yt(job, snap, member):
    from ..snapshot import Snapshot
    kw = {k: _yt_field(snap[k]) for k in _FIELD_KEYS if k in snap}
    if "gamma" in snap:
        kw["gamma"] = snap["gamma"]
    if "density" in snap:
        kw["ionization"] = ionization_model(job)
    return Snapshot.from_yt(str(member["path"]), level=snap.get("level"), **kw)
