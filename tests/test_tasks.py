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
    run_tasks(_fail_at, 0, 0)  # would raise if any chunk ran


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
    r = np.sqrt(x[:, None, None] ** 2 + x[None, :, None] ** 2 + x[None, None, :] ** 2)
    rng = np.random.default_rng(7)
    ne = np.where(r < 0.4, rng.uniform(10.0, 300.0, r.shape), 0.0).astype(np.float32)
    temp = rng.uniform(6.0e3, 1.5e4, r.shape).astype(np.float32)
    return rtrace.Snapshot.from_arrays(temperature=temp * u.K, electron_density=ne * u.cm**-3, cell_size=0.01 * u.pc)


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


@pytest.mark.parametrize("nus", [(1.0e9, 3.0e10), (3.0e10,)])
def test_oblique_sweep_on_threads_is_the_one_thread_sweep_for_any_layout(nus):
    # trace_sheared runs its blocks of rows on threads (run_tasks): each block writes only its own rays, so one
    # thread and two give the same bits, and transposed views (one any-layout specialisation) give what their
    # contiguous copies give (the cells are gathered in tiles of 8 layers, prefetched ahead where c has unit
    # stride: the copies, not the views); with He III cells (the ratio array), thick cells (1 GHz) and thin ones
    # (30 GHz); one frequency without He III (hydrogen: no ratio array; its own row pass) gives what it gives beside
    # another
    from rtrace.transfer.tracer import FrequencyTables

    rng = np.random.default_rng(5)
    shape = (24, 40, 30)  # (c, a, b): transposed to (a, b, c) below
    nn = 10.0 ** rng.uniform(2.0, 7.0, shape)  # n_e x ion term, cm^-6
    nn[rng.random(shape) < 0.3] = 0.0
    temp = rng.uniform(5.0e3, 2.0e4, shape)
    ratio = np.where(rng.random(shape) < 0.3, 0.9, 1.0)  # n_e / ion term below 1: He III
    views = tuple(a.transpose(1, 2, 0) for a in (nn, temp, ratio))
    copies = tuple(np.ascontiguousarray(a) for a in views)
    assert not views[0].flags.c_contiguous
    lo, hi, off = np.zeros(3, np.int64), np.array(views[0].shape, np.int64), np.zeros(3, np.int64)
    cell = 3.0e16  # cm (about 0.01 pc)
    segs = kernels.layer_segments(0.25, 0.75, 0.6, -0.35, cell, cell, cell, 0.8, 0, hi[2], True, 8)
    n_i, n_j = 44, 33  # 3 blocks of 16 rows, the last one short

    def sweep(arrays, threads, freqs=nus):
        tables = FrequencyTables(np.array(freqs))
        nf = len(freqs)
        before = numba.get_num_threads()
        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
        out_i, out_tau, out_em = np.zeros((nf, 1, n_i * n_j)), np.zeros((nf, 1, n_i * n_j)), np.zeros((1, n_i * n_j))
        try:
            kernels.trace_sheared(
                arrays[0],
                arrays[1],
                kernels.emitting_blocks(arrays[0]),
                lo,
                hi,
                off,
                0,
                True,
                -2,
                n_i,
                -3,
                n_j,
                *segs,
                *tables.args(),
                out_i,
                out_tau,
                out_em,
                arrays[2] if len(nus) == 2 else None,
            )
        finally:
            numba.set_num_threads(before)
        return out_i, out_tau, out_em

    one = sweep(copies, 1)
    if len(nus) == 2:
        # rays of tau > 0.1 over ~30 cells at 1 GHz: cells with dtau above SERIES_LIMIT (1e-3), the exact branch
        assert one[1][0].max() > 0.1 and one[1][1].max() > 0.0 and one[2].max() > 0.0
    else:
        # 30 GHz beside 100 GHz (more transparent, so the same cells take the series): the same images
        pair = sweep(copies, 1, (nus[0], 1.0e11))
        assert one[1].max() > 0.0 and np.all(pair[1][0] >= pair[1][1])
        for a, b in zip(one[:2], pair[:2], strict=True):
            np.testing.assert_allclose(a[0], b[0], rtol=1e-13, atol=0)
        assert np.array_equal(one[2], pair[2])
    for arrays, threads in ((copies, 2), (views, 1), (views, 2)):
        for a, b in zip(one, sweep(arrays, threads), strict=True):
            assert np.array_equal(a, b)
    sigs = kernels.trace_sheared.dispatcher.signatures
    assert all(a.layout == "A" for s in sigs for a in s if isinstance(a, numba.types.Array)), sigs


@pytest.mark.parametrize("los", [(0.2, 0.5, 0.84), (0.85, 0.5, 0.17)])
def test_split_route_on_threads_does_not_depend_on_the_thread_count(los):
    # the split route's kernels (per-cell coefficients, sensitivities, remainders, refined rays, cell projection,
    # tube remap) run on run_tasks threads with the chunking of the prange loops they replace: disjoint writes
    # (rows a stride apart, one buffer per chunk, even then odd bands), so one thread and two agree to rounding, at
    # the default tolerance and at one tight enough that blocks of rays are refined (not bit for bit: the cell
    # projection keeps one buffer per thread, as its prange version did, and sums them at the end); thread count
    # set with numba.set_num_threads (numba's documented API)
    from rtrace.transfer import footprint_kernels, linearized, remap

    snap = _sphere()
    north = (1, 0, 0) if abs(los[0]) < 0.5 else (0, 0, 1)
    view = rtrace.View(los=los, north=north, npix=14, width=0.25 * u.pc, distance=1 * u.kpc)
    nus = [1.0, 30.0] * u.GHz
    before = numba.get_num_threads()
    for tolerance in (1e-2, 1e-4):
        try:
            numba.set_num_threads(1)
            one = rtrace.trace(snap, view, nus, background="cmb", tolerance=tolerance)
            numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
            two = rtrace.trace(snap, view, nus, background="cmb", tolerance=tolerance)
        finally:
            numba.set_num_threads(before)
        assert np.all(np.isfinite(one.intensity)) and np.asarray(one.intensity).max() > 0.0
        for a, b in ((one.intensity, two.intensity), (one.tau, two.tau), (one.emission_measure, two.emission_measure)):
            a, b = np.asarray(a), np.asarray(b)
            np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * np.abs(a).max())
    kernels_used = (
        linearized.cell_coefficient_grids,
        linearized.sensitivity_pass,
        linearized.remainder_pass,
        linearized.remainder_trace,
        footprint_kernels.project_blocks,
        remap.remap_parallelograms,
    )
    for kernel in kernels_used:
        dispatcher = kernel.dispatcher
        assert dispatcher.signatures, dispatcher.py_func.__name__  # it ran (compiled or from the cache)
        assert not dispatcher.targetoptions.get("parallel"), dispatcher.py_func.__name__
    for kernel in kernels_used[:4]:  # one any-layout specialisation
        sigs = kernel.dispatcher.signatures
        assert all(a.layout == "A" for s in sigs for a in s if isinstance(a, numba.types.Array)), sigs
