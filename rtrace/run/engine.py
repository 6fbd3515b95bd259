"""The engine a run traces with: the ``[parallel]`` check, the dask client, trace and observe of one view.

:func:`parallel_keywords` names the keywords ``[parallel]`` passes to
`rtrace.trace`; :class:`Engine`
traces one view with the job's ``[trace]`` settings, observes it with
``[beam]`` and ``[noise]`` when the job has a beam, and owns the dask
client for the whole run (started on first use, closed at the end).
"""

import time
import warnings
import zlib

import astropy.units as u
import numpy as np

from ..errors import ConfigError, InputError
from ..observe.edges import warn_if_emission_at_edge
from ..transfer import trace
from ..transfer.tracer import DEFAULT_TOLERANCE

__all__ = ["Engine", "noise_seed", "parallel_keywords", "check_sizes"]


def noise_seed(job, label=None):
    """The noise seed of one snapshot.

    The job's ``[noise].seed`` itself for a single snapshot; for a
    member of a series, a seed derived from it and the snapshot's label, so that each snapshot gets its
    own noise (differences between snapshots would otherwise show the noise as persistent structure)
    and a rerun gets the same noise again. None (a fresh draw) when the job gives no seed.
    """
    seed = job.noise.seed if job.noise is not None else None
    if seed is None or label is None or not job.series:
        return seed
    label_key = zlib.crc32(str(label).encode("utf-8"))
    return int(np.random.SeedSequence([seed, label_key]).generate_state(1, np.uint64)[0] >> np.uint64(1))


def _job_beam(job):
    import radio_beam

    b = job.beam
    return radio_beam.Beam(
        major=b.major, minor=b.major if b.minor is None else b.minor, pa=0 * u.deg if b.pa is None else b.pa
    )


def _observe(res, job, label=None):
    beam = _job_beam(job)
    b = job.beam
    noise = job.noise.rms if job.noise is not None else None
    kw = {}
    if b.frequency_scaling is not None:
        kw = {"beam_scaling": b.frequency_scaling, "reference_frequency": b.reference_frequency}
    budget = job.parallel.max_memory  # bytes (an int)
    return res.observe(
        beam=beam,
        noise=noise,
        seed=noise_seed(job, label),
        max_memory=None if budget is None else budget * u.byte,
        **kw,
    )


def _check_view(job, name, view, pixel_cm):
    """The sizes of one view known before tracing: images (npix x frequencies), beam against field."""
    from ..memory import check_memory, format_bytes, trace_image_bytes, trace_ray_bytes
    from ..observe.beam import beams_for_frequencies
    from ..observe.skymap import check_observation

    nu = job.frequencies.to_value(u.Hz)
    ny, nx = view.shape
    where = f"[[view]] '{name}' npix"
    budget = job.parallel.max_memory
    images = trace_image_bytes(len(nu), ny * nx)
    check_memory(
        images,
        field=where,
        budget=budget,
        what=f"images of {ny} x {nx} pixels at {len(nu)} frequencies ({format_bytes(images)})",
        hint="use a smaller npix or fewer frequencies",
    )
    supersample = int(job.trace.supersample or 1)
    if view.los_axis() is None and job.snapshot.kind == "demo":
        # an oblique view's lattice has at least (cells x supersample)^2 rays (tracer._ObliqueRoute);
        # the grid of other kinds is known once read, and the tracer checks it then, before tracing
        rays = (int(job.snapshot.cells or 64) * supersample) ** 2
        need = trace_ray_bytes(len(nu), rays)
        check_memory(
            need,
            field="[trace].supersample" if supersample > 1 else where,
            budget=budget,
            what=f"view '{name}': a lattice of at least {rays} rays ({supersample} per cell) at {len(nu)} frequencies",
            hint="use a smaller supersample" if supersample > 1 else "use a smaller npix",
        )
    if job.beam is not None and pixel_cm is not None:
        b = job.beam
        ref = b.reference_frequency
        scaling = b.frequency_scaling
        beams = beams_for_frequencies(_job_beam(job), nu, scaling, None if ref is None else ref.to_value(u.Hz))
        pixel_scale = (pixel_cm / view.distance.to_value(u.cm)) * u.rad
        check_observation(
            beams,
            pixel_scale,
            (ny, nx),
            nu,
            noise=job.noise is not None,
            max_memory=budget,
            beam_field="[beam].major",
            image_field=where,
        )
    cmp = job.comparison
    if cmp is not None and pixel_cm is not None and name in cmp.views:
        # the observed beam is laid on the model's own grid before it is reprojected
        obs = cmp.observation
        field = (
            "[comparison].beam"
            if obs.beam_source != "BMAJ/BMIN/BPA"
            else f"[comparison].observation ({obs.source}) BMAJ"
        )
        check_observation(
            [obs.beam],
            (pixel_cm / view.distance.to_value(u.cm)) * u.rad,
            (ny, nx),
            [obs.frequency.to_value(u.Hz)],
            max_memory=budget,
            beam_field=field,
            image_field=where,
            image=f"model of view '{name}'",
        )


