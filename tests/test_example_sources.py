"""The worked example examples/stars_in_clumpy_cloud at low resolution: its job runs and its physics holds.

References: every absorbed photon balances one case-B recombination (on-the-spot approximation,
Osterbrock & Ferland 2006, sec. 2.3), with alpha_B from Hui & Gnedin (1997, from memory) evaluated
here; the ideal gas law for the temperature derived from the pressure. The scenario itself is invented.
"""

import importlib.util
import tomllib
from pathlib import Path

import astropy.units as u
import h5py
import numpy as np
import pytest
import scipy.constants as sc

from rtrace.run.inputs import build_snapshot
from rtrace.run.job import parse_job

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "stars_in_clumpy_cloud"


def _example_module():
    spec = importlib.util.spec_from_file_location("make_cloud", EXAMPLE / "make_snapshot.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def snapshot(tmp_path_factory):
    make = _example_module()
    n = 40
    rho, pressure = make.build(n)
    folder = tmp_path_factory.mktemp("cloud")
    with h5py.File(folder / "cloud.h5", "w") as f:
        f.attrs["cell_size"] = make.BOX_PC / n
        f.attrs["length_unit"] = "pc"
        f.create_dataset("gas/density", data=rho).attrs["units"] = "g / cm3"
        f.create_dataset("gas/pressure", data=pressure).attrs["units"] = "dyn / cm2"
    raw = tomllib.loads((EXAMPLE / "job.toml").read_text())
    job = parse_job(raw, base_dir=folder)
    return build_snapshot(job), rho, pressure, raw, make


def test_the_example_job_balances_photons(snapshot):
    snap, rho, _, raw, _ = snapshot
    assert "100% absorbed" in snap.provenance["photon_budget"]
    q = sum(float(s["rate"].split()[0]) for s in raw["ionization"]["sources"])
    lam = 2.0 * 157807.0 / snap.temperature.value
    alpha_b = 2.753e-14 * lam**1.5 / (1.0 + (lam / 2.740) ** 0.407) ** 2.242
    # photoionized cells are the warm ones (the cloud is 60 K); n_HII = n_e - n_HeII with n_HeII = y n_HII
    warm = snap.temperature.value > 1000.0
    y = (0.27 / 4.002602) / (0.71 / 1.00794)  # n_He / n_H from the mass fractions
    ne = snap.electron_density.value
    n_hii = ne / (1.0 + y)
    recombinations = np.sum((alpha_b * ne * n_hii)[warm]) * np.prod(snap.cell_size)
    assert recombinations / q == pytest.approx(1.0, abs=1e-3)


def test_the_example_globules_cast_shadows(snapshot):
    snap, *_ = snapshot
    ne = snap.electron_density.value
    dx = snap.cell_size[0] / u.pc.to(u.cm)
    at = lambda x, y, z: ne[int(x / dx), int(y / dx), int(z / dx)]  # noqa: E731
    # behind the western globule (centre 2.2 pc, radius 0.3 pc) as seen from the stars near x = 3 pc
    assert at(1.6, 3.15, 3.0) < 1e-3
    # the same distance from the stars toward the north-west, clear of the globules
    assert at(2.3, 3.75, 3.0) > 1.0


def test_the_example_cold_gas_follows_the_ideal_gas_law(snapshot):
    # P = (n_H + n_He + n_e) k T in the neutral gas (n_e ~ 0): the temperature the file's pressure implies
    snap, rho, pressure, _, make = snapshot
    cold = snap.electron_density.value == 0
    n = rho * (make.X / ((sc.m_p + sc.m_e) * 1e3) + make.Y / (4.002602 * sc.atomic_mass * 1e3))
    np.testing.assert_allclose(snap.temperature.value[cold], (pressure / (n * sc.k * 1e7))[cold], rtol=1e-5)
