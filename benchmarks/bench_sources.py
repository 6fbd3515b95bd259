"""Sources benchmark: photoionization by point sources against one trace of the snapshot it makes.

Prints figures and ratios measured in one run on an invented N^3 scenario
(N = 256 by default; ``--cells`` to change): a turbulent-looking cloud
(lognormal density with spatial correlation, sigma = 1 in ln n, mean
n_H = 100 cm^-3, box 10 pc) of cold gas (100 K), photoionized with
``ionized_temperature = 1e4 K`` (a pure-hydrodynamics run), in three cases:

* ``1 src``: one central source whose H II region spans about half the box (bounded: next to no photons escape);
* ``bright``: one central source bright enough to ionize every cell, so its rays cross the whole grid
  and photons leave through the boundary (the worst case for one source);
* ``20 src``: 20 sources at random positions (fixed seed), total Q as for ``1 src``.

Timed, in interleaved rounds after a first-use round (numba compilation or loading from numba's
cache and first touches; shown apart): ``IonizingSources.photoionize`` on the grid reader; one
trace of the resulting snapshot, axis-aligned and oblique (30 deg), 1 frequency, N x N pixels;
``Snapshot.from_arrays`` with the sources model and with ``ionization="collisional"`` (the whole
snapshot build, for context). Printed: median and [min, max] of each timing, ratios
photoionize / trace (target: comparable for one source; also against the trace of the bright case's
snapshot, where every cell emits and the tracer skips nothing), 20 sources / 1 source (target < 10),
from_arrays(sources) / from_arrays(collisional), each as the ratio of medians and the median
[min, max] of the per-round ratios; the photon budget and the fraction of cells ionized per case.

Usage: ``python benchmarks/bench_sources.py [--cells 256] [--rounds 5]``
(``.venv/bin/python benchmarks/bench_sources.py --cells 128`` for a quick look; 256^3 needs about 2 GB).
The kernels are cached on disk by numba, so "first use" is usually a cache load; run with
``NUMBA_CACHE_DIR=$(mktemp -d)`` to include their compilation.
"""

import argparse
import time

import astropy.constants as const
import astropy.units as u
import numpy as np
from timing import max_rss_mb

import rtrace
from rtrace.physics.ionization import IonizingSources
from rtrace.physics.ionization.grid import ArrayInputs

BOX_PC = 10.0
MEAN_NH = 100.0  # cm^-3
SIGMA_LN = 1.0  # standard deviation of ln n
SMOOTH_CELLS = 3.0  # Gaussian smoothing of the white noise (cells, at any N)
T_COLD = 100.0  # K
T_ION = 1e4  # K
X_H, Y_HE = 0.70, 0.28  # the package's default composition
M_H = (const.m_p + const.m_e).cgs.value  # g, the hydrogen atom
ALPHA_B_1E4 = 2.59e-13  # cm^3 s^-1, case B at 1e4 K (for choosing Q only)
N_SCATTERED = 20
SEED = 20240611
NU = [5.0] * u.GHz


def cloud(n, seed=SEED):
    """Lognormal density (g cm^-3, float64) of a correlated Gaussian field: white noise smoothed by FFT."""
    rng = np.random.default_rng(seed)
    spec = np.fft.rfftn(rng.standard_normal((n, n, n), dtype=np.float32))
    k = np.fft.fftfreq(n).astype(np.float32)
    kz = np.fft.rfftfreq(n).astype(np.float32)

    # Gaussian of SMOOTH_CELLS cells: exp(-2 pi^2 s^2 k^2), applied axis by axis (separable, no k^2 cube)
    def damp(kk):
        return np.exp(-2.0 * np.pi**2 * SMOOTH_CELLS**2 * kk**2)

    spec *= damp(k)[:, None, None]
    spec *= damp(k)[None, :, None]
    spec *= damp(kz)[None, None, :]
    g = np.fft.irfftn(spec, s=(n, n, n), axes=(0, 1, 2)).astype(np.float64)
    del spec
    g -= g.mean()
    g *= SIGMA_LN / g.std()
    np.exp(g, out=g)
    g *= MEAN_NH * M_H / X_H / g.mean()  # exactly the mean n_H, as mass density
    return g


def recombinations(rho, cell_cm, mask=None):
    """Case-B recombinations per second (fully ionized H, singly ionized He, 1e4 K) of the cells in ``mask``."""
    n_h = rho * (X_H / M_H)
    ne_per_nh = 1.0 + (Y_HE / 4.0) / X_H
    total = np.sum(n_h**2, where=mask) if mask is not None else np.sum(n_h**2)
    return ALPHA_B_1E4 * ne_per_nh * total * cell_cm**3


