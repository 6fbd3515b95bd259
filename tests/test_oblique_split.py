"""Oblique views traced with ``tolerance``: exact cell projections plus a lattice remainder.

Checked against the independent numpy brute-force reference of
``test_pixel_accuracy`` (exact slab intersections of many sub-rays per
pixel; Kay & Kajiya 1986; the per-cell formal solution, Rybicki & Lightman
1979, eq. 1.30). The emission measure and, with absorption off, the
intensity are linear in the cells' path lengths, so the traced pixels are
exact footprint means; with absorption the remainder is second order in the
cells' optical depths.
"""

import warnings

import astropy.units as u
import numpy as np
import pytest
from jobs import TWO_FREQUENCIES, demo, job_text, view
from test_pixel_accuracy import CELL, DIRECTIONS, NU, _grid, _reference

import rtrace
from rtrace.physics.freefree import absorption_cgs, emission_cgs
from rtrace.transfer.result import PixelAccuracyWarning

FLOOR = 1e-2  # pixels compared: where the reference has converged (see test_pixel_accuracy)
# The reference's own quadrature error on those pixels: 64 and 128 sub-rays per pixel side differ by
# up to 0.5% (test_pixel_accuracy.test_reference_converges_with_more_sub_rays), so agreement is
# checked to 1%; the exactness of the projection itself to 1e-4 is checked in test_footprint.py.
REF_ERROR = 1e-2
PIXEL_CELLS = [(1.6, 64), (4.0, 128)]


@pytest.fixture(scope="module")
def grid():
    ne, t = _grid()
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K,
        cell_size=CELL * u.cm,
        electron_density=ne * u.cm**-3,
        ion_density=ne * u.cm**-3,
        dtype=np.float64,
    )
    alpha = np.stack([absorption_cgs(nu, t, ne, ne).ravel() for nu in NU])
    source = np.stack([emission_cgs(nu, t, ne, ne).ravel() for nu in NU]) / alpha
    return snap, ne, t, alpha, source


def _view(los, north, pix_cells):
    npix = int(np.ceil(21.0 / pix_cells))
    return rtrace.View(los=los, north=north, npix=npix, width=npix * pix_cells * CELL * u.cm, distance=1 * u.kpc), npix


def _worst(got, ref):
    bright = ref >= FLOOR * ref.max()
    return float(np.max(np.abs(got[bright] - ref[bright]) / ref[bright]))


def _trace(snap, view, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PixelAccuracyWarning)
        return rtrace.trace(snap, view, NU * u.Hz, **kw)


@pytest.mark.parametrize("los,north", DIRECTIONS[:2])
def test_emission_measure_and_thin_intensity_are_exact(grid, los, north):
    # EM is a sum of exact cell-prism overlaps, whatever the lattice; at the thin frequency (tau ~
    # 1e-4 .. 2e-2 per ray) the remainder is small, and refined to 1e-2 it leaves the intensity within
    # the reference's accuracy; one ray per cell is several % (up to hundreds of %) off on the same pixels.
    snap, ne, _, alpha, source = grid
    for pix_cells, nsub in PIXEL_CELLS:
        view, npix = _view(los, north, pix_cells)
        ref_i, ref_em = _reference(ne, alpha, source, los, north, npix, pix_cells * CELL, nsub)
        coarse = _trace(snap, view, tolerance=0.5)
        res = _trace(snap, view, tolerance=1e-2)
        plain = rtrace.trace(snap, view, NU * u.Hz, supersample=1)
        assert _worst(coarse._em, ref_em) < REF_ERROR, (los, pix_cells)
        assert np.array_equal(coarse._em, res._em)
        assert _worst(res.intensity.value[1], ref_i[1]) < REF_ERROR, (los, pix_cells)
        assert _worst(plain._em, ref_em) > 0.03
        assert _worst(plain.intensity.value[1], ref_i[1]) > 0.03


