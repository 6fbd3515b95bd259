"""The ``[synthesis]`` and ``[comparison]`` sections of a job: validated in full before any tracing.

``[synthesis]`` observes each view with an Earth-rotation synthesis array
(:func:`rtrace.interferometer.synthesize`); ``[comparison]`` compares each
view with an observed image (:func:`rtrace.compare`) and measures fluxes in
apertures read from region files with the ``regions`` package. Files are
read here, when the job is loaded (antenna layout, observed image header
and pixels, region files), so that a bad file, key or unit stops the job
before any snapshot is read. Each section is a frozen record
(:class:`SynthesisSection`, :class:`ComparisonSection`, None when the job
has none) with:

* ``kwargs``: the keywords of ``synthesize`` / ``compare``;
* ``views``: names of the views it applies to (default: all);
* ``key``: what its outputs depend on beyond the traced view, for the
  output folder's manifest (file names with size, modification time and
  SHA-256 of their contents, and the settings).

``[synthesis]`` keys: ``antennas`` (an antenna file in the format
:func:`rtrace.interferometer.read_antennas` reads, relative to the job
file), ``antenna_unit``, ``latitude``, ``hour_angle_range`` (two angles or
times, e.g. ``["-4 hourangle", "4 hourangle"]``), ``hour_angle_step`` or
``n_hour_angles``, ``min_elevation``, ``dish_diameter``, ``primary_beam``,
``primary_beam_fwhm_factor``, ``weighting``, ``robust``, ``gain``, ``niter``,
``threshold``, ``pixel_scale``, ``image_size``, ``views``.

``[comparison]`` keys: ``observation`` (a FITS image), ``frequency``,
``beam`` (``["6 arcsec", "4 arcsec", "30 deg"]``: major, minor FWHM,
position angle), ``unit``, ``apertures`` (region files), ``views``.
"""

import hashlib
import os
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np

from ..errors import ConfigError, InputError

__all__ = [
    "SynthesisSection",
    "ComparisonSection",
    "synthesis_section",
    "comparison_section",
    "check_synthesis_grids",
    "file_fingerprint",
]


def file_fingerprint(path):
    """Name, size, modification time and SHA-256 of a (small) input file, for inputs keys."""
    path = Path(path)
    st = path.stat()
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    return {"file": os.fspath(path), "size": st.st_size, "mtime_ns": st.st_mtime_ns, "sha256": digest}


def _readable_file(value, where, base_dir):
    path = (Path(base_dir) / value).resolve()
    try:
        found = path.is_file()
    except OSError as exc:  # a name too long for the file system
        raise ConfigError(f"{where}: {path} cannot be used: {exc.strerror}") from None
    if not found:
        raise ConfigError(f"{where}: file not found: {path}")
    if not os.access(path, os.R_OK):
        raise ConfigError(f"{where}: file not readable: {path}")
    return path


def _views(spec, where, names):
    views = spec.get("views", list(names))
    if not views:
        raise ConfigError(f"{where}.views: expected a non-empty list of view names")
    for v in views:
        if v not in names:
            from .values import _suggest

            raise ConfigError(
                f"{where}.views: no view named {v!r}{_suggest(str(v), names)} (the job has: {', '.join(names)})"
            )
    return list(views)


def _angles(value, where, count, kinds=("angle",)):
    from .values import _typed

    if not isinstance(value, list) or len(value) != count:
        raise ConfigError(f"{where}: expected a list of {count} values with units")
    return u.Quantity([_typed(v, kinds, f"{where}[{i}]") for i, v in enumerate(value)])


@dataclass(frozen=True)
class SynthesisSection:
    """``[synthesis]`` as validated (see the module description).

    Attributes
    ----------
    kwargs : dict
        The keywords of `rtrace.interferometer.synthesize` (``antennas`` read from the file).
    views : tuple of str
        The views it applies to.
    key : dict
        What its outputs depend on, for the manifest (the antenna file's fingerprint and the settings).
    """

    kwargs: dict
    views: tuple
    key: dict

    @classmethod
    def parse(cls, table, base_dir, view_names):
        """Validate ``[synthesis]`` (as written; None when absent); None when the job has none."""
        from .schema import typed_table

        return synthesis_section(typed_table(table, "synthesis"), base_dir, view_names)


