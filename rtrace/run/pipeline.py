"""Run a validated job: build each snapshot, trace every view, observe, write every output.

This module is the orchestrator, :func:`run`; the pieces it drives live in
their own modules: :mod:`rtrace.run.inputs` (the job's snapshots and
:func:`build_snapshot`), :mod:`rtrace.run.engine` (tracing and observing one
view, the ``[parallel]`` settings), :mod:`rtrace.run.batch` (units of work,
input keys, the series cache, snapshot reuse), :mod:`rtrace.run.products` (the
files made of each view) and :mod:`rtrace.run.colour_scales` (a series' shared
colour scales).

Every output is planned before any work, with a key of the inputs that make
it (see :mod:`rtrace.run.manifest`). Outputs that the output folder's manifest
records as finished from the same inputs, and whose files still match the
recorded size and SHA-256, are skipped; a view is traced only when one of
its outputs has to be made. An interrupted run therefore resumes where it
stopped, and a changed setting redoes exactly the outputs it affects.

A job file's text is kept with its outputs as ``<directory>/job.toml``;
``[synthesis]`` and ``[comparison]`` add their files to each view's plan
(:mod:`rtrace.run.study_products`).

Layout: a single snapshot writes ``<directory>/<prefix><view>_<quantity>.<ext>``;
a series (``paths``, ``pattern`` or ``seeds``) writes
``<directory>/<label>/<prefix><view>_<quantity>.<ext>`` for each snapshot
label. The pictures of a series are drawn after every snapshot is traced,
with one colour scale per view and quantity for the whole series; traced
results wait for that in a hidden cache folder in the output directory
(``.rtrace-cache``, ``.npz`` files of plain arrays keyed by their inputs),
removed when the run completes and reused by the next run when it is
interrupted. An entry is used only when its SHA-256 checksum and its
signature with a key of the user's kept outside the output folder verify
and it was made from the same inputs (:mod:`rtrace.run.series_cache`); it is
read without pickles, so it can run no code, and one damaged, truncated or
written by anyone else is ignored and the view traced again.
"""

from ..compiling import watch_compilation
from ..errors import OutputError
from ..io.outdir import check_output_paths, check_space, check_writable
from .batch import CACHE_NAME, Cache, Snapshots, make, plan_units, split
from .colour_scales import series_limits, view_ranges
from .engine import Engine, parallel_keywords
from .inputs import build_snapshot
from .manifest import MANIFEST_NAME, Manifest
from .products import QUANTITIES, data_outputs, picture_outputs
from .study_products import check_job_copy, job_copy_output, study_outputs
from .views import build_views

__all__ = ["run", "build_snapshot", "Outputs", "CACHE_NAME"]


class Outputs(list):
    """The files a run wrote (``str``, in order), with the files it found finished.

    Attributes
    ----------
    skipped : list of str
        Outputs left alone because the manifest records them as finished
        from the same inputs and their size and SHA-256 still match.
    """

    def __init__(self, written=(), skipped=()):
        super().__init__(written)
        self.skipped = list(skipped)


def _compiling(say, step, total):
    """Say "compiling kernels (first run only)" and the time taken, if numba compiles in the block."""
    return watch_compilation(lambda message: say(step, total, message))


