"""The job file's tables and keys, with the physical type of every quantity-valued key.

:data:`SCHEMA` is the one list of what a job may say; :func:`typed_table`
reads one table through it (unknown keys get a did-you-mean suggestion,
values are checked for the right type or physical unit). The sections of
:mod:`rtrace.run.sections`, :mod:`rtrace.run.snapshot_sections` and
:mod:`rtrace.run.study` then check what a type cannot express.
"""

from ..errors import ConfigError
from .values import _check_keys, _typed

__all__ = ["SCHEMA", "typed_table"]

# Allowed keys of every table, with the physical type of quantity-valued keys.
SCHEMA = {
    "snapshot": {
        "kind": str,
        "path": str,
        "paths": list,
        "pattern": str,
        "cells": int,
        "seed": int,
        "seeds": list,
        "temperature": str,
        "pressure": str,
        "internal_energy": str,
        "gamma": float,
        "electron_density": str,
        "ion_density": str,
        "density": str,
        "cell_size": "length",
        "origin": "length3",
        "units": dict,
        "subvolume": list,
        "level": int,
    },
    "ionization": {
        "model": str,
        "threshold": "temperature",
        "helium": str,
        "fraction": str,
        "helium_ii": str,
        "helium_iii": str,
        "case": str,
        "sources": list,
        "ionized_temperature": "temperature",
        "allow_outside": bool,
        "rays_per_cell": float,
        "hydrogen_mass_fraction": float,
        "helium_mass_fraction": float,
    },
    "source": {"position": "length3", "rate": "rate"},
    "frequencies": {"values": "frequency_list", "start": "frequency", "stop": "frequency", "num": int, "spacing": str},
    "trace": {"background": str, "supersample": int, "tolerance": float},
    "view": {
        "name": str,
        "los": list,
        "north": list,
        "npix": (int, list),
        "width": "length",
        "distance": "length",
        "center": "length3",
        "ra": "angle",
        "dec": "angle",
    },
    "beam": {"major": "angle", "minor": "angle", "pa": "angle", "scaling": str, "reference_frequency": "frequency"},
    "noise": {"rms": ("flux_per_beam", "flux_per_beam_list"), "seed": int},
    "output": {
        "directory": str,
        "fits": bool,
        "pictures": bool,
        "sed": bool,
        "quantities": list,
        "picture_format": str,
        "prefix": str,
        "spectral_axis": str,
    },
    "parallel": {"scheduler": str, "workers": int, "max_memory": "memory_size"},
    "synthesis": {
        "antennas": str,
        "antenna_unit": str,
        "latitude": "angle",
        "hour_angle_range": list,
        "hour_angle_step": ("angle", "time"),
        "n_hour_angles": int,
        "min_elevation": "angle",
        "dish_diameter": "length",
        "primary_beam": str,
        "primary_beam_fwhm_factor": float,
        "weighting": str,
        "robust": float,
        "gain": float,
        "niter": int,
        "threshold": "flux_per_beam",
        "pixel_scale": "angle",
        "image_size": int,
        "views": list,
    },
    "comparison": {
        "observation": str,
        "frequency": "frequency",
        "beam": list,
        "unit": str,
        "apertures": list,
        "views": list,
    },
}


def typed_table(table, name, where=None):
    """``{key: typed value}`` of one table as written (``{}`` when absent), read through :data:`SCHEMA`.

    Parameters
    ----------
    table : dict or None
        The table as the TOML parser gave it.
    name : str
        Its schema entry (``"trace"``, ``"view"``, ...).
    where : str, optional
        How messages name it; default ``[name]``.

    Raises
    ------
    ConfigError
        Not a table; an unknown key (with a did-you-mean suggestion); a value of the wrong type or unit.
    """
    where = where or f"[{name}]"
    if table is None:
        return {}
    if not isinstance(table, dict):
        raise ConfigError(f"{where}: expected a table")
    _check_keys(table, SCHEMA[name], where)
    return {k: _typed(v, SCHEMA[name][k], f"{where}.{k}") for k, v in table.items()}
