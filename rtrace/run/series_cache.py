"""The series cache: traced views kept on disk between tracing and drawing, in a format that runs no code.

A series' pictures are drawn after every snapshot is traced (they share
colour scales); each traced view waits for that in
``<output dir>/.rtrace-cache/<label>/<view>-<key>.npz``. An entry is a
NumPy ``.npz`` file of plain numeric arrays (``np.savez``; read back with
``allow_pickle=False``, so no object array, hence no code, is ever loaded)
and one ``meta`` array holding UTF-8 JSON of the scalar metadata: the
inputs key of the view, pixel size, centre, provenance, background, beams,
noise and seed.

Every entry carries a SHA-256 of its content (each array's name, dtype,
shape and bytes, in name order) and an HMAC-SHA256 of that digest with the
user's key (:func:`cache_key`, kept outside any output folder). On reading,
an entry is used only if it opens as an ``.npz`` without pickles, holds
exactly the expected arrays with consistent shapes, its checksum matches
its content, the signature verifies with this user's key, and it was made
from the same inputs as the view asked for. Anything else (a damaged,
truncated or foreign file, a pickle, an entry of another view, one written
by another user) reads as "not cached" and the view is traced again.

The checksum alone detects damage; the signature also refuses a
well-formed entry planted by someone who can write to the output folder
but does not hold the key (it would otherwise be drawn and recorded as
finished). The view (`rtrace.View`) is not stored: the caller passes the
one the entry's inputs key was made from.
"""

import hashlib
import hmac
import json
import os
import secrets
import shutil
import stat
import struct
import zipfile
from pathlib import Path

import astropy.units as u
import numpy as np

from ..errors import OutputError
from ..io.atomic import atomic_path

__all__ = ["Cache", "cache_key", "CACHE_FORMAT"]

#: ``format`` of the metadata of a cache entry; entries of another format are not read.
CACHE_FORMAT = "rtrace-series-cache-2"

_KEY_BYTES = 32
_PROCESS_KEY = None
_RESULT_ARRAYS = ("intensity", "tau", "em", "nu", "background", "center")
_SKY_ARRAYS = ("sky_data", "sky_model", "sky_beams")
# RuntimeError: zipfile raises it (and NotImplementedError) for encrypted members and unknown versions
_READ_ERRORS = (
    OSError,
    ValueError,
    KeyError,
    EOFError,
    TypeError,
    RuntimeError,
    struct.error,
    zipfile.BadZipFile,
    zipfile.LargeZipFile,
)


def cache_key():
    """The secret that signs this user's series-cache files (32 random bytes, made on first use).

    It lives outside any output folder: ``$RTRACE_KEY_DIR``, else ``$XDG_CACHE_HOME/rtrace``, else
    ``~/.cache/rtrace``, readable by the user alone. Where that cannot be written, a key for this
    process only is used (a resumed run then retraces instead of reading the cache).
    """
    folder = Path(
        os.environ.get("RTRACE_KEY_DIR") or Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "rtrace"
    )
    path = folder / "series-cache.key"
    try:
        key = path.read_bytes()
        if len(key) == _KEY_BYTES:
            return key
    except OSError:
        pass
    key = secrets.token_bytes(_KEY_BYTES)
    try:
        folder.mkdir(parents=True, exist_ok=True, mode=0o700)
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        with os.fdopen(fd, "wb") as handle:
            handle.write(key)
        return key
    except FileExistsError:
        return cache_key() if path.stat().st_size == _KEY_BYTES else _process_key()
    except OSError:
        return _process_key()


def _process_key():
    global _PROCESS_KEY
    if _PROCESS_KEY is None:
        _PROCESS_KEY = secrets.token_bytes(_KEY_BYTES)
    return _PROCESS_KEY


def content_digest(arrays):
    """SHA-256 (hex) of named numeric arrays: each name, dtype, shape and bytes, in name order."""
    digest = hashlib.sha256()
    for name in sorted(arrays):
        a = np.ascontiguousarray(arrays[name])
        digest.update(json.dumps([name, a.dtype.str, list(a.shape)]).encode("utf-8"))
        digest.update(a.tobytes())
    return digest.hexdigest()


# --- Result and SkyMap to arrays and back --------------------------------------------------------


