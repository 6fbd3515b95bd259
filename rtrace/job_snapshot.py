"""The snapshots a job names, and how each one is loaded (HDF5, yt) or built (demo).

:func:`job_members` lists the job's snapshots (one entry per member of a
series); :func:`build_snapshot` turns one of them into a `~rtrace.Snapshot`,
with the ionization model of ``[ionization]`` when the file holds mass
density rather than electron and ion densities.
"""

from pathlib import Path

__all__ = ["build_snapshot", "job_members"]


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


def job_members(job):
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
    member = member or job_members(job)[0]
    if snap["kind"] == "demo":
        from .demo import scenario
        return scenario(n=snap.get("cells", 64), seed=member.get("seed", snap.get("seed", 7)))
    if snap["kind"] == "yt":
        return _from_yt(job, snap, member)
    from .io.hdf5 import read_hdf5
    kw = {k: snap[k] for k in ("electron_density", "ion_density", "density", "cell_size", "origin", "units")
          if k in snap}
    if "subvolume" in snap:
        kw["subvolume"] = tuple(tuple(p) for p in snap["subvolume"])
    if "density" in snap:
        kw["ionization"] = _ionization_model(job)
    return read_hdf5(member["path"], temperature=snap["temperature"], **kw)


def _yt_field(name):
    """A job's field name: ``"density"`` or ``"gas/density"`` (yt's (type, name))."""
    return tuple(name.split("/", 1)) if "/" in name else name


def _from_yt(job, snap, member):
    from .snapshot import Snapshot
    kw = {k: _yt_field(snap[k]) for k in ("electron_density", "ion_density", "density") if k in snap}
    if "density" in snap:
        ion = job.ionization
        model = ion.get("model", "full")
        kw["ionization"] = _yt_field(ion["fraction"]) if model == "supplied" else _ionization_model(job)
        if model == "supplied":
            kw["composition"] = _composition(ion)
            kw["helium"] = ion.get("helium")
    return Snapshot.from_yt(str(member["path"]), temperature=_yt_field(snap["temperature"]),
                            level=snap.get("level"), **kw)
