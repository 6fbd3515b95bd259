"""Per-cell arrays the tracer derives from an in-memory snapshot once and keeps with it (``snapshot.kept``).

Oblique views read ``n_e x ion term`` instead of both fields (their layer-by-layer sweep reads memory with a
stride, so each array read costs), skip the 8^3 blocks without emitting gas, and read ``n_e / ion term``
only where helium is doubly ionized somewhere. Each is one more cube (the block map 1/512 of a uint8 cube)
for as long as the snapshot lives, or until ``snapshot.release()``.
"""

import numpy as np

from .kernels import emitting_blocks as _mark_emitting_blocks

__all__ = ["emission_product", "emitting_blocks", "emission_ratio", "product_of", "ratio_of"]


def product_of(ne, ni):
    """``n_e x ion term`` per cell in the fields' dtype (for float32 fields the exact product, rounded once)."""
    return np.multiply(ne, ni, dtype=np.result_type(ne, ni))


def ratio_of(ne, ni):
    """``n_e / ion term`` per cell (fields' dtype; 1 where the ion term is 0), or None where they are equal.

    The oblique kernel reads only ``n_e x ion term``; this ratio gives it the
    He III share of the ion term (Z = 2 Gaunt factor) and the ``n_e^2``
    emission measure. Hydrogen and singly ionized helium have an ion term
    equal to ``n_e`` in every cell: None then, and the kernel reads nothing more.
    """
    if ne is ni or np.array_equal(ne, ni):
        return None
    dtype = np.result_type(ne, ni)
    out = np.ones(np.shape(ne), dtype)
    np.divide(ne, ni, out=out, where=np.asarray(ni) > 0, casting="unsafe")
    return out


def emission_product(snapshot):
    """``n_e x ion term`` of ``snapshot``'s cells (storage dtype), formed on first use and kept."""
    if "product" not in snapshot.kept:
        snapshot.kept["product"] = product_of(snapshot._ne, snapshot._ni)
    return snapshot.kept["product"]


def emitting_blocks(snapshot):
    """Which blocks of 8^3 cells of ``snapshot`` hold emitting gas (:func:`kernels.emitting_blocks`), kept."""
    if "blocks" not in snapshot.kept:
        snapshot.kept["blocks"] = _mark_emitting_blocks(emission_product(snapshot))
    return snapshot.kept["blocks"]


def emission_ratio(snapshot):
    """``n_e / ion term`` of ``snapshot``'s cells, or None where they are equal everywhere (:func:`ratio_of`), kept."""
    if "ratio" not in snapshot.kept:
        snapshot.kept["ratio"] = ratio_of(snapshot._ne, snapshot._ni)
    return snapshot.kept["ratio"]
