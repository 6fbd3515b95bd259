"""Lay out the rays of a View through a Snapshot, run the kernels, composite the pieces.

Two routes give the same physics:

* **Line of sight along a grid axis**: every column of cells is one exact
  ray (the fields are constant across the column's footprint), traced over
  contiguous memory. Each column's square footprint is clipped onto the
  pixels (``remap``) for any pixel size and any rotation of north about the
  line of sight. Nothing aliases; the total flux is exact.
* **Any other direction**: parallel rays on a lattice that is commensurate
  with the grid on the two axes most nearly perpendicular to the line of
  sight (``supersample`` rays per cell, and at least one per pixel). All rays
  of one lattice phase cross cell boundaries at the same depths, so the
  Amanatides & Woo traversal is done once per layer of cells
  (``kernels.layer_segments``) and the rays are swept through the grid layer
  by layer (``kernels.trace_sheared``), skipping 8^3 blocks of cells that
  hold no emitting gas (``kernels.emitting_blocks``). Each ray stands for a
  parallelogram tube; tubes tile the image plane and are remapped onto
  pixels by exact clipping, so a pixel reports the mean over its footprint
  and the total flux is the lattice quadrature of the volume integral for
  any pixel size. Faces seen edge-on (directions in or near a coordinate
  plane) do not alias, because the lattice counts exactly ``supersample``
  rays per cell across them.

Each route has a two-dimensional grid of rays (columns; sub-lattice points)
and traces one box of cells at a time into a ``Patch`` over the rays that
box can reach. An in-memory snapshot is by default one box, the whole
arrays. Otherwise (``brick_size``, ``max_memory``, ``client``, or a
file-backed snapshot) the grid is cut into bricks (``bricks``), each read
once from the snapshot's field source and traced on its own sub-array;
the patches are composited front to back (exact, see ``compositing``),
here in sequence or by :mod:`rtrace.transfer.parallel` as a tree of dask tasks.
"""

import copy
import math
import numbers
from collections import namedtuple

import numpy as np

from ..errors import InputError, PixelAccuracyWarning, warn_user
from ..memory import check_memory, fits_in_memory, format_bytes, trace_image_bytes
from ..physics.constants import ALPHA_FF_PREFACTOR, H_OVER_K, C, H
from ..physics.freefree import check_plasma_frequency
from ..physics.gaunt import log_temperature_table
from ..quantities import parse_frequencies
from . import bricks as _bricks
from . import cell_cache, kernels
from .background import background_from_spec
from .compositing import Patch, Segment, composite_into
from .oblique_split import lattice_phases, remap_rays, split_state_bytes, split_trace
from .pixel_error import PixelError
from .remap import remap_parallelograms

__all__ = [
    "trace_images",
    "TracedImages",
    "FrequencyTables",
    "DEFAULT_TOLERANCE",
    "SUGGESTED_TOLERANCE",
    "PIXEL_FLOOR",
    "ESTIMATE_FACTOR",
    "MAX_SUPERSAMPLE",
    "EM_DEFINITIONS",
]

# What every traced image assumes (written to provenance and FITS headers).
PHYSICS = (
    "thermal free-free, Maxwellian non-relativistic, LTE source function B_nu(T_e); "
    "alpha_nu Rybicki & Lightman eq. 5.18b with exact stimulated emission; "
    "Gaunt factor: exact thermal average of the Sommerfeld factor (rtrace's mpmath table), "
    "per ion charge (Z=1 for H II and He II, Z=2 for He III, whose share of the ion term is "
    "2 (1 - n_e / ion term))"
)

#: Emission-measure definitions ``trace(emission_measure=...)`` accepts, with the text products carry.
EM_DEFINITIONS = {
    "electrons": "EM = int n_e^2 dl (observers' definition)",
    "ion_term": "EM = int n_e sum_i Z_i^2 n_i dl (the free-free ion term)",
}


class TracedImages(
    namedtuple(
        "TracedImages",
        "intensity tau em nu view pixel_size_cm center_cm provenance "
        "rays_per_pixel background background_info pixel_error snapshot "
        "trace_options",
    )
):
    """What :func:`trace_images` returns: the images (cgs arrays, shape ``(nfreq, ny, nx)``) and how they were made.

    ``snapshot`` and ``trace_options`` let the Result's diagnostics retrace the same rays.
    """

    __slots__ = ()


class _DefaultTolerance(float):
    """The value of ``trace``'s ``tolerance`` when none is given: a plain float, marked as the default.

    Routes without the split (bricks, dask, AMR, file-backed grids) and
    grids whose per-cell state does not fit in memory fall back to one ray
    lattice with a warning when the tolerance is the default, instead of
    the costly whole-lattice refinement an explicit ``tolerance`` asks for.
    """

    __slots__ = ()


#: ``trace``'s default relative error per oblique pixel.
DEFAULT_TOLERANCE = _DefaultTolerance(1e-2)
# Kept for code written before the default existed: the same value.
SUGGESTED_TOLERANCE = 1e-2
# Pixels fainter than this fraction of an image's peak are not held to the tolerance.
PIXEL_FLOOR = 1e-3
# The error estimate is this times the difference between lattices of s and 2s rays per cell:
# with an error that halves per doubling the difference equals the finer image's error; the
# factor covers error ratios up to 3/4 (slower, uneven convergence at cell edges, measured in
# tests/test_pixel_accuracy.py, where the difference alone fell 1.5x short of the error in one case).
ESTIMATE_FACTOR = 2.0
# Most rays per cell side the refinement of an oblique lattice goes to.
MAX_SUPERSAMPLE = 32

# Opacity scale of an absorption-free trace: alpha -> eps alpha at fixed j_nu, then I / eps.
_THIN_SCALE = 1e-30


