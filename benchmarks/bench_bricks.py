"""Bricks, out-of-core and dask benchmark: what splitting the work costs, measured in one run.

Prints, for an N^3 float32 demo snapshot (N = 256 by default; ``--cells``),
an axis-aligned and an oblique view at 4 frequencies:

* whole-array trace (the in-memory default) vs the same snapshot in bricks
  (``--brick`` cells per side, and the brick ``max_memory`` chooses);
* out-of-core: ``open_hdf5`` (its validation/checksum pass) and the
  file-backed trace vs the in-memory bricked trace (the file is fresh, so it
  is read from the page cache, not the disk);
* dask ``LocalCluster`` with 2 worker processes x 1 thread vs the single
  process, file-backed, same bricks;
* peak RSS growth of the out-of-core trace under ``max_memory`` (Linux).

Usage: ``python benchmarks/bench_bricks.py [--cells 256] [--brick 64] [--budget "64 MB"] [--repeat 2]``
"""

import argparse
import os
import tempfile
import time

import astropy.units as u
import h5py
import numpy as np
from timing import best_of, max_rss_mb

import rtrace
from rtrace import demo


def status_bytes(key):
    """``VmRSS`` / ``VmHWM`` of this process in bytes (Linux), or None."""
    try:
        with open("/proc/self/status") as f:
            return next(int(line.split()[1]) * 1024 for line in f if line.startswith(key + ":"))
    except OSError:
        return None


def reset_peak():
    """Make VmHWM the current RSS (Linux >= 4.0); False where that is not possible."""
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        return True
    except OSError:
        return False


def write_snapshot(snap, path):
    with h5py.File(path, "w") as f:
        f.attrs["cell_size"] = snap.cell_size
        f.attrs["length_unit"] = "cm"
        for name, arr, unit in (("T", snap._t, "K"), ("ne", snap._ne, "cm**-3")):
            f.create_dataset(name, data=arr).attrs["units"] = unit


def max_difference(a, b):
    return max(
        float(np.max(np.abs(x - y)) / np.max(np.abs(y)))
        for x, y in ((a.intensity.value, b.intensity.value), (a.tau, b.tau))
    )


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=256)
    parser.add_argument("--brick", type=int, default=64)
    parser.add_argument("--budget", default="64 MB")
    parser.add_argument("--repeat", type=int, default=2)
    args = parser.parse_args()
    n, brick, budget, repeat = args.cells, args.brick, args.budget, args.repeat

    snap = demo.scenario(n)
    width = (snap.shape[0] * snap.cell_size[0]) * u.cm
    tilt = np.radians(30.0)
    views = {
        "axis-aligned": rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=n, width=width, distance=1 * u.kpc),
        "oblique 30 deg": rtrace.View(
            los=(np.sin(tilt) * 0.6, np.sin(tilt) * 0.8, np.cos(tilt)),
            north=(0, 1, 0),
            npix=n,
            width=width,
            distance=1 * u.kpc,
        ),
    }
    nu = np.geomspace(0.3, 30, 4) * u.GHz
    fields_mb = 2 * snap._t.nbytes / 1e6
    print(
        f"snapshot {n}^3 float32 ({fields_mb:.0f} MB of fields; the ion term is n_e), 4 frequencies, "
        f"{os.cpu_count()} CPU cores, best of {repeat}"
    )

    tmp = tempfile.TemporaryDirectory()
    path = os.path.join(tmp.name, "snap.h5")
    write_snapshot(snap, path)
    small = demo.scenario(16)
    small_path = os.path.join(tmp.name, "small.h5")
    write_snapshot(small, small_path)
    lazy_small = rtrace.open_hdf5(small_path, temperature="T", electron_density="ne")
    for v in views.values():  # compile / load the kernels outside the timings
        sv = rtrace.View(los=v.los, north=v.north, npix=16, distance=1 * u.kpc)
        rtrace.trace(small, sv, nu, supersample=1)
        rtrace.trace(lazy_small, sv, nu, brick_size=8, supersample=1)

    t_open, lazy = best_of(lambda: rtrace.open_hdf5(path, temperature="T", electron_density="ne"), 1)
    print(f"\nopen_hdf5 (streaming validation + checksum over {fields_mb:.0f} MB): {t_open:6.3f} s")

    print(
        f"\n{'view':<16}{'whole':>9}{f'brick {brick}':>11}{'max_memory':>12}{'file':>9}"
        f"{'file/whole':>12}{'max diff':>10}"
    )
    single = {}
    for name, v in views.items():
        t_whole, ref = best_of(lambda v=v, nu=nu: rtrace.trace(snap, v, nu, supersample=1), repeat)
        t_brick, res_b = best_of(lambda v=v, nu=nu: rtrace.trace(snap, v, nu, brick_size=brick, supersample=1), repeat)
        t_budget, res_m = best_of(
            lambda v=v, nu=nu: rtrace.trace(snap, v, nu, max_memory=budget, supersample=1), repeat
        )
        t_file, res_f = best_of(lambda v=v, nu=nu: rtrace.trace(lazy, v, nu, brick_size=brick, supersample=1), repeat)
        single[name] = (t_file, res_f)
        diff = max(max_difference(r, ref) for r in (res_b, res_m, res_f))
        print(
            f"{name:<16}{t_whole:8.3f}s{t_brick:10.3f}s{t_budget:11.3f}s{t_file:8.3f}s"
            f"{t_file / t_whole:11.2f}x{diff:10.1e}"
        )
    print(
        f"(seconds; 'max_memory' = {budget!r}, brick chosen by the planner; 'file' = open_hdf5 snapshot, "
        f"brick {brick}; max diff = largest relative difference from the whole-array images)"
    )

    if reset_peak():
        base = status_bytes("VmRSS")
        for v in views.values():
            rtrace.trace(lazy, v, nu, max_memory=budget, supersample=1)
        grown = status_bytes("VmHWM") - base
        print(
            f"\npeak RSS growth of the two file-backed traces under max_memory={budget!r}: "
            f"{grown / 1e6:.1f} MB (fields on disk: {fields_mb:.0f} MB)"
        )

    try:
        from distributed import Client, LocalCluster
    except ImportError:
        print("\ndask.distributed not installed: no dask figures")
        return
    t0 = time.perf_counter()
    with (
        LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster,
        Client(cluster) as client,
    ):
        for v in views.values():  # workers import rtrace and load the kernels once
            rtrace.trace(
                lazy_small,
                rtrace.View(los=v.los, north=v.north, npix=16, distance=1 * u.kpc),
                nu,
                brick_size=8,
                client=client,
                supersample=1,
            )
        t_start = time.perf_counter() - t0
        print(
            f"\ndask LocalCluster, 2 worker processes x 1 thread (start and warm-up {t_start:.1f} s), "
            f"file-backed, brick {brick}"
        )
        print(f"{'view':<16}{'single':>9}{'dask':>9}{'dask/single':>13}{'max diff':>10}")
        for name, v in views.items():
            t_dask, res = best_of(
                lambda v=v, nu=nu: rtrace.trace(lazy, v, nu, brick_size=brick, client=client, supersample=1), repeat
            )
            t_single, res_single = single[name]
            print(
                f"{name:<16}{t_single:8.3f}s{t_dask:8.3f}s{t_dask / t_single:12.2f}x"
                f"{max_difference(res, res_single):10.1e}"
            )
    print(
        "(the single process already runs the numba kernels on every core; each worker does too, "
        "so on a 2-core machine dask adds scheduling and transfer, not cores)"
    )
    print(f"\nprocess peak RSS {max_rss_mb():.0f} MiB")


if __name__ == "__main__":
    main()
