"""Batch and resume planning of a run: units of work, input keys, the series cache, snapshot reuse.

A run is planned as :class:`Unit` s, one per (snapshot, view). Every output
of a unit carries a key of the inputs that make it (:func:`output_key`,
built from :func:`unit_inputs`, which fingerprints the snapshot's data
with :func:`fingerprint`); the output folder's manifest
(:mod:`rtrace.io.manifest`) tells which of them are finished
(:func:`split`). :class:`Cache` keeps a series' traced results on disk
between tracing and drawing, :class:`Snapshots` keeps only the snapshot
being worked on in memory, and :func:`make` writes outputs and records
them in the manifest.
"""

import hashlib
import hmac
import os
import pickle
import secrets
import shutil
from dataclasses import dataclass
from pathlib import Path

from .io.atomic import atomic_path
from .io.manifest import inputs_key
from .job_snapshot import build_snapshot, job_members

__all__ = ["CACHE_NAME", "Cache", "Snapshots", "Unit", "fingerprint", "make", "observing_settings", "output_key",
           "plan_units", "split", "unit_inputs"]

CACHE_NAME = ".rtrace-cache"

# keys of [snapshot] that say which snapshot(s), not how to read them; each output's key
# carries its own snapshot's fingerprint instead
_MEMBER_KEYS = ("path", "paths", "pattern", "seed", "seeds")


# --- what each output is made from ---------------------------------------------------------------

def fingerprint(job, member):
    """What identifies the snapshot's data: the demo seed, or the file's name, size and mtime.

    Size and modification time, not a checksum of the data: hashing a large
    snapshot on every run would cost as much as reading it; a rewritten file
    changes its mtime.
    """
    if job.snapshot["kind"] == "demo":
        return {"demo_seed": member.get("seed", job.snapshot.get("seed", 7))}
    st = os.stat(member["path"])
    return {"file": Path(member["path"]).name, "size": st.st_size, "mtime_ns": st.st_mtime_ns}


def unit_inputs(job, member, spec):
    """The job settings and data every output of one (snapshot, view) depends on."""
    from . import __version__
    shared = {k: v for k, v in job.snapshot.items() if k not in _MEMBER_KEYS}
    return {"rtrace": __version__, "snapshot": shared, "source": fingerprint(job, member),
            "ionization": job.ionization, "frequencies": job.frequencies, "trace": job.trace, "view": spec}


def observing_settings(job):
    """The settings only observed products depend on."""
    return {"beam": job.beam, "noise": job.noise}


def output_key(base, product, observing=None, limits=None):
    """The inputs key of one product of a unit whose :func:`unit_inputs` are ``base``."""
    parts = dict(base, product=product)
    if observing is not None:        # only observed products change with the beam and noise
        parts["observing"] = observing
    if limits is not None:           # a series picture changes when the series' colour scale does
        parts["limits"] = limits
    return inputs_key(parts)


# --- units of work -------------------------------------------------------------------------------

@dataclass
class Unit:
    """One snapshot seen through one view."""
    member: dict
    name: str
    view: object
    folder: Path
    base: dict
    data_key: str                     # inputs of the traced and observed images themselves
    where: str                        # for progress messages

    @property
    def label(self):
        return f"{self.member['label']}/{self.name}"


def plan_units(job, views, directory):
    """Every (snapshot, view) of the job, snapshot by snapshot, as :class:`Unit` s.

    ``views`` is ``[(name, View)]`` as `rtrace.job.build_views` gives them;
    a series puts each snapshot's outputs in a folder named by its label.
    """
    specs = {spec["name"]: spec for spec in job.views}
    obs = observing_settings(job)
    units = []
    for member in job_members(job):
        for name, view in views:
            base = unit_inputs(job, member, specs[name])
            where = f"{member['label']} / view '{name}'" if job.series else f"view '{name}'"
            folder = directory / member["label"] if job.series else directory
            units.append(Unit(member, name, view, folder, base, output_key(base, "images", obs), where))
    return units