class FrequencyTables:
    """Per-frequency constants the kernels need (all cgs); ``opacity_scale`` multiplies alpha_nu.

    ``gtab`` (2, nfreq, n_T) holds the Gaunt factor for ion charges 1 and 2;
    ``em_ions`` chooses the emission measure the kernels sum (False: ``n_e^2``,
    True: ``n_e x ion term``; see :data:`EM_DEFINITIONS`).
    """

    def __init__(self, nu_hz, opacity_scale=1.0, em_ions=False):
        self.nu = np.ascontiguousarray(nu_hz, float)
        self.hk = H_OVER_K * self.nu  # h nu / k  (K)
        # R&L 5.18b prefactor times nu^-3
        self.alpha_pref = ALPHA_FF_PREFACTOR / self.nu**3 * opacity_scale
        # Planck prefactor 2 h nu^3 / c^2 and Rayleigh-Jeans factor 2 nu^2 k / c^2 (= the former / (h nu / k))
        self.b_pref = np.ascontiguousarray([2.0 * H * self.nu**3 / C**2, 2.0 * H * self.nu**3 / C**2 / self.hk])
        self.log_t0, dlog_t, g1 = log_temperature_table(self.nu, charge=1)
        g2 = log_temperature_table(self.nu, charge=2)[2]
        self.gtab = np.ascontiguousarray(np.stack([g1, g2]))
        self.inv_dlog_t = 1.0 / dlog_t
        self.em_ions = bool(em_ions)

    def args(self):
        """The tables as the kernels take them, in their argument order."""
        return (self.log_t0, self.inv_dlog_t, self.gtab, self.hk, self.alpha_pref, self.b_pref, self.em_ions)

    def subset(self, part):
        """The tables of the frequencies ``part`` (a slice) alone."""
        out = copy.copy(self)
        out.nu, out.hk, out.alpha_pref = self.nu[part], self.hk[part], self.alpha_pref[part]
        out.b_pref = np.ascontiguousarray(self.b_pref[:, part])
        out.gtab = np.ascontiguousarray(self.gtab[:, part])
        return out


def _em_definition(value):
    if not isinstance(value, str) or value not in EM_DEFINITIONS:
        raise InputError(
            f"emission_measure: expected one of {sorted(EM_DEFINITIONS)} ('electrons': "
            f"int n_e^2 dl, 'ion_term': int n_e sum Z^2 n_i dl), got {value!r}"
        )
    return value


def trace_images(
    snapshot,
    view,
    frequencies,
    *,
    background=None,
    supersample=None,
    tolerance=DEFAULT_TOLERANCE,
    brick_size=None,
    max_memory=None,
    client=None,
    absorption=True,
    emission_measure="electrons",
):
    """The images of a trace, before they become a `~rtrace.Result`: a :class:`TracedImages`.

    Parameters as :func:`rtrace.trace` (its docstring is the contract); that function wraps this one.
    """
    nu = parse_frequencies(frequencies, "frequencies")
    bg, bg_info = background_from_spec(background, nu)
    if supersample is not None:
        if (
            isinstance(supersample, (bool, np.bool_))
            or not isinstance(supersample, numbers.Integral)
            or supersample < 1
        ):
            raise InputError(f"supersample: must be a positive int (rays per cell), got {supersample!r}")
        supersample = int(supersample)
    _check_plasma_frequency(snapshot, nu)
    edge = None if brick_size is None else _bricks.check_brick_size(brick_size)
    budget = None if max_memory is None else _bricks.parse_memory(max_memory)
    if client is not None and not (hasattr(client, "submit") and hasattr(client, "scatter")):
        raise InputError(f"client: expected a dask.distributed.Client, got {type(client).__name__}")
    default_tolerance = isinstance(tolerance, _DefaultTolerance)
    tolerance = None if tolerance is None else _check_tolerance(tolerance)
    emission_measure = _em_definition(emission_measure)
    tables = FrequencyTables(nu, 1.0 if absorption else _THIN_SCALE, em_ions=emission_measure == "ion_term")
    center, pix = view.resolve(snapshot)
    run = dict(
        snapshot=snapshot,
        view=view,
        center=center,
        pix=pix,
        tables=tables,
        edge=edge,
        budget=budget,
        client=client,
        absorption=absorption,
        bg=bg,
    )
    if view.los_axis() is not None:
        seg, nrays, _ = _trace_lattice(supersample or 1, **run)
        pixel_error = PixelError(0.0, 1, tolerance, PIXEL_FLOOR, True)
    elif supersample is not None or tolerance is None:
        supersample = supersample or 1
        seg, nrays, _ = _trace_lattice(supersample, **run)
        pixel_error = PixelError(float("nan"), supersample, None, PIXEL_FLOOR, False)
    elif _can_split(snapshot, edge, budget, client) and (not default_tolerance or _split_fits(snapshot, nu)):
        seg, nrays, pixel_error = _split(tolerance, run)
    elif default_tolerance:
        _warn_unrefined(snapshot, edge, budget, client, nu)
        seg, nrays, _ = _trace_lattice(1, **run)
        pixel_error = PixelError(float("nan"), 1, None, PIXEL_FLOOR, False)
    else:
        seg, nrays, pixel_error = _refine(tolerance, run)
    provenance = dict(
        snapshot.provenance,
        checksum=snapshot.checksum(),
        view=view.describe(),
        background="none" if background is None else str(background),
        physics=PHYSICS,
        emission_measure=EM_DEFINITIONS[emission_measure],
    )
    if not absorption:
        provenance["absorption"] = "off (emission only)"
    if pixel_error.tolerance is not None and view.los_axis() is None:
        provenance["pixel_error"] = pixel_error.describe()
    if pixel_error.tolerance is not None and view.los_axis() is None:
        lattice = dict(tolerance=pixel_error.tolerance)  # the same accuracy, not the same rays
    else:
        lattice = dict(supersample=pixel_error.supersample)
    return TracedImages(
        seg.intensity,
        seg.tau,
        seg.em,
        nu,
        view,
        pix,
        center,
        provenance,
        nrays,
        bg,
        bg_info,
        pixel_error,
        snapshot,
        dict(lattice, brick_size=brick_size, max_memory=max_memory, emission_measure=emission_measure),
    )


