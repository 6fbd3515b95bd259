"""The resume manifest of an output folder: which outputs are finished, and from which inputs.

A job run records every output it completes in ``<output dir>/.rtrace-manifest.json``
(rewritten atomically after each one): the output's path relative to the
folder, its size and SHA-256, and a key (SHA-256) of the inputs that produced
it (the job settings that matter for that output, a fingerprint of the
snapshot and the rtrace version). A later run of the job treats an output as
finished only when its entry exists, the inputs key is the same and the file
on disk still has the recorded size and SHA-256; anything else (missing,
truncated, edited, or made from other settings) is made again.

The manifest also keeps, per snapshot and view, the value ranges of the
pictured quantities, so that the pictures of a series can share colour
scales even when a rerun traces only part of the series.

Format (JSON)::

    {"format": "rtrace-manifest", "version": 1, "rtrace": "0.1.0",
     "outputs": {"seed1/a_tau.fits": {"size": 11520, "sha256": "...", "inputs": "...",
                                      "written": "2026-01-01T12:00:00Z"}, ...},
     "ranges": {"seed1/a": {"inputs": "...",
                            "ranges": {"tau": {"min": 0.0, "max": 3.1, "unit": ""}, ...}}, ...}}
"""

import hashlib
import json
import os
import time
import warnings
from pathlib import Path

import numpy as np

from ..io.atomic import atomic_path

__all__ = ["Manifest", "MANIFEST_NAME", "file_sha256", "inputs_key", "snapshot_identity", "FULL_HASH_LIMIT"]

MANIFEST_NAME = ".rtrace-manifest.json"
_FORMAT = "rtrace-manifest"
_VERSION = 1


def file_sha256(path, chunk_size=1 << 20):
    """SHA-256 of a file's content, read in chunks (outputs can be larger than memory).

    Parameters
    ----------
    path : str or os.PathLike
    chunk_size : int, optional
        Bytes read at a time.

    Returns
    -------
    str
        Hexadecimal digest.
    """
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(chunk_size), b""):
            digest.update(block)
    return digest.hexdigest()


#: Files up to this size (bytes) are identified by a SHA-256 of their whole content; larger ones by a sample.
FULL_HASH_LIMIT = 256 << 20
_BLOCK = 1 << 20  # bytes per sampled block
_SAMPLES = 16  # evenly spaced blocks between the first and the last


def _sampled_sha256(handle, size, block=_BLOCK, samples=_SAMPLES):
    """SHA-256 of the size, the first and last ``block`` bytes and ``samples`` evenly spaced blocks between."""
    digest = hashlib.sha256(str(size).encode("ascii"))
    last = max(size - block, 0)
    offsets = sorted({0, last, *(int(round(last * k / (samples + 1))) for k in range(1, samples + 1))})
    for offset in offsets:
        handle.seek(offset)
        data = handle.read(block)
        digest.update(f"{offset}:{len(data)}:".encode("ascii"))
        digest.update(data)
    return digest.hexdigest()


def snapshot_identity(path, full_limit=FULL_HASH_LIMIT):
    """What identifies a snapshot file's data in an inputs key.

    A file up to ``full_limit`` bytes (256 MiB) is identified by its name,
    size and the SHA-256 of its whole content (read in 1 MiB chunks): any
    change of the data is detected, while a copy or ``touch`` that keeps
    the bytes is not a change. A larger file is identified by its name,
    size, modification time and a SHA-256 of its first and last MiB and 16
    evenly spaced MiB between them: an edit that changes the size or the
    modification time, or any byte of the sampled blocks, is detected; an
    edit of the same size outside the sampled blocks whose modification
    time was put back is not.

    Parameters
    ----------
    path : str or os.PathLike
    full_limit : int, optional
        Largest size (bytes) hashed whole.

    Returns
    -------
    dict
        ``{"file", "size", "sha256"}`` or ``{"file", "size", "mtime_ns", "sampled_sha256"}``.
    """
    path = Path(path)
    with open(path, "rb") as handle:
        st = os.fstat(handle.fileno())
        if st.st_size <= full_limit:
            digest = hashlib.sha256()
            for block in iter(lambda: handle.read(_BLOCK), b""):
                digest.update(block)
            return {"file": path.name, "size": st.st_size, "sha256": digest.hexdigest()}
        return {
            "file": path.name,
            "size": st.st_size,
            "mtime_ns": st.st_mtime_ns,
            "sampled_sha256": _sampled_sha256(handle, st.st_size),
        }


def _jsonable(value):
    """JSON form of the values a validated job holds (Quantities, paths, numpy numbers)."""
    import astropy.units as u

    if isinstance(value, u.Quantity):
        return {"value": np.asarray(value.value).tolist(), "unit": value.unit.to_string()}
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (set, frozenset)):
        return sorted(value)
    raise TypeError(f"cannot describe {type(value).__name__} {value!r} in an inputs key")


