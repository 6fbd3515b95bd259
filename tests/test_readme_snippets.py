"""Every Python block of the README runs as written, in the order a reader meets them.

The blocks use arrays a reader has (``T``, ``ne``, ``dx``, ``rho``, ``P``, ionized fractions); the
test gives them invented values: an HII region of 10^4 K in a 2 pc box for the first block (as in
``tests/test_readme_interferometer.py``, which also runs the interferometer block), and a 4 pc box
of warm gas holding the README's two stars for the ionization block. Blocks that need data from
outside the repository (a snapshot file and a dask scheduler, a yt dataset) carry the marker
``<!-- not run by the tests: ... -->`` just above them; every other block must run.
"""

import re
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np

import rtrace

ROOT = Path(__file__).resolve().parents[1]
SKIP = "<!-- not run by the tests:"
INTERFEROMETER = "<!-- test: interferometer snippet"


def _blocks():
    """``[(line, marker, code)]``: each python block with the HTML comment just above it ('' if none)."""
    text = (ROOT / "README.md").read_text()
    out = []
    for m in re.finditer(r"```python\n(.*?)```", text, re.S):
        before = text[: m.start()].rstrip().splitlines()
        marker = before[-1] if before and before[-1].startswith("<!--") else ""
        out.append((text[: m.start()].count("\n") + 1, marker, m.group(1)))
    return out


def _first_block_arrays(n=48):
    x = (np.arange(n) + 0.5) / n * 2 - 1  # box of 2 pc, coordinates in [-1, 1]
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij")
    ne = np.where(np.sqrt(X**2 + Y**2 + Z**2) < 0.5, 200.0, 0.0)
    return {"T": np.full(ne.shape, 1e4), "ne": ne, "dx": (2 * u.pc / n).to_value(u.cm)}


def _ionization_block_arrays(n=16):
    # a 4 pc box (dx in pc, as that block writes it) of warm gas holding both of its stars
    rho = np.full((n, n, n), 100 * 1.67e-24 / 0.7)  # n_H = 100 cm^-3 with X = 0.7
    temp = np.full(rho.shape, 8000.0)
    x = np.linspace(0.0, 1.0, rho.size).reshape(rho.shape)
    return {
        "T": temp,
        "rho": rho,
        "dx": 4.0 / n,
        "P": 2.3 * rho / 1.67e-24 * 1.380649e-16 * temp,
        "x_hii": x,
        "x_heii": 0.5 * x,
        "x_heiii": 0.25 * x,
    }


def _invented_observation(sky, path):
    """The reader's observed image: here the 4 GHz plane of the README's own observed map, as one image."""
    from rtrace.io.fits import write_cube

    k = int(np.argmin(np.abs(sky.frequencies - 4 * u.GHz)))
    write_cube(
        path, sky.data[k], sky.frequencies[k : k + 1], sky.pixel_scale, sky.sky_position, reference_beam=sky.beams[k]
    )


def test_every_readme_block_runs_or_says_why_not(tmp_path, monkeypatch):
    blocks = _blocks()
    skipped = [line for line, marker, _ in blocks if marker.startswith(SKIP)]
    assert len(skipped) == 2, skipped  # the cluster and the yt examples, nothing else
    monkeypatch.chdir(tmp_path)  # the blocks write their files here
    ns = {}
    ran = 0
    for line, marker, code in blocks:
        if marker.startswith((SKIP, INTERFEROMETER)):
            continue
        if "IonizingSources(" in code:
            ns.update(_ionization_block_arrays())
        elif "rtrace.compare(" in code:
            _invented_observation(ns["sky"], tmp_path / "observed.fits")
        elif not ran:
            ns.update(_first_block_arrays())
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # range notes on the invented arrays are not the point
            exec(compile(code, f"README.md, block at line {line}", "exec"), ns)
        ran += 1
    assert ran == 5
    # what the blocks promised: files written, a comparison of the model with its own observation
    assert (tmp_path / "observed_map.fits").exists() and (tmp_path / "intensity.fits").exists()
    assert (tmp_path / "cut.png").exists() and (tmp_path / "comparison.png").exists()
    # the invented observation is the model's own 4 GHz map with noise: the flux ratio is near 1
    assert isinstance(ns["res"], rtrace.Result) and abs(ns["cmp"].flux_ratio - 1) < 0.05
