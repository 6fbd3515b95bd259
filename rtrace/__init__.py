"""rtrace: synthetic thermal free-free radio images from hydrodynamics snapshots.

The public API::

    snap = rtrace.Snapshot.from_arrays(temperature=..., cell_size=..., electron_density=...)
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=256, width=..., distance=...)
    res = rtrace.trace(snap, view, frequencies=[1, 5, 20] * u.GHz)
"""

from . import physics
from .errors import ConfigError, InputError, PhysicsRangeWarning, RtraceError
from .snapshot import Snapshot
from .transfer import Result, View, trace
from .io.lazy import open_hdf5
from . import interferometer
from .comparison import Comparison, compare

__version__ = "0.1.0"

__all__ = ["Snapshot", "View", "Result", "trace", "open_hdf5", "physics", "RtraceError", "InputError",
           "ConfigError", "PhysicsRangeWarning", "compare", "Comparison", "interferometer", "__version__"]
