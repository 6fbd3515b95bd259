"""Spectral index across the face of the invented blister HII region, from Python.

Traces the region at 1 and 10 GHz and prints the spectral index along the
density gradient: near +2 (optically thick, Rayleigh-Jeans) on the dense side,
near -0.1 (optically thin free-free) on the diffuse side (Condon & Ransom 2016).
"""

import astropy.units as u
import numpy as np
from make_snapshot import build

import rtrace


def main():
    rho, temperature = build(96)
    snap = rtrace.Snapshot.from_arrays(
        temperature=temperature * u.K,
        cell_size=0.01 * u.pc,
        density=rho * u.g / u.cm**3,
        ionization="threshold",
        source="examples/hii_gradient",
    )
    res = rtrace.trace(snap, rtrace.View(npix=96, width=0.96 * u.pc, distance=3 * u.kpc), [1, 10] * u.GHz)
    i = res.intensity.value
    row = i.shape[1] // 2
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = np.log(i[1, row] / i[0, row]) / np.log(10.0)
    print("column  tau(1 GHz)  alpha(1-10 GHz)")
    for col in range(14, 84, 6):
        print(f"{col:6d}  {res.tau[0, row, col]:10.3g}  {alpha[col]:+8.2f}")


if __name__ == "__main__":
    main()
