"""The job file's ``[snapshot]`` and ``[ionization]`` sections as typed, frozen records, one parser each.

:class:`SnapshotSection` is what every snapshot of the job shares (kind,
dataset names, units, geometry) and :func:`snapshot_members` lists the
snapshots themselves (one, or a series); :class:`IonizationSection` is the
ionization model of snapshots that hold mass density. Errors are
:class:`~rtrace.errors.ConfigError` naming ``[snapshot].key`` or
``[ionization].key``.
"""

import glob
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np

from ..demo import DEMO_SEED
from ..errors import ConfigError
from ..physics.ionization import DEFAULT_HELIUM_MASS_FRACTION, DEFAULT_HYDROGEN_MASS_FRACTION, DEFAULT_MODEL
from ..physics.ionization.cells import THERMAL_INPUTS
from .checks import check_snapshot
from .schema import SCHEMA, typed_table
from .sections import Section
from .values import _check_keys, _suggest, _typed

__all__ = ["SnapshotSection", "IonizationSection", "Source", "Member", "snapshot_members", "MODEL_KEYS"]

_KINDS = ("demo", "hdf5", "yt")


@dataclass(frozen=True)
class Member:
    """One snapshot of the job: its ``label`` (names its outputs), and a ``path`` (HDF5, yt) or a ``seed`` (demo)."""

    label: str
    path: Path = None
    seed: int = None

    @property
    def origin(self):
        """The file, or the seed, that this snapshot comes from (for messages)."""
        return self.seed if self.path is None else self.path


@dataclass(frozen=True)
class SnapshotSection(Section):
    """``[snapshot]`` as validated: what every snapshot of the job shares.

    ``kind`` is always set (default ``"demo"``); ``path`` is resolved (a
    single file); every other key is None when the job does not give it.
    Lists (``paths``, ``seeds``, ``subvolume``) are tuples.
    """

    kind: str = "demo"
    path: Path = None
    paths: tuple = None
    pattern: str = None
    cells: int = None
    seed: int = None
    seeds: tuple = None
    temperature: str = None
    pressure: str = None
    internal_energy: str = None
    gamma: float = None
    electron_density: str = None
    ion_density: str = None
    density: str = None
    cell_size: u.Quantity = None
    origin: u.Quantity = None
    units: dict = None
    subvolume: tuple = None
    level: int = None

    @property
    def thermal_input(self):
        """The thermal key given (``"temperature"``, ``"pressure"`` or ``"internal_energy"``), or None."""
        return next((k for k in THERMAL_INPUTS if getattr(self, k) is not None), None)

    @classmethod
    def parse(cls, table, base_dir):
        """``(section, members, series)`` from ``[snapshot]``; see :func:`snapshot_members` for the members.

        Raises
        ------
        ConfigError
            Naming ``[snapshot].key``: an unknown key or kind, keys of another kind, no or several
            thermal inputs, missing files, a pattern matching nothing, two snapshots with one label.
        """
        if table is None:
            raise ConfigError(
                "job: the [snapshot] table is required (kind = 'hdf5' or 'yt' with a path, or "
                "kind = 'demo' for the built-in scenario)"
            )
        snap = typed_table(table, "snapshot")
        check_snapshot(snap, table)
        snap["kind"] = kind = snap.get("kind", "demo")
        if kind not in _KINDS:
            raise ConfigError(f"[snapshot].kind: '{kind}' is not 'demo', 'hdf5' or 'yt'")
        _check_kind_keys(snap, kind)
        if kind in ("hdf5", "yt"):
            _thermal(snap, kind)
        members, series = snapshot_members(snap, Path(base_dir))
        return cls._build(snap), members, series


def _check_kind_keys(snap, kind):
    if kind == "yt":
        for key in ("cell_size", "origin", "units", "subvolume"):
            if key in snap:
                raise ConfigError(
                    f"[snapshot].{key}: not used with kind = 'yt' (yt reads the geometry and units from the dataset)"
                )
    elif "level" in snap:
        raise ConfigError("[snapshot].level: only used with kind = 'yt'")


