"""Bricks as dask tasks (rtrace.trace(..., client=...)) against the single-process engine.

Reference: the single-process trace of the same snapshot and bricks; the
per-brick segments composite associatively (Rybicki & Lightman 1979,
eq. 1.30 applied piecewise), so a pairwise tree on the workers must agree
with the sequential front-to-back sum to rounding (1e-6 asked, 1e-12
checked). Clusters are tiny: 2 workers x 1 thread.
"""

import pickle
import subprocess
import sys

import astropy.units as u
import h5py
import numpy as np
import pytest

import rtrace
from rtrace.errors import InputError
from rtrace.io.lazy import HDF5Source, open_hdf5

distributed = pytest.importorskip("distributed")

NU = [0.3, 3.0, 300.0] * u.GHz
SHAPE = (15, 13, 17)
VIEWS = [dict(los=(-1, 0, 0), north=(0, 0, 1)), dict(los=(-0.7, 0.1, -0.7), north=(0, 0, 1))]


def _write(path):
    rng = np.random.default_rng(31)
    ne = 1e3 * rng.lognormal(0, 1, SHAPE)
    with h5py.File(path, "w") as h5:
        h5.attrs["cell_size"] = 0.01
        h5.attrs["length_unit"] = "pc"
        h5.create_dataset("T", data=rng.uniform(5e3, 2e4, SHAPE)).attrs["units"] = "K"
        h5.create_dataset("ne", data=ne).attrs["units"] = "cm**-3"
        h5.create_dataset("rho", data=2.3e-24 * ne).attrs["units"] = "g/cm**3"
    return path


@pytest.fixture(scope="module")
def h5file(tmp_path_factory):
    return _write(tmp_path_factory.mktemp("dask") / "snap.h5")


@pytest.fixture(scope="module")
def client():
    # threads in one process: quick to start; the process-based cluster is tested below
    with (
        distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster,
        distributed.Client(cluster) as c,
    ):
        yield c


def assert_close(a, b, rtol=1e-12):
    for x, y in (
        (a.intensity.value, b.intensity.value),
        (a.tau, b.tau),
        (a.emission_measure.value, b.emission_measure.value),
    ):
        assert np.allclose(x, y, rtol=rtol, atol=0)
    assert a.rays_per_pixel == b.rays_per_pixel


@pytest.mark.parametrize("view", VIEWS)
@pytest.mark.parametrize("kind", ["file, n_e", "file, density", "memory"])
def test_dask_equals_single_process(client, h5file, view, kind):
    # Reference: the single-process trace with the same bricks (module notes).
    if kind == "memory":
        snap = rtrace.io.read_hdf5(h5file, temperature="T", electron_density="ne")
    elif kind == "file, n_e":
        snap = open_hdf5(h5file, temperature="T", electron_density="ne")
    else:
        snap = open_hdf5(h5file, temperature="T", density="rho", ionization="full")
    v = rtrace.View(npix=19, distance=1 * u.kpc, **view)
    single = rtrace.trace(snap, v, NU, supersample=1, brick_size=6)
    assert single.tau[0].max() > 1 and single.tau[-1].max() < 1e-2
    assert_close(rtrace.trace(snap, v, NU, supersample=1, brick_size=6, client=client), single)


def test_dask_with_a_memory_budget(client, h5file):
    # Reference: the single-process trace under the same budget / default bricks.
    snap = open_hdf5(h5file, temperature="T", electron_density="ne")
    v = rtrace.View(los=(0.3, -0.5, 0.8), npix=19, distance=1 * u.kpc)
    assert_close(
        rtrace.trace(snap, v, NU, supersample=1, client=client, max_memory="3 MB"),
        rtrace.trace(snap, v, NU, supersample=1, max_memory="3 MB"),
    )
    assert_close(
        rtrace.trace(snap, v, NU, supersample=1, client=client),  # default bricks
        rtrace.trace(snap, v, NU, supersample=1),
    )


def test_a_failing_task_makes_trace_raise(client, tmp_path):
    # Common practice: never return a partial image. The file passes validation at open, then one brick is
    # spoiled: that brick's task raises, and trace must raise it rather than return an image without the brick.
    path = _write(tmp_path / "spoiled.h5")
    snap = open_hdf5(path, temperature="T", electron_density="ne")
    with h5py.File(path, "r+") as h5:
        h5["T"][9, 2, 14] = np.nan
    view = rtrace.View(los=(0.3, -0.5, 0.8), npix=10, distance=1 * u.kpc)
    with pytest.raises(InputError, match=r"temperature: 1 of 64 cells of brick \[8:12, 0:4, 12:16\]"):
        rtrace.trace(snap, view, NU, supersample=1, brick_size=4, client=client)