@dataclass(frozen=True)
class ComparisonSection:
    """``[comparison]`` as validated (see the module description).

    Attributes
    ----------
    kwargs : dict
        The keywords of `rtrace.compare` (``observation``: the observed image, read now).
    apertures : tuple
        ``(label, region)`` pairs read from the region files.
    views : tuple of str
        The views it applies to.
    key : dict
        What its outputs depend on, for the manifest (file fingerprints and the settings).
    """

    kwargs: dict
    apertures: tuple
    views: tuple
    key: dict

    @property
    def observation(self):
        """The observed image (`rtrace.comparison.Observation`)."""
        return self.kwargs["observation"]

    @classmethod
    def parse(cls, table, base_dir, view_names, frequencies):
        """Validate ``[comparison]`` (as written; None when absent); None when the job has none."""
        from .schema import typed_table

        return comparison_section(typed_table(table, "comparison"), base_dir, view_names, frequencies)


def _synthesis_antennas(spec, base_dir, where):
    from ..interferometer.array import antenna_positions

    for key in ("antennas", "latitude"):
        if key not in spec:
            raise ConfigError(f"{where}: '{key}' is required")
    path = _readable_file(spec["antennas"], f"{where}.antennas", base_dir)
    try:
        antennas = (
            antenna_positions(os.fspath(path), unit=spec.get("antenna_unit"), unit_option="[synthesis].antenna_unit")
            * u.m
        )
    except InputError as exc:
        raise ConfigError(f"{where}.antennas: {exc}") from None
    return path, antennas


def _synthesis_hour_angles(spec, kw, where):
    """``hour_angle_range``, ``hour_angle_step`` / ``n_hour_angles`` and ``min_elevation`` of ``[synthesis]``."""
    from ..interferometer.array import hour_angle_samples

    if "hour_angle_step" in spec and "n_hour_angles" in spec:
        raise ConfigError(f"{where}: give 'hour_angle_step' or 'n_hour_angles', not both")
    if kw.get("n_hour_angles", 1) > 1_000_000:  # the bound hour_angle_samples puts on a step
        raise ConfigError(f"{where}.n_hour_angles: {kw['n_hour_angles']} samples; give at most 1000000")
    if "min_elevation" in kw:
        elevation = kw["min_elevation"].to_value(u.deg)
        if not (np.isfinite(elevation) and -90.0 <= elevation < 90.0):
            raise ConfigError(
                f"{where}.min_elevation: an elevation lies in [-90, 90) deg, got '{spec['min_elevation']}'"
            )
    try:
        hour_angle_samples(
            kw.get("hour_angle_range", (-4, 4) * u.hourangle),
            kw.get("hour_angle_step"),
            kw.get("n_hour_angles", None if "hour_angle_step" in kw else 1),
        )
    except InputError as exc:
        raise ConfigError(f"{where}.{str(exc).split(':', 1)[0]}: {str(exc).split(':', 1)[1].strip()}") from None


def _synthesis_choices(kw, where):
    """Weighting and primary beam among those known, and the keys that only go with them."""
    from ..interferometer.imaging import WEIGHTINGS
    from ..interferometer.sampling import PRIMARY_BEAMS

    if kw.get("weighting", "natural") not in WEIGHTINGS:
        raise ConfigError(f"{where}.weighting: '{kw['weighting']}' is not one of {', '.join(WEIGHTINGS)}")
    if kw.get("primary_beam", "gaussian") not in PRIMARY_BEAMS:
        raise ConfigError(f"{where}.primary_beam: '{kw['primary_beam']}' is not one of {', '.join(PRIMARY_BEAMS)}")
    if "primary_beam" in kw and "dish_diameter" not in kw:
        raise ConfigError(f"{where}.primary_beam: only used with 'dish_diameter'")