def _thermal(snap, kind):
    """``[snapshot]``: one thermal input; pressure and internal energy need the mass density."""
    thermal = [k for k in THERMAL_INPUTS if k in snap]
    if len(thermal) != 1:
        raise ConfigError(
            f"[snapshot]: give exactly one of 'temperature', 'pressure' or 'internal_energy' when "
            f"kind = '{kind}' (got {', '.join(repr(k) for k in thermal) or 'none'})"
        )
    if ("electron_density" in snap) == ("density" in snap):
        raise ConfigError("[snapshot]: give exactly one of 'electron_density' or 'density'")
    if thermal[0] != "temperature" and "density" not in snap:
        raise ConfigError(
            f"[snapshot].{thermal[0]}: needs 'density' (the temperature is derived from it with the "
            "ionization model's particle count)"
        )
    if "gamma" in snap:
        if thermal[0] == "temperature":
            raise ConfigError("[snapshot].gamma: only used with 'pressure' or 'internal_energy'")
        if not (np.isfinite(snap["gamma"]) and snap["gamma"] > 1):
            raise ConfigError(f"[snapshot].gamma: the adiabatic index must be > 1, got {snap['gamma']}")


def _hdf5_file(value, where, base_dir, directories=False):
    """Resolve a snapshot path (relative to the job file); ``directories``: yt datasets may be folders."""
    if not isinstance(value, str):
        raise ConfigError(f"{where}: expected str, got {type(value).__name__} {value!r}")
    path = (base_dir / value).resolve()
    try:
        found = path.exists() if directories else path.is_file()
    except OSError as exc:  # a name too long for the file system
        raise ConfigError(f"{where}: {path} cannot be used: {exc.strerror}") from None
    if not found:
        raise ConfigError(f"{where}: {'path' if directories else 'file'} not found: {path}")
    return path


def _unique_labels(members, where):
    """Outputs are named by label, so two snapshots with one label would overwrite each other."""
    seen = {}
    for m in members:
        if m.label in (".", ".."):  # '...h5' has the stem '..': its folder would be the parent's
            raise ConfigError(
                f"{where}: the snapshot {m.path} is labelled '{m.label}' by its file "
                f"name, which cannot name its output folder; rename the file"
            )
        if m.label in seen:
            raise ConfigError(
                f"{where}: two snapshots share the label '{m.label}' ({seen[m.label]} and "
                f"{m.origin}); outputs are named by label, so labels must differ"
            )
        seen[m.label] = m.origin


def _demo_members(snap):
    for key in ("paths", "pattern"):
        if key in snap:
            raise ConfigError(
                f"[snapshot].{key}: only used with kind = 'hdf5' or 'yt' (a series of demo snapshots takes 'seeds')"
            )
    if "seeds" not in snap:
        return [Member("demo", seed=snap.get("seed", DEMO_SEED))], False
    if "seed" in snap:
        raise ConfigError("[snapshot]: give either 'seed' (one demo snapshot) or 'seeds' (a series), not both")
    seeds = snap["seeds"]
    if not seeds:
        raise ConfigError("[snapshot].seeds: expected a non-empty list of integers")
    for i, seed in enumerate(seeds):
        if isinstance(seed, bool) or not isinstance(seed, int):
            raise ConfigError(f"[snapshot].seeds[{i}]: expected int, got {type(seed).__name__} {seed!r}")
    members = [Member(f"seed{seed}", seed=seed) for seed in seeds]
    _unique_labels(members, "[snapshot].seeds")
    return members, True


def _pattern_files(pattern, base_dir, dirs):
    # relative to the job file, like every other path in a job; sorted so that the series
    # order (and therefore the output layout and progress) does not depend on the file system
    full = pattern if Path(pattern).is_absolute() else str(base_dir / pattern)
    files = sorted(
        Path(p).resolve() for p in glob.glob(full, recursive=True) if (Path(p).exists() if dirs else Path(p).is_file())
    )
    if not files:
        raise ConfigError(f"[snapshot].pattern: '{pattern}' matches no file (looked in {Path(full).parent.resolve()})")
    return files


