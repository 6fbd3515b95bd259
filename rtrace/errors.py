"""Exception hierarchy of rtrace.

Every error raised for bad user input derives from :class:`RtraceError`, so
scripts can catch one class; the subclasses say whose fault it is.
"""

import os
import sys
import warnings

__all__ = [
    "RtraceError",
    "InputError",
    "ConfigError",
    "OutputError",
    "PhysicsRangeWarning",
    "GauntRangeWarning",
    "RelativisticWarning",
    "PixelAccuracyWarning",
    "warn_user",
]


class RtraceError(Exception):
    """Base class of all rtrace errors."""


class InputError(RtraceError, ValueError):
    """A field, array or argument given to rtrace is unusable.

    The message names the field, the problem and how many cells are affected.
    """


class ConfigError(RtraceError, ValueError):
    """A job description or option is inconsistent or unknown."""


class OutputError(RtraceError):
    """The output folder or the disk cannot take the outputs.

    A path outside the output folder, a folder that is read-only, lacks
    permission, has no space left, or a file where a folder is needed (or the
    reverse). The message names the path and the job key or flag that chose
    it; nothing partial is left under a final name.
    """


class PhysicsRangeWarning(UserWarning):
    """Input lies outside the range where the implemented physics is accurate."""


class GauntRangeWarning(PhysicsRangeWarning):
    """Cells lie outside the temperatures of the tracer's Gaunt factor tables (1 K to 1e10 K).

    Their Gaunt factor is the table's edge value; the message counts them.
    """


class PixelAccuracyWarning(UserWarning):
    """An oblique trace stopped refining before its pixels met the requested tolerance."""


class RelativisticWarning(PhysicsRangeWarning):
    """Cells are hot enough (from 1e8 K) for neglected physics to matter.

    Relativistic corrections and electron-electron bremsstrahlung, which
    rtrace neglects, change the free-free emission by several percent there.
    """


_PACKAGE_DIR = os.path.dirname(os.path.abspath(__file__))


def warn_user(message, category=PhysicsRangeWarning):
    """Issue a warning attributed to the first caller outside rtrace (the user's line, not ours)."""
    level, frame = 2, sys._getframe(1)
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(_PACKAGE_DIR):
        frame = frame.f_back
        level += 1
    warnings.warn(message, category, stacklevel=level)
