"""Reading snapshots and writing products: atomic writes, FITS, HDF5.

``atomic_path`` is shared by every writer in rtrace; ``rtrace.io.fits``
writes images, cubes and sky maps with a full WCS; ``rtrace.io.hdf5`` reads
gridded snapshots from HDF5 files.
"""

from .atomic import atomic_path
from .fits import sky_wcs, write_cube, write_result, write_skymap
from .hdf5 import read_hdf5

__all__ = ["atomic_path", "sky_wcs", "write_cube", "write_result", "write_skymap", "read_hdf5"]