def inputs_key(parts):
    """A stable key (SHA-256) of a description of an output's inputs.

    Parameters
    ----------
    parts : dict
        JSON-able description (Quantities, paths and numpy values allowed);
        key order does not matter.

    Returns
    -------
    str
        Hexadecimal digest.
    """
    text = json.dumps(parts, sort_keys=True, separators=(",", ":"), default=_jsonable)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class Manifest:
    """The finished outputs of one output folder (see the module description).

    Parameters
    ----------
    directory : str or os.PathLike
        The output folder; entries are stored relative to it, so the folder
        can be moved as a whole.
    outputs, ranges : dict, optional
        Entries read from an existing manifest.

    Notes
    -----
    Two runs writing into one folder at the same time would each rewrite the
    manifest with their own entries; the worst outcome is that finished
    outputs are not recorded and are made again next time.
    """

    def __init__(self, directory, outputs=None, ranges=None):
        self.directory = Path(directory)
        self.outputs = dict(outputs or {})
        self.ranges = dict(ranges or {})

    @property
    def path(self):
        """Where the manifest lives: ``<directory>/.rtrace-manifest.json``."""
        return self.directory / MANIFEST_NAME

    @classmethod
    def load(cls, directory):
        """Read the folder's manifest; an empty one if there is none.

        A manifest that cannot be read (edited by hand, another format
        version) is ignored with a warning: every output is then made again,
        which is always safe.

        Parameters
        ----------
        directory : str or os.PathLike

        Returns
        -------
        Manifest

        Raises
        ------
        rtrace.errors.OutputError
            If a folder (or anything but a file) stands where the manifest
            should be: it could never be rewritten.
        """
        manifest = cls(directory)
        if manifest.path.exists() and not manifest.path.is_file():
            from ..errors import OutputError

            raise OutputError(
                f"[output].directory: {manifest.path} is not a file; rtrace keeps its record of "
                f"finished outputs under that name (remove it or choose another output folder)"
            )
        try:
            data = json.loads(manifest.path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            return manifest
        except (OSError, ValueError) as exc:
            warnings.warn(f"{manifest.path}: unreadable ({exc}); every output will be made again", stacklevel=2)
            return manifest
        if not (
            isinstance(data, dict)
            and data.get("format") == _FORMAT
            and data.get("version") == _VERSION
            and isinstance(data.get("outputs"), dict)
            and isinstance(data.get("ranges", {}), dict)
        ):
            warnings.warn(
                f"{manifest.path}: not an rtrace manifest of version {_VERSION}; every output will be made again",
                stacklevel=2,
            )
            return manifest
        manifest.outputs = data["outputs"]
        manifest.ranges = data.get("ranges", {})
        return manifest

    def _name(self, path):
        return Path(os.path.relpath(Path(path).resolve(), self.directory.resolve())).as_posix()

    def is_current(self, path, inputs):
        """Whether ``path`` is finished: recorded with these inputs, and its size and SHA-256 still match.

        Parameters
        ----------
        path : str or os.PathLike
            The output file.
        inputs : str
            The inputs key the output would be made from now.

        Returns
        -------
        bool
        """
        entry = self.outputs.get(self._name(path))
        if not isinstance(entry, dict) or entry.get("inputs") != inputs:
            return False
        try:
            size = os.stat(path).st_size
        except OSError:
            return False
        # the size is checked first: it catches truncated files without reading them
        return size == entry.get("size") and file_sha256(path) == entry.get("sha256")

    def record(self, path, inputs):
        """Record ``path`` as finished from ``inputs`` and save the manifest.

        Parameters
        ----------
        path : str or os.PathLike
            An output that has just been written completely.
        inputs : str
            Its inputs key.

        Returns
        -------
        dict
            The new entry.
        """
        entry = {
            "size": os.stat(path).st_size,
            "sha256": file_sha256(path),
            "inputs": inputs,
            "written": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        }
        self.outputs[self._name(path)] = entry
        self.save()
        return entry

    def get_ranges(self, unit, inputs):
        """The value ranges recorded for ``unit`` (e.g. ``"seed1/a"``) from these inputs, or None."""
        entry = self.ranges.get(unit)
        if isinstance(entry, dict) and entry.get("inputs") == inputs:
            return entry.get("ranges")
        return None

    def set_ranges(self, unit, inputs, ranges):
        """Record the value ranges of ``unit`` (JSON-able dict) and save the manifest."""
        self.ranges[unit] = {"inputs": inputs, "ranges": ranges}
        self.save()

    def save(self):
        """Write the manifest atomically (a crash leaves the previous version intact)."""
        from .._version import __version__

        data = {
            "format": _FORMAT,
            "version": _VERSION,
            "rtrace": __version__,
            "outputs": self.outputs,
            "ranges": self.ranges,
        }
        self.directory.mkdir(parents=True, exist_ok=True)
        with atomic_path(self.path) as tmp:
            tmp.write_text(json.dumps(data, indent=1, sort_keys=True), encoding="utf-8")
