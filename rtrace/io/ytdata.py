"""Snapshots from any simulation code yt can read.

yt (Turk et al. 2011, ApJS 192, 9) loads the outputs of many hydrodynamics
codes into one data model; this reader takes a loaded dataset (or a path
for ``yt.load``) and field names, carries yt's units through astropy, and
builds

* a uniform :class:`~rtrace.Snapshot` when the data are one level of grids
  (or when a resampling ``level`` is asked for explicitly), or
* an :class:`~rtrace.amr.AMRSnapshot` holding every grid of a
  block-structured AMR hierarchy at its own resolution, traced leaf by leaf
  with no resampling to the finest level.

Datasets without grids (octree or particle codes) need ``level=``: they are
then sampled on yt's covering grid at that level, and the provenance says so.
"""

import os

import numpy as np

from ..amr import AMRSnapshot, Grid
from ..errors import InputError
from ..gas import derive_fields, thermal_input
from ..physics.freefree import check_temperature_range
from ..physics.ionization import RESERVED_NAMES, IonizationModel
from ..physics.ionization.cells import THERMAL_INPUTS
from ..quantities import CellTally, storage_dtype
from ..snapshot import register_reader

__all__ = ["from_yt"]

#: Per-cell inputs and the bound each must satisfy: (lower, strict).
_BOUNDS = {
    "temperature": (0.0, True),
    "pressure": (0.0, True),
    "internal_energy": (0.0, True),
    "electron_density": (0.0, False),
    "ion_density": (0.0, False),
    "density": (0.0, False),
}


def _load(ds):
    import yt

    if isinstance(ds, (str, os.PathLike)):
        if not os.path.exists(ds):
            raise InputError(f"yt dataset: '{ds}' does not exist")
        return yt.load(os.fspath(ds))
    if not hasattr(ds, "domain_dimensions") or not hasattr(ds, "field_list"):
        raise InputError(f"yt dataset: expected a loaded yt dataset or a path, got {type(ds).__name__}")
    return ds


def _resolve_field(ds, name, param):
    """The yt field key for ``name`` (a name or a ``(type, name)`` tuple); the error lists what exists."""
    known = list(dict.fromkeys(list(ds.field_list) + list(ds.derived_field_list)))
    if isinstance(name, tuple):
        if tuple(name) in known:
            return tuple(name)
        wanted = name[1]
    else:
        wanted = str(name)
        matches = [f for f in known if f[1] == wanted]
        for ftype in ("gas", ds.field_list[0][0] if ds.field_list else None):
            if (ftype, wanted) in matches:
                return (ftype, wanted)
        if matches:
            return matches[0]
    on_disk = ", ".join(f"{t}/{n}" for t, n in ds.field_list)
    gas = sorted({n for t, n in known if t == "gas"})
    raise InputError(
        f"{param}: yt field '{name if isinstance(name, str) else '/'.join(name)}' is not in "
        f"{ds}; fields on disk: {on_disk}; derived gas fields: {', '.join(gas) or 'none'}"
    )


def _fraction_field(ds, ionization):
    """True when ``ionization`` names a dataset field (an ionized fraction) rather than a model."""
    if isinstance(ionization, tuple):
        return True
    return isinstance(ionization, str) and ionization.strip().lower() not in RESERVED_NAMES


def _yt_name(name):
    """A field name as given in a model: ``"x_HII"`` or ``"gas/x_HII"`` for yt's (type, name)."""
    return tuple(name.split("/", 1)) if isinstance(name, str) and "/" in name else name


def _quantity(data, key):
    return data[key].to_astropy()


def _inputs(data, keys):
    """Quantities of the fields ``keys`` (param -> yt key) read from ``data`` (a grid or covering grid)."""
    return {param: _quantity(data, key) for param, key in keys.items()}


def _validate(all_inputs, where):
    """Every grid's inputs counted per field (:class:`~rtrace.quantities.CellTally`): one error per field."""
    tallies = {}
    for inputs in all_inputs:
        for param, q in inputs.items():
            if param in _BOUNDS:
                if param not in tallies:
                    tallies[param] = CellTally(param, *_BOUNDS[param], where=f"in {where}")
                tallies[param].add(np.asarray(q.value))
    for tally in tallies.values():
        tally.raise_if_bad()


def _terms(inputs, options, dtype, cell, origin):
    """``(T_e, n_e, ion term, provenance)`` of one grid's (or the covering grid's) inputs."""
    import astropy.units as u

    ionization = options["ionization"]
    if "ionization" in inputs:
        ionization = np.asarray(inputs["ionization"].to_value(u.dimensionless_unscaled), np.float64)
    fields = {
        name: np.asarray(inputs[key].to_value(u.dimensionless_unscaled), np.float64)
        for key, name in options["model_fields"].items()
    }
    kw = {k: inputs.get(k) for k in THERMAL_INPUTS + ("electron_density", "ion_density", "density")}
    return derive_fields(
        cell,
        origin,
        ionization=ionization,
        composition=options["composition"],
        helium=options["helium"],
        gamma=options["gamma"],
        fields=fields or None,
        dtype=dtype,
        **kw,
    )


