"""Three massive stars in a clumpy cloud from a run without radiative transfer (an invented scene).

The snapshot holds only mass density and pressure (cold gas everywhere, as
a pure hydrodynamics run leaves it). rtrace derives the H II region from the
stars' ionizing photon rates, with shadows behind the dense globules, then:

1. where the photons went (absorbed, escaped) and how much gas they ionized,
2. the thermal radio flux against what the photon rate predicts for optically
   thin gas (the flux counts the photons, as observers use it),
3. the spectral index, and the optical depth across the region,
4. a figure: the midplane electron density (the stars, the globules and their
   shadows) beside the 22 GHz map.

Run: ``python make_snapshot.py cloud.h5 && python run.py`` (writes out/shadows.png). About a minute.
"""

from pathlib import Path

import astropy.units as u
import matplotlib
import numpy as np

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import rtrace  # noqa: E402
from rtrace.analysis.spectra import sed, spectral_index  # noqa: E402
from rtrace.physics import emission_coefficient  # noqa: E402
from rtrace.physics.ionization import Composition, IonizingSources  # noqa: E402
from rtrace.physics.ionization.tables import case_b_coefficient  # noqa: E402

HERE = Path(__file__).resolve().parent
OUT = Path("out")
STARS = [[2.85, 3.0, 3.0], [3.2, 3.15, 2.98], [3.05, 2.75, 3.05]] * u.pc  # as in job.toml
RATES = [3e48, 1.5e48, 5e47] / u.s
T_ION = 8500 * u.K
COMPOSITION = Composition(hydrogen=0.71, helium=0.27)
DISTANCE = 2.5 * u.kpc


def main():
    OUT.mkdir(exist_ok=True)
    stars = IonizingSources(positions=STARS, rates=RATES, composition=COMPOSITION, ionized_temperature=T_ION)
    snap = rtrace.io.read_hdf5(HERE / "cloud.h5", density="gas/density", pressure="gas/pressure", ionization=stars)
    print(snap.describe())

    # 1-2. photons and flux: thin free-free flux of the ionized gas, S = j_nu / (n_e n_i) x int n_e n_i dV / D^2,
    # with int n_e n_HII dV = Q_absorbed / alpha_B (every absorbed photon balances one case-B recombination)
    # and n_i = n_HII + n_HeII = (1 + y) n_HII for singly ionized helium, y = n_He / n_H.
    absorbed = float(snap.provenance["photon_budget"].split("% absorbed")[0].split(": ")[-1]) / 100
    q_abs = absorbed * RATES.sum()
    y = COMPOSITION.helium / 4.002602 / (COMPOSITION.hydrogen / 1.00794)
    emission_volume = q_abs / (case_b_coefficient(np.array([T_ION.value]))[0] * u.cm**3 / u.s) * (1 + y)
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=128, distance=DISTANCE)
    nu = [1, 5, 22, 90] * u.GHz
    res = rtrace.trace(snap, view, nu)
    freq, flux = sed(res)
    alpha = spectral_index(freq, flux)
    print("\n   nu      S (Jy)   thin estimate from Q (Jy)   ratio   alpha to next   max tau")
    for i, (f, s) in enumerate(zip(freq, flux, strict=True)):
        unit = 1 * u.cm**-3
        j = emission_coefficient(f, T_ION, unit, unit) / unit**2  # per unit n_e n_i (R&L eq. 5.14b)
        thin = (4 * np.pi * u.sr * j * emission_volume / (4 * np.pi * DISTANCE**2)).to(u.Jy)
        a = f"{alpha[i]:+.3f}" if i < len(alpha) else ""
        print(
            f"{f.to(u.GHz):7.1f}  {s.to_value(u.Jy):9.4g}   {thin.to_value(u.Jy):13.4g}             "
            f"{(s / thin).decompose().value:6.3f}   {a:>8}     {float(res.tau[i].max()):.3g}"
        )
    print("(at 1 GHz the densest rims are optically thick, so the flux falls below the thin estimate)")

    # 4. the midplane and the map
    ne = snap.electron_density.to_value(u.cm**-3)
    k = ne.shape[2] // 2
    side = 6.0
    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 5), constrained_layout=True)
    image = left.imshow(
        np.log10(np.maximum(ne[:, :, k].T, 1e-2)),
        origin="lower",
        extent=[0, side, 0, side],
        cmap="magma",
        vmin=0,
        vmax=3.5,
    )
    left.plot(STARS[:, 0].to_value(u.pc), STARS[:, 1].to_value(u.pc), "c*", ms=12, mec="k")
    left.set(xlabel="x (pc)", ylabel="y (pc)", title="electron density in the midplane (z = 3 pc)")
    fig.colorbar(image, ax=left, label="log10 n_e (cm$^{-3}$)")
    jy = (res.intensity[2] * res.pixel_solid_angle).to_value(u.mJy)
    # the image's columns grow toward +x (sky west) and its rows toward +y (north): the midplane's orientation
    image = right.imshow(
        np.asinh(jy / np.percentile(jy[jy > 0], 50)), origin="lower", extent=[0, side, 0, side], cmap="inferno"
    )
    right.set(xlabel="x (pc)", ylabel="y (pc)", title="22 GHz, seen face-on (asinh stretch of mJy/pixel)")
    fig.savefig(OUT / "shadows.png", dpi=90)
    print(f"\nwrote {OUT / 'shadows.png'}: the dark wedges behind the three globules are their shadows")


if __name__ == "__main__":
    main()
