"""The engine a run traces with: the ``[parallel]`` check, the dask client, trace and observe of one view.

:func:`trace_keywords` checks, before any work, that this build's
`rtrace.trace` takes the keywords ``[parallel]`` needs; :class:`Engine`
traces one view with the job's ``[trace]`` settings, observes it with
``[beam]`` and ``[noise]`` when the job has a beam, and owns the dask
client for the whole run (started on first use, closed at the end).
"""

import inspect
import time
import zlib

import astropy.units as u
import numpy as np

from .errors import ConfigError
from .observe.edges import warn_if_emission_at_edge

__all__ = ["Engine", "noise_seed", "trace_keywords"]


def noise_seed(job, label=None):
    """The noise seed of one snapshot: the job's ``[noise].seed`` itself for a single snapshot; for a
    member of a series, a seed derived from it and the snapshot's label, so that each snapshot gets its
    own noise (differences between snapshots would otherwise show the noise as persistent structure)
    and a rerun gets the same noise again. None (a fresh draw) when the job gives no seed.
    """
    seed = job.noise.get("seed") if job.noise else None
    if seed is None or label is None or not job.series:
        return seed
    label_key = zlib.crc32(str(label).encode("utf-8"))
    return int(np.random.SeedSequence([seed, label_key]).generate_state(1, np.uint64)[0] >> np.uint64(1))


def _observe(res, job, label=None):
    import radio_beam
    b = job.beam
    beam = radio_beam.Beam(major=b["major"], minor=b.get("minor", b["major"]), pa=b.get("pa", 0 * u.deg))
    noise = job.noise.get("rms") if job.noise else None
    kw = {}
    if b.get("scaling", "none") != "none":
        kw = {"beam_scaling": b["scaling"], "reference_frequency": b.get("reference_frequency")}
    return res.observe(beam=beam, noise=noise, seed=noise_seed(job, label), **kw)


def trace_keywords(job):
    """The keywords ``[parallel]`` needs ``rtrace.trace`` to take; ConfigError if this build lacks them.

    Checked before any work, so that a job does not fail after hours of tracing.
    """
    from . import trace
    par = job.parallel
    wanted = []
    if "scheduler" in par or "workers" in par:
        wanted.append("client")
    if "max_memory" in par:
        wanted.append("max_memory")
    if not wanted:
        return ()
    params = inspect.signature(trace).parameters
    missing = [k for k in wanted if k not in params]
    if missing:
        what = {"client": "trace on a dask cluster ('scheduler' / 'workers')",
                "max_memory": "bound its memory use ('max_memory')"}
        raise ConfigError(f"[parallel]: this rtrace build cannot {' or '.join(what[k] for k in missing)}: "
                          f"rtrace.trace takes no {' or '.join(repr(k) for k in missing)} keyword")
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
            if "scheduler" in par:
                try:
                    self._client = Client(par["scheduler"])
                except (OSError, TimeoutError) as exc:
                    raise ConfigError(f"[parallel].scheduler: cannot connect to {par['scheduler']}: "
                                      f"{exc}") from None
            else:
                self._cluster = LocalCluster(n_workers=par["workers"], threads_per_worker=1)
                self._client = Client(self._cluster)
        return self._client

    def trace(self, snap, view, label=None, view_name="view"):
        """``(Result, SkyMap or None)`` of one view of ``snap``; ``label`` names the snapshot of a series."""
        from . import trace
        job = self.job
        kw = {}
        if "client" in self.keywords:
            kw["client"] = self._get_client()
        if "max_memory" in self.keywords:
            kw["max_memory"] = job.parallel["max_memory"] * u.byte
        t0 = time.perf_counter()
        res = trace(snap, view, job.frequencies, background=job.trace.get("background"),
                    supersample=job.trace.get("supersample", 1), **kw)
        res.provenance["trace_seconds"] = f"{time.perf_counter() - t0:.2f}"
        if job.beam:
            sky = _observe(res, job, label)               # warns itself when emission reaches the edge
        else:
            sky = None
            # background-subtracted intensity: proportional to the flux per pixel
            warn_if_emission_at_edge(res.intensity.value, res.frequencies.to_value(u.Hz), f"view '{view_name}'")
        return res, sky

    def close(self):
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