def scenario_models(rho, cell_cm):
    """The three cases' IonizingSources (and a line describing how Q was chosen)."""
    n = rho.shape[0]
    side = n * cell_cm
    centre = np.full(3, 0.5 * side)
    # 1 src: a region of about radius side/4 (diameter half the box). The recombinations of all the
    # cells within side/4 are mostly those of a few dense clumps, which only the rays that meet them pay
    # for; the other rays run on through thinner gas. 1/8 of that sum gives, for this cloud, an ionized
    # volume of equivalent radius ~side/4 whose farthest cells stay inside the grid (found by trial).
    c = (np.arange(n) + 0.5) * cell_cm - 0.5 * side
    inside = (c[:, None, None] ** 2 + c[None, :, None] ** 2 + c[None, None, :] ** 2) <= (0.25 * side) ** 2
    q_half = recombinations(rho, cell_cm, inside) / 8.0
    del inside
    # bright: 100x the recombinations of the whole grid ionizes every cell, shadows of clumps included
    q_bright = 100.0 * recombinations(rho, cell_cm)
    rng = np.random.default_rng(SEED + 1)
    pos = rng.uniform(0.1, 0.9, (N_SCATTERED, 3)) * side
    share = rng.lognormal(0.0, 1.0, N_SCATTERED)
    rates = q_half * share / share.sum()
    common = dict(ionized_temperature=T_ION * u.K)
    models = {
        "1 src": IonizingSources(centre * u.cm, [q_half] / u.s, **common),
        "bright": IonizingSources(centre * u.cm, [q_bright] / u.s, **common),
        "20 src": IonizingSources(pos * u.cm, rates / u.s, **common),
    }
    note = (
        f"Q: 1 src {q_half:.3g} s-1 (1/8 of the recombinations within r = box/4, all ionized); bright "
        f"{q_bright:.3g} s-1 (100x those of the whole grid); 20 src total {rates.sum():.3g} s-1 "
        f"({rates.min():.2g} .. {rates.max():.2g} each, at random in the central 80% of each axis)"
    )
    return models, note


def timed(fn):
    t0 = time.perf_counter()
    value = fn()
    return time.perf_counter() - t0, value


def interleaved_rounds(tasks, rounds, first=None):
    """First-use time of each task, then ``rounds`` interleaved rounds: ``({key: s}, {key: [s, ...]}, {key: value})``.

    ``tasks`` maps a key to ``(fn, keep)``; the last value of the tasks with ``keep`` true is returned
    (the others are dropped at once, so big results do not pile up). Tasks already in ``first`` (their
    first-use time, measured by the caller) skip the first-use round. Interleaving makes a drift of the
    machine's speed during the run affect the tasks alike.
    """
    first, times, values = dict(first or {}), {k: [] for k in tasks}, {}
    for key, (fn, keep) in tasks.items():
        if key in first:
            continue
        first[key], value = timed(fn)
        if keep:
            values[key] = value
        del value
    for _ in range(rounds):
        for key, (fn, keep) in tasks.items():
            t, value = timed(fn)
            times[key].append(t)
            if keep:
                values[key] = value
            del value
    return first, times, values


def spread(ts):
    ts = np.asarray(ts)
    return f"{np.median(ts):8.3f} [{ts.min():7.3f}, {ts.max():7.3f}]"