def test_emission_only_intensity_is_exact(grid):
    # absorption off: I - I_bg = int j dl, linear in the path lengths, so exact; the reference's
    # "EM" of sqrt(j) is the same integral (its sub-rays integrate j exactly, cell by cell)
    snap, ne, t, alpha, source = grid
    los, north = DIRECTIONS[2]
    view, npix = _view(los, north, 1.6)
    j = emission_cgs(NU[0], t, ne, ne)
    _, ref_j = _reference(np.sqrt(j), alpha, source, los, north, npix, 1.6 * CELL, 64)
    res = _trace(snap, view, tolerance=1e-2, absorption=False)
    assert res.pixel_error.converged
    assert _worst(res.intensity.value[0], ref_j) < REF_ERROR
    assert np.all(np.asarray(res.tau) == 0.0)
    # the unabsorbed image a refined trace reports is retraced to the same accuracy, and absorption
    # only removes intensity (no background here): full <= unabsorbed in every pixel at the thin
    # frequency (common practice), to the tolerance of the two images
    full = _trace(snap, view, tolerance=1e-2)
    assert _worst(full.unabsorbed_intensity.value[0], ref_j) < REF_ERROR
    assert np.all(full.intensity.value[1] <= full.unabsorbed_intensity.value[1] * (1 + 2e-2))


def test_totals_are_the_volume_integrals(grid):
    # sum over pixels of (pixel mean x pixel area) = the volume integral (common practice),
    # for tau (sum alpha V) and EM (sum n_e n_i V): projections conserve them to the kernel's accuracy
    snap, ne, _, alpha, _ = grid
    los, north = DIRECTIONS[1]
    view, _ = _view(los, north, 1.6)
    res = _trace(snap, view, tolerance=0.5)
    area = (1.6 * CELL) ** 2
    assert res._em.sum() * area == pytest.approx(np.sum(ne * ne) * CELL**3, rel=1e-5)
    for f in range(len(NU)):
        assert np.asarray(res.tau)[f].sum() * area == pytest.approx(alpha[f].sum() * CELL**3, rel=1e-5)


def test_thick_pixels_within_tolerance_or_warned(grid):
    # the optically thick frequency (tau ~ 5): refined where the remainder is large; the estimate
    # bounds the error against the reference, and a view that stops short says so
    snap, ne, _, alpha, source = grid
    los, north = DIRECTIONS[0]
    view, npix = _view(los, north, 4.0)
    ref_i, _ = _reference(ne, alpha, source, los, north, npix, 4.0 * CELL, 128)
    res = _trace(snap, view, tolerance=2e-2)
    err = _worst(res.intensity.value[0], ref_i[0])
    assert err <= max(res.pixel_error.max_relative, 2e-2)
    assert res.pixel_error.supersample > 1


def test_background_with_the_split_matches_a_dense_lattice(grid):
    # the background enters the sensitivities (I_out includes it): at the thin frequency the split's
    # subtracted intensity agrees with a dense plain lattice (16 rays per cell side) to 1%
    snap = grid[0]
    los, north = DIRECTIONS[1]
    view, _ = _view(los, north, 4.0)
    split = _trace(snap, view, tolerance=1e-2, background="cmb")
    dense = rtrace.trace(snap, view, NU * u.Hz, supersample=16, background="cmb")
    assert _worst(split.intensity.value[1], dense.intensity.value[1]) < 1e-2
    assert split.specific_intensity("included").value[1].min() > 0


@pytest.mark.parametrize("pix_cells", [0.5, 1.6, 4.0])
def test_refined_rays_cover_their_pixels(grid, pix_cells):
    # the rays traced for refined pixels (needed_rays) are all the tubes those pixels overlap: their exact
    # remap (remap_ray_list, with the shortcut for tubes inside one pixel) gives those pixels what the
    # whole lattice gives, to rounding (tubes tile the plane: constant values remap to their footprint
    # coverage, common practice)
    from rtrace.transfer import oblique_split as split
    from rtrace.transfer.tracer import FrequencyTables, _ObliqueRoute

    snap = grid[0]
    los, north = DIRECTIONS[1]
    view, _ = _view(los, north, pix_cells)
    center, pix = view.resolve(snap)
    rng = np.random.default_rng(5)
    for m in (1, 2, 4):
        route = _ObliqueRoute(snap, view, center, pix, FrequencyTables(NU * u.Hz), m)
        values = rng.random((2,) + tuple(route.ray_shape))
        whole = split.remap_rays(route, values)
        pixels = rng.random(route.image_shape) < 0.2
        big_i, big_j = split.needed_rays(route, pixels)
        assert 0 < big_i.size < values[0].size
        picked = values[:, big_i - route.ia[0], big_j - route.ib[0]]
        got = split.remap_ray_list(route, big_i, big_j, picked)
        assert got[:, pixels] == pytest.approx(whole[:, pixels], rel=1e-11, abs=1e-12 * whole.max())


