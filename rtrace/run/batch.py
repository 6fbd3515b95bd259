"""Batch and resume planning of a run: units of work, input keys, the series cache, snapshot reuse.

A run is planned as :class:`Unit` s, one per (snapshot, view). Every output
of a unit carries a key of the inputs that make it (:func:`output_key`,
built from :func:`unit_inputs`, which fingerprints the snapshot's data
with :func:`fingerprint`); the output folder's manifest
(:mod:`rtrace.run.manifest`) tells which of them are finished
(:func:`split`). :class:`~rtrace.run.series_cache.Cache` keeps a series' traced results on disk
between tracing and drawing, :class:`Snapshots` keeps only the snapshot
being worked on in memory, and :func:`make` writes outputs and records
them in the manifest.
"""

import hashlib
import json
from dataclasses import dataclass
from glob import escape as glob_escape
from pathlib import Path

from ..demo import DEMO_SEED
from ..errors import InputError
from .inputs import build_snapshot, job_members
from .manifest import inputs_key, snapshot_identity
from .series_cache import Cache, cache_key  # noqa: F401  (the series cache lives in its own module)

__all__ = [
    "CACHE_NAME",
    "Cache",
    "Snapshots",
    "Unit",
    "fingerprint",
    "make",
    "observing_settings",
    "output_key",
    "plan_units",
    "split",
    "unit_inputs",
]

CACHE_NAME = ".rtrace-cache"

# keys of [snapshot] that say which snapshot(s), not how to read them; each output's key
# carries its own snapshot's fingerprint instead
_MEMBER_KEYS = ("path", "paths", "pattern", "seed", "seeds")


# --- what each output is made from ---------------------------------------------------------------


def fingerprint(job, member):
    """What identifies the snapshot's data: the demo seed, or the file's content (see below).

    A file is identified by :func:`rtrace.run.manifest.snapshot_identity`:
    up to 256 MiB by the SHA-256 of its whole content, above that by its
    size, modification time and a SHA-256 of 18 sampled MiB. A yt dataset
    named by a file whose data lie in companion files beside it (names
    starting with the file's stem and a dot, e.g. ``DD0010.cpu0000``) adds
    their names, sizes and modification times; one named by a folder is
    identified by the names, sizes and modification times of every file in
    it. Hashing a small file costs one read of it (about 1.3 s per GiB from a warm
    page cache, far less than tracing it); a large one costs 18 MiB of
    reads.

    Raises
    ------
    InputError
        If the snapshot file cannot be read.
    """
    if job.snapshot.kind == "demo":
        seed = member.seed if member.seed is not None else job.snapshot.seed
        return {"demo_seed": DEMO_SEED if seed is None else seed}
    path = Path(member.path)
    try:
        if path.is_dir() and job.snapshot.kind == "yt":
            return {"folder": path.name, "files": _stat_digest((p for p in path.rglob("*") if p.is_file()), path)}
        if not path.is_file():  # a pipe or device would block or never end: not a snapshot file
            raise InputError(
                f"[snapshot] path: '{path}' is not a regular file (or does not exist); "
                f"it cannot be read to identify its data"
            )
        source = snapshot_identity(path)
        if job.snapshot.kind == "yt":
            companions = [p for p in path.parent.glob(f"{glob_escape(path.stem)}.*") if p != path and p.is_file()]
            if companions:
                source["companions"] = _stat_digest(companions, path.parent)
    except OSError as exc:
        raise InputError(
            f"[snapshot] path: cannot read '{path}' to identify its data ({exc.strerror or exc})"
        ) from None
    return source


def _stat_digest(paths, root):
    """SHA-256 of the names (relative to ``root``), sizes and modification times of ``paths``."""
    rows = []
    for p in sorted(paths):
        st = p.stat()
        rows.append([p.relative_to(root).as_posix(), st.st_size, st.st_mtime_ns])
    return hashlib.sha256(json.dumps(rows).encode("utf-8")).hexdigest()


def unit_inputs(job, member, spec, source=None):
    """The job settings and data every output of one (snapshot, view) depends on.

    ``source`` is the member's :func:`fingerprint`, computed here when not given; ``spec`` is the
    view's `~rtrace.run.sections.ViewSection`. Sections enter as their ``as_dict()``, the form the
    manifest hashes (it must not change for the same job file, or resumed runs redo their work).
    """
    from .._version import __version__

    shared = {k: v for k, v in job.snapshot.as_dict().items() if k not in _MEMBER_KEYS}
    return {
        "rtrace": __version__,
        "snapshot": shared,
        "source": fingerprint(job, member) if source is None else source,
        "ionization": job.ionization.as_dict(),
        "frequencies": job.frequencies,
        "trace": job.trace.as_dict(),
        "view": spec.as_dict(),
    }


def observing_settings(job):
    """The settings only observed products depend on."""
    return {
        "beam": {} if job.beam is None else job.beam.as_dict(),
        "noise": {} if job.noise is None else job.noise.as_dict(),
    }


def output_key(base, product, observing=None, limits=None):
    """The inputs key of one product of a unit whose :func:`unit_inputs` are ``base``."""
    parts = dict(base, product=product)
    if observing is not None:  # only observed products change with the beam and noise
        parts["observing"] = observing
    if limits is not None:  # a series picture changes when the series' colour scale does
        parts["limits"] = limits
    return inputs_key(parts)


# --- units of work -------------------------------------------------------------------------------


@dataclass
class Unit:
    """One snapshot seen through one view."""

    member: object  # a rtrace.run.snapshot_sections.Member
    name: str
    view: object
    folder: Path
    base: dict
    data_key: str  # inputs of the traced and observed images themselves
    where: str  # for progress messages

    @property
    def label(self):
        """``"<snapshot label>/<view name>"``, for messages."""
        return f"{self.member.label}/{self.name}"


def plan_units(job, views, directory):
    """Every (snapshot, view) of the job, snapshot by snapshot, as :class:`Unit` s.

    ``views`` is ``[(name, View)]`` as `rtrace.run.job.build_views` gives them;
    a series puts each snapshot's outputs in a folder named by its label.
    """
    specs = {spec.name: spec for spec in job.views}
    obs = observing_settings(job)
    units = []
    for member in job_members(job):
        source = fingerprint(job, member)  # read once per snapshot, not once per view
        for name, view in views:
            base = unit_inputs(job, member, specs[name], source)
            where = f"{member.label} / view '{name}'" if job.series else f"view '{name}'"
            folder = directory / member.label if job.series else directory
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


class Snapshots:
    """Builds a member's snapshot on first need and keeps only the current one."""

    def __init__(self, job, say):
        self.job, self.say = job, say
        self.label, self.snap = None, None

    def get(self, member, step, total):
        """The snapshot of series member ``member``, built (and announced as step ``step`` of ``total``) if new."""
        if self.label != member.label:
            self.snap = None  # release the previous snapshot before reading the next
            where = f"snapshot '{member.label}'" if self.job.series else "the snapshot"
            self.say(step, total, f"building {where}")
            self.snap = build_snapshot(self.job, member)
            self.label = member.label
        return self.snap

    def release(self):
        """Forget the kept snapshot, so that its memory can be freed."""
        self.label, self.snap = None, None
