"""Exception hierarchy of rtrace.

Every error raised for bad user input derives from :class:`RtraceError`, so
scripts can catch one class; the subclasses say whose fault it is.
"""

__all__ = ["RtraceError", "InputError", "ConfigError", "PhysicsRangeWarning"]


class RtraceError(Exception):
    """Base class of all rtrace errors."""


class InputError(RtraceError, ValueError):
    """A field, array or argument given to rtrace is unusable.

    The message names the field, the problem and how many cells are affected.
    """


class ConfigError(RtraceError, ValueError):
    """A job description or option is inconsistent or unknown."""


class PhysicsRangeWarning(UserWarning):
    """Input lies outside the range where the implemented physics is accurate."""