def _cube_bytes(output, shape, n_frequencies):
    """Bytes a FITS cube output will at least add (a lower bound).

    Float32 planes and one header block per file, in 2880-byte FITS blocks
    (FITS standard 4.0, sect. 3.1), less the files it replaces.
    """
    files = output.files
    quantity = getattr(output.make, "keywords", {}).get("quantity")
    planes = 1 if len(files) > 1 or quantity == "emission_measure" else n_frequencies
    block = 2880
    data = -(-planes * shape[0] * shape[1] * 4 // block) * block
    return sum(block + data - (f.stat().st_size if f.is_file() else 0) for f in files)


def _check_paths(job, units, directory, quantities, fmt, pictures, later):
    """Every file the run may write, checked before any work.

    Each must lie inside the folder with nothing in its way, and the free
    space must be at least the FITS cubes' size.
    """
    paths = [directory / MANIFEST_NAME]
    copy = job_copy_output(job, directory)
    paths += [] if copy is None else copy.files
    need = 0
    for unit in units:
        cubes, spectra = data_outputs(job, unit, quantities, fmt)
        plan = (
            cubes
            + spectra
            + study_outputs(job, unit, fmt)
            + (picture_outputs(job, unit, fmt, None) if pictures else [])
        )
        paths += [f for o in plan for f in o.files]
        need += sum(_cube_bytes(o, unit.view.shape, len(job.frequencies)) for o in cubes)
    check_output_paths(paths, directory, "[output].directory")
    check_space(directory, need)
    if later and (directory / CACHE_NAME).exists() and not (directory / CACHE_NAME).is_dir():
        raise OutputError(
            f"[output].directory: {directory / CACHE_NAME} is a file; rtrace keeps a series' "
            f"traced views in a folder of that name (remove the file)"
        )


def run(job, progress=None, restart=False):
    """Execute ``job``; returns the paths written, in order.

    Parameters
    ----------
    job : `~rtrace.run.job.Job`
    progress : callable, optional
        ``progress(step, total, message)``, called as work proceeds;
        messages say which outputs were up to date and skipped, and when
        numba compiles kernels (a first run; see :mod:`rtrace.compiling`).
    restart : bool, optional
        Ignore the manifest of the output folder: make every output again
        (and start a new manifest).

    Returns
    -------
    Outputs
        A list of the paths written (str); ``.skipped`` lists the outputs
        found finished.

    Raises
    ------
    ConfigError
        If ``[parallel]`` asks for something this rtrace build cannot do, or
        the scheduler cannot be reached.
    OutputError
        Before any tracing, if the output folder cannot be created or
        written (a file of that name, read-only, permission denied, no
        space for a probe file), or a planned output lies outside it or has
        a folder or file in its way; while writing, if the disk fills up or
        permissions change (nothing partial is left under a final name).
    """
    say = progress or (lambda step, total, message: None)
    out = job.output
    quantities = list(QUANTITIES) if out.quantities is None else list(out.quantities)
    fmt = out.picture_format
    pictures = out.pictures
    keywords = parallel_keywords(job)
    views = build_views(job)
    directory = out.directory
    check_writable(directory, "[output].directory")  # read-only, no permission, a file: before any work
    check_job_copy(job, directory)  # never overwrite a job.toml rtrace did not write
    later = job.series and pictures  # series pictures wait for the whole series' ranges
    units = plan_units(job, views, directory)
    _check_paths(job, units, directory, quantities, fmt, pictures, later)
    manifest = Manifest(directory) if restart else Manifest.load(directory)
    cache = Cache(directory / CACHE_NAME) if later else None
    if cache is not None and restart:
        cache.clear()
    total = len(units) * (2 if later else 1)
    written, skipped = [], []
    snapshots = Snapshots(job, say)
    copy = job_copy_output(job, directory)  # the job itself, kept with what it made
    if copy is not None:
        todo, _ = split([copy], manifest, skipped)
        make(todo, None, None, manifest, written)

    with Engine(job, keywords) as engine:
        for step, unit in enumerate(units):
            cubes, spectra = data_outputs(job, unit, quantities, fmt)
            # a single snapshot's pictures need no other snapshot: drawn now, on their own scales
            drawn_now = picture_outputs(job, unit, fmt, None) if pictures and not later else []
            plan = cubes + drawn_now + spectra + study_outputs(job, unit, fmt)
            todo, done = split(plan, manifest, skipped)
            need_ranges = later and manifest.get_ranges(unit.label, unit.data_key) is None
            if done:
                say(
                    step,
                    total,
                    f"{unit.where}: {len(done)} of {sum(len(o.files) for o in plan)} outputs up to date, skipped",
                )
            if not todo and not need_ranges:
                continue
            with _compiling(say, step, total):
                snap = snapshots.get(unit.member, step, total)
            say(step, total, f"{unit.where}: tracing {len(job.frequencies)} frequencies")
            with _compiling(say, step, total):
                res, sky = engine.trace(snap, unit.view, unit.member.label, unit.name)
            if todo:
                say(step, total, f"{unit.where}: writing {len(todo)} outputs")
            with _compiling(say, step, total):
                make(todo, res, sky, manifest, written)
            if later:
                manifest.set_ranges(unit.label, unit.data_key, view_ranges(res, sky, len(job.frequencies)))
                cache.put(unit, (res, sky))
            del res, sky
        if later:
            snapshots.release()
            limits = {
                name: series_limits([manifest.get_ranges(v.label, v.data_key) for v in units if v.name == name])
                for name, _ in views
            }
            for k, unit in enumerate(units):
                step = len(units) + k
                plan = picture_outputs(job, unit, fmt, limits[unit.name])
                todo, done = split(plan, manifest, skipped)
                if done:
                    say(step, total, f"{unit.where}: {len(done)} of {len(plan)} pictures up to date, skipped")
                if not todo:
                    continue
                cached = cache.get(unit)
                if cached is None:
                    with _compiling(say, step, total):
                        snap = snapshots.get(unit.member, step, total)
                    say(step, total, f"{unit.where}: tracing {len(job.frequencies)} frequencies again for its pictures")
                    with _compiling(say, step, total):
                        cached = engine.trace(snap, unit.view, unit.member.label, unit.name)
                say(step, total, f"{unit.where}: drawing {len(todo)} pictures on the series' colour scales")
                with _compiling(say, step, total):
                    make(todo, *cached, manifest, written)
                del cached
    if cache is not None:
        cache.clear()
    say(total, total, f"done: {len(written)} written, {len(skipped)} up to date (skipped)")
    return Outputs(written, skipped)
