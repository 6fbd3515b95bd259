"""Cost of the per-charge Gaunt factor and the emission-measure choice in the kernels.

On an N^3 float32 grid (N = 128 by default, ``--cells``), traces in
interleaved rounds, with the same density and temperature fields:

* ``hydrogen``: ion term = n_e (hydrogen, singly ionized helium): the Z = 1
  Gaunt row only, no ratio array on oblique views; this is the default
  trace whose cost must not change (compare with the same script run from
  a checkout before the change: ``--plain`` skips the new keywords);
* ``he III``: Y = 0.28 helium fully doubly ionized (ion term 7/6 n_e, He III
  share 0.29 in every cell): the Z = 2 row is read too, the single-frequency
  kernel takes its cell-by-cell path, and oblique views read the
  ``n_e / ion term`` ratio array;
* ``ion-term EM``: ``emission_measure="ion_term"`` on the hydrogen grid.

Routes: axis 1 frequency, axis 6 frequencies, middle axis 6 frequencies,
oblique 6 frequencies. Prints min / median / max per case.

Usage: ``python benchmarks/bench_gaunt.py [--cells 128] [--rounds 7] [--plain]``
"""

import argparse
import time
import warnings

import astropy.units as u
import numpy as np

import rtrace


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=128)
    parser.add_argument("--rounds", type=int, default=7)
    parser.add_argument("--plain", action="store_true", help="only the hydrogen case, no new keywords")
    args = parser.parse_args()
    n = args.cells
    rng = np.random.default_rng(1)
    ne = (rng.lognormal(3, 1, (n, n, n)) * (rng.random((n, n, n)) > 0.3)).astype(np.float32)
    t = rng.uniform(5e3, 2e4, (n, n, n)).astype(np.float32)
    snaps = {
        "hydrogen": rtrace.Snapshot.from_arrays(
            temperature=t * u.K, cell_size=0.01 * u.pc, electron_density=ne * u.cm**-3
        )
    }
    if not args.plain:
        # X = 0.70, Y = 0.28 by mass, all He doubly ionized: per H atom n_He = 0.1, n_e = 1.2, ion term = 1.4
        snaps["he III"] = rtrace.Snapshot.from_arrays(
            temperature=t * u.K,
            cell_size=0.01 * u.pc,
            electron_density=ne * u.cm**-3,
            ion_density=ne * (1.4 / 1.2) * u.cm**-3,
        )
    six = np.geomspace(0.3, 100, 6) * u.GHz
    routes = {
        "axis 1 freq": (rtrace.View(los=(0, 0, 1), npix=n), [5] * u.GHz),
        "axis 6 freq": (rtrace.View(los=(0, 0, 1), npix=n), six),
        "middle 6 freq": (rtrace.View(los=(0, 1, 0), north=(0, 0, 1), npix=n), six),
        "oblique 6 freq": (rtrace.View(los=(0.3, 0.2, 1), npix=n), six),
    }
    cases = []
    for route, (view, nu) in routes.items():
        for name, snap in snaps.items():
            cases.append((f"{route:15s} {name}", snap, view, nu, {}))
        if not args.plain:
            cases.append((f"{route:15s} ion-term EM", snaps["hydrogen"], view, nu, {"emission_measure": "ion_term"}))
    times = {c[0]: [] for c in cases}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _label, snap, view, nu, kw in cases:  # compile and warm up
            rtrace.trace(snap, view, nu, supersample=1, **kw)
        for _ in range(args.rounds):
            for label, snap, view, nu, kw in cases:
                t0 = time.perf_counter()
                rtrace.trace(snap, view, nu, supersample=1, **kw)
                times[label].append(time.perf_counter() - t0)
    print(f"{n}^3 float32, {args.rounds} rounds: min / median / max (ms)")
    for label, ts in times.items():
        ts = np.array(ts) * 1e3
        print(f"  {label:32s} {ts.min():7.1f} {np.median(ts):7.1f} {ts.max():7.1f}")


if __name__ == "__main__":
    main()
