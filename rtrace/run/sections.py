"""The job file's instrument, view and run sections as typed, frozen records, one parser each.

Every section is a frozen dataclass whose ``parse`` classmethod reads the
table as written in the TOML file, validates it in full and raises
:class:`~rtrace.errors.ConfigError` naming ``[section].key``. A key the job
does not give is None (the run's default applies), except where the
section says otherwise. :meth:`Section.as_dict` gives the keys the job gave
as a plain mapping, the form the output folder's manifest hashes: it must
stay the same for the same job file, or a resumed run would redo finished
outputs.
"""

import math
import re
from dataclasses import dataclass, fields
from pathlib import Path
from types import MappingProxyType

import astropy.units as u
import numpy as np

from ..errors import ConfigError
from ..transfer.result import QUANTITIES
from .checks import check_beam, check_frequencies, check_noise, check_output, check_trace, check_view
from .schema import typed_table
from .values import _suggest

__all__ = [
    "Section",
    "TraceSection",
    "BeamSection",
    "NoiseSection",
    "OutputSection",
    "ParallelSection",
    "ViewSection",
    "parse_frequencies",
    "parse_views",
    "check_scheduler_address",
    "check_workers",
    "QUANTITY_NAMES",
]

QUANTITY_NAMES = QUANTITIES  # what [output].quantities may name: the Result's products


def _plain(value):
    """``value`` as the plain mapping/list form it had before sections were typed (for hashing)."""
    if isinstance(value, Section):
        return value.as_dict()
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    if isinstance(value, (dict, MappingProxyType)):
        return {k: _plain(v) for k, v in value.items()}
    return value


def _frozen(value):
    """Lists (also nested) as tuples, so that a section's values cannot be changed in place."""
    if isinstance(value, list):
        return tuple(_frozen(v) for v in value)
    return value


@dataclass(frozen=True)
class Section:
    """Base of the typed job sections: frozen, with :meth:`as_dict`."""

    def as_dict(self):
        """``{key: value}`` of the keys that are set (not None), lists as lists: the form the manifest hashes.

        Returns
        -------
        dict
        """
        return {f.name: _plain(getattr(self, f.name)) for f in fields(self) if getattr(self, f.name) is not None}

    @classmethod
    def _build(cls, spec):
        return cls(**{k: _frozen(v) for k, v in spec.items()})


@dataclass(frozen=True)
class TraceSection(Section):
    """``[trace]``: how rays are cast.

    Attributes
    ----------
    background : str, `~astropy.units.Quantity` or None
        ``"cmb"``, a temperature or a specific intensity; None without one (``"none"``).
    supersample : int or None
        Rays per pixel side (a fixed lattice).
    tolerance : float or None
        Relative error per pixel the tracer refines to; None: its default.
    """

    background: object = None
    supersample: int = None
    tolerance: float = None

    @classmethod
    def parse(cls, table):
        """Validate ``[trace]`` (``table`` as written, None when absent); ConfigError naming ``[trace].key``."""
        spec = typed_table(table, "trace")
        check_trace(spec)
        return cls._build(spec)


@dataclass(frozen=True)
class BeamSection(Section):
    """``[beam]``: the Gaussian beam (FWHM axes and position angle), optionally scaled with frequency.

    ``minor`` None means a round beam (``major``), ``pa`` None means 0 deg,
    ``scaling`` None means ``"none"``.
    """

    major: u.Quantity = None
    minor: u.Quantity = None
    pa: u.Quantity = None
    scaling: str = None
    reference_frequency: u.Quantity = None

    @property
    def frequency_scaling(self):
        """``"inverse-frequency"``, or None when the beam is the same at every frequency."""
        return None if self.scaling in (None, "none") else self.scaling

    @classmethod
    def parse(cls, table):
        """Validate ``[beam]``; None when the job has none. ConfigError naming ``[beam].key``."""
        beam = typed_table(table, "beam")
        if not beam:
            return None
        if "major" not in beam:
            raise ConfigError("[beam]: 'major' is required")
        if beam.get("scaling", "none") not in ("none", "inverse-frequency"):
            raise ConfigError(f"[beam].scaling: '{beam['scaling']}' is not 'none' or 'inverse-frequency'")
        if "reference_frequency" in beam and beam.get("scaling", "none") == "none":
            raise ConfigError("[beam].reference_frequency: only used with scaling = 'inverse-frequency'")
        check_beam(beam, table)
        return cls._build(beam)


