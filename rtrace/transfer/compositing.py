"""Exact, associative combination of ray segments.

A segment of a ray is summarised by ``(I, tau, EM)``: the intensity it emits
toward the observer with nothing entering from behind, its optical depth and
its emission measure. A ``near`` segment in front of a ``far`` one gives
``I = I_near + e^{-tau_near} I_far``, ``tau = tau_near + tau_far``,
``EM = EM_near + EM_far`` (formal solution of the transfer equation, e.g.
Rybicki & Lightman 1979, eq. 1.30). The operation is associative, so bricks,
slabs or patches can be traced independently and combined in any grouping
that keeps front-to-back order.

A :class:`Patch` is a segment over a rectangle of a route's two-dimensional
grid of rays (the rays one brick can reach). Rays outside a patch are the
identity ``(0, 0, 0)``, which :func:`composite` leaves unchanged bit for bit
(``x + e^{-0} 0 = x``), so patches over different rectangles combine exactly
over the union of their rectangles (:func:`composite_patches`).
"""

from dataclasses import dataclass

import numpy as np

__all__ = ["Segment", "composite", "Patch", "composite_patches", "composite_into"]


@dataclass
class Segment:
    """Per-ray summary: ``intensity`` and ``tau`` (nfreq, ...), ``em`` (...). cgs units."""

    intensity: np.ndarray
    tau: np.ndarray
    em: np.ndarray

    @classmethod
    def empty(cls, nfreq, shape):
        """A transparent, dark segment (the identity of :func:`composite`)."""
        return cls(np.zeros((nfreq,) + tuple(shape)), np.zeros((nfreq,) + tuple(shape)), np.zeros(shape))


def composite(near, far):
    """Segment ``near`` (closer to the observer) in front of ``far``."""
    return Segment(near.intensity + np.exp(-near.tau) * far.intensity, near.tau + far.tau, near.em + far.em)


@dataclass
class Patch:
    """A :class:`Segment` over the ray rectangle ``start .. start + seg.em.shape`` of a ray grid.

    Attributes
    ----------
    start : tuple of int
        Index of the rectangle's first ray on each of the two ray-grid axes.
    seg : Segment
        ``intensity``, ``tau`` (nfreq, n0, n1) and ``em`` (n0, n1), cgs.
    """

    start: tuple
    seg: Segment

    @property
    def stop(self):
        """One past the rectangle's last ray on each axis."""
        return tuple(s + n for s, n in zip(self.start, self.seg.em.shape, strict=True))

    def _slices(self, start):
        """Slices of this patch's rectangle within a rectangle that starts at ``start``."""
        return tuple(slice(a - s, b - s) for a, b, s in zip(self.start, self.stop, start, strict=True))


def composite_into(acc, start, patch):
    """Composite ``patch`` behind the rays of ``acc`` (a Segment over a rectangle at ``start``), in place.

    ``acc`` must cover ``patch``'s rectangle and hold everything in front of it
    (front-to-back accumulation).
    """
    sl = patch._slices(start)
    near = Segment(acc.intensity[(slice(None),) + sl], acc.tau[(slice(None),) + sl], acc.em[sl])
    out = composite(near, patch.seg)
    near.intensity[...] = out.intensity
    near.tau[...] = out.tau
    near.em[...] = out.em


def composite_patches(near, far):
    """Patch ``near`` in front of patch ``far``, over the union of their rectangles.

    Either may be None (no rays), which is the identity.
    """
    if near is None:
        return far
    if far is None:
        return near
    start = tuple(min(a, b) for a, b in zip(near.start, far.start, strict=True))
    stop = tuple(max(a, b) for a, b in zip(near.stop, far.stop, strict=True))
    shape = tuple(b - a for a, b in zip(start, stop, strict=True))
    if start == near.start and stop == near.stop:
        acc = Segment(near.seg.intensity.copy(), near.seg.tau.copy(), near.seg.em.copy())
    else:
        acc = Segment.empty(near.seg.intensity.shape[0], shape)
        sl = near._slices(start)
        acc.intensity[(slice(None),) + sl] = near.seg.intensity
        acc.tau[(slice(None),) + sl] = near.seg.tau
        acc.em[sl] = near.seg.em
    composite_into(acc, start, far)
    return Patch(start, acc)
