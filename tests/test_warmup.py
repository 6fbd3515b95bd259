"""The compile notice and the warm-up that fills numba's cache.

numba raises its "numba:compile" event only when it compiles (not when it
loads machine code from its cache); that is numba's documented event API
(numba.core.event, "numba:compile"), not something of ours, and these tests
check that our notice follows it.
"""

import itertools

import astropy.units as u
import numba
import numpy as np

import rtrace
from rtrace.compiling import COMPILING_MESSAGE, watch_compilation
from rtrace.run.warmup import warm_up

_fresh = itertools.count()


def _new_function(offset=0.0):
    """A numba function never compiled before (cache=False: nothing on disk can serve it)."""
    offset = float(offset) + next(_fresh)

    @numba.njit(cache=False)
    def add(x):
        return x + offset

    add.offset = offset
    return add


def test_notice_appears_when_a_kernel_is_compiled_and_not_after():
    add = _new_function()
    said = []
    with watch_compilation(said.append) as seen:
        assert add(1.0) == 1.0 + add.offset
    assert seen.count == 1 and seen.seconds > 0.0
    # the kernel compiled, by name, with its seconds (the only one, so all of them)
    assert [name for name, _ in seen.kernels] == [f"{__name__}._new_function.<locals>.add"]
    assert seen.kernels[0][1] == seen.seconds
    assert said[0].startswith(COMPILING_MESSAGE)
    assert said[-1].startswith(f"{COMPILING_MESSAGE}: 1 compiled in ")  # the time taken
    # compiled now: calling again compiles nothing and says nothing
    said.clear()
    with watch_compilation(said.append) as seen:
        add(2.0)
    assert seen.count == 0 and said == []


def test_nested_compilation_counts_once():
    inner = _new_function()

    @numba.njit(cache=False)
    def outer(x):
        return inner(x) * 2.0

    with watch_compilation() as seen:
        outer(1.0)
    assert seen.count == 1  # inner is compiled inside outer's compilation
    assert [name for name, _ in seen.kernels] == [f"{__name__}.test_nested_compilation_counts_once.<locals>.outer"]


def test_warm_up_covers_the_routes_of_a_default_trace():
    warm_up()
    # another grid and other views, float32 fields as every default snapshot: all kernels ready
    n = 10
    x = (np.arange(n) + 0.5) / n - 0.5
    ne = np.where(x[:, None, None] ** 2 + x[None, :, None] ** 2 + x[None, None, :] ** 2 < 0.1, 50.0, 0.0)
    snap = rtrace.Snapshot.from_arrays(
        temperature=np.full_like(ne, 8000.0) * u.K, electron_density=ne * u.cm**-3, cell_size=0.02 * u.pc
    )
    said = []
    with watch_compilation(said.append) as seen:
        for los, north in (
            ((0, 0, -1), (0, 1, 0)),
            ((0, -1, 0), (0, 0, 1)),
            ((-1, 0, 0), (0, 1, 0)),
            ((0.3, 0.2, 0.93), (0, 1, 0)),
            ((0.9, 0.1, 0.42), (0, 1, 0)),
        ):
            view = rtrace.View(los=los, north=north, npix=12, width=0.25 * u.pc, distance=1 * u.kpc)
            for nu in ([2.0, 20.0] * u.GHz, [8.0] * u.GHz):
                res = rtrace.trace(snap, view, nu, background="cmb")
                assert np.all(np.isfinite(res.intensity))
                if view.los_axis() is None:
                    # the split route at the default accuracy and with refined blocks
                    for tolerance in (1e-2, 1e-4):
                        res = rtrace.trace(snap, view, nu, background="cmb", tolerance=tolerance)
                        assert np.all(np.isfinite(res.intensity))
    assert seen.count == 0, said


def test_warm_up_reaches_the_split_route_and_its_refinement():
    # the kernels that only the split route and its block refinement use have been compiled (numba's
    # dispatcher lists a signature once it has one, compiled or loaded from the cache)
    from rtrace.transfer import footprint_kernels, linearized

    warm_up()
    for kernel in (
        linearized.cell_coefficient_grids,
        linearized.sensitivity_pass,
        linearized.remainder_pass,
        linearized.remainder_trace,
        linearized.mark_rays,
        footprint_kernels.project_blocks,
    ):
        dispatcher = getattr(kernel, "dispatcher", kernel)
        assert dispatcher.signatures, dispatcher.py_func.__name__


def test_transposed_views_share_the_compiled_oblique_kernels():
    # an oblique view whose rays run closest to the first grid axis reads transposed views of the fields;
    # they go through the same any-layout specialisation as the contiguous arrays (one per dtype set)
    from rtrace.transfer import kernels, linearized

    warm_up()
    for kernel in (kernels.trace_sheared, linearized.cell_coefficient_grids, linearized.sensitivity_pass):
        sigs = kernel.dispatcher.signatures
        float32_fields = [
            s
            for s in sigs
            if getattr(s[0], "dtype", None) == numba.float32 or getattr(s[1], "dtype", None) == numba.float32
        ]
        assert all(a.layout == "A" for s in sigs for a in s if isinstance(a, numba.types.Array)), sigs
        assert len(float32_fields) <= 2, sigs  # at most with and without the He III ratio


def test_pipeline_says_when_it_compiles(tmp_path, monkeypatch):
    # a kernel compiled during the trace of a run must be announced through its progress callback
    from rtrace.run import engine as engine_module

    add = _new_function()
    real_trace = engine_module.Engine.trace

    def trace_and_compile(self, snap, view, *args):
        add(0.0)
        return real_trace(self, snap, view, *args)

    monkeypatch.setattr(engine_module.Engine, "trace", trace_and_compile)
    from rtrace.run.job import parse_job, run_job

    job = parse_job(
        {
            "snapshot": {"kind": "demo", "cells": 16},
            "frequencies": {"values": ["1 GHz"]},
            "view": [{"name": "v", "los": [0, 0, 1], "npix": 16, "width": "2.2 pc", "distance": "2 kpc"}],
            "output": {"directory": str(tmp_path / "out"), "pictures": False},
        }
    )
    lines = []
    run_job(job, progress=lambda step, total, message: lines.append(message))
    # (on a cold cache the run's own kernels may add more such lines; ours makes at least one pair)
    started = [m for m in lines if m == COMPILING_MESSAGE + " ..."]
    finished = [m for m in lines if m.startswith(COMPILING_MESSAGE + ": ") and " compiled in " in m]
    assert started and len(started) == len(finished), lines
    assert lines.index(started[0]) < lines.index(finished[0])