def _trace_lattice(supersample, *, snapshot, view, center, pix, tables, edge, budget, client, absorption, bg):
    """One trace on the lattice of ``supersample`` rays per cell: ``(image Segment, rays per pixel, route)``."""
    if view.los_axis() is not None:
        route = _AxisRoute(snapshot, view, center, pix, tables)
    else:
        route = _ObliqueRoute(snapshot, view, center, pix, tables, int(supersample))
    _check_ray_memory(route, int(supersample))
    in_memory = getattr(snapshot, "in_memory", True)
    if getattr(snapshot, "is_amr", False):
        if edge is not None or budget is not None or client is not None:
            raise InputError(
                "brick_size / max_memory / client: not available for AMR snapshots; their leaves "
                "are traced in memory, one at a time"
            )
        patch = _trace_amr(route, snapshot, view.los)
    elif in_memory and edge is None and budget is None and client is None:
        zero = np.zeros(3, np.int64)
        whole = np.asarray(snapshot.shape, np.int64)
        arrays = (snapshot._ne, snapshot._ni, snapshot._t)
        if isinstance(route, _ObliqueRoute):
            patch = route.trace_brick(
                zero,
                whole,
                arrays,
                zero,
                product=cell_cache.emission_product(snapshot),
                blocks=cell_cache.emitting_blocks(snapshot),
                ratio=cell_cache.emission_ratio(snapshot),
            )
        else:
            patch = route.trace_brick(zero, whole, arrays, zero)
    else:
        source = snapshot.field_source()
        edge = _brick_edge(route, source, edge, budget)
        order = _bricks.front_to_back(snapshot.shape, edge, view.los)
        if client is not None:
            from . import parallel

            patch = parallel.trace_bricks(client, route, source, order)
        else:
            patch = _trace_in_sequence(route, source, order)
    if not absorption and patch is not None:
        patch.seg.intensity /= _THIN_SCALE  # I = sum S dtau' / eps = int j ds (1 + O(eps tau))
        patch.seg.tau[...] = 0.0
    seg, nrays = route.finish(patch, bg)
    return seg, nrays, route


# -- error-controlled pixels on oblique views ----------------------------------------------------


def _check_tolerance(tolerance):
    if (
        isinstance(tolerance, (bool, np.bool_))
        or not isinstance(tolerance, numbers.Real)
        or not math.isfinite(tolerance)
        or not 0.0 < tolerance < 1.0
    ):
        raise InputError(
            f"tolerance: must be a number with 0 < tolerance < 1 (relative error per pixel), got {tolerance!r}"
        )
    return float(tolerance)


def _relative_difference(coarse, fine, bg, floor=PIXEL_FLOOR):
    """Largest ``|X_coarse - X_fine| / |X_fine|`` over pixels with ``|X_fine| >= floor * max |X_fine|``.

    ``X`` runs over the background-subtracted intensity of each frequency
    and the emission measure (``coarse`` and ``fine`` are image Segments).
    Images that are zero everywhere contribute nothing.
    """
    worst = 0.0
    planes = [(c - b, f - b) for c, f, b in zip(coarse.intensity, fine.intensity, bg, strict=True)]
    planes.append((coarse.em, fine.em))
    for c, f in planes:
        size = np.abs(f)
        peak = size.max() if size.size else 0.0
        if not peak > 0.0:
            continue
        bright = size >= floor * peak
        worst = max(worst, float(np.max(np.abs(c[bright] - f[bright]) / size[bright])))
    return worst


def _refine(tolerance, run):
    """Double the lattice density until two successive images agree to ``tolerance`` per pixel.

    Returns the finer image of the last pair, its rays per pixel and a
    :class:`PixelError`. :data:`ESTIMATE_FACTOR` times the difference
    between lattices of ``s`` and ``2 s`` rays per cell is taken as the
    error of the finer one: the pixel quadrature of a field that is
    piecewise constant on cells converges about linearly in the ray
    spacing, so the finer image's error is about that difference (tests/test_pixel_accuracy.py checks it against an
    independent reference on grids with cell-to-cell structure; it is an
    estimate, not a guaranteed bound). Refinement stops at :data:`MAX_SUPERSAMPLE`
    rays per cell or when the next lattice would not fit in memory, with a
    :class:`PixelAccuracyWarning` giving the error reached.
    """
    seg, nrays, route = _trace_lattice(1, **run)
    s = max(route.m)
    estimate, why = float("inf"), None
    while True:
        nxt = 2 * s
        if nxt > MAX_SUPERSAMPLE:
            why = f"the cap of {MAX_SUPERSAMPLE} rays per cell side was reached"
            break
        try:
            fine, fine_rays, _ = _trace_lattice(nxt, **run)
        except InputError as err:
            if "memory" not in str(err).lower():
                raise
            why = f"a lattice of {nxt} rays per cell side would not fit in memory"
            break
        estimate = ESTIMATE_FACTOR * _relative_difference(seg, fine, run["bg"], PIXEL_FLOOR)
        seg, nrays, s = fine, fine_rays, nxt
        if estimate <= tolerance:
            return seg, nrays, PixelError(estimate, s, tolerance, PIXEL_FLOOR, True)
    warn_user(
        f"tolerance: pixels of this oblique view reached a relative error estimate of {estimate:.3g} "
        f"at supersample={s}, not the {tolerance:g} asked for ({why}); pass a larger tolerance, a "
        "coarser npix or an explicit supersample",
        PixelAccuracyWarning,
    )
    return seg, nrays, PixelError(estimate, s, tolerance, PIXEL_FLOOR, False)


