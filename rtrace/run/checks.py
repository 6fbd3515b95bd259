"""Checks of a job's values that a schema type cannot express, all made before any snapshot is read.

:mod:`rtrace.run.job` reads each key with the right type (an int, a list, a
quantity of the right physical type); the functions here then check the
values themselves: finite and positive sizes, distances and frequencies,
no duplicate frequency, beam axes in order, declinations on the sphere,
image sizes and line-of-sight vectors of the right shape, non-negative
backgrounds and noise, and names that can safely become file names. Each
raises :class:`~rtrace.errors.ConfigError` naming the table and key
(``[beam].minor``, ``[[view]] #2.npix``), the problem, and for lists how
many items are affected.
"""

import math
import string

import astropy.units as u
import numpy as np

from ..errors import ConfigError

__all__ = [
    "check_name",
    "check_prefix",
    "check_view",
    "check_beam",
    "check_frequencies",
    "check_trace",
    "check_noise",
    "check_snapshot",
    "check_output",
    "decode_job_text",
]

# Outputs are named <prefix><view>_<suffix> inside the output folder: a name must stay one file name
# there. Letters, digits, '_', '-' and '.' (not leading: no hidden files, no '.' or '..').
_ALLOWED = frozenset(string.ascii_letters + string.digits + "_-.")
_NAME_RULE = "letters, digits, '_', '-' and '.' (not first)"
_MAX_NAME = 100  # file systems allow 255 bytes; the suffixes rtrace adds need the rest


def _why_not_a_name(value):
    """Why ``value`` (a str) is not a safe file name, or None if it is."""
    if value == "":
        return "is empty"
    if "/" in value or "\\" in value:
        return "contains a path separator; it must be a name, not a path"
    if ".." in value:
        return "contains '..'; it must be a name, not a path"
    if len(value) > _MAX_NAME:
        return f"is {len(value)} characters long (at most {_MAX_NAME})"
    if value.startswith("."):
        return "starts with '.'"
    bad = sorted({c for c in value if c not in _ALLOWED})
    if bad:
        return f"contains {len(bad)} character(s) unsafe in file names ({' '.join(repr(c) for c in bad)})"
    return None


def check_name(value, where):
    r"""Return ``value`` if it can be used as a file name inside the output folder.

    Parameters
    ----------
    value : str
        A view name (the outputs of a view are named after it).
    where : str
        The key reported in the error message, e.g. ``"[[view]] #1.name"``.

    Returns
    -------
    str

    Raises
    ------
    ConfigError
        Not a str; empty; a path (``/``, ``\``, ``..``, absolute); a leading
        ``.``; characters other than ASCII letters, digits, ``_``, ``-`` and
        ``.``; longer than 100 characters.
    """
    if not isinstance(value, str):
        raise ConfigError(f"{where}: expected str, got {type(value).__name__} {value!r}")
    why = _why_not_a_name(value)
    if why is not None:
        raise ConfigError(f"{where}: {value!r} {why}; use only {_NAME_RULE}")
    return value


def check_prefix(value, where="[output].prefix"):
    """Return ``value`` if it may start every output file name (empty is allowed: no prefix).

    Raises
    ------
    ConfigError
        As :func:`check_name`, except that the empty prefix is accepted.
    """
    if value == "":
        return value
    return check_name(value, where)


def _finite_positive(q, where, text):
    value = q.value
    if not np.isfinite(value):
        raise ConfigError(f"{where}: must be finite, got '{text}'")
    if not value > 0:
        raise ConfigError(f"{where}: must be positive, got '{text}'")


def _vector(value, where):
    """Three finite numbers, not all zero (a direction)."""
    if not isinstance(value, list) or len(value) != 3:
        got = f"{len(value)} values" if isinstance(value, list) else f"{type(value).__name__} {value!r}"
        raise ConfigError(f"{where}: expected a list of three numbers, e.g. [0, 0, 1], got {got}")
    bad = [i for i, v in enumerate(value) if isinstance(v, bool) or not isinstance(v, (int, float))]
    if bad:
        raise ConfigError(f"{where}: {len(bad)} of 3 entries are not numbers (entry {bad[0]}: {value[bad[0]]!r})")
    bad = [i for i, v in enumerate(value) if not np.isfinite(v)]
    if bad:
        raise ConfigError(f"{where}: {len(bad)} of 3 entries are not finite ({value})")
    if not any(value):
        raise ConfigError(f"{where}: [0, 0, 0] has no direction")


def _npix(value, where):
    if isinstance(value, list):
        if len(value) != 2:
            raise ConfigError(f"{where}: expected one integer or a list of two, [ny, nx], got a list of {len(value)}")
        items = value
    else:
        items = [value]
    for v in items:
        if isinstance(v, bool) or not isinstance(v, int):
            raise ConfigError(f"{where}: expected a positive integer number of pixels, got {type(v).__name__} {v!r}")
        if v < 1:
            raise ConfigError(f"{where}: expected a positive number of pixels, got {v}")