def test_refinement_stops_where_the_next_lattice_does_not_fit(grid, monkeypatch):
    # a finer lattice whose rays (only those of the tiles refined) are refused by the memory check ends
    # the refinement with a warning that says so and the estimate reached on the last lattice (not an
    # error: the coarser images are still valid)
    from rtrace.errors import InputError
    from rtrace.transfer import oblique_split, tracer

    snap = grid[0]
    view, _ = _view(*DIRECTIONS[0], 1.6)
    with monkeypatch.context() as patch:
        patch.setattr(tracer, "MAX_SUPERSAMPLE", 1)  # the first lattice alone
        first = _trace(snap, view, tolerance=1e-3)

    real = oblique_split.check_memory

    def refuse(need, *, field, what, hint, budget=None):
        if "rays of" in what:  # the refined rays; the per-cell state passes
            raise InputError(f"{field}: {what}: not enough memory (test)")
        return real(need, field=field, what=what, hint=hint, budget=budget)

    monkeypatch.setattr(oblique_split, "check_memory", refuse)
    with pytest.warns(
        PixelAccuracyWarning,
        match=r"at supersample=1, not the 0.001 asked for \(the \d+ rays of "
        r"the next lattice \(2 per cell side\) would not fit in memory\)",
    ):
        res = rtrace.trace(snap, view, NU * u.Hz, tolerance=1e-3)
    assert not res.pixel_error.converged and res.pixel_error.supersample == 1
    assert res.pixel_error.max_relative > 1e-3
    np.testing.assert_allclose(res.intensity.value, first.intensity.value, rtol=1e-12)


def test_per_cell_state_only_for_emitting_blocks():
    # the split's per-cell arrays hold the 8^3 blocks with gas only: a grid emitting in one corner needs
    # one block's worth, and block_slots numbers exactly those blocks
    from rtrace.transfer.kernels import emitting_blocks
    from rtrace.transfer.linearized import block_slots
    from rtrace.transfer.oblique_split import split_state_bytes

    nn = np.zeros((20, 17, 9))
    nn[2, 3, 4] = nn[15, 16, 8] = 1.0
    blocks = emitting_blocks(nn)
    slots, where = block_slots(blocks)
    assert where.tolist() == [[0, 0, 0], [1, 2, 1]]
    assert slots[0, 0, 0] == 0 and slots[1, 2, 1] == 1 and np.count_nonzero(slots >= 0) == 2
    assert split_state_bytes(blocks, 2) == 8 * 2 * 512 * 7


def test_job_tolerance_key(tmp_path):
    # [trace] tolerance reaches the tracer: the FITS cards record the estimate; with supersample too,
    # or out of (0, 1), the job is refused before any work
    from astropy.io import fits

    from rtrace.cli import EXIT_CONFIG, EXIT_OK, main

    job = job_text(
        snapshot=demo(16),
        frequencies=TWO_FREQUENCIES,
        trace={"tolerance": 0.2},
        view=view("tilted", 12, "2 kpc", los=[1, 2, 3]),
        output={"directory": "out", "pictures": False},
    )
    path = tmp_path / "job.toml"
    path.write_text(job)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(["run", str(path), "--quiet"]) == EXIT_OK
    header = fits.getheader(tmp_path / "out" / "tilted_intensity.fits")
    assert 0.0 <= header["RTPIXERR"] and header["RTPIXSS"] >= 1
    path.write_text(job.replace("tolerance = 0.2", "tolerance = 0.2\nsupersample = 2"))
    assert main(["run", str(path), "--quiet"]) == EXIT_CONFIG
    path.write_text(job.replace("tolerance = 0.2", "tolerance = 1.5"))
    assert main(["run", str(path), "--quiet"]) == EXIT_CONFIG
