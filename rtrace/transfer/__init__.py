"""Ray layout (View), numba kernels, compositing and the tracer."""

from .result import Result
from .tracer import trace
from .view import View

__all__ = ["Result", "View", "trace"]