def _synthesis_numbers(kw, where):
    """Dish diameter, gain, iterations, image size, robust, factors, pixel scale and threshold in range."""
    if "dish_diameter" in kw and not kw["dish_diameter"].to_value(u.m) > 0:
        raise ConfigError(f"{where}.dish_diameter: must be a positive length, got '{kw['dish_diameter']}'")
    if "gain" in kw and not 0 < kw["gain"] <= 1:
        raise ConfigError(f"{where}.gain: the loop gain must lie in (0, 1], got {kw['gain']}")
    if "niter" in kw and kw["niter"] < 1:
        raise ConfigError(f"{where}.niter: expected a positive number of components, got {kw['niter']}")
    if "image_size" in kw and kw["image_size"] < 8:
        raise ConfigError(f"{where}.image_size: expected at least 8 pixels, got {kw['image_size']}")
    for key in ("robust", "primary_beam_fwhm_factor"):
        if key in kw and not np.isfinite(kw[key]):
            raise ConfigError(f"{where}.{key}: must be finite, got {kw[key]}")
    for key in ("pixel_scale", "threshold"):
        if key in kw and not kw[key].value > 0:
            raise ConfigError(f"{where}.{key}: must be positive, got '{kw[key]}'")


_SYNTHESIS_KEYWORDS = (
    "hour_angle_step",
    "n_hour_angles",
    "min_elevation",
    "dish_diameter",
    "primary_beam",
    "primary_beam_fwhm_factor",
    "weighting",
    "robust",
    "gain",
    "niter",
    "threshold",
    "pixel_scale",
    "image_size",
)


def synthesis_section(spec, base_dir, view_names):
    """Validate ``[synthesis]`` (already type-checked by the schema): a :class:`SynthesisSection`, None when absent."""
    if not spec:
        return None
    where = "[synthesis]"
    path, antennas = _synthesis_antennas(spec, base_dir, where)
    kw = {"antennas": antennas}
    lat = spec["latitude"].to_value(u.deg)
    if not -90.0 <= lat <= 90.0:
        raise ConfigError(f"{where}.latitude: must lie in [-90, 90] deg, got '{spec['latitude']}'")
    kw["latitude"] = spec["latitude"]
    if "hour_angle_range" in spec:
        kw["hour_angle_range"] = _angles(spec["hour_angle_range"], f"{where}.hour_angle_range", 2, ("angle", "time"))
    kw.update({key: spec[key] for key in _SYNTHESIS_KEYWORDS if key in spec})
    _synthesis_hour_angles(spec, kw, where)
    _synthesis_choices(kw, where)
    _synthesis_numbers(kw, where)
    if "robust" in kw and kw.get("weighting") != "robust":
        raise ConfigError(f"{where}.robust: only used with weighting = 'robust'")
    views = _views(spec, where, view_names)
    key = {k: v for k, v in spec.items() if k != "antennas"}
    key["antennas"] = file_fingerprint(path)
    return SynthesisSection(kw, tuple(views), key)


def _comparison_beam(value, where):
    import radio_beam

    major, minor, pa = _angles(value, f"{where}.beam", 3)
    if not np.all(np.isfinite([major.value, minor.value, pa.value])):
        raise ConfigError(f"{where}.beam: major, minor and position angle must be finite, got {value}")
    if not (major.value > 0 and minor.value > 0) or minor > major:
        raise ConfigError(f"{where}.beam: expected major >= minor > 0, got {value}")
    return radio_beam.Beam(major=major.to(u.arcsec), minor=minor.to(u.arcsec), pa=pa.to(u.deg))


def _observation(spec, path, where, frequencies):
    """The observed image, read now with the job's overrides; its frequency must lie among the job's."""
    import warnings

    from ..comparison import read_observation

    kw = {}
    if "frequency" in spec:
        kw["frequency"] = spec["frequency"]
    if "beam" in spec:
        kw["beam"] = _comparison_beam(spec["beam"], where)
    if "unit" in spec:
        kw["unit"] = spec["unit"]
    options = {k: f"{where}.{k}" for k in ("frequency", "beam", "unit")}
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # notes are repeated in the comparison's own output
            obs = read_observation(os.fspath(path), name=f"{where}.observation", options=options, **kw)
    except InputError as exc:
        raise ConfigError(str(exc)) from None
    nu = obs.frequency.to_value(u.Hz)
    lo, hi = float(frequencies.min().to_value(u.Hz)), float(frequencies.max().to_value(u.Hz))
    if not lo * (1 - 1e-9) <= nu <= hi * (1 + 1e-9):
        raise ConfigError(
            f"{where}.observation: observed at {nu / 1e9:.6g} GHz, outside the job's frequencies "
            f"({lo / 1e9:.6g}-{hi / 1e9:.6g} GHz); add it to [frequencies]"
        )
    return obs