def check_view(spec, raw, where):
    """Check one ``[[view]]`` (``spec`` typed by the schema, ``raw`` as written), in place.

    Raises
    ------
    ConfigError
        A name that is not a file name; ``los`` or ``north`` not three
        finite numbers or all zero; ``npix`` not a positive integer or a
        list of two; ``width`` or ``distance`` not finite and positive;
        ``center`` not finite; ``ra`` not finite; ``dec`` outside
        [-90, 90] deg.
    """
    if "name" in spec:
        check_name(spec["name"], f"{where}.name")
    for key in ("los", "north"):
        if key in spec:
            _vector(spec[key], f"{where}.{key}")
    if "npix" in spec:
        _npix(spec["npix"], f"{where}.npix")
    for key in ("width", "distance"):
        if key in spec:
            _finite_positive(spec[key], f"{where}.{key}", raw[key])
    if "center" in spec:
        bad = int(np.sum(~np.isfinite(spec["center"].value)))
        if bad:
            raise ConfigError(f"{where}.center: {bad} of 3 coordinates are not finite ({raw['center']})")
    if "ra" in spec and not np.isfinite(spec["ra"].value):
        raise ConfigError(f"{where}.ra: must be finite, got '{raw['ra']}'")
    if "dec" in spec:
        dec = spec["dec"].to_value(u.deg)
        if not (np.isfinite(dec) and -90.0 <= dec <= 90.0):
            raise ConfigError(f"{where}.dec: a declination lies in [-90, 90] deg, got '{raw['dec']}'")


def check_beam(beam, raw):
    """Check ``[beam]``: axes finite and positive, ``minor <= major``, ``pa`` finite.

    Raises
    ------
    ConfigError
    """
    for key in ("major", "minor"):
        if key in beam:
            _finite_positive(beam[key], f"[beam].{key}", raw[key])
    if "minor" in beam and beam["minor"] > beam["major"]:
        raise ConfigError(
            f"[beam].minor: '{raw['minor']}' is larger than major = '{raw['major']}'; the minor "
            f"axis (FWHM) must not exceed the major axis"
        )
    if "pa" in beam and not np.isfinite(beam["pa"].value):
        raise ConfigError(f"[beam].pa: must be finite, got '{raw['pa']}'")
    if "reference_frequency" in beam:
        _finite_positive(beam["reference_frequency"], "[beam].reference_frequency", raw["reference_frequency"])


def check_frequencies(nu, where="[frequencies]"):
    """Check the job's frequencies (Hz): finite, positive, no two equal.

    Raises
    ------
    ConfigError
        Naming how many are bad, and which frequencies repeat.
    """
    hz = np.asarray(nu.to_value(u.Hz), dtype=float)
    bad = ~np.isfinite(hz)
    if bad.any():
        raise ConfigError(f"{where}: {int(bad.sum())} of {hz.size} frequencies are not finite")
    bad = hz <= 0
    if bad.any():
        raise ConfigError(
            f"{where}: {int(bad.sum())} of {hz.size} frequencies are not positive "
            f"(first: {hz[bad][0]:g} Hz); frequencies must be positive"
        )
    values, counts = np.unique(hz, return_counts=True)
    if (counts > 1).any():
        repeated = values[counts > 1]
        listed = ", ".join(f"{v / 1e9:.9g} GHz" for v in repeated[:5])
        raise ConfigError(
            f"{where}: {len(repeated)} frequenc{'y is' if len(repeated) == 1 else 'ies are'} "
            f"given more than once ({listed}{', ...' if len(repeated) > 5 else ''}); "
            f"outputs are named by frequency, so each must appear once"
        )


_INTENSITY = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)


def _background(value):
    """``[trace].background``: ``"cmb"``, ``"none"``, a temperature or a specific intensity."""
    where = "[trace].background"
    text = value.strip().lower()
    if text == "cmb":
        return "cmb"
    if text == "none":
        return None
    try:
        q = u.Quantity(value)
    except (TypeError, ValueError):
        raise ConfigError(
            f"{where}: '{value}' is not 'cmb', 'none', a temperature ('20 K') or a specific "
            f"intensity ('1e-17 erg / (s cm2 Hz sr)')"
        ) from None
    if q.unit.is_equivalent(u.K):
        q = q.to(u.K)
    elif q.unit.is_equivalent(_INTENSITY):
        q = q.to(_INTENSITY)
    else:
        raise ConfigError(f"{where}: '{value}' is neither a temperature nor a specific intensity (unit '{q.unit}')")
    if not (np.isfinite(q.value) and q.value >= 0):
        raise ConfigError(f"{where}: must be finite and >= 0, got '{value}'")
    return q


