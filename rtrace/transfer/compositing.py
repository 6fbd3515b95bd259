"""Exact, associative combination of ray segments.

A segment of a ray is summarised by ``(I, tau, EM)``: the intensity it emits
toward the observer with nothing entering from behind, its optical depth and
its emission measure. A ``near`` segment in front of a ``far`` one gives
``I = I_near + e^{-tau_near} I_far``, ``tau = tau_near + tau_far``,
``EM = EM_near + EM_far`` (formal solution of the transfer equation, e.g.
Rybicki & Lightman 1979, eq. 1.30). The operation is associative, so bricks,
slabs or patches can be traced independently and combined in any grouping
that keeps front-to-back order.
"""

from dataclasses import dataclass

import numpy as np

__all__ = ["Segment", "composite"]


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
    return Segment(near.intensity + np.exp(-near.tau) * far.intensity,
                   near.tau + far.tau, near.em + far.em)