def _apertures(names, base_dir, where):
    """``(apertures, fingerprints)``: ``(label, region)`` pairs of every region file, and the files' fingerprints."""
    import regions

    apertures, fingerprints = [], []
    for i, name in enumerate(names):
        w = f"{where}.apertures[{i}]"
        if not isinstance(name, str):
            raise ConfigError(f"{w}: expected a region file name, got {name!r}")
        rpath = _readable_file(name, w, base_dir)
        try:
            regs = regions.Regions.read(os.fspath(rpath))
        except Exception as exc:  # the regions parsers raise many kinds of errors
            raise ConfigError(f"{w}: cannot read {rpath.name} as a region file: {exc}") from None
        if len(regs) == 0:
            raise ConfigError(f"{w}: {rpath.name} holds no region")
        bad = [k for k, r in enumerate(regs) if not isinstance(r, (regions.SkyRegion, regions.PixelRegion))]
        if bad:
            raise ConfigError(f"{w}: {len(bad)} of {len(regs)} entries of {rpath.name} are not regions")
        apertures.extend((f"{rpath.name}#{k}", r) for k, r in enumerate(regs))
        fingerprints.append(file_fingerprint(rpath))
    return apertures, fingerprints


def comparison_section(spec, base_dir, view_names, frequencies):
    """Validate ``[comparison]``; the observed image and the region files are read now. None when absent."""
    if not spec:
        return None
    where = "[comparison]"
    if "observation" not in spec:
        raise ConfigError(f"{where}: 'observation' is required (an observed FITS image)")
    path = _readable_file(spec["observation"], f"{where}.observation", base_dir)
    obs = _observation(spec, path, where, frequencies)
    apertures, fingerprints = _apertures(spec.get("apertures", []), base_dir, where)
    views = _views(spec, where, view_names)
    key = {k: v for k, v in spec.items() if k not in ("observation", "apertures")}
    key["observation"] = file_fingerprint(path)
    key["apertures"] = fingerprints
    return ComparisonSection({"observation": obs}, tuple(apertures), tuple(views), key)


def check_synthesis_grids(job, views):
    """Refuse, before any tracing, a ``[synthesis]`` whose image grid would be too large for a view.

    Checked for views with a ``width`` (the field of the others depends on the snapshot's box and
    is checked when the view is synthesized); also that no two antennas stand closer than one
    dish diameter. ``views`` is ``[(name, View)]``.
    """
    from ..interferometer.grid import AIRY_FWHM_FACTOR, image_grid
    from ..interferometer.sampling import GAUSSIAN_FWHM_FACTOR
    from ..physics.constants import C

    syn = job.synthesis
    if syn is None:
        return
    kw = syn.kwargs
    pos = kw["antennas"].to_value(u.m)
    sep = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=-1)
    bmax = float(sep.max())
    pb = None
    if "dish_diameter" in kw:
        d = kw["dish_diameter"].to_value(u.m)
        ground = np.linalg.norm(pos[:, None, :2] - pos[None, :, :2], axis=-1)
        ground[np.diag_indices(len(pos))] = np.inf
        if ground.min() < d:
            i, j = np.unravel_index(np.argmin(ground), ground.shape)
            raise ConfigError(
                f"[synthesis].dish_diameter: antennas {min(i, j)} and {max(i, j)} stand "
                f"{ground.min():.4g} m apart on the ground, closer than one dish diameter ({d:.4g} m)"
            )
        factor = (
            kw.get("primary_beam_fwhm_factor", GAUSSIAN_FWHM_FACTOR)
            if kw.get("primary_beam", "gaussian") == "gaussian"
            else AIRY_FWHM_FACTOR
        )
        pb = factor / d
    lam = C / job.frequencies.to_value(u.Hz) * 1e-2
    for name, view in views:
        if name not in syn.views or view.width is None:
            continue
        ny, nx = view.shape
        field = (view.width / view.distance).decompose().value * max(ny, nx) / nx
        try:
            image_grid(field, bmax, lam, pb, kw.get("pixel_scale"), kw.get("image_size"))
        except InputError as exc:
            raise ConfigError(f"[synthesis] for view '{name}': {exc}") from None
