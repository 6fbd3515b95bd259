"""Per-cell cost when every cell emits: rtrace's tracer against a numpy transfer and a streaming pass.

One run, on an N^3 float32 grid where every cell emits (smooth random n_e in
5-205 cm^-3, T in 5e3-2e4 K; N = 256 by default, ``--cells`` to change), times
in interleaved rounds and prints min / median / max of each and of the ratios
within each round:

* numpy: a vectorised per-slice transfer along the last axis (same physics
  functions as the package; the route without rtrace), target rtrace axis 1
  frequency <= 0.10x of it
* stream: a numba pass that only reads the two fields once (the memory-bound
  floor for any per-cell work), target rtrace axis 1 frequency <= 6x of it
* rtrace axis-aligned 1 frequency, 8 frequencies (target <= 2.5x of one) and
  oblique at supersample=1 (target <= 2x of axis)

* with ``--one-thread``: one numba thread, each case timed in process CPU seconds, so the
  figures hold steady on a machine shared with other work (wall-clock ratios there vary 2x)

* with ``--compile``: first-use compile time, the warm-up (``python -m rtrace.run.warmup``) run in a
  fresh process with an empty numba cache (``NUMBA_CACHE_DIR`` a new temporary folder): kernels
  compiled and seconds, as the warm-up reports them (target for the demo's kernels <= 15 s)

Latest, the axis kernels (issue 14 item 3, branch ``axis2``): the opacity factor ``alpha_nu / (n_e n_i)``
comes from a per-frequency table indexed by the temperature's bits (``rtrace/transfer/ttable.py``: node and
weight by integer operations, no logarithm, square root or division per cell; results move by up to 2.2e-7
relative, the table's linear interpolation in T); the single-frequency kernel fuses its per-cell passes into
one vectorised loop (sums of dtau and EM reassociated), advances 8 rays side by side (was 4) and all axis
kernels contract multiply-adds. Profile of the single-frequency kernel before (one thread, CPU time, 256^3,
by leaving parts out): ``ln T`` from the bits, the Gaunt gather, dtau (square root, division), the series and
source (a division), the EM pass and the 4-ray recurrence were 121 ms against 13.4 ms for the streaming pass;
after: the table gather (a scalar loop: the compiler emits no vector gather here) 18 ms, the recurrence
9 ms, the fused loop and the field reads 25 ms, 52 ms in all. Measured at load 9-11 (three other jobs and a
test suite on the 2 cores), so in CPU seconds, one thread, 5 rounds, main (6351ed1) and this branch
alternating, two runs each (a harness timing the same calls); then this script with ``--one-thread``, one run
each, while the test suite ran too: before axis1 0.147 s, axis8 0.420, oblique 0.579, stream 0.014, numpy
4.48; axis1/stream 10.2-12.5 (median 10.7), axis8/axis1 2.46-3.04 (2.87), oblique/axis1 3.5-4.1 (3.8);
after axis1 0.081, axis8 0.291, oblique 0.582, stream 0.014, numpy 5.19; axis1/stream 4.7-6.4 (median
5.8), axis8/axis1 3.3-4.3 (3.6), oblique/axis1 6.6-8.3 (7.2: the oblique sweep is unchanged here);
axis1/numpy 0.016 (target <= 0.10, met before and after):

==============================  ======================  ======================  ========
one thread, CPU s, medians      before (6351ed1)        after (axis2)           target
==============================  ======================  ======================  ========
stream (reads the two fields)   0.014 / 0.016           0.014 / 0.014
axis 1 frequency (whole trace)  0.146 / 0.147           0.070 / 0.071
axis 8 frequencies              0.415 / 0.444           0.277 / 0.287
axis1/stream, per round         9.9-11.3 / 9.0-10.9     4.4-5.3 / 4.1-5.2       <= 6
axis8/axis1, per round          2.79-2.94 / 2.87-3.05   3.82-4.11 / 3.98-4.45   <= 2.5
kernel alone, 1 frequency       0.121-0.127             0.050-0.055
kernel alone, 8 frequencies     0.368                   0.256
middle axis, 1 / 8 frequencies  0.24 / 0.89             0.127 / 0.38
==============================  ======================  ======================  ========

The single-frequency target (<= 6x the streaming pass) is met with margin in CPU time (wall clock, both
threads, at that load: medians 5.3 and 6.9 against 8.8-9.7 before). Of the 70 ms trace, 18 ms is outside
these kernels: the image step (the remap of the columns onto pixels, 9 ms in ``remap._band_pass`` on both
threads for 256^2 columns) and the input checks (a pass over n_e, 4 ms). The 8-frequency
ratio got worse (2.9 -> 4.0): the 8-frequency kernel gained 1.4-1.5x, the single-frequency one 2.1x.
What bounds it, measured: with its per-cell arithmetic removed the kernel still takes 253 of its 256 ms,
and 2, 4, 8, 16 frequencies take 183, 244, 252, 331 ms, so ~170 ms is per-cell overhead (the scalar part
and the entry checks of the vectorised frequency loop, which the compiler re-runs for every cell: its
arrays may alias) rather than work per frequency. Tried and dropped (same run, same units): two-phase
per ray (coefficients for all cells, then the recurrence) 392-398 ms (the 3-output frequency loop stays
scalar, the recurrence through memory costs 140 ms); 8 frequencies' sums in local variables, straight-line
code per cell 474 ms (not vectorised); a fixed 8-count frequency loop 471 ms; 2 and 4 rays interleaved
per cell 284 and 538 ms; the per-cell factors in a vectorised pre-pass 281 ms. Compile time with an empty
cache, per kernel in a fresh process, two runs each at load 8-10: single frequency 5.3, 11.1 s before /
4.8, 5.6 s after; 8 frequencies 4.9, 4.6 / 5.1, 5.4; middle axis 5.7, 5.5 / 4.7, 5.3 (unchanged within
the noise).


  compiled and seconds, as the warm-up reports them; then the demo (``rtrace demo``) the same way,
  each kernel it compiles with its seconds (``rtrace.compiling.Compilation.kernels``; target for the
  demo's kernels <= 15 s on an idle machine). ``--compile-only`` stops there.

Latest (branch ``compile2``: the footprint table's and the remap's polygon clipping written once, as a loop
over the box's sides, instead of four inlined copies; vertex buffers picked by index, so no array is passed
or swapped per pixel; the tube work written into the remap's band pass). The demo with an empty cache, one
process each, old (main, 6351ed1) and new alternating, two rounds, at load 5.7-9.4 (four other jobs on the
2 cores, so wall time was 2-2.5x the CPU time; CPU seconds of the compiling thread, ``time.thread_time``,
are the steadier measure):

================================  ==================  ==================
demo, 13 kernels + planck         before (main)       after (compile2)
================================  ==================  ==================
all, CPU s                        17.42, 18.09        15.59, 15.74
kernel_table (with exact_kernel)  2.91, 3.26          1.92, 1.79
remap band pass                   1.66, 1.75          1.14, 1.12
_exact_many                       0.29, 0.29          0.20, 0.22
the 11 others (unchanged)         12.56, 12.79        12.33, 12.61
================================  ==================  ==================

Scaled to an idle machine with the ratio of the old figures (15.9-16.3 s idle against 17.4-18.1 CPU-s
here): about 14.2 s (13.9-14.6), target <= 15 s met, by about 0.8 s. In isolation (the two kernels
compiled in a fresh process, 2 x 2 alternating runs): ``kernel_table`` 2.28-2.43 -> 1.52-1.72 CPU-s, the
band pass 1.62-1.76 -> 1.16-1.37 CPU-s; run time, one thread: a 400 x 300 table 83-91 -> 30-34 ms
(2.7x faster: ``_overlap`` no longer takes four array views per call), 200k tubes remapped 84-104 ->
75-88 ms; tables and images bit for bit the same (52 cases, random and degenerate directions, compared
with ``np.array_equal``). What is left is outside these modules: ``_sheared_row_blocks`` 4 s; and
``_row_coefficients`` is compiled twice in ``trace_sheared``, once for the argument type
``Literal[int](-1)``, because ``last`` starts as the literal ``-1`` (numba's type propagation compiles
a called function for an intermediate literal type; ``first, last = width, np.int64(-1)`` in
``_sheared_row_blocks`` removes it: 15.59, 15.74 -> 14.90, 15.45 CPU-s in the same rounds).

Before (the split route's kernels on threads too, ``splitthr``; quiet machine, load 1.4): ``--compile``
gives 16 kernels in 21.4 s; the demo run with an empty cache compiles its 13 kernels in 15.9 and
16.3 s (two runs; 27.4 s before that branch): ``_sheared_row_blocks`` 4 s, ``kernel_table`` 2.8 s,
the remap's band pass 1.6 s and the last-axis planes 1.8 s are the largest left (target <= 15 s,
not met by about 1 s). The figures and tables below are the history.

Oblique sweep (branch ``sweep2``, issue 14 item 3): ``trace_sheared`` gathers each task's cells one block
(8 layers) at a time into a tile, layer innermost, prefetching the columns 8 ahead (``llvm.prefetch``) when the
rays run nearly along the array's last axis; its loops index with unsigned values (a signed index costs a
negative-index wraparound per access, which had kept the crossing loop and the ``ln T`` loop scalar), 16 rows
of rays a task, and one frequency in the radio regime without He III has a vectorised row pass
(``_radio_row``). Images bit-identical (both directions, 1 and 8 frequencies). This script, 256^3, 5 rounds,
two alternating runs of each, machine busy (load 8-11):

=================================  ======================  ======================  ========
both threads, medians, s           before (6351ed1)        after (sweep2)          target
=================================  ======================  ======================  ========
axis 1 frequency                   0.410 / 0.354           0.366 / 0.344
oblique, supersample=1             1.388 / 1.461           0.617 / 0.596
oblique/axis1 (min-median-max)     3.05-3.31-3.73 /        1.46-1.93-2.00 /        <= 2
                                   3.71-3.93-4.35          1.53-1.62-2.50
=================================  ======================  ======================  ========

(The "after" runs are of eac8455; the final tile gather, 2fe7960, once, while the test suite ran on the same
cores: oblique 0.689 s, axis1 0.430 s, oblique/axis1 1.03-1.52-3.21.)

``trace_sheared`` alone, CPU seconds, one thread, medians of 5 (``los`` (0.3, 0.4, 0.87): layers along the
contiguous axis; (0.9, -0.3, 0.5): along the first): 1 frequency 0.493 -> 0.236 s and 0.387 -> 0.210 s; 8
frequencies (3 rounds) 0.985 -> 0.868 s and 0.854 -> 0.811 s; the sparse demo scenario (``demo.scenario(256)``,
13.7% of cells emit, first view) 0.131 -> 0.130 s, image identical. Where the single-frequency sweep's time went
before (perf, samples by code address): a quarter in the loads of the strided layer reads, then the ``ln T``
and crossing loops (scalar: the wraparound), then the coefficients; after: the tile gather's loads still lead.
Compile time: ``_sheared_row_blocks`` with an empty cache (a first call on a tiny float32 grid, 1 frequency,
two runs each) 4.2-4.3 -> 5.5-5.8 CPU-s (numba's LLVM time about 2.5 -> 4.7 s: the loops that now vectorise),
so it grew by about 1.4 s (the brief asked that it not grow; not met).

Usage: ``PYTHONPATH=. python benchmarks/bench_emitting.py [--cells 256] [--rounds 5] [--compile | --compile-only]``
from the repository root (without ``PYTHONPATH=.`` a script imports the installed rtrace, not this
copy).

Measured (issue 14, item 3), 256^3, on the 2-core machine shared with three other jobs (load 3-4,
so absolute times vary 2-7x between runs; compare ratios within one run):

===============================  ======================  ======================  ========
one thread, median of 5, s       before (98f58a7)        after (this branch)     target
===============================  ======================  ======================  ========
axis 1 frequency (whole trace)   0.340 / 0.339           0.271 / 0.270
axis 8 frequencies               1.100 / 1.111           0.782 / 0.728
oblique, supersample=1           1.228 / 1.231           1.101 / 1.069
axis8 / axis1                    3.19 / 3.27             2.92 / 2.82             <= 2.5
oblique / axis1                  3.56 / 3.63             4.11 / 3.95             <= 2
kernel alone, axis 1 frequency   0.30                    0.12
kernel alone, axis 8 frequencies 0.83                    0.38
kernel alone, oblique (128^3)    0.088                   0.062
===============================  ======================  ======================  ========

(two alternating runs of each, one thread, ``numba.set_num_threads(1)``, whole ``rtrace.trace``
calls; kernel times from direct calls on the same grid). Both threads, this script, 3-5 rounds,
min / median / max of the ratios within each round:

* before: axis1/numpy 0.025-0.062, axis1/stream 7.0-16.6 (median 12.0, 11.5), axis8/axis1 2.8-3.5
  (medians 3.02, 2.87), oblique/axis1 2.7-3.6 (medians 3.47, 3.43)
* after: axis1/numpy 0.021-0.031 (numpy itself slowed 5-10x by the load), axis1/stream 9.4-12.3
  (median 10.2), axis8/axis1 2.40-3.33 (median 2.75), oblique/axis1 3.4-5.2 (median 4.3)

Targets met: axis1 <= 0.10x numpy. Not met: axis1 <= 6x the streaming pass (7-10x), 8 frequencies
<= 2.5x one (2.75-2.9x), oblique <= 2x axis (about 4x: the oblique sweep gained less than the axis
kernel, so the ratio grew; its cell pass reads each layer with a stride and evaluates coefficients
cell by cell). First-use compile of the warm-up's kernels with a cold numba cache
(``NUMBA_CACHE_DIR=$(mktemp -d) python -m rtrace.run.warmup``) under the same load: 178 s before, 162 s
after (34-45 s when the machine is idle); after, at load 2.5-3.5: 46.8 s, of which trace_along_last_axis
8.7 s, trace_sheared 7.5 s (C-ordered arrays) + 7.3 s (transposed, 'A' layout), remap_parallelograms 5.1 s,
trace_along_middle_axis 5.0 s + 4.6 s ('A'), one_frequency_along_last_axis 4.4 s, emitting_blocks 1.4 s.
The <= 15 s target is not met; the transposed-layout specialisations (12 s) are the first candidates.

Quiet machine (load < 1), after all of issue 14's and 15's changes, this script, 5 rounds, both
threads: numpy 4.11 s, stream 7 ms, axis1 72 ms, axis8 206 ms, oblique 299 ms (medians);
axis1/numpy 0.017 (target <= 0.10, met), axis1/stream 10.2-10.5 (<= 6, not met), axis8/axis1
2.84-3.38, median 2.87 (<= 2.5, not met), oblique/axis1 4.06-4.66, median 4.17 (<= 2, not met).
Cold-cache warm-up (9 kernels): 57.9 s (was 34-45 s idle before the He III rows and the
vectorised loops; target <= 15 s, not met).

Compile time (issue 14, item 4), per kernel specialisation, seconds of numba compilation with an
empty cache (numba's "numba:compile" event, outermost compilations), the warm-up's routes plus
oblique traces at tolerance 1e-2 (the split route, the default since d728b3a), one process each,
back to back at load 3.4-4 on the 2-core machine (so about twice the idle figures):

===================================  ===========================  ===========================
kernel                               before (d728b3a)             after (this branch)
===================================  ===========================  ===========================
along the last axis, 8 frequencies   11.9 (parfor)                1.8 (threads, run_tasks)
along the last axis, 1 frequency     5.1                          1.8
along the middle axis, C + 'A'       6.6 + 6.5                    1.8 + 1.8
emitting_blocks                      1.4                          0.15
layer_segments                       0.9                          1.0
trace_sheared, C + 'A'               10.8 + 10.8                  15.3 (one 'A', any_layout)
remap_parallelograms                 5.4                          3.4 (_add_tube not inlined)
cell_coefficient_grids, C + 'A'      4.1 + 2.9                    3.8 (any_layout)
sensitivity_pass (two layouts)       1.7 + 2.0                    2.0
remainder_pass (two layouts)         1.1 + 1.1                    1.2
remainder_trace (block refinement)   not in the warm-up           1.4
kernel_table (with exact_kernel)     5.4                          3.5 (no parfor)
project, _exact_many                 3.7, 0.3                     3.7, 0.3
total                                81.7 (19 compilations)       42.9 (16)
===================================  ===========================  ===========================

The axis kernels lost most: numba's ``parallel=True`` typed each loop body twice, ran its parfor
passes and built a gufunc, 5-6x the cost of the body alone; they now run as ``nogil`` kernels on
threads (run time unchanged: axis 1 frequency 0.204 s after / 0.248 s before, 8 frequencies 0.646 /
0.634, oblique 0.873 / 0.893, medians of 5 rounds of this script in one session at load 4-5; the
middle-axis kernel on one thread, 192^3, 0.105 / 0.102 s). ``trace_sheared`` keeps its parfor: its
body compiled as a plain function ran 4x slower (0.86 s against 0.21 s, 192^3, one thread; cause not
found), so it is compiled once for both memory orders instead. The demo uses the last-axis kernel
and the split route's kernels (its gas has no He III): about 37 s of the 43 s above (about 35 s at
the load of the warm-up runs below), so the
<= 15 s target is not met; trace_sheared (15 s) and the split route's parfor kernels (project,
cell_coefficient_grids, sensitivity_pass, remap: 13 s) are what is left.

``python -m rtrace.run.warmup`` with an empty cache (what ``--compile`` runs), two alternating runs each,
load 1.6-3.6: before (d728b3a, whose warm-up reaches the split route through the default tolerance
but not its block refinement) 18 kernels in 81.1 s and 78.7 s; after, 15 kernels in 39.9 s and
41.3 s (43-44 s for the process); 2.5 s once cached.

``trace_sheared`` on threads (``run_tasks``, one any-layout specialisation) instead of its parfor, load 1.0-1.6,
old (1b240c9) and new alternating:

=================================================  =====================  =====================
                                                   before (parfor)        after (threads)
=================================================  =====================  =====================
trace_sheared alone, empty cache, 2 runs           13.7, 13.7 s           3.9, 3.9 s
warm-up, empty cache (16 kernels), 2 runs          40.1, 41.6 s           33.2, 31.9 s
kernel alone, 256^3, 2 threads, 1 / 8 frequencies  0.254 / 0.72 s         0.251 / 0.66 s
  (medians of 5; second oblique direction)         0.192 / 0.633 s        0.211 / 0.628 s
this script, oblique (median of 5), two runs       0.270, 0.286 s         0.277, 0.284 s
this script, oblique/axis1 (median), two runs      3.67, 3.71             3.08, 3.74
=================================================  =====================  =====================

Images identical bit for bit (both directions, 1 and 8 frequencies). The cause of the plain build's 4-5x slowdown
(0.24 s against 0.05 s, 128^3, one thread, 1 frequency): half its samples were in ``NRT_incref``/``NRT_decref``,
the atomic reference counts of the arrays passed per cell to the inlined ``_coefficients_at``; neither a separate
row function calling it nor a non-inlined helper removed them; indexing the tables in the row loop itself
(``kernels._row_coefficients``) did. Where the sweep's time goes (256^3, one thread, 1 frequency, 0.50 s, by
leaving parts out): reading a layer's cells into the row buffers 0.155 s, their ``ln T`` 0.055 s, the
coefficients 0.15 s, the crossings 0.13-0.14 s. The read (a stride through memory per cell; about 10x a
streaming pass over the two fields) alone costs twice the whole axis-aligned trace on two threads (0.075 s), so
the oblique/axis target (<= 2) needs another way of reading the layers, e.g. tiles of 16 layers read along
the contiguous axis (not attempted).
"""

