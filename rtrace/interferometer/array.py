"""Antenna layouts, their baselines, and the (u, v, w) tracks the baselines draw as the Earth turns.

Geometry (part of the public contract)
--------------------------------------
* Antenna positions are local **east, north, up** offsets (ENU) from any
  reference point of the site, in a length unit.
* A baseline is ``r_j - r_i`` for antennas ``i < j``; auto-correlations are
  not baselines.
* ENU -> equatorial ``(X, Y, Z)``: ``X`` toward hour angle 0, declination 0
  (the local meridian on the celestial equator), ``Y`` toward hour angle
  -6 h (east), ``Z`` toward the north celestial pole. For latitude ``phi``::

      X = -sin(phi) N + cos(phi) U
      Y =  E
      Z =  cos(phi) N + sin(phi) U

  the rotation by the colatitude about the east axis that Thompson, Moran &
  Swenson, *Interferometry and Synthesis in Radio Astronomy*, 3rd ed.
  (2017), ch. 4, write in terms of the baseline's azimuth and elevation
  (from memory; we did not check the equation number).
* Equatorial -> ``(u, v, w)`` toward a source at hour angle ``H`` and
  declination ``delta`` (TMS 2017, eq. 4.1, from memory)::

      u =  sin H X + cos H Y
      v = -sin delta cos H X + sin delta sin H Y + cos delta Z
      w =  cos delta cos H X - cos delta sin H Y + sin delta Z

  ``u`` points east, ``v`` north, ``w`` toward the source. An east-west
  baseline of length ``b`` gives ``u = b cos H``, ``v = b sin delta sin H``,
  ``w = -b cos delta sin H``: an ellipse in the (u, v) plane (TMS 2017,
  eq. 4.3, from memory).
* Time given for hour angles is converted with the Earth's rotation rate:
  hour angle advances 24 h in one sidereal day of 86164.0905 s (from
  memory), so one hour of clock time is 1.0027 h of hour angle.

Antenna files
-------------
A plain text file, one antenna per line, three numbers: east, north, up.
``#`` starts a comment (whole line or rest of a line); blank lines are
ignored. One optional line ``unit = <length unit>`` (any unit astropy reads:
``m``, ``km``, ``cm``...) before the first antenna gives the unit; without
it the caller's ``unit=`` is required. Example::

    # three invented antennas
    unit = m
      0.0    0.0   0.0
     35.0   12.0   0.5     # east of the first
    -20.0   48.0  -0.3
"""

import math
import os
import re

import astropy.units as u
import numpy as np

from ..errors import InputError

__all__ = [
    "read_antennas",
    "write_antennas",
    "antenna_positions",
    "baseline_pairs",
    "enu_to_equatorial",
    "equatorial_to_uvw",
    "source_elevation",
    "hour_angle_samples",
    "uvw_tracks",
    "SIDEREAL_DAY_S",
]

# Mean sidereal day in SI seconds (from memory): the period of the hour angle.
SIDEREAL_DAY_S = 86164.0905

_UNIT_LINE = re.compile(r"^\s*unit\s*=\s*(\S+)\s*$", re.IGNORECASE)


# --------------------------------------------------------------------------------------------
# antenna positions
# --------------------------------------------------------------------------------------------


def _length_unit(unit, name):
    try:
        un = u.Unit(unit)
    except (ValueError, TypeError):
        raise InputError(f"{name}: cannot read {unit!r} as a unit") from None
    if not un.is_equivalent(u.m):
        raise InputError(f"{name}: expected a length unit, got '{un}'")
    return un