def ratio_line(label, num, den, target=""):
    per_round = np.divide(num, den)
    return (
        f"{label:<44}{np.median(num) / np.median(den):7.2f}   per round {np.median(per_round):6.2f} "
        f"[{per_round.min():.2f}, {per_round.max():.2f}]{target}"
    )


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=256)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    n, rounds = args.cells, args.rounds

    cell_cm = BOX_PC * u.pc.to(u.cm) / n
    t_build, rho = timed(lambda: cloud(n))
    temp = np.full(rho.shape, T_COLD)
    n_h = rho * (X_H / M_H)
    print(
        f"cloud {n}^3, box {BOX_PC:g} pc (cell {BOX_PC / n * 1e3:.1f} mpc): lognormal n_H, mean "
        f"{n_h.mean():.1f} cm-3, sigma(ln n) {np.log(n_h).std():.2f}, range {n_h.min():.3g} .. {n_h.max():.3g} "
        f"cm-3, correlation {SMOOTH_CELLS:g} cells; T = {T_COLD:g} K, photoionized at {T_ION:g} K "
        f"(built in {t_build:.1f} s)"
    )
    del n_h
    models, note = scenario_models(rho, cell_cm)
    print(note)

    shape = rho.shape
    cell3 = np.full(3, cell_cm)
    origin = np.zeros(3)
    reader = ArrayInputs(
        inputs={"density": rho, "temperature": temp}, fields={}, shape=shape, cell_size=cell3, origin=origin
    )
    density_q = u.Quantity(rho, u.g / u.cm**3, copy=False)
    temp_q = u.Quantity(temp, u.K, copy=False)

    def build(ionization):
        return rtrace.Snapshot.from_arrays(
            temperature=temp_q, cell_size=cell_cm * u.cm, density=density_q, ionization=ionization
        )

    side = n * cell_cm * u.cm
    tilt = np.radians(30.0)
    views = {
        "axis": rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=n, width=side, distance=1 * u.kpc),
        "oblique": rtrace.View(
            los=(np.sin(tilt) * 0.6, np.sin(tilt) * 0.8, np.cos(tilt)),
            north=(0, 1, 0),
            npix=n,
            width=side,
            distance=1 * u.kpc,
        ),
    }

    # first uses, in the order that puts each kernel's compilation (or cache load) on its own row:
    # photoionize, then the snapshots to trace, built once outside the timed rounds
    first, snaps = {}, {}
    for case, model in models.items():
        first[("photoionize", case)], _ = timed(lambda model=model: model.photoionize(reader))
    for case, model in models.items():
        first[("from_arrays", case)], snaps[case] = timed(lambda model=model: build(model))

    tasks = {}
    for case, model in models.items():
        tasks[("photoionize", case)] = (lambda m=model: m.photoionize(reader), True)
        for vname, view in views.items():
            tasks[(f"trace {vname}", case)] = (lambda s=snaps[case], v=view: rtrace.trace(s, v, NU), False)
        tasks[("from_arrays", case)] = (lambda m=model: build(m), False)
    tasks[("from_arrays", "collisional")] = (lambda: build("collisional"), False)
    first, times, values = interleaved_rounds(tasks, rounds, first)

    print(
        f"\n{rounds} interleaved rounds after a first-use round; seconds, median [min, max]; first use = "
        "the first call (numba compile or cache load, first touches)"
    )
    print(f"{'':<24}{'median [min, max]':>28}{'first use':>12}")
    for (what, case), ts in times.items():
        print(f"{what + ', ' + case:<24}{spread(ts):>28}{first[(what, case)]:12.3f}")

    print("\nratios: of the medians, and per round median [min, max]")
    one, many = times[("photoionize", "1 src")], times[("photoionize", "20 src")]
    for case in models:
        for vname in views:
            target = "   (target: comparable, ~1)" if case == "1 src" else ""
            print(
                ratio_line(
                    f"photoionize / trace {vname}, {case}",
                    times[("photoionize", case)],
                    times[(f"trace {vname}", case)],
                    target,
                )
            )
    # the trace of a mostly neutral snapshot skips the gas that does not emit: the bright case's snapshot
    # (every cell emitting) gives the cost of a trace of the whole grid
    for vname in views:
        for case in ("1 src", "20 src"):
            print(
                ratio_line(
                    f"photoionize {case} / trace {vname}, bright",
                    times[("photoionize", case)],
                    times[(f"trace {vname}", "bright")],
                )
            )
    print(ratio_line("photoionize 20 src / 1 src", many, one, "   (target < 10)"))
    for vname in views:
        print(
            ratio_line(
                f"photoionize 20 src / trace {vname} 1 src",
                many,
                times[(f"trace {vname}", "1 src")],
                "   (target < 10)",
            )
        )
    for case in models:
        print(
            ratio_line(
                f"from_arrays {case} / collisional", times[("from_arrays", case)], times[("from_arrays", "collisional")]
            )
        )

    print("\nphoton budget and ionized cells (photoionized fraction p; a front cell has p^2 = its ionized volume)")
    for case in models:
        sol = values[("photoionize", case)]
        p = sol.fraction
        volume = float(np.mean(np.square(p, dtype=np.float64)))
        print(f"{case:<8}{sol.provenance()['photon_budget']}")
        print(
            f"{'':<8}cells with p > 0.5: {np.mean(p > 0.5):.2%}; p > 0: {np.mean(p > 0):.2%}; ionized volume "
            f"sum p^2 / cells: {volume:.2%} (a sphere of radius {(3 * volume / (4 * np.pi)) ** (1 / 3):.2f} box); "
            f"snapshot: {snaps[case].provenance.get('ionization_state', '?')}"
        )
    print(f"\npeak RSS {max_rss_mb():.0f} MiB")


if __name__ == "__main__":
    main()
