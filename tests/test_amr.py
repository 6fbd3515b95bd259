"""AMR at native resolution and snapshots through yt.

The reference for every image here is yt's own covering grid at the finest
level (yt, Turk et al. 2011, ApJS 192, 9: ``covering_grid`` fills each cell
from the finest grid that holds it), traced as an ordinary uniform
snapshot: a block-structured hierarchy (Berger & Colella 1989, J. Comput.
Phys. 82, 64) with sub-cell structure in its refined patches must give the
same image as that uniform grid. The data are invented test patterns.
"""

import astropy.units as u
import numpy as np
import pytest

yt = pytest.importorskip("yt")

import rtrace  # noqa: E402
from rtrace import amr  # noqa: E402
from rtrace.errors import InputError  # noqa: E402

BOX_PC = 2.0
FREQS = [0.3, 1.4, 8.0, 40.0] * u.GHz  # thick to thin through the dense knots


def _fields(rng, dims):
    dims = tuple(dims)
    t = rng.uniform(6e3, 2e4, dims)
    ne = rng.uniform(0.0, 3e3, dims) * (rng.uniform(size=dims) > 0.2)  # some neutral (n_e = 0) cells
    return {"temperature": (t, "K"), "electron_density": (ne, "cm**-3")}


def _hierarchy(seed=3):
    """Level 0: two 8x8x4 grids; level 1 inside both; level 2 inside level 1 (refine by 2)."""
    rng = np.random.default_rng(seed)
    grids = [
        dict(left_edge=[0, 0, 0], right_edge=[1, 1, 0.5], level=0, dimensions=[8, 8, 4]),
        dict(left_edge=[0, 0, 0.5], right_edge=[1, 1, 1], level=0, dimensions=[8, 8, 4]),
        # spans the two level-0 grids' boundary plane z = 0.5
        dict(left_edge=[0.25, 0.125, 0.25], right_edge=[0.75, 0.625, 0.875], level=1, dimensions=[8, 8, 10]),
        dict(left_edge=[0.0, 0.5, 0.0], right_edge=[0.25, 1.0, 0.25], level=1, dimensions=[4, 8, 4]),
        dict(left_edge=[0.375, 0.25, 0.5], right_edge=[0.625, 0.5, 0.75], level=2, dimensions=[8, 8, 8]),
    ]
    for g in grids:
        g.update(_fields(rng, g["dimensions"]))
    return yt.load_amr_grids(grids, [8, 8, 8], length_unit=(BOX_PC, "pc"))


@pytest.fixture(scope="module")
def hierarchy():
    ds = _hierarchy()
    snap = rtrace.Snapshot.from_yt(ds, temperature="temperature", electron_density="electron_density")
    cg = ds.covering_grid(2, ds.domain_left_edge, ds.domain_dimensions * 4)
    uniform = rtrace.Snapshot.from_arrays(
        temperature=cg["gas", "temperature"].to_astropy(),
        electron_density=cg["stream", "electron_density"].to_astropy(),
        cell_size=BOX_PC / 32 * u.pc,
    )
    return ds, snap, uniform


def test_amr_snapshot_keeps_native_resolution(hierarchy):
    ds, snap, uniform = hierarchy
    assert isinstance(snap, amr.AMRSnapshot)
    assert snap.levels == 3 and snap.shape == (32, 32, 32)
    np.testing.assert_allclose(snap.cell_size, uniform.cell_size, rtol=1e-9)  # yt and astropy parsecs agree to ~1e-10
    counts = snap.cell_counts()
    # cells actually held by the leaves, per level, and their finest-level volume tiles the domain
    assert counts[0] > 0 and counts[1] > 0 and counts[2] == 8**3
    assert sum(int(c) * snap.scale(lev) ** 3 for lev, c in enumerate(counts)) == 32**3
    assert counts.sum() < 32**3 / 10  # far fewer than the uniform finest grid


def test_leaves_tile_the_domain_with_the_finest_data(hierarchy):
    ds, snap, uniform = hierarchy
    owner = np.full(snap.shape, -1)
    for n, leaf in enumerate(snap.leaves):
        sl = tuple(slice(a, b) for a, b in zip(leaf.lo, leaf.hi, strict=True))
        assert np.all(owner[sl] == -1), "leaves overlap"
        owner[sl] = n
        # the leaf's data, spread to the finest level, is yt's covering grid there
        r = snap.scale(leaf.level)
        ne, _, t = snap.leaf_arrays(leaf)
        fine_t = np.repeat(np.repeat(np.repeat(t, r, 0), r, 1), r, 2)
        np.testing.assert_allclose(fine_t, uniform._t[sl], rtol=1e-6)
    assert np.all(owner >= 0), "leaves leave gaps"


