"""Spectral index of the invented ionized jet against inclination, from Python.

Builds the snapshot in memory (no file needed), traces it at three
inclinations and prints the integrated spectral index between 5 and 50 GHz.
A spherical r^-2 wind gives alpha = 0.6 (Wright & Barlow 1975; Panagia & Felli
1975); a collimated flow gives values between about 0.6 and 1 depending on
its geometry (Reynolds 1986, ApJ 304, 713; from memory). Here the index
changes only modestly with inclination, because the emission comes from the
same tau ~ 1 surface seen in projection; the flux grows as the cone is seen
more from the side.
"""

import astropy.units as u
import numpy as np
from make_snapshot import build

import rtrace


def main():
    ne, temperature, dx = build(96)
    n = ne.shape[0]
    snap = rtrace.Snapshot.from_arrays(
        temperature=temperature * u.K,
        cell_size=dx * u.AU,
        electron_density=ne * u.cm**-3,
        origin=[-dx * n / 2] * 3 * u.AU,
        source="examples/ionized_jet",
    )
    nu = [5, 50] * u.GHz
    for incl in (0, 30, 60, 90):
        i = np.radians(incl)
        view = rtrace.View(
            los=(0, np.sin(i), np.cos(i)),
            north=(0, np.cos(i), -np.sin(i)) if incl else (0, 1, 0),
            npix=128,
            width=1100 * u.AU,
            distance=1.5 * u.kpc,
        )
        flux = rtrace.trace(snap, view, nu).flux_density()
        alpha = np.log(flux[1] / flux[0]) / np.log(nu[1] / nu[0])
        print(
            f"inclination {incl:2d} deg: S(5 GHz) = {flux[0].to(u.mJy):8.3f}, "
            f"S(50 GHz) = {flux[1].to(u.mJy):8.3f}, alpha = {alpha:.3f}"
        )


if __name__ == "__main__":
    main()