def _kill_other_workers_on_first_brick(monkeypatch, cluster_of):
    """Make the first brick task close every other worker of the cluster abruptly (their data is lost with them).

    The other workers, not the task's own: dask may run a brick's task beside a copy of its brick fetched from the
    worker it was scattered to (small data moves to an idle worker), and losing that copy loses nothing, so
    killing the task's own worker did not always lose data. The other workers hold the other bricks scattered
    round-robin, so their loss is certain. ``cluster_of()`` gives the running LocalCluster (None before it starts).
    """
    import threading
    import time

    from distributed.core import Status

    from rtrace.transfer import tracer

    real = tracer._ObliqueRoute.trace_brick
    lock, done = threading.Lock(), []

    def trace_brick(self, lo, hi, arrays, origin, **kwargs):
        cluster = cluster_of()
        me = distributed.get_worker()
        with lock:
            # only a task of this cluster: a task of an earlier test's cluster can still be running in its
            # thread (cancelling a future does not stop a running task) and would otherwise take the kill
            kill = not done and cluster is not None and any(w is me for w in cluster.workers.values())
            if kill:
                done.append(lo)
        if kill:
            others = [w for w in cluster.workers.values() if w is not me]
            for worker in others:
                worker.loop.add_callback(worker.close, nanny=False, executor_wait=False)
            deadline = time.monotonic() + 30.0  # they go while this task is running
            while any(w.status != Status.closed for w in others) and time.monotonic() < deadline:
                time.sleep(0.05)
        return real(self, lo, hi, arrays, origin, **kwargs)

    monkeypatch.setattr(tracer._ObliqueRoute, "trace_brick", trace_brick)
    return done


def test_a_lost_worker_with_in_memory_bricks_is_traced_again(h5file, monkeypatch):
    # Reference: the single-process trace. Scattered bricks of an in-memory snapshot die with their worker
    # (dask cannot recompute scattered data): the view is traced again from the client's copy.
    snap = rtrace.io.read_hdf5(h5file, temperature="T", electron_density="ne")
    view = rtrace.View(los=(0.3, -0.5, 0.8), npix=10, distance=1 * u.kpc)
    single = rtrace.trace(snap, view, NU, supersample=1, brick_size=6)
    running = []
    killed = _kill_other_workers_on_first_brick(monkeypatch, lambda: running[0] if running else None)
    with (
        distributed.LocalCluster(n_workers=3, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster,
        distributed.Client(cluster) as c,
    ):
        running.append(cluster)
        with pytest.warns(UserWarning, match=r"client: the dask cluster lost data .* \(attempt 2 of 3\)"):
            res = rtrace.trace(snap, view, NU, supersample=1, brick_size=6, client=c)
    assert len(killed) == 1
    assert_close(res, single)


def test_workers_lost_in_every_attempt_give_a_clear_error(h5file, monkeypatch):
    from rtrace.errors import ConfigError
    from rtrace.transfer import parallel

    monkeypatch.setattr(parallel, "ATTEMPTS", 1)
    snap = rtrace.io.read_hdf5(h5file, temperature="T", electron_density="ne")
    view = rtrace.View(los=(0.3, -0.5, 0.8), npix=10, distance=1 * u.kpc)
    running = []
    _kill_other_workers_on_first_brick(monkeypatch, lambda: running[0] if running else None)
    with (
        distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster,
        distributed.Client(cluster) as c,
    ):
        running.append(cluster)
        with pytest.raises(
            ConfigError,
            match=r"client: in each of 1 attempt the dask cluster lost a worker "
            r"holding bricks of this in-memory snapshot .*open_hdf5",
        ):
            rtrace.trace(snap, view, NU, supersample=1, brick_size=6, client=c)


def test_client_must_be_a_client(h5file):
    # Common practice: the parameter is named in the error.
    snap = open_hdf5(h5file, temperature="T", electron_density="ne")
    with pytest.raises(InputError, match="client: expected a dask.distributed.Client"):
        rtrace.trace(snap, rtrace.View(npix=4, distance=1 * u.kpc), NU, client=object())


def test_worker_processes_read_their_own_bricks(h5file, monkeypatch):
    # Reference: the single-process trace. With worker processes, a file-backed snapshot's tasks get the source
    # (path, names, units: a few hundred bytes) and an index range. Reading is made impossible in this (client)
    # process: the trace still succeeds, so every brick was read by a worker.
    snap = open_hdf5(h5file, temperature="T", electron_density="ne")
    view = rtrace.View(los=(0.3, -0.5, 0.8), npix=19, distance=1 * u.kpc)
    single = rtrace.trace(snap, view, NU, supersample=1, brick_size=5)
    assert len(pickle.dumps(snap.field_source())) < 2000

    def no_reading_here(self, lo, hi, **kwargs):
        raise AssertionError("the client read a brick")

    monkeypatch.setattr(HDF5Source, "read", no_reading_here)
    with pytest.raises(AssertionError):
        rtrace.trace(snap, view, NU, supersample=1, brick_size=5)  # the guard works in this process
    with (
        distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster,
        distributed.Client(cluster) as c,
    ):
        res = rtrace.trace(snap, view, NU, supersample=1, brick_size=5, client=c)
        hosts = c.run(lambda: __import__("os").getpid())
    assert len(set(hosts.values())) == 2  # two separate worker processes
    assert_close(res, single)


def test_rtrace_imports_without_dask():
    # Common practice for optional dependencies: rtrace (and its dask module) must import when dask is not
    # installed: None in sys.modules makes any import of dask or distributed fail.
    code = (
        "import sys; sys.modules['dask'] = sys.modules['distributed'] = None\n"
        "import rtrace, rtrace.transfer.parallel, rtrace.io.lazy\n"
        "assert not [m for m in sys.modules if m.split('.')[0] in ('dask', 'distributed') and sys.modules[m]]\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