def check_trace(trace):
    """Check ``[trace]`` in place.

    ``supersample`` >= 1; 0 < ``tolerance`` < 1, not with ``supersample``;
    ``background`` read into what ``trace`` takes.

    ``background`` becomes ``"cmb"``, None (``"none"``) or a Quantity (K, or
    erg s^-1 cm^-2 Hz^-1 sr^-1).

    Raises
    ------
    ConfigError
    """
    if "supersample" in trace and trace["supersample"] < 1:
        raise ConfigError(
            f"[trace].supersample: expected a positive integer (rays per pixel side), got {trace['supersample']}"
        )
    if "tolerance" in trace:
        tol = trace["tolerance"]
        if not (math.isfinite(tol) and 0.0 < tol < 1.0):
            raise ConfigError(
                f"[trace].tolerance: expected a relative error per pixel with 0 < tolerance < 1 (e.g. 0.01), got {tol}"
            )
        if "supersample" in trace:
            raise ConfigError(
                "[trace].tolerance: give either tolerance (refined to that accuracy) or supersample "
                "(a fixed lattice), not both"
            )
    if "background" in trace:
        bg = _background(trace["background"])
        if bg is None:
            del trace["background"]
        else:
            trace["background"] = bg


def check_noise(noise, raw):
    """Check ``[noise]``: every ``rms`` finite and >= 0; ``seed`` >= 0 (numpy seeds are non-negative).

    Raises
    ------
    ConfigError
    """
    if "rms" in noise:
        rms = np.atleast_1d(noise["rms"].value)
        bad = ~(np.isfinite(rms) & (rms >= 0))
        if bad.any():
            raise ConfigError(
                f"[noise].rms: {int(bad.sum())} of {rms.size} value(s) negative or not finite ({raw['rms']})"
            )
    if "seed" in noise and noise["seed"] < 0:
        raise ConfigError(f"[noise].seed: expected an integer >= 0, got {noise['seed']}")


def check_snapshot(snap, raw):
    """Check ``[snapshot]`` values.

    Demo ``cells`` >= 2, seeds and yt ``level`` >= 0, finite positive
    ``cell_size``, finite ``origin``, ``subvolume`` three pairs of integers.

    Raises
    ------
    ConfigError
    """
    if "cells" in snap and snap["cells"] < 2:
        raise ConfigError(f"[snapshot].cells: the demo needs at least 2 cells per side, got {snap['cells']}")
    if "level" in snap and snap["level"] < 0:
        raise ConfigError(f"[snapshot].level: expected a refinement level >= 0, got {snap['level']}")
    if "seed" in snap and snap["seed"] < 0:
        raise ConfigError(f"[snapshot].seed: expected an integer >= 0, got {snap['seed']}")
    for i, seed in enumerate(snap.get("seeds", [])):
        if isinstance(seed, int) and not isinstance(seed, bool) and seed < 0:
            raise ConfigError(f"[snapshot].seeds[{i}]: expected an integer >= 0, got {seed}")
    if "cell_size" in snap:
        _finite_positive(snap["cell_size"], "[snapshot].cell_size", raw["cell_size"])
    if "origin" in snap:
        bad = int(np.sum(~np.isfinite(snap["origin"].value)))
        if bad:
            raise ConfigError(f"[snapshot].origin: {bad} of 3 coordinates are not finite ({raw['origin']})")
    if "subvolume" in snap:
        sub = snap["subvolume"]
        shape_ok = len(sub) == 3 and all(isinstance(p, list) and len(p) == 2 for p in sub)
        if not shape_ok:
            raise ConfigError(
                "[snapshot].subvolume: expected three [start, stop] pairs of cell indices, e.g. "
                "[[0, 64], [0, 64], [10, 50]]"
            )
        for axis, pair in enumerate(sub):
            if any(isinstance(v, bool) or not isinstance(v, int) for v in pair):
                raise ConfigError(f"[snapshot].subvolume[{axis}]: expected two integers, got {pair}")
            if pair[0] < 0 or pair[1] <= pair[0]:
                raise ConfigError(f"[snapshot].subvolume[{axis}]: expected 0 <= start < stop, got {pair}")


def _picture_formats():
    from matplotlib.backend_bases import FigureCanvasBase

    return sorted(FigureCanvasBase.get_supported_filetypes())


def check_output(out):
    """Check ``[output]``.

    ``prefix`` a safe file-name start, ``picture_format`` one matplotlib writes,
    ``directory`` not an existing file.

    Raises
    ------
    ConfigError
    """
    if "prefix" in out:
        check_prefix(out["prefix"])
    if "picture_format" in out:
        formats = _picture_formats()
        if out["picture_format"] not in formats:
            from .values import _suggest

            fmt = out["picture_format"]
            raise ConfigError(
                f"[output].picture_format: '{fmt}'{_suggest(fmt, formats)} is not one of {', '.join(formats)}"
            )
    directory = out["directory"]
    try:
        is_file = directory.exists() and not directory.is_dir()
    except OSError as exc:  # a name too long, a folder that cannot be searched
        raise ConfigError(f"[output].directory: {directory} cannot be used: {exc.strerror}") from None
    if is_file:
        raise ConfigError(f"[output].directory: {directory} exists and is not a folder")


def decode_job_text(data, path):
    """The text of a job file's bytes; a ConfigError naming the file and the first bad byte if not UTF-8.

    A leading byte-order mark is dropped.

    Raises
    ------
    ConfigError
    """
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise ConfigError(
            f"job file {path}: not UTF-8 text: byte 0x{data[exc.start]:02x} at offset {exc.start} "
            f"(line {line}) cannot be decoded; save the file as UTF-8"
        ) from None
