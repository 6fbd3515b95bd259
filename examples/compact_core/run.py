"""A compact, optically thick ionized core inside a faint extended halo (an invented scene).

Shows the questions rtrace answers beyond a map:

1. where the emission turns optically thick (tau = 1 depth, turnover frequency),
2. what a cut through the core shows with and without absorption,
3. what two interferometer layouts recover of the halo (largest angular scale),
4. how a model compares with an interferometric "observation", and why the
   model must be filtered the same way before it is compared.

Run: ``python run.py`` (writes figures and FITS files to ./out). Takes about a minute.
"""

import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord

import rtrace
from rtrace.interferometer import SynthesisWarning

HERE = Path(__file__).resolve().parent
OUT = Path("out")


def snapshot(n=96, box=0.5 * u.pc):
    """Core: n_e = 1e5 cm-3 within 0.03 pc; halo: 2000 cm-3 within 0.2 pc; 9000 K gas, neutral outside."""
    side = box.to_value(u.pc)
    x = (np.arange(n) + 0.5) * side / n - side / 2
    r = np.sqrt(x[:, None, None] ** 2 + x[None, :, None] ** 2 + x[None, None, :] ** 2)
    ne = np.where(r < 0.2, 2000.0, 0.0)
    ne = np.where(r < 0.03, 1.0e5, ne)
    t = np.full_like(ne, 9000.0)
    return rtrace.Snapshot.from_arrays(
        temperature=t * u.K,
        electron_density=ne * u.cm**-3,
        cell_size=box / n,
        origin=[-side / 2] * 3 * u.pc,
        source="compact_core",
    )


def main():
    OUT.mkdir(exist_ok=True)
    snap = snapshot()
    sky = SkyCoord(ra=210.0 * u.deg, dec=-40.0 * u.deg)
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=96, distance=2 * u.kpc, sky_position=sky)
    nu = [1.4, 5, 15, 43] * u.GHz
    res = rtrace.trace(snap, view, nu)
    c = 48  # the image centre, (column, row)

    # 1. optical depth
    depth = res.tau_unity_depth()[:, c, c]
    per_pixel, whole = res.turnover_frequency()
    print("tau = 1 depth through the centre, from the near side of the box:")
    for f, d in zip(nu, depth, strict=True):
        print(f"  {f:5.1f}: {d:.4f}" if np.isfinite(d) else f"  {f:5.1f}: never (thin)")
    print(f"turnover frequency: centre {per_pixel[c, c].to(u.GHz):.1f}, whole source {whole.to(u.GHz):.2f}")

    # 2. a cut through the core, with and without absorption
    cut = res.cut((4, c), (91, c))
    with np.errstate(invalid="ignore", divide="ignore"):  # NaN outside the gas
        ratio = (cut.intensity / cut.unabsorbed_intensity).value
    print(
        "absorption loss I / I_unabsorbed at the core:",
        ", ".join(f"{f:.1f}: {v:.3f}" for f, v in zip(nu, ratio[:, cut.columns.size // 2], strict=True)),
    )
    cut.plot(OUT / "cut.png")

    # 3. two invented arrays at 5 GHz
    res5 = rtrace.trace(snap, view, [5] * u.GHz)
    true = res5.flux_density()[0]
    maps = {}
    for layout in ("compact_y8", "ring12"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", SynthesisWarning)
            sm = rtrace.interferometer.synthesize(
                res5,
                antennas=HERE.parent / "antennas" / f"{layout}.txt",
                latitude=-30 * u.deg,
                hour_angle_range=(-4, 4) * u.hourangle,
            )
        maps[layout] = sm
        print(
            f"{layout:>10}: clean beam {sm.beam.major.to(u.arcsec):.1f} x {sm.beam.minor.to(u.arcsec):.1f}, "
            f"LAS {sm.largest_angular_scale[0].to(u.arcsec):.0f}, recovered {sm.flux_density()[0]:.3g} "
            f"of {true:.3g}"
        )
    maps["ring12"].write_fits(OUT / "ring12_5GHz.fits")

    # 4. the ring array's image as the "observation": the raw model has flux the array cannot see
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        raw = rtrace.compare(res5, OUT / "ring12_5GHz.fits")
    print(
        f"model vs ring12 image: flux ratio {raw.flux_ratio:.2f} (the halo is filtered out of the image, "
        "not of the model: filter the model with the same array before comparing)"
    )
    raw.plot(OUT / "comparison.png")
    raw.write_fits(OUT / "residual.fits")


if __name__ == "__main__":
    main()
