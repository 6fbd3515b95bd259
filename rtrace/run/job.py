"""Job files: a whole study described in TOML, validated in full before any tracing starts.

A job names a snapshot (or a series of snapshots), how to ionize it, the
frequencies, one or more views, the instrument (beam, noise), the outputs and
optionally where to compute (``[parallel]``). :func:`load_job` parses and
validates everything (unknown keys get a did-you-mean suggestion, quantities
are checked for the right physical type, files for existence) and returns a
:class:`Job`; :func:`run_job` executes it. See ``examples/`` for complete
job files.

A :class:`Job` is frozen and holds one typed, frozen section per table
(:mod:`rtrace.run.sections`, :mod:`rtrace.run.snapshot_sections`,
:mod:`rtrace.run.study`), each validated by its own ``parse``; a changed
job is a copy made with `dataclasses.replace`.
"""

import dataclasses
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u

from ..errors import ConfigError
from .checks import decode_job_text
from .schema import SCHEMA
from .sections import (
    BeamSection,
    NoiseSection,
    OutputSection,
    ParallelSection,
    TraceSection,
    ViewSection,
    check_scheduler_address,
    check_workers,
    parse_frequencies,
    parse_views,
)
from .snapshot_sections import IonizationSection, Member, SnapshotSection
from .study import ComparisonSection, SynthesisSection
from .values import _suggest
from .views import build_views

__all__ = [
    "Job",
    "load_job",
    "parse_job",
    "run_job",
    "build_views",
    "override_parallel",
    "check_scheduler_address",
    "check_workers",
    "SCHEMA",
    "SnapshotSection",
    "IonizationSection",
    "TraceSection",
    "ViewSection",
    "BeamSection",
    "NoiseSection",
    "OutputSection",
    "ParallelSection",
    "SynthesisSection",
    "ComparisonSection",
    "Member",
]

_TOP = set(SCHEMA) - {"source"}  # [[ionization.sources]] entries, not a table of their own


@dataclass(frozen=True, eq=False)
class Job:
    """A validated job, frozen: one typed section per table. Build it with :func:`load_job` or :func:`parse_job`.

    A changed copy is made with `dataclasses.replace` (as :func:`override_parallel` does). Two jobs
    compare equal only when they are the same object.

    Attributes
    ----------
    snapshot : `~rtrace.run.snapshot_sections.SnapshotSection`
        ``[snapshot]``: the settings shared by every snapshot (kind, dataset
        names, units, geometry); ``path`` is resolved for a single file.
    ionization : `~rtrace.run.snapshot_sections.IonizationSection`
        ``[ionization]`` (every key None when the job has none).
    frequencies : `~astropy.units.Quantity`
        In Hz.
    trace : `~rtrace.run.sections.TraceSection`
        ``[trace]``.
    views : tuple of `~rtrace.run.sections.ViewSection`
        One per ``[[view]]``, each with a unique ``name``.
    beam, noise : `~rtrace.run.sections.BeamSection`, `~rtrace.run.sections.NoiseSection` or None
        ``[beam]`` and ``[noise]``; None when the job has none.
    output : `~rtrace.run.sections.OutputSection`
        ``[output]`` with its defaults; ``directory`` is an absolute path.
    base_dir : pathlib.Path
        Folder of the job file; relative paths are read from there.
    snapshots : tuple of `~rtrace.run.snapshot_sections.Member`
        The snapshots to process, in order: each has a ``label`` and either a
        ``path`` (HDF5, yt) or a ``seed`` (demo). One entry for a single snapshot.
    series : bool
        True when the job names a series (``paths``, ``pattern`` or
        ``seeds``): outputs then go to one sub-folder per snapshot label and
        pictures share colour scales across the series.
    parallel : `~rtrace.run.sections.ParallelSection`
        ``[parallel]``: ``scheduler`` (an address) or ``workers`` (an int),
        and ``max_memory`` (bytes, an int); all None without the table.
    synthesis, comparison : `~rtrace.run.study.SynthesisSection`, `~rtrace.run.study.ComparisonSection` or None
        ``[synthesis]`` and ``[comparison]`` as validated by :mod:`rtrace.run.study`; None when the job has none.
    text : str or None
        The job file's text (:func:`load_job`); a run keeps a copy of it
        with its outputs.
    """

    snapshot: SnapshotSection
    ionization: IonizationSection
    frequencies: u.Quantity
    trace: TraceSection
    views: tuple
    beam: BeamSection = None
    noise: NoiseSection = None
    output: OutputSection = None
    base_dir: Path = field(default_factory=Path.cwd)
    snapshots: tuple = ()
    series: bool = False
    parallel: ParallelSection = field(default_factory=ParallelSection)
    synthesis: SynthesisSection = None
    comparison: ComparisonSection = None
    text: str = None