import argparse
import os
import re
import subprocess
import sys
import tempfile
import time

import astropy.units as u
import numba
import numpy as np

import rtrace
from rtrace.physics.freefree import absorption_cgs
from rtrace.physics.planck import planck_cgs


def smooth_field(n, lo, hi, seed):
    """``(n, n, n)`` float32 field from a few random low-order Fourier modes, scaled to ``[lo, hi]``."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 2.0 * np.pi, n, endpoint=False, dtype=np.float32)
    f = np.zeros((n, n, n), np.float32)
    for _ in range(6):
        kx, ky, kz = rng.integers(1, 4, 3)
        px, py, pz = rng.uniform(0, 2 * np.pi, 3)
        f += (
            np.sin(kx * x + px)[:, None, None] * np.sin(ky * x + py)[None, :, None] * np.sin(kz * x + pz)[None, None, :]
        ).astype(np.float32)
    f -= f.min()
    f /= f.max()
    return (lo + (hi - lo) * f).astype(np.float32)


def numpy_transfer(ne, t, ds, nu):
    """Transfer along the last axis, one slice of cells at a time, in vectorised numpy (I, tau)."""
    inten = np.zeros(ne.shape[:2])
    tau = np.zeros(ne.shape[:2])
    for k in range(ne.shape[2]):
        tk = t[:, :, k].astype(np.float64)
        nk = ne[:, :, k].astype(np.float64)
        dtau = absorption_cgs(nu, tk, nk, nk) * ds
        att = -np.expm1(-dtau)
        inten += att * (planck_cgs(nu, tk) - inten)
        tau += dtau
    return inten, tau


@numba.njit(parallel=True, cache=True)
def stream_pass(ne, t, out):
    """Read both fields once along the last axis (a sum per ray): the memory-bound floor."""
    na, nb, nl = ne.shape
    for a in numba.prange(na):
        for b in range(nb):
            acc = 0.0
            for l in range(nl):
                acc += float(ne[a, b, l]) * float(t[a, b, l])
            out[a, b] = acc


def cold_compile():
    """The warm-up in a fresh process with an empty numba cache: ``(kernels compiled, seconds, process wall s)``."""
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        t0 = time.perf_counter()
        out = subprocess.run(
            [sys.executable, "-m", "rtrace.run.warmup"], env=env, capture_output=True, text=True, check=True
        ).stdout
        wall = time.perf_counter() - t0
    found = re.search(r"(\d+) compiled in ([\d.]+) s", out)
    if found is None:
        raise RuntimeError(f"the warm-up compiled nothing with an empty cache:\n{out}")
    return int(found.group(1)), float(found.group(2)), wall


# Run in a fresh process: the demo job (``rtrace demo``) with compilation watched, one line per kernel compiled.
_DEMO_PROGRAM = """
import contextlib, io, sys
from rtrace.cli import main
from rtrace.compiling import watch_compilation
with watch_compilation() as seen, contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
    status = main(["demo", "--output", sys.argv[1]])