@dataclass(frozen=True)
class NoiseSection(Section):
    """``[noise]``: the rms per beam (one value, or one per frequency) and the random seed (None: fresh)."""

    rms: u.Quantity = None
    seed: int = None

    @classmethod
    def parse(cls, table, beam, frequencies):
        """Validate ``[noise]`` against the job's beam and frequencies; None when the job has none."""
        noise = typed_table(table, "noise")
        if not noise:
            return None
        if beam is None:
            raise ConfigError("[noise]: noise is defined per beam, so it needs a [beam]")
        if "rms" not in noise:
            raise ConfigError("[noise]: 'rms' is required")
        check_noise(noise, table)
        if noise["rms"].ndim == 1 and len(noise["rms"]) != len(frequencies):
            raise ConfigError(f"[noise].rms: {len(noise['rms'])} values for {len(frequencies)} frequencies")
        return cls._build(noise)


@dataclass(frozen=True)
class OutputSection(Section):
    """``[output]``: what is written and where (defaults filled in; ``directory`` absolute).

    ``quantities`` None means every quantity the run makes.
    """

    directory: Path = None
    fits: bool = True
    pictures: bool = True
    sed: bool = True
    quantities: tuple = None
    picture_format: str = "png"
    prefix: str = ""
    spectral_axis: str = "auto"

    @classmethod
    def parse(cls, table, base_dir):
        """Validate ``[output]``; ``directory`` is resolved against ``base_dir`` (default ``rtrace-output``)."""
        out = typed_table(table, "output")
        for q in out.get("quantities", []):
            if not isinstance(q, str):
                raise ConfigError(f"[output].quantities: expected names such as 'intensity', got {q!r}")
            if q not in QUANTITY_NAMES:
                raise ConfigError(f"[output].quantities: unknown '{q}'{_suggest(q, QUANTITY_NAMES)}")
        out.setdefault("spectral_axis", "auto")
        if out["spectral_axis"] not in ("auto", "tabular"):
            raise ConfigError(
                f"[output].spectral_axis: '{out['spectral_axis']}' is not 'auto' (FREQ or FREQ-LOG "
                "cubes, one file per frequency for other lists) or 'tabular' (one FREQ-TAB cube)"
            )
        out["directory"] = (Path(base_dir) / out.get("directory", "rtrace-output")).resolve()
        check_output(out)
        return cls._build(out)


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
        raise ConfigError(
            f"{where}: {value!r} is not a scheduler address of the form scheme://host:port (e.g. 'tcp://10.0.0.5:8786')"
        )
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


@dataclass(frozen=True)
class ParallelSection(Section):
    """``[parallel]``: a running cluster's ``scheduler`` address or a local one of ``workers``, and ``max_memory``.

    ``max_memory`` is in bytes (an int); all three None: rtrace's own threads, no memory budget.
    """

    scheduler: str = None
    workers: int = None
    max_memory: int = None

    @property
    def cluster(self):
        """True when the job asks for a dask cluster (a scheduler address or local workers)."""
        return self.scheduler is not None or self.workers is not None

    @classmethod
    def parse(cls, table):
        """Validate ``[parallel]``; ConfigError naming ``[parallel].key``."""
        spec = typed_table(table, "parallel")
        if "scheduler" in spec and "workers" in spec:
            raise ConfigError(
                "[parallel]: give either 'scheduler' (the address of a running cluster) or "
                "'workers' (the size of a local one), not both"
            )
        if "scheduler" in spec:
            check_scheduler_address(spec["scheduler"])
        if "workers" in spec:
            check_workers(spec["workers"])
        if "max_memory" in spec:
            nbytes = spec["max_memory"].to_value(u.byte)
            if not np.isfinite(nbytes) or nbytes < 1:
                raise ConfigError(
                    f"[parallel].max_memory: must be a positive amount of memory, got '{spec['max_memory']}'"
                )
            spec["max_memory"] = int(nbytes)
        return cls._build(spec)

    def with_cluster(self, workers=None, scheduler=None):
        """A copy asking for ``workers`` local workers or the cluster at ``scheduler`` (``max_memory`` kept)."""
        if workers is not None:
            return ParallelSection(workers=workers, max_memory=self.max_memory)
        return ParallelSection(scheduler=scheduler, max_memory=self.max_memory)


