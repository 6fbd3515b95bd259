"""Write the snapshot of an invented collimated ionized wind (a bipolar flow) to HDF5.

A fully ionized 1e4 K flow leaves a young star along +-z inside a cone of
half-opening angle 20 deg, with n_e falling as r^-2 (constant speed, constant
mass-loss rate), embedded in neutral gas. Usage:
    python make_snapshot.py [output.h5] [--cells N]
"""

import argparse

import h5py
import numpy as np


def build(n=96, box_au=800.0, n0=1e8, r0_au=10.0, half_angle_deg=20.0):
    dx = box_au / n
    x = (np.arange(n) + 0.5) * dx - box_au / 2
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij")
    r = np.sqrt(X**2 + Y**2 + Z**2)
    cos_theta = np.abs(Z) / np.maximum(r, 1e-9)
    in_cone = cos_theta >= np.cos(np.radians(half_angle_deg))
    ne = np.where(in_cone, n0 * (r0_au / np.maximum(r, r0_au)) ** 2, 0.0)
    temperature = np.where(in_cone, 1.0e4, 50.0)
    return ne.astype(np.float32), temperature.astype(np.float32), dx


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("output", nargs="?", default="jet.h5")
    parser.add_argument("--cells", type=int, default=96)
    args = parser.parse_args()
    ne, temperature, dx = build(args.cells)
    with h5py.File(args.output, "w") as f:
        f.attrs["cell_size"] = dx
        f.attrs["cell_size_units"] = "AU"
        f.attrs["origin"] = [-dx * args.cells / 2] * 3
        g = f.create_group("gas")
        g.create_dataset("electron_number_density", data=ne).attrs["units"] = "cm**-3"
        g.create_dataset("electron_temperature", data=temperature).attrs["units"] = "K"
    print(f"wrote {args.output}: {args.cells}^3 cells of {dx:.3g} AU")


if __name__ == "__main__":
    main()