def _file_members(snap, base_dir):
    """Members of an HDF5 or yt job; ``snap["path"]`` is resolved in place."""
    if "seeds" in snap:
        raise ConfigError(
            "[snapshot].seeds: only used with kind = 'demo' (a series of files takes 'paths' or 'pattern')"
        )
    kind = snap["kind"]
    dirs = kind == "yt"
    sources = [k for k in ("path", "paths", "pattern") if k in snap]
    if not sources:
        raise ConfigError(
            f"[snapshot]: 'path' is required when kind = '{kind}' (or 'paths' / 'pattern' for a series of files)"
        )
    if len(sources) > 1:
        raise ConfigError(
            f"[snapshot]: give one of 'path', 'paths' or 'pattern', not {' and '.join(repr(k) for k in sources)}"
        )
    if "path" in snap:
        snap["path"] = _hdf5_file(snap["path"], "[snapshot].path", base_dir, dirs)
        return [Member(snap["path"].stem, path=snap["path"])], False
    if "paths" in snap:
        if not snap["paths"]:
            raise ConfigError("[snapshot].paths: expected a non-empty list of file names")
        files = [_hdf5_file(v, f"[snapshot].paths[{i}]", base_dir, dirs) for i, v in enumerate(snap["paths"])]
        where = "[snapshot].paths"
    else:
        files = _pattern_files(snap["pattern"], base_dir, dirs)
        where = "[snapshot].pattern"
    members = [Member(f.stem, path=f) for f in files]
    _unique_labels(members, where)
    return members, True


def snapshot_members(snap, base_dir):
    """``(members, series)`` from a typed ``[snapshot]`` dict (``path`` resolved in place).

    ``members`` is a tuple of :class:`Member`, one per snapshot, in
    order; ``series`` is True when the job names a series (``paths``, ``pattern`` or ``seeds``).
    """
    members, series = _demo_members(snap) if snap["kind"] == "demo" else _file_members(snap, base_dir)
    return tuple(members), series


# The ionization models a job may name, and which [ionization] keys each one takes.
MODEL_KEYS = {
    "full": {"helium"},
    "threshold": {"threshold", "helium"},
    "saha": set(),
    "collisional": {"case"},
    "supplied": {"fraction", "helium", "helium_ii", "helium_iii"},
    "sources": {"sources", "ionized_temperature", "helium", "allow_outside", "rays_per_cell"},
}
_HELIUM_CHOICES = {
    "full": ("single", "double"),
    "threshold": ("single", "double"),
    "supplied": ("single", "double", "none", "follow"),
    "sources": ("single", "none"),
}
_COMMON_IONIZATION = {"model", "hydrogen_mass_fraction", "helium_mass_fraction"}


@dataclass(frozen=True)
class Source(Section):
    """One ``[[ionization.sources]]`` entry: a position (three lengths) and an ionizing photon rate."""

    position: u.Quantity = None
    rate: u.Quantity = None

    @classmethod
    def parse(cls, entry, index):
        """Validate the ``index``-th source; ConfigError naming ``[ionization].sources[i].key``."""
        where = f"[ionization].sources[{index}]"
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
        return cls._build(spec)


def _sources(entries):
    """``[[ionization.sources]]``: a tuple of :class:`Source`."""
    if not entries:
        raise ConfigError(
            "[ionization].sources: expected a non-empty list of sources, each "
            "{ position = ['1 pc', '2 pc', '3 pc'], rate = '1e49 / s' }"
        )
    return tuple(Source.parse(entry, i) for i, entry in enumerate(entries))