def from_yt(
    ds,
    *,
    temperature=None,
    electron_density=None,
    ion_density=None,
    density=None,
    pressure=None,
    internal_energy=None,
    gamma=None,
    ionization=None,
    composition=None,
    helium=None,
    level=None,
    dtype=np.float32,
):
    """Build a snapshot from a yt dataset (see :meth:`rtrace.Snapshot.from_yt`)."""
    from ..snapshot import Snapshot

    dtype = storage_dtype(dtype)
    if (electron_density is None) == (density is None):
        raise InputError("electron_density / density: give exactly one of them (density with ionization)")
    thermal, thermal_name = thermal_input(temperature, pressure, internal_energy)
    if electron_density is not None and thermal != "temperature":
        raise InputError(
            f"{thermal}: needs density (the particle count that turns it into a temperature "
            "depends on the mass density and its ionization)"
        )
    ds = _load(ds)
    keys = {thermal: _resolve_field(ds, thermal_name, thermal)}
    model_fields = {}
    if electron_density is not None:
        keys["electron_density"] = _resolve_field(ds, electron_density, "electron_density")
        if ion_density is not None:
            keys["ion_density"] = _resolve_field(ds, ion_density, "ion_density")
        if ionization is not None:
            raise InputError("ionization: only used with density; electron_density was given directly")
    else:
        if ion_density is not None:
            raise InputError("ion_density: only used with electron_density")
        keys["density"] = _resolve_field(ds, density, "density")
        if _fraction_field(ds, ionization):
            keys["ionization"] = _resolve_field(ds, ionization, "ionization")
            ionization = None
        elif isinstance(ionization, IonizationModel):
            # fields the model reads by name (e.g. SuppliedFraction("x_HII", helium_ii="x_HeII"))
            for n, name in enumerate(ionization.field_names()):
                key = f"model_field_{n}"
                keys[key] = _resolve_field(ds, _yt_name(name), f"ionization field '{name}'")
                model_fields[key] = name
    options = {
        "ionization": ionization,
        "composition": composition,
        "helium": helium,
        "gamma": gamma,
        "model_fields": model_fields,
    }
    left = ds.domain_left_edge.to("cm").d.astype(float)
    width = (ds.domain_right_edge - ds.domain_left_edge).to("cm").d.astype(float)
    base = np.asarray(ds.domain_dimensions, np.int64)
    fields_text = ", ".join(f"{p}={'/'.join(k)}" for p, k in keys.items())
    grids = getattr(ds.index, "grids", None) if level is None else None
    max_level = int(getattr(ds.index, "max_level", 0)) if grids is not None else 0
    if level is not None or grids is None or max_level == 0:
        if grids is None and level is None:
            raise InputError(
                f"level: {ds} has no grid hierarchy (octree or particle data); give a level "
                "(level= in Python, [snapshot].level in a job file) to sample it on yt's covering grid "
                "at that refinement level"
            )
        lev = 0 if level is None else int(level)
        if lev < 0:
            raise InputError(f"level: must be >= 0, got {level}")
        dims = base * int(ds.refine_by) ** lev
        cg = ds.covering_grid(lev, ds.domain_left_edge, dims)
        inputs = _inputs(cg, keys)
        _validate([inputs], f"{ds}")
        t, ne, ni, derived = _terms(inputs, options, dtype, width / dims, left)
        check_temperature_range(t, "temperature")
        how_sampled = "uniform level-0 grid" if level is None else f"sampled on yt's covering grid at level {lev}"
        prov = {"source": f"yt: {ds} ({how_sampled}; {fields_text})", **derived}
        return Snapshot(t, ne, ni, width / dims, left, prov)
    if isinstance(ionization, IonizationModel) and not ionization.local:
        raise InputError(
            f"ionization: {type(ionization).__name__} needs the whole grid at one resolution; "
            f"{ds} is a {max_level + 1}-level AMR hierarchy: give a level (level= in Python, "
            "[snapshot].level in a job file) to sample it on a uniform grid"
        )
    return _amr_snapshot(ds, grids, keys, options, dtype, base, left, width, fields_text)


def _amr_snapshot(ds, grids, keys, options, dtype, base, left, width, fields_text):
    r = int(np.max(ds.refine_by))
    levels = 1 + max(int(g.Level) for g in grids)
    all_inputs, boxes = [], []
    for g in grids:
        lev = int(g.Level)
        start = np.asarray(g.get_global_startindex(), np.int64)
        dims = np.asarray(g.ActiveDimensions, np.int64)
        scale = r ** (levels - 1 - lev)
        boxes.append((lev, start * scale, (start + dims) * scale, f"grid {g.id}"))
        all_inputs.append(_inputs(g, keys))
    _validate(all_inputs, f"{len(grids)} grids of {ds}")
    out, derived = [], {}
    for g, (lev, lo, hi, label), inputs in zip(grids, boxes, all_inputs, strict=True):
        dims = np.asarray(g.ActiveDimensions, np.int64)
        edge = np.asarray(g.LeftEdge.to("cm").d, float)
        size = np.asarray((g.RightEdge - g.LeftEdge).to("cm").d, float) / dims
        t, ne, ni, derived = _terms(inputs, options, dtype, size, edge)
        check_temperature_range(t, "temperature")
        out.append(Grid(lev, lo, hi, ne, ni, t, label))
    derived.pop("ionization_state", None)  # the last grid's alone; not the dataset's
    prov = {"source": f"yt: {ds} (AMR, {levels} levels, {len(grids)} grids; {fields_text})", **derived}
    return AMRSnapshot(out, r, base, width / base, left, prov)


register_reader("yt", from_yt)  # behind Snapshot.from_yt
