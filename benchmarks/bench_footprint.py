"""Cost and accuracy of the exact footprint projector (rtrace.transfer.footprint).

Two parts, one run:

* **Table build** (:class:`Footprint`) for several directions (generic ones,
  a line of sight in a coordinate plane with north along a grid axis, one
  nearly in a coordinate plane), pixels of 0.1, 0.5, 1.6 and 8 cells, cubic
  and non-cubic (1 : 2 : 0.5) cells: wall time, exactly evaluated nodes,
  the table's size, and its measured error (``accuracy``: largest error over
  max K; ``relative_accuracy``: over max(K, 0.01 max K)).
* **Projection** (:func:`project_cells`) of an N^3 grid (N = 256 by default,
  ``--cells``) where every cell holds a value (float32, smooth random n_e
  5-205 cm^-3 squared) onto N x N pixels of 1.7 cells, one quantity, the grid
  passed as the transposed (a, b, c) view the tracer uses; and of the same
  grid with 90% of its cells zero. Interleaved rounds; min / median / max.

Usage: ``python benchmarks/bench_footprint.py [--cells 256] [--rounds 5]``
"""

import argparse
import time

import astropy.units as u
import numba
import numpy as np

import rtrace
from rtrace.transfer.footprint import Footprint, project_cells
from rtrace.transfer.tracer import FrequencyTables, _ObliqueRoute

DIRECTIONS = [
    ((1.0, 2.0, 3.0), (0.3, -0.9, 0.2)),
    ((1.0, 2.0, 0.0), (0.0, 0.0, 1.0)),
    ((1.0, 1.0, 1.0), (0.0, 0.0, 1.0)),
    ((0.02, 1.0, 0.5), (0.0, 0.0, 1.0)),
    ((1.0, 2.0, 0.0), (0.3, 0.1, 1.0)),
]


def route(los, north, pix_cells, n, cell=(1.0, 1.0, 1.0), npix=None, fields=None):
    """The tracer's oblique route for an n^3 grid viewed along ``los`` with pixels of ``pix_cells`` cells."""
    npix = npix or 16
    cell = np.asarray(cell, float)
    ne = fields if fields is not None else np.ones((n, n, n), np.float32)
    snap = rtrace.Snapshot.from_arrays(
        temperature=np.full(ne.shape, 1e4, np.float32) * u.K,
        cell_size=cell * u.cm,
        electron_density=ne * u.cm**-3,
        ion_density=ne * u.cm**-3,
    )
    view = rtrace.View(los=los, north=north, npix=npix, width=npix * pix_cells * u.cm, distance=1 * u.kpc)
    center, pix = view.resolve(snap)
    return _ObliqueRoute(snap, view, center, pix, FrequencyTables(np.array([1e9])), 1)


def smooth_field(n, lo, hi, seed):
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


def stats(xs):
    xs = np.asarray(xs)
    return f"min {xs.min():.3f}  median {np.median(xs):.3f}  max {xs.max():.3f}"


def tables():
    print("Table build (Footprint.from_route); wall s, exactly evaluated nodes, table shape, error / max K")
    Footprint.from_route(route(*DIRECTIONS[0], 1.6, 12))  # compile
    for los, north in DIRECTIONS:
        for pix_cells in (0.1, 0.5, 1.6, 8.0):
            for cell in ((1.0, 1.0, 1.0), (1.0, 2.0, 0.5)):
                r = route(los, north, pix_cells, 12, cell=cell)
                t0 = time.perf_counter()
                fp = Footprint.from_route(r)
                dt = time.perf_counter() - t0
                print(
                    f"  los={los!s:18} north={north!s:17} pixel {pix_cells:4} cells, cell {cell!s:15}: "
                    f"{dt:6.3f} s  nodes {fp.exact_nodes:7d}  table {fp.table.shape!s:13} "
                    f"accuracy {fp.accuracy:.1e}  relative {fp.relative_accuracy:.1e}  K^(1/{fp.power})"
                )


def projection(n, rounds):
    print(
        f"\nProjection (project_cells) of a {n}^3 float32 grid onto {n}x{n} pixels of 1.7 cells, "
        f"{numba.get_num_threads()} threads"
    )
    ne = smooth_field(n, 5.0, 205.0, 1)
    r = route((1.0, 2.0, 3.0), (0.3, -0.9, 0.2), 1.7, n, npix=n, fields=ne)
    fp = Footprint.from_route(r)
    full = (ne * ne).transpose(r.order)[None]
    sparse_grid = ne * ne
    sparse_grid[np.random.default_rng(2).random(sparse_grid.shape) < 0.9] = 0.0
    sparse = sparse_grid.transpose(r.order)[None]
    lo = np.zeros(3, np.int64)
    hi = np.asarray(full.shape[1:], np.int64)
    out = np.zeros((1, n, n))
    project_cells(fp, full[:, :2, :2, :2], lo, np.array([2, 2, 2]), lo, out)  # compile
    times = {"every cell": [], "10% of cells": []}
    for _ in range(rounds):
        for name, vals in (("every cell", full), ("10% of cells", sparse)):
            out[:] = 0.0
            t0 = time.perf_counter()
            project_cells(fp, vals, lo, hi, lo, out)
            times[name].append(time.perf_counter() - t0)
    for name, ts in times.items():
        print(f"  {name:13}: {stats(ts)} s  ({np.median(ts) / n**3 * 1e9:.1f} ns a cell, median)")
    print(
        f"  last image's total / (sum of cell values x V / A_pix) - 1 = "
        f"{out.sum() / (sparse_grid.astype(float).sum() * fp.total()) - 1:.1e} (below 0 by what falls "
        f"outside the image)"
    )


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=256)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    tables()
    projection(args.cells, args.rounds)


if __name__ == "__main__":
    main()
