"""Adaptive-mesh snapshots traced at native resolution.

A block-structured AMR hierarchy (grids on levels 0..L, each level refined
by ``refine_by`` on every axis) is cut into non-overlapping uniform boxes,
*leaves*, each lying inside one grid of the finest level present there. The
cut is a binary space partition (a k-d tree) whose planes are grid
boundaries, so the leaves tile the domain with the finest available data
everywhere and nothing is resampled. Walking the tree with the near side of
every plane first gives the leaves in front-to-back order for any line of
sight: a ray crosses each plane at most once, from its far side to its near
side (Fuchs, Kedem & Naylor 1980, "On visible surface generation by a
priori tree structures", SIGGRAPH 80), which is what the associative
compositing of :mod:`rtrace.transfer.compositing` needs.

Index boxes are kept in units of the finest level's cells: a level-``l``
cell is ``R_l = refine_by ** (L - l)`` of them on a side. Every grid of
level ``l > 0`` must start and end on cell boundaries of level ``l - 1``
(proper alignment, common practice in block-structured AMR codes).
"""

import hashlib

import numpy as np

from .errors import InputError
from .physics.constants import PC
from .snapshot import GridGeometry

__all__ = ["AMRSnapshot", "Grid", "Leaf", "decompose", "front_to_back"]


class Grid:
    """One AMR grid: its level, index box and fields (cgs arrays, ``(nx, ny, nz)``).

    ``lo``, ``hi`` are in finest-level cell units; ``ne``, ``ni``, ``t`` are
    the electron density, ion term and temperature at the grid's own
    resolution.
    """

    def __init__(self, level, lo, hi, ne, ni, t, label=""):
        self.level = int(level)
        self.lo = np.asarray(lo, np.int64)
        self.hi = np.asarray(hi, np.int64)
        self.ne, self.ni, self.t = ne, ni, t
        self.label = label or "a grid"


class Leaf:
    """A uniform box of one grid: ``lo <= finest index < hi``, cells of that grid's level."""

    def __init__(self, grid, lo, hi):
        self.grid = grid
        self.lo = np.asarray(lo, np.int64)
        self.hi = np.asarray(hi, np.int64)

    @property
    def level(self):
        """Refinement level of the grid this leaf belongs to (0 the coarsest)."""
        return self.grid.level


class _Split:
    """A k-d tree node: ``low`` holds finest indices < ``plane`` on ``axis``, ``high`` the rest."""

    def __init__(self, axis, plane, low, high):
        self.axis, self.plane, self.low, self.high = axis, plane, low, high


def _overlaps(g, lo, hi):
    return bool(np.all(g.lo < hi) and np.all(g.hi > lo))


def _contains(g, lo, hi):
    return bool(np.all(g.lo <= lo) and np.all(g.hi >= hi))


def decompose(grids, domain_lo, domain_hi):
    """k-d tree of leaves tiling ``[domain_lo, domain_hi)`` (finest-level cell units).

    Parameters
    ----------
    grids : list of `Grid`
        The hierarchy; level-0 grids must cover the domain.
    domain_lo, domain_hi : array-like (3,) of int

    Returns
    -------
    tree
        A `Leaf` or a split node; see :func:`front_to_back`.

    Raises
    ------
    InputError
        Part of the domain no level-0 grid covers.
    """
    by_level = {}
    for g in grids:
        by_level.setdefault(g.level, []).append(g)
    return _node(
        np.asarray(domain_lo, np.int64), np.asarray(domain_hi, np.int64), -1, None, by_level.get(0, []), by_level
    )


def _node(lo, hi, level, grid, candidates, by_level):
    """The region ``[lo, hi)`` lies inside ``grid`` (level ``level``); ``candidates``: level + 1 grids."""
    cands = [g for g in candidates if _overlaps(g, lo, hi)]
    if not cands:
        if grid is None:
            raise InputError(
                f"AMR hierarchy: no level-0 grid covers the cells from {lo.tolist()} to "
                f"{hi.tolist()} (finest-level indices); level 0 must cover the domain"
            )
        return Leaf(grid, lo, hi)
    for g in cands:
        if _contains(g, lo, hi):
            return _node(lo, hi, level + 1, g, by_level.get(level + 2, []), by_level)
    # cut at the candidate boundary nearest the middle of the region's longest possible cut
    best = None
    for g in cands:
        for ax in range(3):
            for p in (int(g.lo[ax]), int(g.hi[ax])):
                if lo[ax] < p < hi[ax]:
                    score = abs(p - 0.5 * (lo[ax] + hi[ax])) / (hi[ax] - lo[ax])
                    if best is None or score < best[0]:
                        best = (score, ax, p)
    _, ax, p = best
    low_hi, high_lo = hi.copy(), lo.copy()
    low_hi[ax], high_lo[ax] = p, p
    return _Split(
        ax, p, _node(lo, low_hi, level, grid, cands, by_level), _node(high_lo, hi, level, grid, cands, by_level)
    )


def leaves(tree):
    """All leaves of ``tree`` (any order)."""
    out, stack = [], [tree]
    while stack:
        node = stack.pop()
        if isinstance(node, Leaf):
            out.append(node)
        else:
            stack.extend((node.high, node.low))
    return out