@pytest.mark.parametrize("los", [(1, 0, 0), (0, 1, 0), (0, 0, 1), (0, 0, -1), (-1, 0, 0)])
def test_amr_axis_views_equal_uniform_finest_grid(hierarchy, los):
    ds, snap, uniform = hierarchy
    north = (0, 1, 0) if abs(los[1]) == 0 else (0, 0, 1)
    view = rtrace.View(los=los, north=north, npix=40, distance=1 * u.kpc)
    a = rtrace.trace(snap, view, FREQS)
    b = rtrace.trace(uniform, view, FREQS)
    assert b.tau.max() > 3 and b.tau.min() < 0.1  # the check covers thick and thin rays
    np.testing.assert_allclose(a.intensity.value, b.intensity.value, rtol=1e-5, atol=1e-30)
    np.testing.assert_allclose(a.tau, b.tau, rtol=1e-5, atol=1e-12)
    np.testing.assert_allclose(a.emission_measure.value, b.emission_measure.value, rtol=1e-5, atol=1e-12)


@pytest.mark.parametrize("los, supersample", [((0.3, 0.4, 0.866), 1), ((-0.7, 0.2, -0.3), 1), ((0.05, -0.6, 0.5), 2)])
def test_amr_oblique_views_equal_uniform_finest_grid(hierarchy, los, supersample):
    ds, snap, uniform = hierarchy
    view = rtrace.View(los=los, north=(0, 0, 1) if abs(los[2]) < 0.6 else (0, 1, 0), npix=48, distance=1 * u.kpc)
    a = rtrace.trace(snap, view, FREQS, supersample=supersample, background="cmb")
    b = rtrace.trace(uniform, view, FREQS, supersample=supersample, background="cmb")
    assert b.tau.max() > 3
    np.testing.assert_allclose(a.intensity.value, b.intensity.value, rtol=1e-5, atol=1e-30)
    np.testing.assert_allclose(a.tau, b.tau, rtol=1e-5, atol=1e-12)
    np.testing.assert_allclose(a.emission_measure.value, b.emission_measure.value, rtol=1e-5, atol=1e-12)
    np.testing.assert_allclose(a.flux_density().value, b.flux_density().value, rtol=1e-6)


def test_front_to_back_order_holds_along_random_rays(hierarchy):
    """Along any ray, the leaves it meets come in the order of the list (nearest first)."""
    ds, snap, uniform = hierarchy
    rng = np.random.default_rng(0)
    for _ in range(20):
        los = rng.normal(size=3)
        los /= np.linalg.norm(los)
        rank = {id(leaf): n for n, leaf in enumerate(amr.front_to_back(snap.tree, los))}
        start = rng.uniform(0, 32, 3)
        # march from the observer's side (far along +los) backwards
        pts = start[None, :] + np.linspace(60, -60, 4000)[:, None] * los[None, :]
        inside = np.all((pts >= 0) & (pts < 32), axis=1)
        seen = []
        for p in pts[inside]:
            idx = np.floor(p).astype(int)
            for leaf in snap.leaves:
                if np.all(leaf.lo <= idx) and np.all(idx < leaf.hi):
                    seen.append(rank[id(leaf)])
                    break
        assert seen == sorted(seen)


def test_amr_refuses_bricking_options(hierarchy):
    ds, snap, uniform = hierarchy
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=8, distance=1 * u.kpc)
    with pytest.raises(InputError, match="AMR"):
        rtrace.trace(snap, view, [1] * u.GHz, brick_size=8)


def test_misaligned_refined_grid_is_refused():
    """yt refuses such data at load time; a reader that does not gets the same answer from rtrace."""

    def grid(level, lo, hi):
        n = tuple(np.asarray(hi) - np.asarray(lo))
        one = np.ones(n, np.float32)
        return amr.Grid(level, lo, hi, one, one, 1e4 * one, "grid 7")

    # level-1 grid from level-1 index 3 (finest units, refine by 2, two levels): inside a level-0 cell
    grids = [grid(0, [0, 0, 0], [16, 16, 16]), grid(1, [3, 4, 4], [11, 12, 12])]
    with pytest.raises(InputError, match=r"grid 7 at level 1 \(cells \[3, 4, 4\].*cell boundaries of level 0"):
        amr.AMRSnapshot(grids, 2, (8, 8, 8), np.ones(3), np.zeros(3), {"source": "test"})


def test_missing_field_lists_the_fields_that_exist(hierarchy):
    ds = hierarchy[0]
    with pytest.raises(InputError, match=r"electron_density: yt field 'n_e'.*stream/electron_density"):
        rtrace.Snapshot.from_yt(ds, temperature="temperature", electron_density="n_e")