def override_parallel(job, workers=None, scheduler=None):
    """The job with its cluster choice replaced (``--workers`` / ``--scheduler`` on the command line).

    Either argument replaces both ``scheduler`` and ``workers`` of ``[parallel]``;
    ``max_memory`` is kept. The job itself is not changed (it is frozen).

    Parameters
    ----------
    job : Job
    workers : int, optional
        Size of a local cluster.
    scheduler : str, optional
        Address of a running scheduler.

    Returns
    -------
    Job
        A copy with the new ``[parallel]``, or ``job`` itself when neither is given.

    Raises
    ------
    ConfigError
        If both are given or either is malformed.
    """
    if workers is not None and scheduler is not None:
        raise ConfigError("--workers and --scheduler: give one or the other")
    if workers is None and scheduler is None:
        return job
    if workers is not None:
        parallel = job.parallel.with_cluster(workers=check_workers(workers, "--workers"))
    else:
        parallel = job.parallel.with_cluster(scheduler=check_scheduler_address(scheduler, "--scheduler"))
    return dataclasses.replace(job, parallel=parallel)


def _check_tables(raw):
    if not isinstance(raw, dict):
        raise ConfigError(f"job: expected a table of tables, got {type(raw).__name__}")
    for key in sorted(set(raw) - _TOP):
        raise ConfigError(f"job: unknown table '[{key}]'{_suggest(key, _TOP)}; allowed: {', '.join(sorted(_TOP))}")


def _check_before_work(job):
    """Checks that need the whole job: view geometry, sizes in memory, synthesis grids, datasets."""
    built = build_views(job)  # the View constructor validates geometry now, not after tracing
    from .engine import check_sizes

    check_sizes(job, built)  # images and beam kernels fit in memory; beam narrower than the field
    from .study import check_synthesis_grids

    check_synthesis_grids(job, built)
    from .inputs import check_datasets, check_ionization

    check_ionization(job)  # the model's values, and sources against the grid, before any field is read
    check_datasets(job)  # the named datasets exist, numeric, 3-D, one shape (metadata only)


def parse_job(raw, base_dir="."):
    """Validate a job given as a dict (the parsed TOML) into a :class:`Job`.

    Each table is read by its section's parser, in the order of the job format.

    Raises
    ------
    ConfigError
        On the first problem, naming ``[table].key``.
    """
    base_dir = Path(base_dir)
    _check_tables(raw)
    snap, members, series = SnapshotSection.parse(raw.get("snapshot"), base_dir)
    ion = IonizationSection.parse(raw.get("ionization"), snap)
    nu = parse_frequencies(raw.get("frequencies"))
    trace = TraceSection.parse(raw.get("trace"))
    views = parse_views(raw.get("view", []))
    beam = BeamSection.parse(raw.get("beam"))
    noise = NoiseSection.parse(raw.get("noise"), beam, nu)
    out = OutputSection.parse(raw.get("output"), base_dir)
    par = ParallelSection.parse(raw.get("parallel"))
    view_names = [v.name for v in views]
    synthesis = SynthesisSection.parse(raw.get("synthesis"), base_dir, view_names)
    comparison = ComparisonSection.parse(raw.get("comparison"), base_dir, view_names, nu)
    job = Job(
        snap,
        ion,
        nu,
        trace,
        views,
        beam,
        noise,
        out,
        base_dir,
        members,
        series,
        par,
        synthesis=synthesis,
        comparison=comparison,
    )
    _check_before_work(job)
    return job


def load_job(path):
    """Read and validate a TOML job file."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"job file not found: {path}")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ConfigError(f"job file {path}: cannot be read: {exc}") from None
    text = decode_job_text(data, path)
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    return dataclasses.replace(parse_job(raw, base_dir=path.parent), text=text)


def run_job(job, progress=None, restart=False):
    """Execute a validated job; returns the list of files written.

    ``progress(step, total, message)`` is called before each step (the command
    line draws a progress bar from it). Outputs recorded as finished in the
    output folder's manifest are skipped unless ``restart`` (see
    :func:`rtrace.run.pipeline.run`).
    """
    from .pipeline import run

    return run(job, progress=progress, restart=restart)