def _can_split(snapshot, edge, budget, client):
    """Whether the exact-projection split (:mod:`.oblique_split`) applies: a whole in-memory uniform grid."""
    return (
        getattr(snapshot, "in_memory", True)
        and not getattr(snapshot, "is_amr", False)
        and edge is None
        and budget is None
        and client is None
    )


def _split_fits(snapshot, nu):
    """Whether the split's per-cell state for one frequency fits in the memory at hand (:func:`split_state_bytes`)."""
    return fits_in_memory(split_state_bytes(cell_cache.emitting_blocks(snapshot), 1))


def _frequency_chunk(snapshot, nfreq):
    """Most frequencies whose split state fits in memory together (at least 1: the split then says it does not fit)."""
    blocks = cell_cache.emitting_blocks(snapshot)
    k = nfreq
    while k > 1 and not fits_in_memory(split_state_bytes(blocks, k)):
        k = (k + 1) // 2
    return k


def _warn_unrefined(snapshot, edge, budget, client, nu):
    """Say why an oblique view with the default tolerance is traced on one lattice without an estimate."""
    if getattr(snapshot, "is_amr", False):
        why = "AMR snapshots are traced leaf by leaf"
    elif client is not None:
        why = "the grid is traced as dask tasks"
    elif not getattr(snapshot, "in_memory", True):
        why = "the snapshot is read from its file in bricks"
    elif edge is not None or budget is not None:
        why = "the grid is traced in bricks (brick_size / max_memory)"
    else:
        need = split_state_bytes(cell_cache.emitting_blocks(snapshot), 1)
        why = (
            f"its per-cell state ({format_bytes(need)} even for one frequency at a time) does not fit in the "
            "memory available"
        )
    warn_user(
        f"tolerance: this oblique view is traced on one lattice of 1 ray per cell with no pixel error "
        f"estimate, because the error-controlled split needs the whole grid in memory and {why}; pixels "
        "can be several % off (more on faint edges) where the gas has cell-scale structure. Pass an "
        "explicit tolerance to refine the whole lattice (about 4x the time per doubling), an explicit "
        "supersample, or fewer frequencies",
        PixelAccuracyWarning,
    )


def _split(tolerance, run):
    """An oblique view by the split into an exact cell projection and a lattice remainder.

    The frequencies are split in as few groups as let the per-cell state fit
    in memory (:func:`_frequency_chunk`); each group is refined on its own, so
    a group's images are those of a trace of its frequencies alone.
    """
    snapshot, tables, bg = run["snapshot"], run["tables"], run["bg"]
    nf = len(tables.nu)
    step = _frequency_chunk(snapshot, nf)
    parts = [
        _split_frequencies(tolerance, run, tables.subset(slice(lo, lo + step)), bg[lo : lo + step])
        for lo in range(0, nf, step)
    ]
    intensity = np.concatenate([p[0].intensity for p in parts])
    tau = np.concatenate([p[0].tau for p in parts])
    seg = Segment(intensity, tau, parts[0][0].em)
    rays = max(p[1] for p in parts)
    m = max(p[2] for p in parts)
    estimate = max(p[3] for p in parts)
    converged = all(p[4] for p in parts)
    stopped = "; ".join(sorted({p[5] for p in parts if p[5]}))
    if tolerance is not None and not converged:
        warn_user(
            f"tolerance: pixels of this oblique view reached a relative error estimate of {estimate:.3g} "
            f"at supersample={m}, not the {tolerance:g} asked for ({stopped}); pass a larger tolerance, "
            "a coarser npix or an explicit supersample",
            PixelAccuracyWarning,
        )
    return seg, rays, PixelError(estimate, m, tolerance, PIXEL_FLOOR, converged)


def _split_frequencies(tolerance, run, tables, bg):
    """:func:`split_trace` of the frequencies of ``tables``.

    Returns ``(Segment, rays per pixel, m, estimate, converged, why refinement stopped)``.
    """
    snapshot = run["snapshot"]
    zero = np.zeros(3, np.int64)
    whole = np.asarray(snapshot.shape, np.int64)
    arrays = (snapshot._ne, snapshot._ni, snapshot._t)

    def make_route(m):
        route = _ObliqueRoute(snapshot, run["view"], run["center"], run["pix"], tables, m)
        if m == 1:  # the first lattice is traced whole; finer ones only where pixels need them
            _check_ray_memory(route, m)
        return route

    def trace_rays(route):
        patch = route.trace_brick(
            zero,
            whole,
            arrays,
            zero,
            product=cell_cache.emission_product(snapshot),
            blocks=cell_cache.emitting_blocks(snapshot),
            ratio=cell_cache.emission_ratio(snapshot),
        )
        return _full_segment(patch, route.nfreq, route.ray_shape)

    cells = (
        cell_cache.emission_product(snapshot),
        snapshot._t,
        cell_cache.emitting_blocks(snapshot),
        cell_cache.emission_ratio(snapshot),
    )
    images, m, estimate, converged, stopped = split_trace(
        make_route,
        trace_rays,
        cells,
        bg,
        tolerance=tolerance,
        floor=PIXEL_FLOOR,
        max_supersample=MAX_SUPERSAMPLE,
        thin_scale=None if run["absorption"] else _THIN_SCALE,
    )
    return images.segment(bg), images.rays, m, estimate, converged, stopped


def _check_plasma_frequency(snapshot, nu):
    """Warn if the lowest frequency is near or below the plasma frequency of some cells (reads no file)."""
    if getattr(snapshot, "is_amr", False):
        check_plasma_frequency(nu, [g.ne for g in snapshot.grids])
    elif getattr(snapshot, "in_memory", True):
        if isinstance(getattr(snapshot, "_ne", None), np.ndarray):
            check_plasma_frequency(nu, [snapshot._ne])
    else:
        ranges = getattr(snapshot, "_ranges", {}).get("electron_density")
        if ranges is not None:
            check_plasma_frequency(nu, largest=ranges[1])


