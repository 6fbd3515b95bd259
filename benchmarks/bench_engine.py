"""Engine benchmark: rtrace's numba tracer against a straightforward vectorised numpy transfer.

Prints figures and ratios measured in one run on an N^3 float32 snapshot
(N = 256 by default; ``--cells`` to change):

* rtrace (axis-aligned, 1 frequency) vs numpy (same physics, same transfer), target <= 0.1x
* 8 frequencies vs 1, target <= 3x
* oblique view vs axis-aligned at the same image size, target <= 2.5x; also for the same
  snapshot with every cell ionized (the oblique sweep skips blocks of neutral cells, which the
  built-in scenario has plenty of, so the ratio is shown without that help too)
* million cell-crossings per second; peak memory growth during the traces

Usage: ``python benchmarks/bench_engine.py [--cells 256] [--repeat 5]``
"""

import argparse
import time
import tracemalloc

import astropy.units as u
import numpy as np
from timing import best_of

import rtrace
from rtrace.physics.freefree import absorption_cgs
from rtrace.physics.planck import planck_cgs
from rtrace.transfer import cell_cache


def numpy_reference(snap, nu_hz):
    """Axis-aligned transfer along +z in plain vectorised numpy (the route without rtrace).

    alpha and S per cell from the same physics functions, then the formal solution
    I = sum_k S_k (1 - e^{-dtau_k}) exp(-sum_{k' > k} dtau_k') along each column.
    """
    ds = snap.cell_size[2]
    t = snap._t.astype(np.float64)
    ne = snap._ne.astype(np.float64)
    out = []
    for nu in nu_hz:
        dtau = absorption_cgs(nu, t, ne, ne) * ds
        src = planck_cgs(nu, t) * -np.expm1(-dtau)
        behind = np.cumsum(dtau[:, :, ::-1], axis=2)[:, :, ::-1] - dtau  # optical depth in front of each cell
        out.append((src * np.exp(-behind)).sum(axis=2).T)
    return np.array(out)