def _beam_rows(beams):
    return np.array(
        [[b.major.to_value(u.deg), b.minor.to_value(u.deg), b.pa.to_value(u.deg)] for b in beams], float
    ).reshape(-1, 3)


def _beam(row):
    from radio_beam import Beam

    return Beam(major=row[0] * u.deg, minor=row[1] * u.deg, pa=row[2] * u.deg)


def to_arrays(res, sky, inputs):
    """``{name: ndarray}`` of a traced view (``sky`` may be None); raises TypeError/ValueError if not storable."""
    arrays = {
        "intensity": np.asarray(res._intensity),
        "tau": np.asarray(res.tau),
        "em": np.asarray(res._em),
        "nu": res.frequencies.to_value(u.Hz),
        "background": np.asarray(res.background.value, float),
        "center": res.center.to_value(u.cm),
    }
    info = res.background_info
    meta = {
        "format": CACHE_FORMAT,
        "inputs": inputs,
        "pixel_size_cm": float(res.pixel_size.to_value(u.cm)),
        "rays_per_pixel": int(res.rays_per_pixel),
        "provenance": res.provenance,
        "background_info": [info.kind, info.temperature],
        "sky": None,
    }
    if sky is not None:
        arrays.update(sky_data=sky._data, sky_model=sky._model, sky_beams=_beam_rows(sky.beams))
        arrays["sky_beam"] = _beam_rows([sky.beam])
        if sky._rms is not None:
            arrays["sky_rms"] = sky._rms
        meta["sky"] = {
            "provenance": sky.provenance,
            "beam_scaling": sky.beam_scaling,
            "reference_frequency": float(sky.reference_frequency.to_value(u.Hz)),
            "seed": None if sky.seed is None else int(sky.seed),
            "background": sky.background,
        }
    text = json.dumps(meta, sort_keys=True, allow_nan=False)
    if json.loads(text) != meta:  # e.g. tuples or numpy values in a provenance: not kept exactly
        raise TypeError("metadata does not survive JSON unchanged")
    for name, a in arrays.items():
        if a.dtype.kind not in "fiub":
            raise TypeError(f"{name}: dtype {a.dtype} is not a plain number type")
    arrays["meta"] = np.frombuffer(text.encode("utf-8"), np.uint8)
    return arrays


def from_arrays(arrays, view):
    """``(Result, SkyMap or None)`` rebuilt from :func:`to_arrays`'s arrays; ValueError if inconsistent."""
    from ..observe.skymap import SkyMap
    from ..transfer.background import Background
    from ..transfer.result import Result

    meta = json.loads(arrays["meta"].tobytes().decode("utf-8"))
    sky_meta = meta["sky"]
    names = set(_RESULT_ARRAYS) | {"meta"}
    if sky_meta is not None:
        names |= set(_SKY_ARRAYS) | {"sky_beam"} | ({"sky_rms"} & set(arrays))
    if set(arrays) != names:
        raise ValueError(f"unexpected arrays {sorted(set(arrays) ^ names)}")
    cube = arrays["intensity"].shape
    if (
        len(cube) != 3
        or arrays["tau"].shape != cube
        or arrays["em"].shape != cube[1:]
        or arrays["nu"].shape != cube[:1]
        or arrays["background"].shape != cube[:1]
        or arrays["center"].shape != (3,)
    ):
        raise ValueError("inconsistent array shapes")
    res = Result(
        arrays["intensity"],
        arrays["tau"],
        arrays["em"],
        arrays["nu"],
        view,
        float(meta["pixel_size_cm"]),
        arrays["center"],
        meta["provenance"],
        rays_per_pixel=int(meta["rays_per_pixel"]),
        background=arrays["background"],
        background_info=Background(*meta["background_info"]),
    )
    if sky_meta is None:
        return res, None
    rms = arrays.get("sky_rms")
    if (
        arrays["sky_data"].shape != cube
        or arrays["sky_model"].shape != cube
        or arrays["sky_beams"].shape != (cube[0], 3)
        or arrays["sky_beam"].shape != (1, 3)
        or (rms is not None and rms.shape != cube[:1])
    ):
        raise ValueError("inconsistent observed-map shapes")
    sky = SkyMap(
        arrays["sky_data"],
        arrays["sky_model"],
        [_beam(r) for r in arrays["sky_beams"]],
        res,
        rms,
        sky_meta["provenance"],
        beam=_beam(arrays["sky_beam"][0]),
        beam_scaling=sky_meta["beam_scaling"],
        reference_frequency=sky_meta["reference_frequency"],
        seed=sky_meta["seed"],
        background=sky_meta["background"],
    )
    return res, sky