def _check_ray_memory(route, supersample):
    """Refuse a trace whose per-ray state and images alone exceed the memory at hand (before any work).

    These live whatever the bricking: the accumulated segment of every ray and
    the images with the remap's temporaries (``_Route.finish_bytes``). A
    ``max_memory`` is checked in full by the brick planner (:func:`_brick_edge`).
    """
    rays = route.segment_bytes(route.ray_count)
    finish = route.finish_bytes()
    need = rays + finish
    ny, nx = route.image_shape
    images = trace_image_bytes(route.nfreq, ny * nx)
    if isinstance(route, _ObliqueRoute) and need - images > images:
        (n_a, n_b), (m_a, m_b) = route.ray_shape, route.m
        field = "supersample" if supersample > 1 else "npix"
        what = (
            f"a lattice of {n_a} x {n_b} rays ({m_a} x {m_b} per cell) over {route.nfreq} frequencies, "
            f"with {ny} x {nx} pixel images"
        )
        hint = (
            "use a smaller supersample"
            if supersample > 1
            else "use a smaller npix (pixels finer than a cell add rays on oblique views)"
        )
    else:
        field = "npix"
        what = (
            f"images of {ny} x {nx} pixels at {route.nfreq} frequencies ({format_bytes(images)}: "
            "intensity, optical depth and emission measure), with the per-ray state"
        )
        hint = "use a smaller npix or fewer frequencies (trace them in separate calls)"
    check_memory(need, field=field, what=what, hint=hint)


# -- bricked tracing ----------------------------------------------------------------------------

# Estimate of the per-ray arrays alive while one brick is traced and composited, in units of
# one (2 nfreq + 1) float64 segment per ray: the brick's patch, one lattice phase's kernel
# output, and composite()'s result plus its exp(-tau) temporary.
_BRICK_SEGMENTS = 4


def _brick_edge(route, source, edge, budget):
    """Brick edge (cells) from ``brick_size`` and/or ``max_memory``."""
    shape = source.shape
    if budget is None:
        return edge if edge is not None else min(_bricks.DEFAULT_BRICK, max(shape))

    def working_set(b):
        # the accumulated per-ray state lives throughout; bricks come and go; the images
        # and the remap's temporaries exist only after the last brick is freed
        cells = int(np.prod(np.minimum(shape, b)))
        brick = (
            cells * source.bytes_per_cell
            + source.scratch_bytes
            + _BRICK_SEGMENTS * route.segment_bytes(route.brick_ray_count(b))
            + route.table_bytes(b)
        )
        return route.segment_bytes(route.ray_count) + max(brick, route.finish_bytes())

    what = "one brick of the fields, the per-ray segment state and the images"
    if edge is None:
        return _bricks.choose_brick_edge(shape, budget, working_set, what)
    need = working_set(edge)
    if need > budget:
        raise InputError(
            f"max_memory: brick_size={edge} needs about {need / 1e6:.3g} MB ({what}), "
            f"more than the {budget / 1e6:.3g} MB allowed; give a smaller brick_size "
            "or leave it out to have one chosen"
        )
    return edge


def _trace_in_sequence(route, source, order):
    """Read and trace the bricks one at a time (front to back), compositing as they come."""
    acc = Segment.empty(route.nfreq, route.ray_shape)
    for lo, hi in order:
        if route.brick_rays(lo, hi) is None:
            continue  # no ray of this view reaches the brick: do not read it
        arrays = source.read(lo, hi)
        patch = route.trace_brick(lo, hi, arrays, lo)
        del arrays  # free the brick before the next one is read
        if patch is not None:
            composite_into(acc, (0, 0), patch)
    return Patch((0, 0), acc)


def _trace_amr(route, snap, los):
    """Trace an AMR snapshot's leaves front to back, each at its own level's resolution.

    The ray grid is that of the finest level; a level whose cells are ``r``
    finest cells wide uses the same rays (:meth:`coarsened`), so the leaves'
    patches composite exactly.
    """
    from ..amr import front_to_back

    acc = Segment.empty(route.nfreq, route.ray_shape)
    routes = {}
    for leaf in front_to_back(snap.tree, los):
        r = snap.scale(leaf.level)
        if r not in routes:
            routes[r] = route.coarsened(r)
        level_route = routes[r]
        lo, hi = leaf.lo // r, leaf.hi // r  # the leaf in its level's cell indices
        if level_route.brick_rays(lo, hi) is None:
            continue
        patch = level_route.trace_brick(lo, hi, snap.leaf_arrays(leaf), lo)
        if patch is not None:
            composite_into(acc, (0, 0), patch)
    return Patch((0, 0), acc)


def _full_segment(patch, nfreq, ray_shape):
    """The patch spread over the whole ray grid (identity where it has no rays)."""
    if patch is not None and tuple(patch.start) == (0, 0) and patch.seg.em.shape == tuple(ray_shape):
        return patch.seg
    full = Segment.empty(nfreq, ray_shape)
    if patch is not None:
        composite_into(full, (0, 0), patch)
    return full


class _Route:
    """What both routes share: sizes for the memory planner."""

    def segment_bytes(self, nrays):
        """Bytes of one float64 segment (I, tau per frequency; EM) for ``nrays`` rays."""
        return (2 * self.nfreq + 1) * 8 * int(nrays)

    @property
    def ray_count(self):
        return int(np.prod(self.ray_shape))

    def finish_bytes(self):
        """Images plus the remap's temporaries (values, background terms, tube positions)."""
        npix = int(np.prod(self.image_shape))
        rays = self.ray_count
        return trace_image_bytes(self.nfreq, npix) + (3 * self.nfreq + 1 + 8) * 8 * rays

    def table_bytes(self, edge):
        return 0