def front_to_back(tree, los):
    """Leaves of ``tree`` nearest the observer first, for rays travelling along ``los``.

    The observer is at +infinity along ``los``, so on an axis where
    ``los > 0`` the high side of a plane is the near one. Where ``los`` is
    parallel to a plane no ray crosses it and either order is valid.
    """
    los = np.asarray(los, float)
    out, stack = [], [tree]
    while stack:
        node = stack.pop()
        if isinstance(node, Leaf):
            out.append(node)
            continue
        near, far = (node.high, node.low) if los[node.axis] > 0 else (node.low, node.high)
        stack.extend((far, near))  # near is popped first
    return out


class AMRSnapshot(GridGeometry):
    """An AMR hierarchy of electron density, ion term and temperature, traced leaf by leaf.

    Built by :meth:`rtrace.Snapshot.from_yt`. The geometry attributes are
    those of the equivalent uniform grid at the finest level (what the ray
    lattice and the image are laid out on); the data stay at their native
    resolutions.

    Attributes
    ----------
    shape : tuple of int
        Finest-level cells spanning the domain on each axis.
    cell_size : ndarray (3,)
        Finest-level cell size in cm.
    origin : ndarray (3,)
        Lower corner of the domain in cm.
    refine_by : int
    levels : int
        Number of levels present (the finest is ``levels - 1``).
    tree
        The k-d tree of leaves (:func:`decompose`).
    provenance : dict
    """

    in_memory = True
    is_amr = True

    def __init__(self, grids, refine_by, base_shape, base_cell, origin, provenance):
        self.grids = list(grids)
        self.refine_by = int(refine_by)
        self.levels = 1 + max(g.level for g in self.grids)
        scale = self.refine_by ** (self.levels - 1)
        self.shape = tuple(int(n) * scale for n in base_shape)
        self.cell_size = np.asarray(base_cell, float) / scale
        self.origin = np.asarray(origin, float)
        self.provenance = dict(provenance)
        for g in self.grids:
            if g.level > 0:
                r = self.scale(g.level - 1)
                if np.any(g.lo % r) or np.any(g.hi % r):
                    s = self.scale(g.level)
                    raise InputError(
                        f"AMR hierarchy: {g.label} at level {g.level} (cells {(g.lo // s).tolist()} "
                        f"to {(g.hi // s).tolist()} of its level) does not start and end on cell "
                        f"boundaries of level {g.level - 1}; rtrace needs grids aligned with their "
                        "parents' cells"
                    )
        self.tree = decompose(self.grids, np.zeros(3, np.int64), np.asarray(self.shape, np.int64))
        self.leaves = leaves(self.tree)
        self._checksum = None

    def scale(self, level):
        """Finest-level cells per side of one level-``level`` cell."""
        return self.refine_by ** (self.levels - 1 - level)

    def leaf_arrays(self, leaf):
        """``(n_e, ion term, T)`` of ``leaf`` at its level's resolution (contiguous copies)."""
        g, r = leaf.grid, self.scale(leaf.level)
        sl = tuple(slice(int((a - b) // r), int((c - b) // r)) for a, c, b in zip(leaf.lo, leaf.hi, g.lo, strict=True))
        if g.ni is g.ne:
            ne = np.ascontiguousarray(g.ne[sl])
            return ne, ne, np.ascontiguousarray(g.t[sl])
        return tuple(np.ascontiguousarray(x[sl]) for x in (g.ne, g.ni, g.t))

    def cell_counts(self):
        """Cells the leaves hold, per level (the data actually traced)."""
        counts = np.zeros(self.levels, np.int64)
        for leaf in self.leaves:
            counts[leaf.level] += int(np.prod((leaf.hi - leaf.lo) // self.scale(leaf.level)))
        return counts

    def checksum(self):
        """SHA-256 of every grid's fields and box, and of the geometry; computed once."""
        if self._checksum is None:
            h = hashlib.sha256()
            for g in self.grids:
                for arr in (g.lo, g.hi, g.t, g.ne, g.ni):
                    h.update(memoryview(np.ascontiguousarray(arr)).cast("B"))
            for arr in (self.cell_size, self.origin):
                h.update(memoryview(np.ascontiguousarray(arr)).cast("B"))
            self._checksum = h.hexdigest()
        return self._checksum

    def describe(self):
        """A few lines for people: levels, grids, leaves, finest cell, cells per level and each field's range."""
        counts = self.cell_counts()
        lines = [
            f"AMR snapshot, {self.levels} level(s) refined by {self.refine_by}, {len(self.grids)} grids, "
            f"{len(self.leaves)} leaves, from {self.provenance['source']}",
            f"  finest cell {', '.join(f'{c / PC:.4g}' for c in self.cell_size)} pc; "
            f"equivalent uniform grid {self.shape[0]}x{self.shape[1]}x{self.shape[2]}",
            "  cells traced per level: " + ", ".join(f"{int(c)}" for c in counts),
            f"  ionization {self.provenance.get('ionization', '?')}",
        ]
        for name, attr, unit in (("T_e", "t", "K"), ("n_e", "ne", "cm-3"), ("ion term", "ni", "cm-3")):
            lo = min(float(getattr(g, attr).min()) for g in self.grids)
            hi = max(float(getattr(g, attr).max()) for g in self.grids)
            lines.append(f"  {name:<10} {lo:.4g} .. {hi:.4g} {unit}")
        return "\n".join(lines)

    def __repr__(self):
        return (
            f"<AMRSnapshot levels={self.levels} grids={len(self.grids)} leaves={len(self.leaves)} "
            f"source={self.provenance['source']!r}>"
        )