for name, seconds in seen.kernels:
    print(f"{seconds:.3f} {name}")
sys.exit(status)
"""


def demo_compile():
    """The demo (``rtrace demo``) in a fresh process with an empty numba cache: ``[(kernel, seconds), ...]``."""
    with tempfile.TemporaryDirectory() as work:
        env = dict(os.environ, NUMBA_CACHE_DIR=os.path.join(work, "cache"))
        out = subprocess.run(
            [sys.executable, "-c", _DEMO_PROGRAM, os.path.join(work, "out")],
            env=env,
            capture_output=True,
            text=True,
            check=True,
        ).stdout
    kernels = [(name, float(seconds)) for seconds, name in (line.split(" ", 1) for line in out.splitlines())]
    if not kernels:
        raise RuntimeError("the demo compiled nothing with an empty cache")
    return kernels


def summary(values):
    v = np.asarray(values)
    return f"{v.min():8.3f} / {np.median(v):8.3f} / {v.max():8.3f}"


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=256)
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument(
        "--compile", action="store_true", help="also time the warm-up and the demo, each with an empty numba cache"
    )
    parser.add_argument("--compile-only", action="store_true", help="only that (no per-cell timings)")
    parser.add_argument(
        "--one-thread",
        action="store_true",
        help="one thread, timed in process CPU seconds (steady on a machine shared with other work)",
    )
    args = parser.parse_args()
    clock = time.perf_counter
    if args.one_thread:
        numba.set_num_threads(1)
        clock = time.process_time
    if args.compile or args.compile_only:
        count, seconds, wall = cold_compile()
        print(
            f"first use, empty numba cache: the warm-up compiled {count} kernels in {seconds:.1f} s "
            f"({wall:.1f} s for the whole process)",
            flush=True,
        )
        kernels = demo_compile()
        total = sum(sec for _, sec in kernels)
        print(
            f"the demo (rtrace demo) with an empty cache compiled {len(kernels)} kernels in {total:.1f} s "
            f"(target <= 15 s on an idle machine; load average now {os.getloadavg()[0]:.1f}):",
            flush=True,
        )
        for name, sec in sorted(kernels, key=lambda k: -k[1]):
            print(f"  {sec:6.2f} s  {name}")
        if args.compile_only:
            return
    n = args.cells
    cell = 1.0e-3 * u.pc
    ne = smooth_field(n, 5.0, 205.0, 1)
    t = smooth_field(n, 5.0e3, 2.0e4, 2)
    snap = rtrace.Snapshot.from_arrays(temperature=t * u.K, electron_density=ne * u.cm**-3, cell_size=cell)
    ds = cell.to_value(u.cm)
    width = n * cell
    axis_view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=n, width=width, distance=1 * u.kpc)
    tilt = np.radians(30.0)
    oblique_view = rtrace.View(
        los=(np.sin(tilt) * 0.6, np.sin(tilt) * 0.8, np.cos(tilt)),
        north=(0, 1, 0),
        npix=n,
        width=width,
        distance=1 * u.kpc,
    )
    one = [5.0] * u.GHz
    eight = np.geomspace(0.3, 100, 8) * u.GHz
    out = np.zeros((n, n))

    cases = {
        "numpy": lambda: numpy_transfer(ne, t, ds, one.to_value(u.Hz)[0]),
        "stream": lambda: stream_pass(ne, t, out),
        "axis1": lambda: rtrace.trace(snap, axis_view, one),
        "axis8": lambda: rtrace.trace(snap, axis_view, eight),
        "oblique": lambda: rtrace.trace(snap, oblique_view, one, supersample=1),
    }
    t0 = time.perf_counter()
    results = {k: fn() for k, fn in cases.items()}  # compile / first touch, untimed
    print(f"grid {n}^3 float32, every cell emits; first (untimed) round {time.perf_counter() - t0:.1f} s")
    times = {k: [] for k in cases}
    for _ in range(args.rounds):
        for key, fn in cases.items():
            t0 = clock()
            fn()
            times[key].append(clock() - t0)
    print(
        f"{'CPU ' if args.one_thread else ''}times over {args.rounds} rounds"
        f"{', one thread' if args.one_thread else ''}, s (min / median / max):"
    )
    for key in cases:
        print(f"  {key:8s} {summary(times[key])}")
    ratios = {
        "axis1/numpy (<= 0.10)": ("axis1", "numpy"),
        "axis1/stream (<= 6)": ("axis1", "stream"),
        "axis8/axis1 (<= 2.5)": ("axis8", "axis1"),
        "oblique/axis1 (<= 2)": ("oblique", "axis1"),
    }
    print("ratios within each round (min / median / max), target:")
    for label, (a, b) in ratios.items():
        print(f"  {label:24s} {summary(np.divide(times[a], times[b]))}")
    ref_i, ref_tau = results["numpy"]
    ours = results["axis1"]
    di = np.max(np.abs(ours.intensity.value[0].T / ref_i - 1))
    dt = np.max(np.abs(np.asarray(ours.tau)[0].T / ref_tau - 1))
    print(f"axis 1 frequency vs numpy: max relative difference I {di:.1e}, tau {dt:.1e}")


if __name__ == "__main__":
    main()
