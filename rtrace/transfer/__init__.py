"""Ray layout (View), numba kernels, compositing and the tracer."""

from .high_level import trace
from .result import Result
from .view import View

__all__ = ["Result", "View", "trace"]