# -- axis-aligned route -------------------------------------------------------------------------


class _AxisRoute(_Route):
    """Rays are the grid's columns along the line of sight; the ray grid is the other two axes."""

    def __init__(self, snap, view, center, pix, tables):
        la, ls = view.los_axis()
        self.la, self.forward = la, ls > 0
        self.trans = {2: (0, 1), 1: (0, 2), 0: (1, 2)}[la]
        a, b = self.trans
        self.ds = float(snap.cell_size[la])
        self.cell = np.asarray(snap.cell_size, float)
        self.origin = np.asarray(snap.origin, float)
        self.center, self.pix = np.asarray(center, float), float(pix)
        self.west, self.north = np.asarray(view.west, float), np.asarray(view.north, float)
        self.image_shape = tuple(view.shape)
        self.tables = tables
        self.nfreq = len(tables.nu)
        self.ray_shape = (int(snap.shape[a]), int(snap.shape[b]))

    def brick_ray_count(self, edge):
        return min(edge, self.ray_shape[0]) * min(edge, self.ray_shape[1])

    def coarsened(self, r):
        """The route for cells ``r`` times larger on every axis (an AMR level), on the same rays."""
        return self if r == 1 else _CoarseAxisRoute(self, r)

    def brick_rays(self, lo, hi):
        a, b = self.trans
        return (int(lo[a]), int(lo[b])), (int(hi[a]), int(hi[b]))

    def trace_brick(self, lo, hi, arrays, off):
        """Column segments of the cells ``lo <= index < hi`` given as that box's own arrays.

        ``off`` is unused: a column kernel needs no global index (the patch
        position carries it).
        """
        ne, ni, t = arrays
        if ne.shape != tuple(int(h - l) for l, h in zip(lo, hi, strict=True)):
            raise ValueError("axis route: brick arrays do not match the brick bounds")
        if self.la == 2:
            # the single-frequency kernel keeps its ray sums in registers; choosing here, not inside a
            # kernel, means a run compiles only the one it uses
            arrs, kern = (
                (ne, ni, t),
                (kernels.one_frequency_along_last_axis if self.nfreq == 1 else kernels.trace_along_last_axis),
            )
        elif self.la == 1:
            arrs, kern = (ne, ni, t), kernels.trace_along_middle_axis
        else:
            arrs, kern = tuple(x.transpose(1, 0, 2) for x in (ne, ni, t)), kernels.trace_along_middle_axis
        (r0, s0), (r1, s1) = self.brick_rays(lo, hi)
        seg = Segment.empty(self.nfreq, (r1 - r0, s1 - s0))
        kern(*arrs, self.ds, self.forward, *self.tables.args(), seg.intensity, seg.tau, seg.em)
        return Patch((r0, s0), seg)

    def finish(self, patch, bg):
        """Clip every column's square footprint onto the pixels: ``(image Segment, rays per pixel)``."""
        nfreq = self.nfreq
        seg = _full_segment(patch, nfreq, self.ray_shape)
        a, b = self.trans
        cell = self.cell
        centers = np.zeros(self.ray_shape + (3,))
        centers[..., a] = self.origin[a] + (np.arange(self.ray_shape[0])[:, None] + 0.5) * cell[a]
        centers[..., b] = self.origin[b] + (np.arange(self.ray_shape[1])[None, :] + 0.5) * cell[b]
        centers[..., self.la] = self.center[self.la]
        cols, rows = _pixel_coordinates(
            centers.reshape(-1, 3), self.center, self.west, self.north, self.image_shape, self.pix
        )
        e1 = cell[a] * np.array([self.west[a], self.north[a]]) / self.pix
        e2 = cell[b] * np.array([self.west[b], self.north[b]]) / self.pix
        flat = Segment(seg.intensity.reshape(nfreq, -1), seg.tau.reshape(nfreq, -1), seg.em.ravel())
        planes = np.zeros((2 * nfreq + 1,) + self.image_shape)
        _splat(flat, bg, cols, rows, e1, e2, planes)
        return _planes_to_segment(planes, bg), 1


class _CoarseAxisRoute:
    """Columns of cells ``r`` finest cells wide, spread onto the finest level's columns.

    Every finest column inside a coarse one crosses the same cells over the
    same path lengths, so its segment is the coarse column's, exactly.
    """

    def __init__(self, fine, r):
        self.r = r
        self.coarse = copy.copy(fine)
        self.coarse.ds = fine.ds * r
        self.nfreq = fine.nfreq

    def brick_rays(self, lo, hi):
        (r0, s0), (r1, s1) = self.coarse.brick_rays(lo, hi)
        r = self.r
        return (r0 * r, s0 * r), (r1 * r, s1 * r)

    def trace_brick(self, lo, hi, arrays, off):
        patch = self.coarse.trace_brick(lo, hi, arrays, off)
        r = self.r

        def spread(x):
            return np.repeat(np.repeat(x, r, axis=-2), r, axis=-1)

        seg = Segment(spread(patch.seg.intensity), spread(patch.seg.tau), spread(patch.seg.em))
        return Patch((patch.start[0] * r, patch.start[1] * r), seg)


# -- oblique route ------------------------------------------------------------------------------


def _lattice_range(lo, hi, spacing):
    """Integer lattice indices i with (i + 0.5) * spacing covering [lo, hi]."""
    return int(math.floor(lo / spacing - 0.5)), int(math.ceil(hi / spacing - 0.5))


