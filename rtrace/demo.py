"""The built-in scenario: a young HII bubble with a dense shell and a compact ionized wind.

An invented scene (no real object): a clumpy neutral cloud of 2 pc, inside it
an ionized bubble of low-density 9000 K gas bounded by a dense, clumpy
ionized shell, and at the centre a compact r^-2 ionized wind at 1e4 K. At
1 GHz the shell and the wind are optically thick; by 20 GHz everything but
the wind core is thin, so the scene exercises both regimes.

``python -m rtrace.demo`` builds it, traces it at several frequencies and
prints a summary.
"""

import argparse
import time

import astropy.constants as const
import astropy.units as u
import numpy as np

from .physics.ionization import Composition, TemperatureThreshold
from .snapshot import Snapshot

__all__ = ["scenario", "main", "DEMO_FREQUENCIES"]

# geometric, like the demo job's: cubes of these planes get a FREQ-LOG axis
DEMO_FREQUENCIES = 0.3 * u.GHz * (100 / 0.3) ** (np.arange(6) / 5)
_M_H = (const.m_p + const.m_e).cgs.value   # g, mass of a hydrogen atom (binding energy neglected)


def _clumps(n, rng, slope=-3.7, sigma=0.7):
    """Log-normal density contrast from a Gaussian random field with power spectrum k^slope.

    Written to keep few full-size temporaries (one complex cube, transformed in place).
    """
    from scipy import fft
    k = np.fft.fftfreq(n) * n
    phase = rng.random((n, n, n))
    phase *= 2 * np.pi
    field = np.empty((n, n, n), complex)                          # e^{2 pi i u}: random phases
    np.cos(phase, out=field.real)
    np.sin(phase, out=field.imag)
    del phase
    kk = k[:, None, None]**2 + k[None, :, None]**2 + k[None, None, :]**2
    kk[0, 0, 0] = 1.0
    kk **= slope / 4                                              # |k|^(slope/2)
    kk[0, 0, 0] = 0.0
    field *= kk
    del kk
    field = fft.ifftn(field, overwrite_x=True).real
    field *= sigma / field.std()
    field -= sigma**2 / 2
    return np.exp(field, out=field)


def scenario(n=96, seed=7, box=2.0 * u.pc):
    """Build the demo snapshot.

    Parameters
    ----------
    n : int
        Cells per side.
    seed : int
        Seed of the clump field (the scene is reproducible).
    box : `~astropy.units.Quantity`
        Side of the cubic box.

    Returns
    -------
    `~rtrace.Snapshot`
    """
    rng = np.random.default_rng(seed)
    side = box.to_value(u.pc)
    dx = side / n
    x = (np.arange(n) + 0.5) * dx - side / 2
    clumps = _clumps(n, rng)
    # bubble centred slightly off the box centre so views differ
    bx, by, bz = 0.08, -0.05, 0.0
    r = np.sqrt((x[:, None, None] - bx)**2 + (x[None, :, None] - by)**2 + (x[None, None, :] - bz)**2)
    r_bubble, shell = 0.55, 0.09
    n_h = 300.0 * clumps                                          # neutral cloud, cm-3
    temp = np.full_like(n_h, 30.0)                                # K
    inside = r < r_bubble
    n_h[inside] = 30.0
    temp[inside] = 9000.0
    in_shell = (r >= r_bubble) & (r < r_bubble + shell)
    n_h[in_shell] = 1500.0 * clumps[in_shell]
    temp[in_shell] = 8000.0
    r_wind, r_core = 0.15, max(0.5 * dx, 0.004)
    wind = r < r_wind
    n_h[wind] = 3.0e4 * (0.02 / np.maximum(r[wind], r_core))**2
    temp[wind] = 1.0e4
    del r, inside, in_shell, wind, clumps
    comp = Composition(hydrogen=0.70, helium=0.28)
    rho = n_h
    rho *= _M_H / comp.hydrogen                                   # g cm-3, in place
    return Snapshot.from_arrays(temperature=u.Quantity(temp, u.K, copy=False), cell_size=dx * u.pc,
                                density=u.Quantity(rho, u.g / u.cm**3, copy=False),
                                ionization=TemperatureThreshold(5000.0 * u.K, composition=comp),
                                origin=[-side / 2] * 3 * u.pc,
                                source=f"rtrace.demo.scenario(n={n}, seed={seed})")


def main(argv=None):
    from . import View, trace

    parser = argparse.ArgumentParser(description="Trace the built-in HII-bubble scenario and summarise it.")
    parser.add_argument("--cells", type=int, default=96, help="cells per side (default 96)")
    parser.add_argument("--pixels", type=int, default=128, help="image pixels per side (default 128)")
    args = parser.parse_args(argv)

    t0 = time.perf_counter()
    snap = scenario(args.cells)
    t1 = time.perf_counter()
    print(snap.describe())
    print(f"  built in {t1 - t0:.2f} s")
    views = {"face-on (los +z)": View(los=(0, 0, 1), north=(0, 1, 0), npix=args.pixels, distance=2 * u.kpc),
             "oblique (30 deg)": View(los=(0, np.sin(np.radians(30)), np.cos(np.radians(30))),
                                      north=(0, 1, 0), npix=args.pixels, distance=2 * u.kpc)}
    for name, view in views.items():
        t0 = time.perf_counter()
        res = trace(snap, view, DEMO_FREQUENCIES)
        dt = time.perf_counter() - t0
        flux = res.flux_density().to_value(u.Jy)
        nu = res.frequencies.to_value(u.GHz)
        alpha = np.diff(np.log(flux)) / np.diff(np.log(nu))
        print(f"\n{name}: {res}, traced in {dt:.2f} s")
        print(f"  {'nu (GHz)':>9} {'S (Jy)':>10} {'alpha':>7} {'max tau':>9} {'max T_b (K)':>12}")
        tb = res.brightness_temperature().to_value(u.K)
        for f in range(len(nu)):
            a = f"{alpha[f]:+7.2f}" if f < len(alpha) else " " * 7
            print(f"  {nu[f]:9.3g} {flux[f]:10.4g} {a} {res.tau[f].max():9.3g} {np.nanmax(tb[f]):12.4g}")
        print(f"  peak emission measure {res.emission_measure.max():.3g}  (alpha: spectral index to the next frequency)")


if __name__ == "__main__":
    main()
