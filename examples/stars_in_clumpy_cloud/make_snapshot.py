"""Write an invented snapshot of three massive stars in a clumpy cloud to HDF5.

A 6 pc box of cold (60 K) molecular-cloud gas from a hydrodynamics run with
no radiative transfer: the file holds only mass density and pressure, as the
solver wrote them. The stars sit in a sheet of the cloud about 1 pc thick
(denser gas above and below confines their H II region), the density a
lognormal field correlated over about 0.1 pc (mean n_H 200 cm^-3 in the
sheet), with three dense globules (n_H 3e4 cm^-3) just outside the group of
stars; the stars' positions and ionizing photon rates are in
job.toml. Usage: python make_snapshot.py [output.h5] [--cells N]
"""

import argparse

import astropy.constants as const
import h5py
import numpy as np
from scipy.ndimage import gaussian_filter

BOX_PC = 6.0
X, Y = 0.71, 0.27  # hydrogen and helium mass fractions
M_H = (const.m_p + const.m_e).cgs.value  # g
M_HE = 4.002602 * const.u.cgs.value  # g
K_B = const.k_B.cgs.value  # erg/K
#: Globules: centre (pc) and radius (pc), about 0.8 pc from the group of stars (which is 0.4 pc across),
#: so that all three stars see each globule in about the same direction and their shadows overlap.
GLOBULES = [((2.2, 3.15, 3.0), 0.3), ((3.75, 3.6, 3.0), 0.3), ((3.1, 2.1, 3.0), 0.28)]


def build(n=128, seed=3):
    rng = np.random.default_rng(seed)
    # correlated over ~3 cells whatever n is: the smoothing length is fixed in pc, not in cells
    field = gaussian_filter(rng.standard_normal((n, n, n)), sigma=0.12 * n / BOX_PC, mode="wrap")
    field /= field.std()
    c = (np.arange(n) + 0.5) * BOX_PC / n
    gx, gy, gz = np.meshgrid(c, c, c, indexing="ij")
    sheet = 1.0 + 49.0 * -np.expm1(-(((gz - 3.0) / 0.6) ** 4))  # 1 in the midplane, 50 beyond 1 pc from it
    n_h = 200.0 * sheet * np.exp(0.6 * field - 0.5 * 0.6**2)
    for (x0, y0, z0), radius in GLOBULES:
        inside = (gx - x0) ** 2 + (gy - y0) ** 2 + (gz - z0) ** 2 < radius**2
        n_h[inside] = 3.0e4
    rho = n_h * M_H / X
    n_particles = n_h + rho * Y / M_HE  # neutral atoms: what sets P in cold gas
    pressure = n_particles * K_B * 60.0
    return rho, pressure


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("output", nargs="?", default="cloud.h5")
    parser.add_argument("--cells", type=int, default=128)
    args = parser.parse_args()
    rho, pressure = build(args.cells)
    with h5py.File(args.output, "w") as f:
        f.attrs["cell_size"] = BOX_PC / args.cells
        f.attrs["length_unit"] = "pc"
        f.create_dataset("gas/density", data=rho).attrs["units"] = "g / cm3"
        f.create_dataset("gas/pressure", data=pressure).attrs["units"] = "dyn / cm2"
    print(f"wrote {args.output}: {args.cells}^3 cells, {BOX_PC} pc box")


if __name__ == "__main__":
    main()