class _ObliqueRoute(_Route):
    """Rays on a lattice commensurate with the grid; the ray grid is the sub-lattice (I, J).

    Axes are renamed ``(a, b, c)`` with ``c`` most nearly parallel to the
    rays. Sub-lattice index ``I`` on axis a is lattice phase ``I mod m_a`` of
    cell column ``I // m_a``; ray ``(I, J)`` crosses the plane ``x_c = 0``
    (grid coordinates) at ``((I + 1/2) h_a, (J + 1/2) h_b)``. Ray grid entry
    ``(r, s)`` is ``(I, J) = (ia0 + r, ib0 + s)``.
    """

    def __init__(self, snap, view, center, pix, tables, supersample):
        ny, nx = view.shape
        cell = np.asarray(snap.cell_size, float)
        los = np.asarray(view.los, float)
        c = int(np.argmax(np.abs(los)))
        a, b = [ax for ax in range(3) if ax != c]
        size = np.asarray(snap.shape) * cell
        # lattice in the plane x_c = 0 (grid coordinates): m rays per cell on axes a and b
        m_a = max(supersample, math.ceil(cell[a] / pix - 1e-9))
        m_b = max(supersample, math.ceil(cell[b] / pix - 1e-9))
        h_a, h_b = cell[a] / m_a, cell[b] / m_b
        rho_a, rho_b = los[a] / los[c], los[b] / los[c]
        shift_a, shift_b = rho_a * size[c], rho_b * size[c]  # drift of a ray across the grid's depth
        ia = _lattice_range(-max(shift_a, 0.0), size[a] - min(shift_a, 0.0), h_a)
        ib = _lattice_range(-max(shift_b, 0.0), size[b] - min(shift_b, 0.0), h_b)
        # pixel coordinates are affine in the sub-lattice indices: (col, row) = p0 + I e1 + J e2
        rel_center = center - snap.origin
        e1 = h_a * np.array([view.west[a], view.north[a]]) / pix
        e2 = h_b * np.array([view.west[b], view.north[b]]) / pix
        origin_pt = np.zeros(3)
        origin_pt[a], origin_pt[b] = 0.5 * h_a, 0.5 * h_b
        p0 = np.array(_pixel_coordinates(origin_pt, rel_center, view.west, view.north, view.shape, pix))
        # keep only the part of the lattice whose tubes can touch the image
        inv = np.linalg.inv(np.column_stack([e1, e2]))
        margin = np.abs(e1) + np.abs(e2)
        corners = np.array(
            [
                [-margin[0], -margin[1]],
                [nx + margin[0], -margin[1]],
                [-margin[0], ny + margin[1]],
                [nx + margin[0], ny + margin[1]],
            ]
        )
        ij = (corners - p0) @ inv.T
        self.ia = (max(ia[0], int(math.floor(ij[:, 0].min()))), min(ia[1], int(math.ceil(ij[:, 0].max()))))
        self.ib = (max(ib[0], int(math.floor(ij[:, 1].min()))), min(ib[1], int(math.ceil(ij[:, 1].max()))))
        self.ray_shape = (max(self.ia[1] - self.ia[0] + 1, 0), max(self.ib[1] - self.ib[0] + 1, 0))
        if 0 in self.ray_shape:
            self.ray_shape = (0, 0)
        self.order = np.array([a, b, c], np.int64)
        self.cell_abc = cell[[a, b, c]]
        self.m = (m_a, m_b)
        self.h = (h_a, h_b)
        self.rho = (rho_a, rho_b)
        self.abs_lc = abs(los[c])
        self.forward = bool(los[c] > 0)
        self.max_seg = 3 + math.ceil(abs(rho_a) * cell[c] / cell[a]) + math.ceil(abs(rho_b) * cell[c] / cell[b])
        self.e1, self.e2, self.p0 = e1, e2, p0
        self.image_shape = tuple(view.shape)
        self.tables = tables
        self.nfreq = len(tables.nu)

    def coarsened(self, r):
        """The route for cells ``r`` times larger on every axis (an AMR level), on the same rays.

        The lattice is unchanged (same spacing, same origin), so a coarse
        cell holds ``r m`` lattice phases per axis where a finest cell holds
        ``m``; ray indices, and hence patches, are shared by all levels.
        """
        if r == 1:
            return self
        out = copy.copy(self)
        out.cell_abc = self.cell_abc * r
        out.m = (self.m[0] * r, self.m[1] * r)
        return out

    def _ray_span(self, axis, lo_t, hi_t):
        """Sub-lattice indices (inclusive) of rays that can visit cells lo_t..hi_t on ``axis`` (0 = a, 1 = b)."""
        h, rho = self.h[axis], self.rho[axis]
        cell, cell_c = self.cell_abc[axis], self.cell_abc[2]
        drift = (rho * lo_t[2] * cell_c, rho * hi_t[2] * cell_c)
        # a ray at (I + 1/2) h + drift(x_c) over the brick's depth must meet [lo, hi) cells;
        # one lattice step of margin each side absorbs rounding (extra rays stay the identity)
        first = math.floor((lo_t[axis] * cell - max(drift)) / h - 0.5) - 1
        last = math.ceil((hi_t[axis] * cell - min(drift)) / h - 0.5) + 1
        rng = self.ia if axis == 0 else self.ib
        return max(first, rng[0]), min(last, rng[1])

    def brick_rays(self, lo, hi):
        """Ray-grid rectangle ``((r0, s0), (r1, s1))`` of rays that can reach the brick, or None."""
        if self.ray_shape == (0, 0):
            return None
        lo_t, hi_t = np.asarray(lo)[self.order], np.asarray(hi)[self.order]
        i_first, i_last = self._ray_span(0, lo_t, hi_t)
        j_first, j_last = self._ray_span(1, lo_t, hi_t)
        if i_last < i_first or j_last < j_first:
            return None
        return ((i_first - self.ia[0], j_first - self.ib[0]), (i_last - self.ia[0] + 1, j_last - self.ib[0] + 1))

    def brick_ray_count(self, edge):
        """Upper bound on the rays :meth:`brick_rays` gives a cubic brick of ``edge`` cells."""
        n = []
        for axis in (0, 1):
            span = edge * self.cell_abc[axis] + abs(self.rho[axis]) * edge * self.cell_abc[2]
            n.append(min(math.ceil(span / self.h[axis]) + 4, self.ray_shape[axis]))
        return n[0] * n[1]

    def table_bytes(self, edge):
        # the layer tables, and the brick's n_e x ion term (4 or 8 bytes a cell; counted as 8)
        return 3 * 8 * edge * self.max_seg + 8 * edge**3

    def trace_brick(self, lo, hi, arrays, off, product=None, blocks=None, ratio=False):
        """Segments of the rays reaching cells ``lo <= index < hi``; ``arrays`` start at global index ``off``.

        ``arrays`` (n_e, ion term, T) may be the whole grid (``off`` = 0) or
        the brick's own sub-array (``off`` = ``lo``); ``product`` is their
        ``n_e x ion term`` and ``blocks`` its :func:`kernels.emitting_blocks`
        if already at hand (:func:`cell_cache.emission_product`,
        :func:`cell_cache.emitting_blocks`), else they are formed for the brick;
        likewise ``ratio`` (:func:`cell_cache.ratio_of`, which may be None; False:
        not given).
        """
        rect = self.brick_rays(lo, hi)
        if rect is None:
            return None
        if product is None:
            product = cell_cache.product_of(arrays[0], arrays[1])
            blocks = None
        if blocks is None:
            blocks = kernels.emitting_blocks(product)
        if ratio is False:
            ratio = cell_cache.ratio_of(arrays[0], arrays[1])
        ratio_t = None if ratio is None else ratio.transpose(self.order)
        (r0, s0), (r1, s1) = rect
        i_first, i_last = r0 + self.ia[0], r1 - 1 + self.ia[0]
        j_first, j_last = s0 + self.ib[0], s1 - 1 + self.ib[0]
        order = self.order
        arrs = (product.transpose(order), arrays[2].transpose(order), blocks.transpose(order))
        lo_t = np.ascontiguousarray(np.asarray(lo, np.int64)[order])
        hi_t = np.ascontiguousarray(np.asarray(hi, np.int64)[order])
        off_t = np.ascontiguousarray(np.asarray(off, np.int64)[order])
        (m_a, m_b), (rho_a, rho_b) = self.m, self.rho
        cell_a, cell_b, cell_c = self.cell_abc
        nfreq = self.nfreq
        seg = Segment.empty(nfreq, (r1 - r0, s1 - s0))
        for pa, pb, i_lo, n_i, j_lo, n_j, rows, cols in lattice_phases(self.m, i_first, i_last, j_first, j_last):
            segs = kernels.layer_segments(
                (pa + 0.5) / m_a,
                (pb + 0.5) / m_b,
                rho_a,
                rho_b,
                cell_a,
                cell_b,
                cell_c,
                self.abs_lc,
                lo_t[2],
                hi_t[2],
                self.forward,
                self.max_seg,
            )
            part = Segment.empty(nfreq, (1, n_i * n_j))
            kernels.trace_sheared(
                *arrs,
                lo_t,
                hi_t,
                off_t,
                lo_t[2],
                self.forward,
                i_lo,
                n_i,
                j_lo,
                n_j,
                *segs,
                *self.tables.args(),
                part.intensity,
                part.tau,
                part.em,
                ratio_t,
            )
            seg.intensity[:, rows, cols] = part.intensity.reshape(nfreq, n_i, n_j)
            seg.tau[:, rows, cols] = part.tau.reshape(nfreq, n_i, n_j)
            seg.em[rows, cols] = part.em.reshape(n_i, n_j)
        return Patch((r0, s0), seg)

    def finish(self, patch, bg):
        """Remap every ray's tube onto the pixels: ``(image Segment, rays per pixel)``."""
        ny, nx = self.image_shape
        if self.ray_shape == (0, 0):
            return _planes_to_segment(np.zeros((2 * self.nfreq + 1, ny, nx)), bg), 0.0
        seg = _full_segment(patch, self.nfreq, self.ray_shape)
        delta = seg.intensity + bg[:, None, None] * np.expm1(-seg.tau)  # I_seg + I_bg e^{-tau} - I_bg
        planes = remap_rays(self, np.concatenate([delta, seg.tau, seg.em[None]]))
        return _planes_to_segment(planes, bg), self.ray_count / (nx * ny)