def _plain_zip(handle):
    """Whether ``handle`` is a zip whose members are stored uncompressed, fit in the file and pass their CRC.

    ``np.savez`` stores its arrays uncompressed; refusing anything else bounds the memory a
    read can take by the file's size (a compressed member could expand to any size).
    """
    size = os.fstat(handle.fileno()).st_size
    with zipfile.ZipFile(handle) as archive:
        infos = archive.infolist()
        if not (
            infos
            and all(i.compress_type == zipfile.ZIP_STORED for i in infos)
            and sum(i.file_size for i in infos) <= size
        ):
            return False
        return archive.testzip() is None  # every member's CRC-32, headers and padding included


class Cache:
    """Traced results of a series, kept on disk between tracing and drawing (see the module notes).

    Memory holds one view's result at a time however long the series; the
    files are keyed by the inputs, so a resumed run reuses what an
    interrupted one traced, and stale, damaged or foreign files are never
    used.

    Parameters
    ----------
    folder : str or os.PathLike
        The cache folder (``<output dir>/.rtrace-cache``).
    """

    def __init__(self, folder):
        self.folder = Path(folder)
        self.key = cache_key()

    def _file(self, unit):
        return self.folder / unit.member.label / f"{unit.name}-{unit.data_key[:20]}.npz"

    def _signature(self, digest):
        return hmac.new(self.key, digest.encode("ascii"), hashlib.sha256).hexdigest()

    def put(self, unit, value):
        """Keep ``value = (Result, SkyMap or None)`` of ``unit``; one that cannot be stored or written is skipped.

        A skipped value is not an error: the pictures then trace that view again. The outputs
        themselves report a full disk or a read-only folder; the cache only saves work.
        """
        res, sky = value
        try:
            arrays = to_arrays(res, sky, unit.data_key)
        except (TypeError, ValueError, AttributeError):
            return  # not storable: the pictures retrace this view instead
        digest = content_digest(arrays)
        arrays["checksum"] = np.frombuffer(f"{digest} {self._signature(digest)}".encode("ascii"), np.uint8)
        path = self._file(unit)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            with atomic_path(path) as tmp:
                with open(tmp, "wb") as handle:  # a file object: np.savez would otherwise append ".npz"
                    np.savez(handle, **arrays)
        except (OSError, OutputError):
            return  # no room, no permission, a folder in the way: the pictures retrace this view instead

    def get(self, unit):
        """``(Result, SkyMap or None)`` of ``unit``, or None when there is no entry that passes every check."""
        path = self._file(unit)
        try:
            if not stat.S_ISREG(os.stat(path).st_mode):
                return None  # a folder, a pipe (reading would block), a device
            with open(path, "rb") as handle:
                if not _plain_zip(handle):
                    return None
                handle.seek(0)
                with np.load(handle, allow_pickle=False) as npz:
                    arrays = {name: np.array(npz[name]) for name in npz.files}  # writable copies
            stamp = arrays.pop("checksum").tobytes().decode("ascii").split(" ")
            if len(stamp) != 2 or any(a.dtype.kind not in "fiub" for a in arrays.values()):
                return None
            digest, signature = stamp
            if not (
                hmac.compare_digest(digest, content_digest(arrays))
                and hmac.compare_digest(signature, self._signature(digest))
            ):
                return None  # damaged, or not written with this user's key
            meta = json.loads(arrays["meta"].tobytes().decode("utf-8"))
            if not isinstance(meta, dict) or meta.get("format") != CACHE_FORMAT or meta.get("inputs") != unit.data_key:
                return None  # another format, or another view's entry under this name
            return from_arrays(arrays, unit.view)
        except _READ_ERRORS:
            return None

    def clear(self):
        """Remove the cache folder and everything in it."""
        shutil.rmtree(self.folder, ignore_errors=True)
