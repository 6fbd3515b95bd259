"""Write an invented HII region with a steep density gradient (a blister) to HDF5.

Photoionized 8500 K gas in a sphere of 0.35 pc radius whose hydrogen density
falls exponentially toward +x (scale 0.08 pc, 3e4 cm-3 at the dense edge),
inside 30 K neutral gas. Only mass density and temperature are stored; the
job derives the ionization. Usage: python make_snapshot.py [output.h5] [--cells N]
"""

import argparse

import astropy.constants as const
import h5py
import numpy as np

M_H = (const.m_p + const.m_e).cgs.value  # g, hydrogen atom mass


def build(n=96, cell_pc=0.01):
    x = (np.arange(n) + 0.5 - n / 2) * cell_pc
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij")
    r = np.sqrt(X**2 + Y**2 + Z**2)
    n_h = np.where(r < 0.35, 3e4 * np.exp(-(X + 0.35) / 0.08), 2e3)
    temperature = np.where(r < 0.35, 8500.0, 30.0)
    rho = n_h * M_H / 0.71
    return rho, temperature


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("output", nargs="?", default="hii.h5")
    parser.add_argument("--cells", type=int, default=96)
    args = parser.parse_args()
    rho, temperature = build(args.cells)
    with h5py.File(args.output, "w") as f:
        f.create_dataset("rho", data=rho)  # units given in the job file
        f.create_dataset("T", data=temperature)
    print(f"wrote {args.output}: {args.cells}^3 cells")


if __name__ == "__main__":
    main()