def check_sizes(job, views):
    """Check at validation that every view's images and beam kernel fit; ConfigError if not.

    ConfigError for a view whose images or beam kernel will not fit or whose beam is
    wider than its image (views with a ``width``; the others are checked by :meth:`Engine.trace`
    once the snapshot's extent is known, still before tracing). See :mod:`rtrace.memory`.
    """
    for name, view in views:
        pixel_cm = None if view.width is None else view.width.to_value(u.cm) / view.shape[1]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the run warns once, when it observes
            try:
                _check_view(job, name, view, pixel_cm)
            except InputError as exc:
                raise ConfigError(str(exc)) from None


def parallel_keywords(job):
    """The keywords of `rtrace.trace` that ``[parallel]`` sets: ``client`` (a cluster), ``max_memory``."""
    par = job.parallel
    wanted = []
    if par.cluster:
        wanted.append("client")
    if par.max_memory is not None:
        wanted.append("max_memory")
    return tuple(wanted)


class Engine:
    """Traces and observes one view; starts the dask client on first use and closes it at the end."""

    def __init__(self, job, keywords):
        self.job = job
        self.keywords = keywords
        self._client = None
        self._cluster = None

    def _get_client(self):
        if self._client is None:
            # imported here: dask is needed only by jobs that ask for a cluster
            from dask.distributed import Client, LocalCluster

            par = self.job.parallel
            if par.scheduler is not None:
                try:
                    self._client = Client(par.scheduler)
                except (OSError, TimeoutError) as exc:
                    raise ConfigError(f"[parallel].scheduler: cannot connect to {par.scheduler}: {exc}") from None
            else:
                self._cluster = LocalCluster(n_workers=par.workers, threads_per_worker=1)
                self._client = Client(self._cluster)
        return self._client

    def trace(self, snap, view, label=None, view_name="view"):
        """``(Result, SkyMap or None)`` of one view of ``snap``; ``label`` names the snapshot of a series."""
        job = self.job
        kw = {}
        if "client" in self.keywords:
            kw["client"] = self._get_client()
        if "max_memory" in self.keywords:
            kw["max_memory"] = job.parallel.max_memory * u.byte
        if job.beam is not None or job.comparison is not None:
            # the view's extent is known now: a beam wider than the image, or a kernel that
            # cannot fit, is refused before tracing
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                try:
                    _check_view(job, view_name, view, view.resolve(snap)[1])
                except InputError as exc:
                    raise ConfigError(str(exc)) from None
        t0 = time.perf_counter()
        tolerance = DEFAULT_TOLERANCE if job.trace.tolerance is None else job.trace.tolerance
        res = trace(
            snap,
            view,
            job.frequencies,
            background=job.trace.background,
            supersample=job.trace.supersample,
            tolerance=tolerance,
            **kw,
        )
        res.provenance["trace_seconds"] = f"{time.perf_counter() - t0:.2f}"
        if job.beam is not None:
            sky = _observe(res, job, label)  # warns itself when emission reaches the edge
        else:
            sky = None
            # background-subtracted intensity: proportional to the flux per pixel
            warn_if_emission_at_edge(res.intensity.value, res.frequencies.to_value(u.Hz), f"view '{view_name}'")
        return res, sky

    def close(self):
        """Close the dask client and the local cluster this engine started, if any."""
        if self._client is not None:
            self._client.close()
        if self._cluster is not None:
            self._cluster.close()
        self._client = self._cluster = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
