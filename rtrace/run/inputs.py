"""The snapshots a job names, and how each one is loaded (HDF5, yt) or built (demo).

:func:`job_members` lists the job's snapshots (one entry per member of a
series); :func:`build_snapshot` turns one of them into a `~rtrace.Snapshot`,
with the ionization model of ``[ionization]`` when the file holds mass
density rather than electron and ion densities.
"""

from pathlib import Path

import astropy.units as u

from ..demo import DEMO_SEED
from ..physics.ionization.cells import THERMAL_INPUTS
from .snapshot_sections import Member

__all__ = ["build_snapshot", "job_members", "ionization_model", "check_ionization", "check_datasets"]


def _or(value, default):
    return default if value is None else value


def _composition(ion):
    from ..physics.ionization import DEFAULT_HELIUM_MASS_FRACTION, DEFAULT_HYDROGEN_MASS_FRACTION, Composition

    if ion.hydrogen_mass_fraction is not None or ion.helium_mass_fraction is not None:
        return Composition(
            hydrogen=_or(ion.hydrogen_mass_fraction, DEFAULT_HYDROGEN_MASS_FRACTION),
            helium=_or(ion.helium_mass_fraction, DEFAULT_HELIUM_MASS_FRACTION),
        )
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
    model = ion.model_name
    if model == "threshold":
        kw = {} if ion.threshold is None else {"threshold": ion.threshold}
        return TemperatureThreshold(composition=comp, helium=_or(ion.helium, "single"), **kw)
    if model == "supplied":
        return SuppliedFraction(
            ion.fraction, composition=comp, helium=ion.helium, helium_ii=ion.helium_ii, helium_iii=ion.helium_iii
        )
    if model == "sources":
        sources = ion.sources
        return IonizingSources(
            positions=u.Quantity([s.position.to(u.cm) for s in sources]),
            rates=u.Quantity([s.rate.to(u.s**-1) for s in sources]),
            composition=comp,
            ionized_temperature=ion.ionized_temperature,
            helium=_or(ion.helium, "single"),
            allow_outside=_or(ion.allow_outside, False),
            rays_per_cell=_or(ion.rays_per_cell, 4.0),
        )
    if model == "saha":
        return SahaEquilibrium(comp)
    if model == "collisional":
        return CollisionalEquilibrium(comp, case=_or(ion.case, "A"))
    return FullyIonized(comp, helium=_or(ion.helium, "single"))


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
    from ..io.hdf5 import file_geometry, open_file, subvolume_slices
    from ..quantities import parse_vector3

    if job.snapshot.density is None:
        return
    try:
        model = ionization_model(job)
    except InputError as exc:
        raise ConfigError(f"[ionization]: {exc}") from None
    if job.ionization.model != "sources" or job.snapshot.kind != "hdf5":
        return
    snap = job.snapshot
    thermal = getattr(snap, snap.thermal_input)
    for member in job_members(job):
        try:
            with open_file(member.path) as handle:
                if thermal not in handle:
                    return  # the reader names the missing dataset
                shape = handle[thermal].shape
                cell_size, origin = file_geometry(handle, snap.cell_size, snap.origin, member.path)
            cell = parse_vector3(cell_size, "cell_size", u.cm)
            org = np.zeros(3) if origin is None else parse_vector3(origin, "origin", u.cm)
            if snap.subvolume is not None:
                slices, starts = subvolume_slices(tuple(tuple(p) for p in snap.subvolume), shape)
                shape = tuple(sl.stop - sl.start for sl in slices)
                org = org + starts * cell
            model.check_geometry(shape, cell, org)
        except InputError as exc:
            raise ConfigError(f"[ionization].sources: {exc} (snapshot '{member.path}')") from None


def _job_key(job, message):
    """``"[snapshot].temperature: ..."`` from a reader's ``"temperature: ..."`` (the key the job wrote)."""
    from ..io.hdf5 import MODEL_FIELD

    param, sep, rest = message.partition(": ")
    if sep and param in job.snapshot.as_dict():
        return f"[snapshot].{param}: {rest}"
    if sep and param.startswith(MODEL_FIELD):
        name = param[len(MODEL_FIELD) :]
        keys = [k for k in ("fraction", "helium_ii", "helium_iii") if getattr(job.ionization, k) == name]
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
    from ..io.hdf5 import checked_names, file_geometry, open_fields, open_file, subvolume_slices, wanted_fields

    snap = job.snapshot
    if snap.kind != "hdf5":
        return
    model = ionization_model(job) if snap.density is not None else None
    kw = {k: getattr(snap, k) for k in _FIELD_KEYS}
    for member in job_members(job):
        try:
            wanted, _ = wanted_fields(**kw, ionization=model, composition=None, helium=None)
            wanted = checked_names(wanted, snap.units or {})
            with open_file(member.path) as handle:
                _, shape, _ = open_fields(handle, wanted, snap.units or {}, member.path)
                file_geometry(handle, snap.cell_size, snap.origin, member.path)
            if snap.subvolume is not None:
                subvolume_slices(tuple(tuple(p) for p in snap.subvolume), shape)
        except InputError as exc:
            raise ConfigError(f"{_job_key(job, str(exc))} (snapshot '{member.path}')") from None


def job_members(job):
    """The job's snapshots; a Job built by hand without ``snapshots`` has its single one."""
    if job.snapshots:
        return job.snapshots
    snap = job.snapshot
    if snap.kind == "demo":
        return (Member("demo", seed=_or(snap.seed, DEMO_SEED)),)
    return (Member(Path(snap.path).stem, path=Path(snap.path)),)


def build_snapshot(job, member=None):
    """Load (HDF5) or build (demo) one of the job's snapshots.

    Parameters
    ----------
    job : `~rtrace.run.job.Job`
    member : `~rtrace.run.snapshot_sections.Member`, optional
        An entry of ``job.snapshots``; default the first.

    Returns
    -------
    `~rtrace.Snapshot`
    """
    snap = job.snapshot
    member = member or job_members(job)[0]
    if snap.kind == "demo":
        from ..demo import scenario

        return scenario(n=_or(snap.cells, 64), seed=_or(member.seed, _or(snap.seed, DEMO_SEED)))
    if snap.kind == "yt":
        return _from_yt(job, snap, member)
    from ..io.hdf5 import read_hdf5

    kw = {k: getattr(snap, k) for k in _HDF5_KEYS if getattr(snap, k) is not None}
    if snap.subvolume is not None:
        kw["subvolume"] = tuple(tuple(p) for p in snap.subvolume)
    if snap.density is not None:
        kw["ionization"] = ionization_model(job)
    return read_hdf5(member.path, **kw)


def _yt_field(name):
    """A job's field name: ``"density"`` or ``"gas/density"`` (yt's (type, name))."""
    return tuple(name.split("/", 1)) if "/" in name else name


def _from_yt(job, snap, member):
    from ..snapshot import Snapshot

    kw = {k: _yt_field(getattr(snap, k)) for k in _FIELD_KEYS if getattr(snap, k) is not None}
    if snap.gamma is not None:
        kw["gamma"] = snap.gamma
    if snap.density is not None:
        kw["ionization"] = ionization_model(job)
    return Snapshot.from_yt(str(member.path), level=snap.level, **kw)
