"""A whole grid through an ionization model, piece by piece, so temporaries stay small.

A *grid reader* gives the gas of any box of cells: ``read(lo, hi)`` returns
``(inputs, fields)``, float64 cgs arrays of the box (``density`` and one
thermal input, see :data:`~rtrace.physics.ionization.cells.THERMAL_INPUTS`)
and the model's per-cell fields. :class:`ArrayInputs` reads arrays held in
memory; file-backed snapshots provide their own reader. Models that need
the whole grid at once (photoionization by sources) solve it first, through
the same reader.
"""

import numpy as np

from ...errors import InputError
from .cells import THERMAL_INPUTS, IonizationSummary, evaluate_piece

__all__ = ["ArrayInputs", "evaluate_grid", "slabs", "box_slices", "PIECE_CELLS"]

#: Cells per piece: bounds the models' float64 temporaries (tens of arrays) to a few hundred MB.
PIECE_CELLS = 1 << 19


def slabs(shape, max_cells=PIECE_CELLS):
    """Boxes ``(lo, hi)`` of whole ``[i0:i1, :, :]`` slabs covering the grid.

    Each holds at most ``max_cells`` cells (one plane if a plane alone is larger).
    """
    plane = int(shape[1]) * int(shape[2])
    step = max(1, max_cells // max(plane, 1))
    for i in range(0, int(shape[0]), step):
        yield (i, 0, 0), (min(i + step, int(shape[0])), int(shape[1]), int(shape[2]))


def box_slices(lo, hi):
    """The slices of the box ``lo <= (i, j, k) < hi``."""
    return tuple(slice(int(a), int(b)) for a, b in zip(lo, hi, strict=True))


class ArrayInputs:
    """In-memory gas fields as a grid reader.

    Parameters
    ----------
    inputs : dict
        float64 cgs arrays of the whole grid (``density`` and a thermal
        input); scalars (``gamma``) pass through.
    fields : dict
        Per-cell fields by name (arrays broadcastable to the grid).
    shape : tuple of int
    cell_size, origin : ndarray (3,)
        Geometry in cm (used by models that cast rays).

    Attributes
    ----------
    thermal : str
        Which thermal input the grid has: ``"temperature"``, ``"pressure"``
        or ``"internal_energy"`` (every grid reader has this attribute).
    """

    def __init__(self, inputs, fields, shape, cell_size, origin):
        self.inputs = inputs
        self.fields = {}
        for key, value in (fields or {}).items():
            try:
                self.fields[key] = np.broadcast_to(value, shape)
            except ValueError:
                raise InputError(
                    f"fields: {key!r} has shape {np.shape(value)}, which does not broadcast to the "
                    f"grid shape {tuple(shape)}"
                ) from None
        self.shape = tuple(int(n) for n in shape)
        self.cell_size = np.asarray(cell_size, float)
        self.origin = np.asarray(origin, float)
        self.thermal = next(k for k in THERMAL_INPUTS if k in inputs)

    def read(self, lo, hi):
        """``(inputs, fields)`` over the box ``lo <= index < hi`` (per-cell arrays sliced, scalars kept)."""
        box = box_slices(lo, hi)
        inputs = {k: (v[box] if np.ndim(v) == 3 else v) for k, v in self.inputs.items()}
        return inputs, {k: v[box] for k, v in self.fields.items()}


def evaluate_grid(model, grid, dtype, max_cells=PIECE_CELLS):
    """Electron temperature, electron density and ion term of every cell, and what was done.

    Parameters
    ----------
    model : IonizationModel
    grid : a grid reader (e.g. :class:`ArrayInputs`)
    dtype : numpy dtype
        Storage type of the returned arrays.

    Returns
    -------
    t_e, n_e, ion : ndarray
        ``dtype`` arrays of the grid's shape (K, cm^-3, cm^-3).
    provenance : dict
        ``ionization`` (the model), ``ionization_state`` (ionized mass and
        volume) and whatever the model adds (e.g. its sources and photon budget).
    """
    shape = grid.shape
    extra, photo = {}, None
    if not model.local:
        solution = model.photoionize(grid)
        photo = solution.fraction
        extra = solution.provenance()
    out = [np.empty(shape, dtype) for _ in range(3)]
    summary = IonizationSummary()
    for lo, hi in slabs(shape, max_cells):
        inputs, fields = grid.read(lo, hi)
        box = box_slices(lo, hi)
        if photo is not None:
            fields["<photo>"] = photo[box]
        for arr, value in zip(out, evaluate_piece(model, inputs, fields, summary), strict=True):
            arr[box] = value
    model.warn_range()
    provenance = {"ionization": model.describe(), "ionization_state": summary.describe(), **extra}
    return (*out, provenance)
