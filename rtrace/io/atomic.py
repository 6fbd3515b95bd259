"""Atomic file replacement: a write either completes or leaves no trace.

Every rtrace writer (FITS, CSV, PNG, ...) writes into a hidden temporary
file next to the target and renames it onto the target only once the write
has finished and reached the disk. A crash, a full disk or an exception in
the middle therefore never leaves a truncated file under the target's name,
and an existing file keeps its old content until the new one is complete.
"""

import contextlib
import os
import secrets
from pathlib import Path

from .outdir import output_error

__all__ = ["atomic_path"]


def _fsync_file(path):
    """Flush ``path``'s data to the storage device."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_directory(directory):
    """Flush a directory entry (the rename) to disk; best effort.

    POSIX needs this for the rename itself to survive a power cut; some
    platforms (Windows) and file systems cannot open a directory, and the
    data is already safe, so failure here is ignored.
    """
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@contextlib.contextmanager
def atomic_path(path):
    r"""Context manager giving a temporary path that replaces ``path`` on success.

    The temporary file lies in the same directory as ``path`` (so the final
    :func:`os.replace` is an atomic rename on one file system), has a hidden
    name (leading dot) and ends with the same name as ``path``, so writers
    that choose a format or compression from the suffix (``.fits``,
    ``.fits.gz``, ``.png``) behave as for the target. The temporary file is
    not created: the body of the ``with`` block must create it.

    On normal exit the temporary file is fsync'ed, renamed onto ``path``
    (replacing any existing file) and the directory is fsync'ed. On any
    exception (including KeyboardInterrupt) the temporary file is removed and
    the exception re-raised; ``path`` is left exactly as it was.

    The new file has the permissions the writer gives it (the umask
    default), not those of the file it replaces; if ``path`` is a symbolic
    link, the link itself is replaced.

    Parameters
    ----------
    path : str or os.PathLike
        Final destination of the file.

    Yields
    ------
    pathlib.Path
        Where to write.

    Raises
    ------
    FileNotFoundError
        If the body of the ``with`` block finished without creating the
        temporary file (nothing is then written to ``path``).
    rtrace.errors.OutputError
        If writing fails for a reason of the disk or the folder (no space
        left, quota, permission denied, read-only file system, a folder where
        the file should go, a file where a folder should be): the
        :class:`OSError` (see :data:`rtrace.io.outdir.OUTPUT_ERRNOS`) is
        re-raised as an OutputError naming ``path``, after the temporary file
        is removed.

    Examples
    --------
    >>> with atomic_path("table.csv") as tmp:          # doctest: +SKIP
    ...     tmp.write_text("a,b\n1,2\n")
    """
    target = Path(os.fspath(path))
    directory = target.parent
    # A random token keeps concurrent writers of the same target apart.
    tmp = directory / f".{target.name}.{secrets.token_hex(6)}.tmp{''.join(target.suffixes)}"
    try:
        yield tmp
        _fsync_file(tmp)
        os.replace(tmp, target)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        err = output_error(exc, target, note="nothing partial was left under its name")
        if err is not None:
            raise err from exc
        raise
    _fsync_directory(directory if str(directory) else ".")