def traced_peak_mb(fn):
    """Peak of the memory numpy (and Python) allocate while ``fn`` runs, above what was live before (MiB)."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    base = tracemalloc.get_traced_memory()[0]
    value = fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return (peak - base) / 2**20, value


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=256)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    n = args.cells

    from rtrace import demo

    snap = demo.scenario(n)  # float32 storage
    print(
        f"snapshot {n}^3 float32 ({3 * snap._t.nbytes / 2**20:.0f} MiB of fields; ion term shares n_e: "
        f"{snap._ni is snap._ne})"
    )
    width = (snap.shape[0] * snap.cell_size[0]) * u.cm
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

    # compile (cached on disk after the first run) outside the timings
    small = demo.scenario(16)
    for v in (axis_view, oblique_view):
        rtrace.trace(small, rtrace.View(los=v.los, north=v.north, npix=16, distance=1 * u.kpc), eight, supersample=1)

    cases = {"axis1": (axis_view, one), "axis8": (axis_view, eight), "oblique": (oblique_view, one)}
    times, results = interleaved_rounds(snap, cases, args.repeat)
    t_1, t_8, t_ob = (min(times[k]) for k in ("axis1", "axis8", "oblique"))
    res1, res_ob = results["axis1"], results["oblique"]
    per_round = {
        "8/1": np.divide(times["axis8"], times["axis1"]),
        "oblique/axis": np.divide(times["oblique"], times["axis1"]),
    }
    snap.release()  # measure the cached n_e x ion term too
    mem_rt = max(
        traced_peak_mb(lambda v=v, nu=nu: rtrace.trace(snap, v, nu, supersample=1))[0] for v, nu in cases.values()
    )
    t_np, ref = best_of(lambda: numpy_reference(snap, one.to_value(u.Hz)), 1)
    mem_np, _ = traced_peak_mb(lambda: numpy_reference(snap, one.to_value(u.Hz)))

    ours = res1.intensity.value[0]
    peak_diff = np.abs(ours - ref[0]).max() / np.abs(ref[0]).max()
    bright = ref[0] > 1e-3 * ref[0].max()
    bright_diff = np.max(np.abs(ours[bright] / ref[0][bright] - 1))
    cells = n**3
    print(f"numpy reference, 1 frequency      {t_np:8.3f} s")
    print(f"rtrace axis-aligned, 1 frequency  {t_1:8.3f} s   ratio to numpy {t_1 / t_np:6.3f}  (target <= 0.1)")
    print(f"rtrace axis-aligned, 8 frequencies{t_8:8.3f} s   ratio to 1 freq {t_8 / t_1:5.2f}  (target <= 3)")
    print(
        f"rtrace oblique (30 deg), 1 freq   {t_ob:8.3f} s   ratio to axis  {t_ob / t_1:6.2f}  (target <= 2.5)"
        f"   rays/pixel {res_ob.rays_per_pixel}"
    )
    print(
        "ratios within each round (min / median / max): "
        + "; ".join(f"{k} {v.min():.2f} / {np.median(v):.2f} / {v.max():.2f}" for k, v in per_round.items())
    )
    print(f"cell-crossings per second: axis {cells / t_1 / 1e6:7.1f} M (1 freq), {cells / t_8 / 1e6:7.1f} M (8 freq)")
    print(
        f"rtrace vs numpy intensity: max difference {peak_diff:.1e} of the peak; "
        f"max relative difference {bright_diff:.1e} where I > 1e-3 of the peak"
    )
    cube_mb = cells * 4 / 2**20
    print(
        f"peak memory allocated while tracing (tracemalloc): rtrace {mem_rt:.0f} MiB (budget: one float32 cube "
        f"{cube_mb:.0f} MiB + images); numpy reference {mem_np:.0f} MiB"
    )

    # the same snapshot with every cell ionized (warm ionized gas: n_e >= 1 cm-3, T >= 5000 K), so the
    # oblique sweep has no neutral block to skip
    print(
        f"emitting cells in the scenario: {np.mean(cell_cache.emission_product(snap) > 0):.1%}; "
        f"8^3 blocks holding one: {cell_cache.emitting_blocks(snap).mean():.1%}"
    )
    full = rtrace.Snapshot.from_arrays(
        temperature=np.maximum(snap._t, np.float32(5e3)) * u.K,
        cell_size=snap.cell_size * u.cm,
        electron_density=np.maximum(snap._ne, np.float32(1.0)) * u.cm**-3,
    )
    snap = results = None  # free the demo grid before the fully ionized one
    times, _ = interleaved_rounds(full, {"axis1": (axis_view, one), "oblique": (oblique_view, one)}, args.repeat)
    ratio = np.divide(times["oblique"], times["axis1"])
    print(
        f"every cell ionized: axis {min(times['axis1']):.3f} s, oblique {min(times['oblique']):.3f} s, "
        f"ratio {min(times['oblique']) / min(times['axis1']):.2f} (per round {ratio.min():.2f} / "
        f"{np.median(ratio):.2f} / {ratio.max():.2f}; target <= 2.5)"
    )


def interleaved_rounds(snap, cases, repeat):
    """Time each case's trace in interleaved rounds after an untimed one: ``({case: [s, ...]}, {case: Result})``.

    Interleaving makes a drift of the machine's speed during the run affect the cases alike;
    the untimed round takes the first-touch costs of the big arrays (and of the cached product).
    """
    times = {k: [] for k in cases}
    results = {}
    for view, nu in cases.values():
        rtrace.trace(snap, view, nu, supersample=1)
    for _ in range(repeat):
        for key, (view, nu) in cases.items():
            t0 = time.perf_counter()
            results[key] = rtrace.trace(snap, view, nu, supersample=1)
            times[key].append(time.perf_counter() - t0)
    return times, results


if __name__ == "__main__":
    main()
