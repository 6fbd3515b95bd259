"""The built-in scenario: it exercises optically thick and thin emission."""

import astropy.units as u
import numpy as np

import rtrace
from rtrace import demo


def test_scenario_has_thick_and_thin_regimes():
    snap = demo.scenario(n=32)
    assert snap.shape == (32, 32, 32)
    assert snap._ne.max() > 1e3 and (snap._ne == 0).any()        # ionized gas inside a neutral cloud
    res = rtrace.trace(snap, rtrace.View(npix=32, distance=2 * u.kpc), [0.3, 100] * u.GHz)
    assert res.tau[0].max() > 5 and np.median(res.tau[1][res.tau[1] > 0]) < 0.01
    flux = res.flux_density().to_value(u.Jy)
    assert np.all(flux > 0)


def test_scenario_is_reproducible():
    a, b = demo.scenario(n=16, seed=3), demo.scenario(n=16, seed=3)
    assert a.checksum() == b.checksum()
    assert a.checksum() != demo.scenario(n=16, seed=4).checksum()


def test_demo_main_runs(capsys):
    demo.main(["--cells", "24", "--pixels", "24"])
    out = capsys.readouterr().out
    assert "face-on" in out and "S (Jy)" in out