@dataclass(frozen=True)
class ViewSection(Section):
    """One ``[[view]]``: camera direction, image size, geometry and sky position; ``name`` is always set."""

    name: str = None
    los: tuple = None
    north: tuple = None
    npix: object = None
    width: u.Quantity = None
    distance: u.Quantity = None
    center: u.Quantity = None
    ra: u.Quantity = None
    dec: u.Quantity = None

    @classmethod
    def parse(cls, table, index):
        """Validate the ``index``-th (from 0) ``[[view]]``; ConfigError naming ``[[view]] #n.key``."""
        where = f"[[view]] #{index + 1}"
        if not isinstance(table, dict):
            raise ConfigError(f"{where}: expected a table")
        spec = typed_table(table, "view", where)
        check_view(spec, table, where)
        spec.setdefault("name", f"view{index + 1}")
        if ("ra" in spec) != ("dec" in spec):
            raise ConfigError(f"{where}: give both 'ra' and 'dec' or neither")
        return cls._build(spec)


def _check_unique_names(view, index, names):
    where = f"[[view]] #{index + 1}"
    if view.name in names:
        raise ConfigError(f"{where}.name: '{view.name}' is used by another view")
    same = [n for n in names if n.lower() == view.name.lower()]
    if same:
        raise ConfigError(
            f"{where}.name: '{view.name}' differs from view '{same[0]}' only in case; their "
            f"files would overwrite each other on case-insensitive file systems"
        )


def parse_views(tables):
    """Validate the job's ``[[view]]`` tables (a list, or one table) into a tuple of :class:`ViewSection`.

    Raises
    ------
    ConfigError
        No view; a bad key or value (``[[view]] #2.npix``); two names equal, also when they differ only in case.
    """
    if isinstance(tables, dict):
        tables = [tables]
    if not tables:
        raise ConfigError("job: at least one [[view]] is required")
    views = []
    names = set()
    for i, table in enumerate(tables):
        view = ViewSection.parse(table, i)
        # checked in the order the views are read, so the second of two equal names is the one named
        _check_unique_names(view, i, names)
        names.add(view.name)
        views.append(view)
    return tuple(views)


def _frequency_grid(spec):
    """``start``, ``stop``, ``num`` and ``spacing`` of ``[frequencies]`` as frequencies in Hz (a numpy array)."""
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
        raise ConfigError(
            "[frequencies].num: one frequency between different 'start' and 'stop'; give "
            "start = stop, or values = [...]"
        )
    # built exactly as the FITS axis describes them, so cubes get a FREQ or FREQ-LOG axis:
    # even steps, or nu_k = start exp(k ln(stop/start) / (num - 1)) (the -LOG axis of
    # Greisen et al. 2006, A&A 446, 747, with CRVAL = start)
    k = np.arange(num, dtype=float)
    if num == 1:
        return np.array([start])
    if spacing == "log":
        if start <= 0 or stop <= 0:
            raise ConfigError("[frequencies]: frequencies must be positive")
        # the C library's exp and log, element by element: numpy's vectorised exp can differ in the last bit
        # between numpy versions, which would change the frequencies and so every output's resume key
        step = (math.log(stop) - math.log(start)) / (num - 1)
        return np.array([start * math.exp(i * step) for i in range(num)])
    return start + k * ((stop - start) / (num - 1))


def parse_frequencies(table):
    """Validate ``[frequencies]`` (``values``, or ``start``/``stop``/``num``/``spacing``): a read-only Quantity in Hz.

    Raises
    ------
    ConfigError
        Both forms given, a key missing, or frequencies not finite, not positive or repeated.
    """
    if table is None:
        raise ConfigError("job: the [frequencies] table is required")
    spec = typed_table(table, "frequencies")
    if "values" in spec:
        if set(spec) - {"values"}:
            raise ConfigError("[frequencies]: give either 'values' or 'start', 'stop', 'num', not both")
        nu = spec["values"]
    else:
        nu = _frequency_grid(spec) * u.Hz
    check_frequencies(nu, "[frequencies].values" if "values" in spec else "[frequencies]")
    nu = nu.to(u.Hz)
    nu.flags.writeable = False  # part of a frozen Job: read, never changed in place
    return nu
