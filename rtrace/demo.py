"""The built-in scenario: a young HII bubble with a dense shell and a compact ionized wind.

An invented scene (no real object): a clumpy neutral cloud of 2 pc, inside it
an ionized bubble of low-density 9000 K gas bounded by a dense, clumpy
ionized shell, and at the centre a compact, cored r^-2 ionized wind at
1e4 K. The ionized fraction is supplied (smooth edges), so the scene is the
same object at every resolution. At 0.3 GHz the shell is optically thick,
at 1 GHz only its densest clumps and the wind; from 3 GHz everything is
thin, so the scene exercises both regimes.

``python -m rtrace.demo`` builds it, traces it at several frequencies and
prints a summary.
"""

import argparse
import time

import astropy.constants as const
import astropy.units as u
import numpy as np

from .errors import InputError
from .physics.ionization import Composition, SuppliedFraction
from .snapshot import Snapshot

__all__ = ["scenario", "main", "DEMO_FREQUENCIES", "DEMO_SEED"]

# geometric, like the demo job's: cubes of these planes get a FREQ-LOG axis
#: Seed of the demo's clump field when a job gives none.
DEMO_SEED = 7
DEMO_FREQUENCIES = 0.3 * u.GHz * (100 / 0.3) ** (np.arange(6) / 5)
_M_H = (const.m_p + const.m_e).cgs.value  # g, mass of a hydrogen atom (binding energy neglected)


#: Highest clump wavenumber, in cycles per box side: the smallest clumps are 1/8 of the box (0.25 pc).
CLUMP_MODES = 8
#: Half-width of the smooth edges of bubble, shell and wind, in pc (resolved by 64 cells per 2 pc).
EDGE_WIDTH = 0.04