def read_antennas(path, unit=None, unit_option="unit="):
    """Read antenna positions (east, north, up) from a plain text file.

    Parameters
    ----------
    path : str or os.PathLike
        The file (format in the module documentation: ``#`` comments, an
        optional ``unit = m`` line, then three numbers per antenna).
    unit : str or `~astropy.units.Unit`, optional
        Length unit of the numbers when the file has no ``unit =`` line. If
        the file has one, ``unit`` must be the same unit or omitted.
    unit_option : str
        How messages name ``unit`` (e.g. ``"antenna_unit="`` from
        ``synthesize``, a job key from a job file).

    Returns
    -------
    `~astropy.units.Quantity` (n, 3)
        East, north, up offsets in the file's unit.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise InputError(f"antennas: file '{path}' does not exist")
    arg_unit = None if unit is None else _length_unit(unit, "unit")
    file_unit = None
    rows = []
    with open(path, encoding="utf-8") as fh:
        for lineno, raw in enumerate(fh, start=1):
            line = raw.split("#", 1)[0].strip()
            if not line:
                continue
            m = _UNIT_LINE.match(line)
            if m:
                if file_unit is not None:
                    raise InputError(f"antennas: '{path}' line {lineno}: a second 'unit =' line")
                if rows:
                    raise InputError(
                        f"antennas: '{path}' line {lineno}: the 'unit =' line must come before the first antenna"
                    )
                file_unit = _length_unit(m.group(1), f"antennas: '{path}' line {lineno}: unit")
                continue
            fields = line.split()
            if len(fields) != 3:
                raise InputError(
                    f"antennas: '{path}' line {lineno}: expected three numbers "
                    f"(east north up), got {len(fields)} field(s): {line!r}"
                )
            try:
                values = [float(f) for f in fields]
            except ValueError:
                raise InputError(f"antennas: '{path}' line {lineno}: not a number in {line!r}") from None
            if not all(math.isfinite(v) for v in values):
                raise InputError(f"antennas: '{path}' line {lineno}: positions must be finite, got {line!r}")
            rows.append(values)
    if file_unit is not None and arg_unit is not None and file_unit != arg_unit:
        raise InputError(
            f"{unit_option.rstrip('=')}: the file '{path}' says '{file_unit}', {unit_option} says '{arg_unit}'"
        )
    use = file_unit if file_unit is not None else arg_unit
    if use is None:
        raise InputError(f"antennas: '{path}' has no 'unit =' line; give {unit_option} (e.g. 'm')")
    if not rows:
        raise InputError(f"antennas: '{path}' lists no antennas")
    return np.array(rows, dtype=float) * use


def write_antennas(path, positions, comment=None):
    """Write antenna positions in the format :func:`read_antennas` reads (unit: the Quantity's).

    Parameters
    ----------
    path : str or os.PathLike
        Output file.
    positions : `~astropy.units.Quantity` (n, 3)
        East, north, up offsets.
    comment : str, optional
        Text for ``#`` lines at the top (may span several lines).
    """
    pos = antenna_positions(positions)  # validates
    q = u.Quantity(positions)
    lines = [f"# {c}".rstrip() for c in (comment.splitlines() if comment else [])]
    lines.append("# columns: east north up")
    lines.append(f"unit = {q.unit.to_string()}")
    for e, n, up in q.value.reshape(pos.shape):
        lines.append(f"{e:16.6f} {n:16.6f} {up:12.6f}")
    with open(os.fspath(path), "w", encoding="utf-8") as fh:
        fh.write("\n".join(lines) + "\n")


def antenna_positions(antennas, unit=None, unit_option="unit="):
    """Validate antenna positions and return them in metres.

    Parameters
    ----------
    antennas : `~astropy.units.Quantity` (n, 3), str or os.PathLike
        East, north, up offsets (a length), or the path of an antenna file.
    unit : str, optional
        Unit of a file without a ``unit =`` line.
    unit_option : str
        How messages name ``unit``.

    Returns
    -------
    ndarray (n, 3), metres
    """
    if isinstance(antennas, (str, os.PathLike)):
        antennas = read_antennas(antennas, unit=unit, unit_option=unit_option)
    elif unit is not None:
        raise InputError(f"{unit_option.rstrip('=')}: only used when antennas is a file path")
    if not isinstance(antennas, u.Quantity):
        raise InputError(
            "antennas: expected a Quantity (n, 3) of lengths (east, north, up), e.g. "
            "np.array([[0, 0, 0], [100, 0, 0]]) * u.m, or the path of an antenna file"
        )
    if not antennas.unit.is_equivalent(u.m):
        raise InputError(f"antennas: expected lengths, got unit '{antennas.unit}'")
    pos = np.asarray(antennas.to_value(u.m), dtype=float)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise InputError(f"antennas: expected shape (n, 3) (east, north, up per antenna), got shape {pos.shape}")
    if pos.shape[0] < 2:
        raise InputError(f"antennas: an interferometer needs at least 2 antennas, got {pos.shape[0]}")
    bad = ~np.all(np.isfinite(pos), axis=1)
    if bad.any():
        raise InputError(
            f"antennas: {int(bad.sum())} antenna position(s) are not finite (first: antenna {int(np.argmax(bad))})"
        )
    # coincident antennas would make a zero-length baseline
    d = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=-1)
    i, j = np.nonzero(np.triu(d == 0, k=1))
    if i.size:
        raise InputError(
            f"antennas: antennas {int(i[0])} and {int(j[0])} are at the same position ({i.size} coincident pair(s))"
        )
    return pos


def baseline_pairs(n_antennas):
    """Antenna index pairs ``(i, j)``, ``i < j``, of all ``n (n - 1) / 2`` baselines; (nb, 2) int."""
    i, j = np.triu_indices(int(n_antennas), k=1)
    return np.stack([i, j], axis=1)


# --------------------------------------------------------------------------------------------
# coordinates
# --------------------------------------------------------------------------------------------


def enu_to_equatorial(enu, latitude_rad):
    """Local (east, north, up) vectors (..., 3) -> equatorial (X, Y, Z) (..., 3), same unit.

    See the module documentation for the axes (TMS 2017, ch. 4, from memory).
    """
    enu = np.asarray(enu, float)
    sphi, cphi = math.sin(latitude_rad), math.cos(latitude_rad)
    e, n, up = enu[..., 0], enu[..., 1], enu[..., 2]
    return np.stack([-sphi * n + cphi * up, e, cphi * n + sphi * up], axis=-1)


def equatorial_to_uvw(xyz, hour_angle_rad, dec_rad):
    """Equatorial baselines (nb, 3) at hour angles (nh,) -> (u, v, w) of shape (nh, nb, 3).

    TMS 2017, eq. 4.1 (from memory); same unit as ``xyz``.
    """
    xyz = np.asarray(xyz, float)
    h = np.asarray(hour_angle_rad, float)[:, None]
    x, y, z = xyz[None, :, 0], xyz[None, :, 1], xyz[None, :, 2]
    sh, ch = np.sin(h), np.cos(h)
    sd, cd = math.sin(dec_rad), math.cos(dec_rad)
    uu = sh * x + ch * y
    vv = -sd * ch * x + sd * sh * y + cd * z
    ww = cd * ch * x - cd * sh * y + sd * z
    return np.stack([uu, vv, ww], axis=-1)


def source_elevation(hour_angle_rad, dec_rad, latitude_rad):
    """Elevation (rad) of a source: ``sin e = sin phi sin delta + cos phi cos delta cos H``.

    Spherical astronomy's standard relation (e.g. TMS 2017, sec. 4.2, from memory).
    """
    h = np.asarray(hour_angle_rad, float)
    s = math.sin(latitude_rad) * math.sin(dec_rad) + math.cos(latitude_rad) * math.cos(dec_rad) * np.cos(h)
    return np.arcsin(np.clip(s, -1.0, 1.0))


def _hour_angle_rad(value, name):
    """An angle, or a time converted with the sidereal rotation rate, in radians (array)."""
    q = u.Quantity(value) if not isinstance(value, u.Quantity) else value
    if q.unit.is_equivalent(u.rad):
        out = q.to_value(u.rad)
    elif q.unit.is_equivalent(u.s):
        out = q.to_value(u.s) * (2.0 * math.pi / SIDEREAL_DAY_S)
    else:
        raise InputError(f"{name}: expected an angle (e.g. u.hourangle) or a time, got unit '{q.unit}'")
    out = np.asarray(out, float)
    if not np.all(np.isfinite(out)):
        raise InputError(f"{name}: must be finite, got {value}")
    return out


def hour_angle_samples(hour_angle_range, hour_angle_step=None, n_hour_angles=None):
    """Hour angles (rad) at which the visibilities are sampled.

    Parameters
    ----------
    hour_angle_range : `~astropy.units.Quantity` (2,)
        ``(start, stop)``, angles (``u.hourangle``, degrees) or times (read as
        hour angle through the sidereal rate); ``start <= stop``, at most
        24 h apart. ``start == stop`` is a single snapshot.
    hour_angle_step : `~astropy.units.Quantity`, optional
        Spacing; samples at ``start, start + step, ...`` up to ``stop``.
    n_hour_angles : int, optional
        Number of evenly spaced samples from ``start`` to ``stop``
        inclusive (one sample: the midpoint); instead of ``hour_angle_step``.

    Returns
    -------
    ndarray (nh,), radians
    """
    if not isinstance(hour_angle_range, u.Quantity):
        raise InputError("hour_angle_range: expected a Quantity (start, stop), e.g. (-4, 4) * u.hourangle")
    rng = _hour_angle_rad(hour_angle_range, "hour_angle_range").reshape(-1)
    if rng.size != 2:
        raise InputError(f"hour_angle_range: expected two values (start, stop), got {rng.size}")
    start, stop = float(rng[0]), float(rng[1])
    if stop < start:
        raise InputError(
            f"hour_angle_range: start ({hour_angle_range[0]}) is after stop "
            f"({hour_angle_range[1]}); give (start, stop) in increasing order"
        )
    if stop - start > 2.0 * math.pi * (1.0 + 1e-12):
        raise InputError(
            f"hour_angle_range: spans {math.degrees(stop - start) / 15.0:.6g} h, "
            f"more than the 24 h of one turn of the Earth"
        )
    if hour_angle_step is not None and n_hour_angles is not None:
        raise InputError("hour_angle_step, n_hour_angles: give one of them, not both")
    if n_hour_angles is not None:
        if isinstance(n_hour_angles, bool) or not float(n_hour_angles).is_integer() or int(n_hour_angles) < 1:
            raise InputError(f"n_hour_angles: expected a positive integer, got {n_hour_angles!r}")
        n = int(n_hour_angles)
        if n > 1 and stop == start:
            raise InputError("n_hour_angles: more than one sample of an empty hour-angle range")
        return np.linspace(start, stop, n) if n > 1 else np.array([0.5 * (start + stop)])
    if hour_angle_step is None:
        raise InputError("hour_angle_step: required (or give n_hour_angles)")
    if not isinstance(hour_angle_step, u.Quantity):
        raise InputError("hour_angle_step: expected a Quantity, e.g. 5 * u.min or 1.25 * u.deg")
    step = _hour_angle_rad(hour_angle_step, "hour_angle_step")
    if step.ndim != 0:
        raise InputError(f"hour_angle_step: expected a scalar, got shape {step.shape}")
    step = float(step)
    if not step > 0:
        raise InputError(f"hour_angle_step: must be positive, got {hour_angle_step}")
    n = int(math.floor((stop - start) / step * (1.0 + 1e-12))) + 1
    if n > 1_000_000:
        raise InputError(f"hour_angle_step: {hour_angle_step} gives {n} samples; use a larger step")
    return start + step * np.arange(n)


def uvw_tracks(positions_m, latitude_rad, dec_rad, hour_angle_rad):
    """(u, v, w) in metres of every baseline at every hour angle.

    Parameters
    ----------
    positions_m : ndarray (n, 3)
        ENU antenna positions in metres.
    latitude_rad, dec_rad : float
        Site latitude and source declination.
    hour_angle_rad : ndarray (nh,)

    Returns
    -------
    uvw : ndarray (nh, nb, 3), metres
    pairs : ndarray (nb, 2) of antenna indices
    xyz : ndarray (nb, 3), equatorial baselines in metres
    """
    pairs = baseline_pairs(len(positions_m))
    enu = positions_m[pairs[:, 1]] - positions_m[pairs[:, 0]]
    xyz = enu_to_equatorial(enu, latitude_rad)
    return equatorial_to_uvw(xyz, hour_angle_rad, dec_rad), pairs, xyz