def test_bad_values_are_counted_over_all_grids():
    rng = np.random.default_rng(2)
    grids = [
        dict(left_edge=[0, 0, 0], right_edge=[1, 1, 1], level=0, dimensions=[8, 8, 8]),
        dict(left_edge=[0.25, 0.25, 0.25], right_edge=[0.75, 0.75, 0.75], level=1, dimensions=[8, 8, 8]),
    ]
    for g in grids:
        g.update(_fields(rng, g["dimensions"]))
    grids[0]["temperature"][0][0, 0, :3] = -5.0
    grids[1]["temperature"][0][1, 1, :4] = 0.0
    ds = yt.load_amr_grids(grids, [8, 8, 8], length_unit=(1, "pc"))
    with pytest.raises(InputError, match=r"temperature: 7 of 1024 cells .* violate temperature > 0"):
        rtrace.Snapshot.from_yt(ds, temperature="temperature", electron_density="electron_density")


def test_uniform_dataset_and_density_with_ionization_model():
    """A single-level yt dataset becomes an ordinary Snapshot equal to from_arrays on the same data."""
    rng = np.random.default_rng(4)
    rho = rng.uniform(1e-22, 1e-20, (12, 10, 8))
    t = rng.uniform(5e3, 3e4, (12, 10, 8))
    bbox = np.array([[0, 1.2], [0, 1.0], [0, 0.8]])
    ds = yt.load_uniform_grid(
        {"density": (rho, "g/cm**3"), "temperature": (t, "K")}, rho.shape, length_unit=(1, "pc"), bbox=bbox
    )
    snap = rtrace.Snapshot.from_yt(ds, temperature=("gas", "temperature"), density="density", ionization="full")
    ref = rtrace.Snapshot.from_arrays(
        temperature=t * u.K, density=rho * u.g / u.cm**3, ionization="full", cell_size=0.1 * u.pc
    )
    assert isinstance(snap, rtrace.Snapshot) and snap.shape == ref.shape
    np.testing.assert_allclose(snap.cell_size, ref.cell_size, rtol=1e-9)
    np.testing.assert_allclose(snap._ne, ref._ne, rtol=1e-6)
    np.testing.assert_allclose(snap._ni, ref._ni, rtol=1e-6)
    np.testing.assert_allclose(snap._t, ref._t, rtol=1e-6)
    assert "yt" in snap.provenance["source"]


def test_path_form_loads_through_yt(tmp_path):
    rng = np.random.default_rng(5)
    t = rng.uniform(5e3, 3e4, (8, 8, 8))
    ne = rng.uniform(0, 100, (8, 8, 8))
    ds = yt.load_uniform_grid(
        {"temperature": (t, "K"), "electron_density": (ne, "cm**-3")}, t.shape, length_unit=(1, "pc")
    )
    cg = ds.covering_grid(0, ds.domain_left_edge, ds.domain_dimensions)
    path = cg.save_as_dataset(
        str(tmp_path / "cube"), fields=[("stream", "temperature"), ("stream", "electron_density")]
    )
    snap = rtrace.Snapshot.from_yt(path, temperature="temperature", electron_density="electron_density")
    np.testing.assert_allclose(snap._ne, ne, rtol=1e-6)
    with pytest.raises(InputError, match="does not exist"):
        rtrace.Snapshot.from_yt(str(tmp_path / "nope.h5"), temperature="temperature", electron_density="x")


def test_job_file_reads_a_yt_dataset(tmp_path):
    from rtrace.errors import ConfigError
    from rtrace.run.inputs import build_snapshot
    from rtrace.run.job import load_job

    rng = np.random.default_rng(6)
    t = rng.uniform(5e3, 3e4, (8, 8, 8))
    rho = rng.uniform(1e-22, 1e-21, (8, 8, 8))
    ds = yt.load_uniform_grid({"temperature": (t, "K"), "density": (rho, "g/cm**3")}, t.shape, length_unit=(1, "pc"))
    cg = ds.covering_grid(0, ds.domain_left_edge, ds.domain_dimensions)
    cg.save_as_dataset(str(tmp_path / "cube"), fields=[("stream", "temperature"), ("stream", "density")])
    text = """
[snapshot]
kind = "yt"
path = "cube.h5"
temperature = "temperature"
density = "gas/density"
[ionization]
model = "full"
[frequencies]
values = ["1 GHz"]
[[view]]
los = [0, 0, 1]
north = [0, 1, 0]
npix = 8
distance = "1 kpc"
"""
    (tmp_path / "job.toml").write_text(text)
    snap = build_snapshot(load_job(tmp_path / "job.toml"))
    ref = rtrace.Snapshot.from_arrays(
        temperature=t * u.K, density=rho * u.g / u.cm**3, ionization="full", cell_size=1 / 8 * u.pc
    )
    np.testing.assert_allclose(snap._ne, ref._ne, rtol=1e-6)
    (tmp_path / "bad.toml").write_text(text.replace('kind = "yt"', 'kind = "yt"\ncell_size = "1 pc"'))
    with pytest.raises(ConfigError, match="cell_size: not used with kind = 'yt'"):
        load_job(tmp_path / "bad.toml")