def split(plan, manifest, skipped):
    """``(todo, done)``: the outputs of ``plan`` to make, and the paths found finished (added to ``skipped``).

    An output that writes several files (a cube one file per plane) is finished only when every one is.
    """
    todo, done = [], []
    for o in plan:
        if all(manifest.is_current(f, o.inputs) for f in o.files):
            done.extend(str(f) for f in o.files)
        else:
            todo.append(o)
    skipped.extend(done)
    return todo, done


def make(todo, res, sky, manifest, written):
    """Write each output of ``todo`` from one traced view, recording each of its files in the manifest."""
    for output in todo:
        output.path.parent.mkdir(parents=True, exist_ok=True)
        output.make(output.path, res, sky)
        for f in output.files:
            manifest.record(f, output.inputs)
            written.append(str(f))


# --- what is kept between steps ------------------------------------------------------------------

def cache_key():
    """The secret that signs this user's series-cache files (32 random bytes, made on first use).

    It lives outside any output folder: ``$RTRACE_KEY_DIR``, else ``$XDG_CACHE_HOME/rtrace``, else
    ``~/.cache/rtrace``, readable by the user alone. Where that cannot be written, a key for this
    process only is used (a resumed run then retraces instead of reading the cache).
    """
    folder = Path(os.environ.get("RTRACE_KEY_DIR")
                  or Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "rtrace")
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


_KEY_BYTES = 32
_PROCESS_KEY = None
#: First bytes of a signed cache file; the HMAC-SHA256 of the payload follows.
_MAGIC = b"rtrace-cache-1\n"


class Cache:
    """Traced results of a series, kept on disk between tracing and drawing.

    Memory holds one view's result at a time however long the series; the
    files are keyed by the inputs, so a resumed run reuses what an
    interrupted one traced, and stale files are never read. Each file is
    signed (HMAC-SHA256) with the user's key (:func:`cache_key`), kept
    outside the output folder: a file that was damaged, or written by anyone
    without that key, is never unpickled; the view is traced again.
    """

    def __init__(self, folder):
        self.folder = Path(folder)
        self.key = cache_key()

    def _file(self, unit):
        return self.folder / unit.member["label"] / f"{unit.name}-{unit.data_key[:20]}.pickle"

    def _signature(self, payload):
        return hmac.new(self.key, payload, hashlib.sha256).digest()

    def put(self, unit, value):
        path = self._file(unit)
        try:
            payload = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
        except (pickle.PicklingError, TypeError, AttributeError):
            return                          # not cacheable: the pictures retrace this view instead
        path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(path) as tmp:
            tmp.write_bytes(_MAGIC + self._signature(payload) + payload)

    def get(self, unit):
        """The cached value, or None when there is none or its signature does not verify."""
        try:
            data = self._file(unit).read_bytes()
        except OSError:
            return None
        head = len(_MAGIC) + hashlib.sha256().digest_size
        if not data.startswith(_MAGIC) or len(data) < head:
            return None
        payload = data[head:]
        if not hmac.compare_digest(data[len(_MAGIC):head], self._signature(payload)):
            return None                     # damaged, or not written with this user's key: never unpickled
        try:
            return pickle.loads(payload)    # signed by this user's own runs (see the class notes)
        except (pickle.UnpicklingError, EOFError, AttributeError, ImportError):
            return None

    def clear(self):
        shutil.rmtree(self.folder, ignore_errors=True)


class Snapshots:
    """Builds a member's snapshot on first need and keeps only the current one."""

    def __init__(self, job, say):
        self.job, self.say = job, say
        self.label, self.snap = None, None

    def get(self, member, step, total):
        if self.label != member["label"]:
            self.snap = None                 # release the previous snapshot before reading the next
            where = f"snapshot '{member['label']}'" if self.job.series else "the snapshot"
            self.say(step, total, f"building {where}")
            self.snap = build_snapshot(self.job, member)
            self.label = member["label"]
        return self.snap

    def release(self):
        self.label, self.snap = None, None