def _splat(seg, bg, cols, rows, e1, e2, planes):
    """Add tubes (``seg``: (nfreq, nray) and (nray,)) onto ``planes`` (2 nfreq + 1, ny, nx).

    The planes hold, per pixel, the footprint mean of ``I - I_bg``, of tau and
    of EM; :func:`_planes_to_segment` adds the background back, so pixels no
    tube covers see the background alone.
    """
    delta = seg.intensity + bg[:, None] * np.expm1(-seg.tau)  # I_seg + I_bg e^{-tau} - I_bg
    values = np.ascontiguousarray(np.concatenate([delta, seg.tau, seg.em[None, :]]))
    remap_parallelograms(
        np.ascontiguousarray(cols, float),
        np.ascontiguousarray(rows, float),
        np.asarray(e1, float),
        np.asarray(e2, float),
        values,
        planes,
    )


def _planes_to_segment(planes, bg):
    nfreq = len(bg)
    return Segment(planes[:nfreq] + bg[:, None, None], planes[nfreq : 2 * nfreq], planes[-1])


def _pixel_coordinates(points, center, west, north, image_shape, pix):
    """Image-plane position (column, row), in pixel units, of points (..., 3) in cm."""
    ny, nx = image_shape
    rel = points - center
    return rel @ west / pix + nx / 2, rel @ north / pix + ny / 2
