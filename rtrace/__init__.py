"""rtrace: synthetic thermal free-free radio images from hydrodynamics snapshots.

The public API::

    snap = rtrace.Snapshot.from_arrays(temperature=..., cell_size=..., electron_density=...)
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=256, width=..., distance=...)
    res = rtrace.trace(snap, view, frequencies=[1, 5, 20] * u.GHz)
"""

from . import interferometer, physics
from ._version import __version__
from .comparison import Comparison, compare
from .errors import ConfigError, InputError, PhysicsRangeWarning, RtraceError
from .io import ytdata as _ytdata  # noqa: F401  (registers Snapshot.from_yt's reader)
from .io.lazy import open_hdf5
from .snapshot import Snapshot
from .transfer import Result, View, trace

__all__ = [
    "Snapshot",
    "View",
    "Result",
    "trace",
    "open_hdf5",
    "physics",
    "RtraceError",
    "InputError",
    "ConfigError",
    "PhysicsRangeWarning",
    "compare",
    "Comparison",
    "interferometer",
    "__version__",
]
