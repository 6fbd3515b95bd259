"""The files a job's ``[synthesis]`` and ``[comparison]`` make of a traced view, and the job's own copy.

Named like every other output, ``<folder>/<prefix><view>_<suffix>``:

* ``<view>_synthesized.fits``: the restored synthesis image, Jy per clean
  beam, on the array's own grid (:func:`rtrace.interferometer.synthesize`);
  ``<view>_synthesized.<fmt>``: its picture.
* ``<view>_comparison.fits``: residual (observed - model), model and
  observation on the observed grid (:meth:`rtrace.comparison.Comparison.write_fits`);
  ``<view>_comparison.<fmt>``: the three side by side;
  ``<view>_comparison.ecsv``: flux densities over the common footprint and in
  every aperture of the region files.

Each is an :class:`rtrace.run.products.Output` whose key holds the view's
inputs and the section's settings and file fingerprints, so the manifest
skips it on a rerun and redoes it when the antenna layout, the observed
image or a region file changes. The synthesized map and the comparison are
computed once per traced view and shared by their files.
"""

from functools import partial

from ..io.atomic import atomic_path
from ..io.tables import write_ecsv
from .batch import output_key
from .manifest import inputs_key
from .products import Output

__all__ = ["study_outputs", "job_copy_output", "check_job_copy", "JOB_COPY_NAME"]

JOB_COPY_NAME = "job.toml"


def _stem(job, unit, suffix):
    """``<folder>/<prefix><view>_<suffix>``, as every output of a view is named (checked inside the folder)."""
    from .products import _stem as stem

    return stem(job, unit, suffix)


def _close(fig):
    import matplotlib.pyplot as plt

    plt.close(fig)


class _Once:
    """The value of ``compute(res)`` for the last traced view, computed once for all its files."""

    def __init__(self, compute):
        self.compute = compute
        self.res = None
        self.value = None

    def __call__(self, res):
        if self.res is not res:
            self.res, self.value = res, self.compute(res)
        return self.value


def _synthesize(res, kwargs):
    from ..interferometer import synthesize

    return synthesize(res, **kwargs)


def _compare(res, kwargs):
    import warnings

    from ..comparison import ComparisonWarning, compare

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ComparisonWarning)  # notes are written into the table
        return compare(res, kwargs["observation"])


def _write_synth_fits(path, res, sky, once):
    once(res).write_fits(path)


def _draw_synth(path, res, sky, once):
    from ..plot import plot_panels

    _close(plot_panels(once(res), quantity="intensity", path=path))


def _write_comparison_fits(path, res, sky, once):
    once(res).write_fits(path)


def _draw_comparison(path, res, sky, once):
    _close(once(res).plot(path))


def _write_comparison_table(path, res, sky, once, apertures, name):
    cmp = once(res)
    title = f"rtrace comparison of view '{name}' ({res.provenance.get('source', '')}) with {cmp.observation_source}"
    write_ecsv(path, cmp.flux_table(apertures, title=title))


def study_outputs(job, unit, fmt):
    """The ``[synthesis]`` and ``[comparison]`` outputs of one view (a `rtrace.run.batch.Unit`)."""
    pictures = job.output.pictures
    plan = []
    syn = job.synthesis
    if syn is not None and unit.name in syn.views:
        once = _Once(partial(_synthesize, kwargs=syn.kwargs))
        settings = {"synthesis": syn.key}
        plan.append(
            Output(
                _stem(job, unit, "synthesized.fits"),
                output_key(unit.base, "synthesized:fits", settings),
                partial(_write_synth_fits, once=once),
            )
        )
        if pictures:
            plan.append(
                Output(
                    _stem(job, unit, f"synthesized.{fmt}"),
                    output_key(unit.base, f"synthesized:{fmt}", settings),
                    partial(_draw_synth, once=once),
                )
            )
    cmp = job.comparison
    if cmp is not None and unit.name in cmp.views:
        once = _Once(partial(_compare, kwargs=cmp.kwargs))
        settings = {"comparison": cmp.key}
        plan.append(
            Output(
                _stem(job, unit, "comparison.fits"),
                output_key(unit.base, "comparison:fits", settings),
                partial(_write_comparison_fits, once=once),
            )
        )
        plan.append(
            Output(
                _stem(job, unit, "comparison.ecsv"),
                output_key(unit.base, "comparison:ecsv", settings),
                partial(_write_comparison_table, once=once, apertures=cmp.apertures, name=unit.name),
            )
        )
        if pictures:
            plan.append(
                Output(
                    _stem(job, unit, f"comparison.{fmt}"),
                    output_key(unit.base, f"comparison:{fmt}", settings),
                    partial(_draw_comparison, once=once),
                )
            )
    return plan


def _write_job_copy(path, res, sky, text):
    with atomic_path(path) as tmp:
        tmp.write_text(text)


def _recorded_names(directory):
    """Names the folder's manifest file records, read without judging it (empty if unreadable)."""
    import json

    from .manifest import MANIFEST_NAME

    try:
        data = json.loads((directory / MANIFEST_NAME).read_text(encoding="utf-8"))
        return set(data.get("outputs", {}))
    except (OSError, ValueError, AttributeError):
        return set()


def check_job_copy(job, directory):
    """Refuse, before any work, to overwrite a ``job.toml`` in the output folder that rtrace did not write.

    A file of that name that the folder's manifest does not record (e.g. the
    user's own job file, when another job writes into its folder) is left
    alone unless it already holds this job's text.

    Raises
    ------
    ConfigError
        Naming the file and what to do.
    """
    from ..errors import ConfigError

    path = directory / JOB_COPY_NAME
    if job.text is None or not path.exists() or JOB_COPY_NAME in _recorded_names(directory):
        return
    try:
        same = path.read_text() == job.text
    except (OSError, UnicodeDecodeError):
        same = False
    if not same:
        raise ConfigError(
            f"[output].directory: {path} exists and was not written by rtrace; a run keeps a copy "
            f"of its job file under that name, so move that file or write the outputs elsewhere "
            f"(--output on the command line)"
        )


def job_copy_output(job, directory):
    """The copy of the job file kept with the outputs (``<directory>/job.toml``), or None without its text."""
    if job.text is None:
        return None
    return Output(
        directory / JOB_COPY_NAME, inputs_key({"job_text": job.text}), partial(_write_job_copy, text=job.text)
    )