def _clumps(n, rng, slope=-3.7, sigma=0.7, modes=CLUMP_MODES):
    """Log-normal density contrast from a Gaussian random field with power spectrum k^slope.

    The field is defined in the box's own coordinates by its Fourier modes up
    to ``modes`` cycles per side, drawn from ``rng`` independently of ``n``;
    ``n`` only sets where it is sampled (cell centres), by zero-padding the
    modes into an ``n``-point inverse FFT. The same seed therefore gives the
    same cloud at every resolution (modes above the grid's Nyquist limit are
    dropped when ``n <= 2 * modes``). The normalisation (``sigma`` in ln
    density) comes from the modes (Parseval), not from the samples.
    """
    from scipy import fft

    m = 2 * modes + 1
    k = np.arange(-modes, modes + 1)  # integer wavenumbers, cycles per side
    kx, ky, kz = np.meshgrid(k, k, k, indexing="ij")
    kk = (kx**2 + ky**2 + kz**2).astype(float)
    kk[modes, modes, modes] = 1.0
    amp = kk ** (slope / 4)  # |k|^(slope/2): power ~ k^slope
    amp[modes, modes, modes] = 0.0
    amp[kk > modes**2] = 0.0  # a sphere of modes: isotropic
    coeff = amp * (rng.standard_normal((m, m, m)) + 1j * rng.standard_normal((m, m, m)))
    coeff = 0.5 * (coeff + np.conj(coeff[::-1, ::-1, ::-1]))  # Hermitian: the field is real
    keep = min(modes, (n - 1) // 2)  # modes this grid can sample
    if keep < modes:
        cut = slice(modes - keep, modes + keep + 1)
        coeff = coeff[cut, cut, cut]
        k = k[modes - keep : modes + keep + 1]
    norm = sigma / np.sqrt(np.sum(np.abs(coeff) ** 2))  # Parseval: the field's variance
    shift = np.exp(1j * np.pi * k / n)  # samples at cell centres (i + 1/2) / n
    coeff = coeff * norm * shift[:, None, None] * shift[None, :, None] * shift[None, None, :]
    field = np.zeros((n, n, n), complex)
    idx = np.mod(k, n)
    field[np.ix_(idx, idx, idx)] = coeff
    field = fft.ifftn(field, overwrite_x=True, norm="forward").real
    field -= sigma**2 / 2
    return np.exp(field, out=field)


def _inside(r, radius, width=EDGE_WIDTH):
    """Smooth step: 1 inside ``radius - width``, 0 outside ``radius + width``, twice differentiable between.

    The quintic 1 - (6t^5 - 15t^4 + 10t^3) of t = (r - radius + width) / (2 width);
    exactly 0 outside, so the neutral cloud holds no trace of ionized gas.
    """
    t = np.clip((r - radius + width) / (2.0 * width), 0.0, 1.0)
    return 1.0 - t * t * t * (t * (6.0 * t - 15.0) + 10.0)


def scenario(n=96, seed=DEMO_SEED, box=2.0 * u.pc):
    """Build the demo snapshot.

    The scene is defined in physical coordinates (smooth edges 0.08 pc wide,
    clumps no smaller than 0.25 pc, a wind with a 0.03 pc core), so ``n``
    changes only its sampling: fluxes at 64, 128 and 256 cells per side
    agree within 2% (``tests/test_demo.py``). Below about 64 cells the
    edges and the wind core are unresolved and the images differ more.

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
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 2:
        raise InputError(f"cells: the demo needs an integer number of cells per side >= 2, got {n!r}")
    rng = np.random.default_rng(seed)
    side = box.to_value(u.pc)
    scale = side / 2.0  # the scene is drawn for a 2 pc box
    dx = side / n
    x = (np.arange(n) + 0.5) * dx - side / 2
    clumps = _clumps(n, rng)
    # bubble centred slightly off the box centre so views differ
    bx, by, bz = 0.08 * scale, -0.05 * scale, 0.0
    r = np.sqrt((x[:, None, None] - bx) ** 2 + (x[None, :, None] - by) ** 2 + (x[None, None, :] - bz) ** 2)
    r_bubble, shell, r_wind, r_core = 0.55 * scale, 0.09 * scale, 0.15 * scale, 0.03 * scale
    width = EDGE_WIDTH * scale
    bubble = _inside(r, r_bubble, width)  # 1 inside the bubble
    ionized = _inside(r, r_bubble + shell, width)  # 1 inside the shell's outer edge
    wind = _inside(r, r_wind, width)
    n_h = clumps * (300.0 * (1.0 - ionized) + 1500.0 * (ionized - bubble))  # cloud and shell, cm-3
    n_h += 30.0 * bubble
    n_h += wind * 3.0e4 * (0.02 * scale) ** 2 / (r**2 + r_core**2)  # r^-2 wind, cored
    temp = 30.0 * (1.0 - ionized) + 8000.0 * (ionized - bubble) + 9000.0 * bubble  # K
    temp += wind * (1.0e4 - temp)
    del r, bubble, wind, clumps
    comp = Composition()  # X = 0.70, Y = 0.28
    rho = n_h
    rho *= _M_H / comp.hydrogen  # g cm-3, in place
    return Snapshot.from_arrays(
        temperature=u.Quantity(temp, u.K, copy=False),
        cell_size=dx * u.pc,
        density=u.Quantity(rho, u.g / u.cm**3, copy=False),
        ionization=SuppliedFraction(ionized, composition=comp),
        origin=[-side / 2] * 3 * u.pc,
        source=f"rtrace.demo.scenario(n={n}, seed={seed})",
    )


def main(argv=None):
    """Build the demo scenario, trace it and print a summary (``python -m rtrace.demo``).

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (``--cells``, ``--pixels``); default ``sys.argv[1:]``.
    """
    from .transfer import View, trace

    parser = argparse.ArgumentParser(description="Trace the built-in HII-bubble scenario and summarise it.")
    parser.add_argument("--cells", type=int, default=96, help="cells per side (default 96)")
    parser.add_argument("--pixels", type=int, default=128, help="image pixels per side (default 128)")
    args = parser.parse_args(argv)

    t0 = time.perf_counter()
    snap = scenario(args.cells)
    t1 = time.perf_counter()
    print(snap.describe())
    print(f"  built in {t1 - t0:.2f} s")
    views = {
        "face-on (los +z)": View(los=(0, 0, 1), north=(0, 1, 0), npix=args.pixels, distance=2 * u.kpc),
        "oblique (30 deg)": View(
            los=(0, np.sin(np.radians(30)), np.cos(np.radians(30))),
            north=(0, 1, 0),
            npix=args.pixels,
            distance=2 * u.kpc,
        ),
    }
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
        print(
            f"  peak emission measure {res.emission_measure.max():.3g}  (alpha: spectral index to the next frequency)"
        )


if __name__ == "__main__":
    main()
