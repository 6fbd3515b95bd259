"""Kernels run on threads by rtrace.transfer.tasks (not numba's parallel=True), one specialisation per layout.

What is checked against something outside the project: every task runs once
(counted), an any-layout call gives what numpy gives for the same
transposed data, and a kernel's results do not depend on the number of
threads (numba.set_num_threads, numba's documented thread-count API).
"""

import astropy.units as u
import numba
import numpy as np
import pytest

import rtrace
from rtrace.transfer import kernels
from rtrace.transfer.tasks import any_layout, entry_point, run_tasks


@numba.njit(nogil=True, cache=False)
def _count_tasks(lo, hi, hits):
    for t in range(lo, hi):
        hits[t] += 1


@numba.njit(nogil=True, cache=False)
def _fail_at(lo, hi, bad):
    for t in range(lo, hi):
        if t == bad:
            raise ValueError("task failed")


@pytest.mark.parametrize("n", [1, 2, 7, 64, 1001])
@pytest.mark.parametrize("threads", [1, 2])
def test_every_task_runs_exactly_once(n, threads):
    hits = np.zeros(n, np.int64)
    before = numba.get_num_threads()
    numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
    try:
        run_tasks(_count_tasks, n, hits)
    finally:
        numba.set_num_threads(before)
    assert np.array_equal(hits, np.ones(n, np.int64))


def test_no_tasks_runs_nothing():
    run_tasks(_fail_at, 0, 0)          # would raise if any chunk ran


def test_an_error_in_a_task_reaches_the_caller():
    with pytest.raises(ValueError, match="task failed"):
        run_tasks(_fail_at, 50, 37)


@any_layout
@numba.njit(cache=False)
def _weighted_sum(a, w):
    out = 0.0
    for i in range(a.shape[0]):
        for j in range(a.shape[1]):
            out += a[i, j] * w[j]
    return out


def test_any_layout_compiles_once_for_contiguous_and_transposed_arrays():
    rng = np.random.default_rng(3)
    a = rng.random((5, 5))
    w = rng.random(5)
    # numpy's matrix-vector product is the reference for both layouts
    assert _weighted_sum(a, w) == pytest.approx(float(np.sum(a @ w)), rel=1e-12)
    assert _weighted_sum(a.T, w) == pytest.approx(float(np.sum(a.T @ w)), rel=1e-12)
    assert _weighted_sum(np.asfortranarray(a), w) == pytest.approx(float(np.sum(a @ w)), rel=1e-12)
    sigs = _weighted_sum.dispatcher.signatures
    assert len(sigs) == 1 and sigs[0][0].layout == "A"
    # a different dtype is a different specialisation, as with numba itself
    _weighted_sum(a.astype(np.float32), w)
    assert len(_weighted_sum.dispatcher.signatures) == 2


def test_entry_point_reuses_the_compiled_specialisation():
    hits = np.zeros(3, np.int64)
    f1 = entry_point(_count_tasks, (0, 3, hits))
    f2 = entry_point(_count_tasks, (0, 3, np.zeros(8, np.int64)))
    assert f1 is f2


def _sphere(n=20):
    x = (np.arange(n) + 0.5) / n - 0.5
    r = np.sqrt(x[:, None, None]**2 + x[None, :, None]**2 + x[None, None, :]**2)
    rng = np.random.default_rng(7)
    ne = np.where(r < 0.4, rng.uniform(10.0, 300.0, r.shape), 0.0).astype(np.float32)
    temp = rng.uniform(6.0e3, 1.5e4, r.shape).astype(np.float32)
    return rtrace.Snapshot.from_arrays(temperature=temp * u.K, electron_density=ne * u.cm**-3,
                                       cell_size=0.01 * u.pc)


@pytest.mark.parametrize("los", [(0, 0, 1), (0, 1, 0), (1, 0, 0), (0.2, 0.5, 0.84), (0.85, 0.5, 0.17)])
def test_traces_do_not_depend_on_the_thread_count(los):
    # each task writes only its own rays, so one thread and two give bit-identical images
    snap = _sphere()
    north = (1, 0, 0) if abs(los[0]) < 0.5 else (0, 0, 1)
    view = rtrace.View(los=los, north=north, npix=16, width=0.25 * u.pc, distance=1 * u.kpc)
    nus = [1.0, 5.0, 30.0] * u.GHz
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = rtrace.trace(snap, view, nus, supersample=2)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = rtrace.trace(snap, view, nus, supersample=2)
    finally:
        numba.set_num_threads(before)
    assert np.array_equal(one.intensity, two.intensity)
    assert np.array_equal(np.asarray(one.tau), np.asarray(two.tau))
    assert np.array_equal(np.asarray(one.emission_measure), np.asarray(two.emission_measure))


def test_emitting_blocks_match_a_numpy_reduction():
    # numpy's reshape-and-any over 8^3 blocks is the reference (common practice)
    rng = np.random.default_rng(11)
    nn = np.where(rng.random((20, 17, 9)) < 0.01, 1.0, 0.0).astype(np.float32)
    got = kernels.emitting_blocks(nn)
    pad = np.zeros((24, 24, 16), np.float32)
    pad[:20, :17, :9] = nn
    want = (pad.reshape(3, 8, 3, 8, 2, 8) > 0).any(axis=(1, 3, 5))
    assert got.dtype == np.uint8 and np.array_equal(got.astype(bool), want)
