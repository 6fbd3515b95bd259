"""How rtrace's trace time scales with grid size and with threads, measured in one run.

For each grid size N (``--sizes``, default 128 256 512) the demo scenario is
built at N^3 (float32) and traced at one frequency (5 GHz) for an
axis-aligned and an oblique (30 deg) line of sight, image N x N pixels,
width = box side. Printed: best-of-``--repeat`` seconds, million
cell-crossings per second (N^3 / time for both views: for the oblique view
this is the same N^3-based figure, not a count of the segments its rays
actually cross) and the time ratio between successive sizes, scaled to a
factor 8 in cells.

Thread scaling: for the ``--thread-size`` case (default 256) the same traces
with ``numba.set_num_threads(k)`` for k = 1 .. NUMBA_NUM_THREADS, time and
speedup over one thread.

Usage: ``python benchmarks/bench_scaling.py [--sizes 128 256 512] [--repeat 3] [--thread-size 256]``
(512^3 needs a few GB while the scenario is built and ~1.5 GB for the snapshot).
"""

import argparse
import gc
import math
import time

import astropy.units as u
import numba
from timing import best_of, max_rss_mb

import rtrace
from rtrace import demo

TILT = math.radians(30.0)
VIEWS = {
    "axis": (0.0, 0.0, 1.0),
    "oblique": (math.sin(TILT) * 0.6, math.sin(TILT) * 0.8, math.cos(TILT)),
}
NORTH = (0.0, 1.0, 0.0)
NU = [5.0] * u.GHz


def views_for(snap, n):
    width = float(snap.shape[0] * snap.cell_size[0]) * u.cm
    return {
        name: rtrace.View(los=los, north=NORTH, npix=n, width=width, distance=1 * u.kpc) for name, los in VIEWS.items()
    }


def thread_scaling(snap, n, repeat):
    views = views_for(snap, n)
    top = numba.config.NUMBA_NUM_THREADS
    rows = []
    for k in range(1, top + 1):
        numba.set_num_threads(k)
        rows.append(
            (
                k,
                {
                    name: best_of(lambda v=v, snap=snap: rtrace.trace(snap, v, NU, supersample=1), repeat)[0]
                    for name, v in views.items()
                },
            )
        )
    numba.set_num_threads(top)
    return rows


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256, 512], help="cells per side")
    parser.add_argument("--repeat", type=int, default=3, help="best of this many runs (default 3)")
    parser.add_argument(
        "--thread-size", type=int, default=256, help="grid size of the thread-scaling test (default 256; 0 to skip)"
    )
    args = parser.parse_args()
    sizes = sorted(set(args.sizes))
    print(
        f"rtrace trace at 5 GHz, image N x N, width = box side; numba threads {numba.get_num_threads()} "
        f"(NUMBA_NUM_THREADS {numba.config.NUMBA_NUM_THREADS}), best of {args.repeat}"
    )

    # compile outside the timings (numba caches on disk)
    small = demo.scenario(16)
    for v in views_for(small, 16).values():
        rtrace.trace(small, v, NU, supersample=1)
    del small

    results, threads = {}, None
    for n in sizes:
        t0 = time.perf_counter()
        snap = demo.scenario(n)
        t_build = time.perf_counter() - t0
        gc.collect()
        row = {
            name: best_of(lambda v=v, snap=snap: rtrace.trace(snap, v, NU, supersample=1), args.repeat)[0]
            for name, v in views_for(snap, n).items()
        }
        results[n] = row
        print(
            f"  N={n:4d}: scenario built in {t_build:6.1f} s; axis {row['axis']:8.3f} s, "
            f"oblique {row['oblique']:8.3f} s; peak RSS so far {max_rss_mb():.0f} MiB",
            flush=True,
        )
        if n == args.thread_size:
            threads = thread_scaling(snap, n, args.repeat)
        del snap
        gc.collect()
    if args.thread_size and args.thread_size not in sizes:
        snap = demo.scenario(args.thread_size)
        threads = thread_scaling(snap, args.thread_size, args.repeat)
        del snap

    print(
        f"\n{'N':>5} {'cells':>12} {'axis s':>9} {'Mcell/s':>8} {'oblique s':>10} {'Mcell/s*':>9}"
        f"   {'time ratio to previous N, scaled to 8x cells (axis, oblique)'}"
    )
    prev = None
    for n in sizes:
        cells = n**3
        ta, to = results[n]["axis"], results[n]["oblique"]
        line = f"{n:5d} {cells:12d} {ta:9.3f} {cells / ta / 1e6:8.1f} {to:10.3f} {cells / to / 1e6:9.1f}"
        if prev is not None:
            cell_ratio = cells / prev**3
            expo = math.log(8.0) / math.log(cell_ratio)
            ra = (ta / results[prev]["axis"]) ** expo
            ro = (to / results[prev]["oblique"]) ** expo
            raw = (
                f"raw {ta / results[prev]['axis']:.2f}, {to / results[prev]['oblique']:.2f} for {cell_ratio:.3g}x cells"
            )
            line += f"   {ra:6.2f}, {ro:6.2f}  ({raw})"
        print(line)
        prev = n
    print(
        "  * oblique Mcell/s is N^3 / time, the same N^3-based figure as the axis view "
        "(its rays cross more cell segments than N^3)"
    )

    if threads:
        print(f"\nthread scaling at N={args.thread_size} (numba.set_num_threads(k)):")
        base = threads[0][1]
        for k, row in threads:
            print(
                f"  k={k:2d}: axis {row['axis']:8.3f} s (speedup {base['axis'] / row['axis']:5.2f}), "
                f"oblique {row['oblique']:8.3f} s (speedup {base['oblique'] / row['oblique']:5.2f})"
            )
    print(f"\npeak RSS {max_rss_mb():.0f} MiB")


if __name__ == "__main__":
    main()