@dataclass(frozen=True)
class IonizationSection(Section):
    """``[ionization]`` as validated against the model it names; every key None when not given.

    ``model`` None means ``"full"`` (see :attr:`model_name`).
    """

    model: str = None
    threshold: u.Quantity = None
    helium: str = None
    fraction: str = None
    helium_ii: str = None
    helium_iii: str = None
    case: str = None
    sources: tuple = None
    ionized_temperature: u.Quantity = None
    allow_outside: bool = None
    rays_per_cell: float = None
    hydrogen_mass_fraction: float = None
    helium_mass_fraction: float = None

    @property
    def model_name(self):
        """The model's name, ``"full"`` when the job names none."""
        return self.model or DEFAULT_MODEL

    @classmethod
    def parse(cls, table, snapshot):
        """Validate ``[ionization]`` for the job's ``snapshot`` (a :class:`SnapshotSection`)."""
        ion = typed_table(table, "ionization")
        if ion and (snapshot.kind == "demo" or snapshot.electron_density is not None):
            raise ConfigError(
                "[ionization]: only used with [snapshot].density (the demo scenario and "
                "snapshots with electron_density carry their own ionization)"
            )
        model = ion.get("model", DEFAULT_MODEL)
        _check_model_keys(ion, model)
        if model == "sources":
            if "sources" not in ion:
                raise ConfigError(
                    "[ionization]: model = 'sources' needs 'sources', e.g. [[ionization.sources]] "
                    "position = ['1 pc', '2 pc', '3 pc'], rate = '1e49 / s'"
                )
            ion["sources"] = _sources(ion["sources"])
        _check_ionization_values(ion)
        return cls._build(ion)


def _check_model_keys(ion, model):
    """The model exists, and every key given is one it uses, with an allowed value."""
    if model not in MODEL_KEYS:
        raise ConfigError(
            f"[ionization].model: '{model}'{_suggest(model, MODEL_KEYS)} is not one of {', '.join(MODEL_KEYS)}"
        )
    for key in sorted(set(ion) - _COMMON_IONIZATION - MODEL_KEYS[model]):
        users = [m for m, keys in MODEL_KEYS.items() if key in keys]
        raise ConfigError(
            f"[ionization].{key}: not used by model = '{model}' (it belongs to {' or '.join(repr(m) for m in users)})"
        )
    if "helium" in ion and ion["helium"] not in _HELIUM_CHOICES.get(model, ()):
        raise ConfigError(
            f"[ionization].helium: '{ion['helium']}' is not valid for model = '{model}'; choose "
            f"one of {', '.join(_HELIUM_CHOICES[model])}"
        )
    if "case" in ion and ion["case"] not in ("A", "B"):
        raise ConfigError(f"[ionization].case: '{ion['case']}' is not 'A' or 'B'")
    if model == "supplied" and "fraction" not in ion:
        raise ConfigError(
            "[ionization]: model = 'supplied' needs 'fraction' (the dataset with the hydrogen ionized fraction)"
        )
    if model == "supplied" and "helium" in ion and ({"helium_ii", "helium_iii"} & set(ion)):
        raise ConfigError("[ionization].helium: not used when 'helium_ii' / 'helium_iii' datasets are given")


def _check_ionization_values(ion):
    """Temperatures positive, mass fractions in [0, 1] and summing to at most 1, rays per cell 4 to 64."""
    for key in ("threshold", "ionized_temperature"):
        if key in ion and not ion[key].to_value(u.K) > 0:
            raise ConfigError(f"[ionization].{key}: must be a positive temperature, got '{ion[key]}'")
    for key in ("hydrogen_mass_fraction", "helium_mass_fraction"):
        if key in ion and not 0 <= ion[key] <= 1:
            raise ConfigError(f"[ionization].{key}: a mass fraction lies in [0, 1], got {ion[key]}")
    total = ion.get("hydrogen_mass_fraction", DEFAULT_HYDROGEN_MASS_FRACTION) + ion.get(
        "helium_mass_fraction", DEFAULT_HELIUM_MASS_FRACTION
    )
    if total > 1:
        raise ConfigError(
            f"[ionization].helium_mass_fraction: hydrogen_mass_fraction + helium_mass_fraction = "
            f"{total:.6g} exceeds 1 (the defaults are {DEFAULT_HYDROGEN_MASS_FRACTION:.2f} and "
            f"{DEFAULT_HELIUM_MASS_FRACTION:.2f})"
        )
    if "rays_per_cell" in ion and not 4 <= ion["rays_per_cell"] <= 64:
        raise ConfigError(f"[ionization].rays_per_cell: expected a number from 4 to 64, got {ion['rays_per_cell']}")
