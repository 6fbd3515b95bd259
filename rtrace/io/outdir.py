"""Output-folder safety: every file lies inside the folder, the folder is writable, disk errors are named.

Three guards, used by the job runner and the command line before any
tracing, and by :func:`rtrace.io.atomic.atomic_path` while writing:

- :func:`check_inside` refuses a path that does not lie inside the output
  folder once both are resolved (``..`` components, absolute names and
  symbolic links that point out of the folder are all refused), a defence in
  depth besides the job validator's check of view names and prefixes;
- :func:`check_writable` creates the folder, writes and removes a probe
  file, so that a read-only, permission-denied or full output folder, or an
  ``--output`` that names a file, is reported before hours of tracing;
- :func:`output_error` turns an :class:`OSError` of the disk or the file
  system (no space, no permission, read-only, a file where a folder should
  be) into an :class:`~rtrace.errors.OutputError` that names the path.
"""

import errno
import os
import secrets
import shutil
from pathlib import Path

from ..errors import OutputError

__all__ = ["OUTPUT_ERRNOS", "check_inside", "check_writable", "check_output_paths", "check_space", "output_error"]

#: errno values that are the output folder's or the disk's fault, not a bug of rtrace.
OUTPUT_ERRNOS = {
    errno.ENOSPC: "no space left on the device",
    errno.EDQUOT: "disk quota exceeded",
    errno.EFBIG: "file too large for the file system",
    errno.EACCES: "permission denied",
    errno.EPERM: "operation not permitted",
    errno.EROFS: "read-only file system",
    errno.EEXIST: "a file of that name is in the way",
    errno.ENOTDIR: "a file stands where a folder is needed",
    errno.EISDIR: "a folder stands where a file is needed",
}


def output_error(exc, path, what="output", note=""):
    """The :class:`~rtrace.errors.OutputError` for ``exc``, or None when it is not an output-folder problem.

    Parameters
    ----------
    exc : BaseException
        The error raised while creating or writing ``path``.
    path : str or os.PathLike
        The file or folder being written (named in the message).
    what : str, optional
        What the path is, for the message (``"[output].directory"``,
        ``"--csv"``, ...).
    note : str, optional
        Appended to the message (e.g. that nothing partial was left).

    Returns
    -------
    OutputError or None
    """
    cause = _disk_cause(exc)
    if cause is None and isinstance(exc, OSError) and exc.errno is None and _nearly_full(path):
        # a writer's own short-write check (astropy's "N requested and M written") carries no errno
        cause = OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), os.fspath(path))
    if cause is None:
        return None
    exc = cause
    hint = {
        errno.ENOSPC: "free some space or write elsewhere",
        errno.EDQUOT: "free some space or write elsewhere",
        errno.EEXIST: "remove it or choose another folder",
        errno.ENOTDIR: "remove it or choose another folder",
        errno.EISDIR: "remove it or choose another folder",
    }.get(exc.errno, "choose a folder you can write to")
    where = exc.filename if exc.filename is not None else path
    return OutputError(
        f"{what}: cannot write {os.fspath(where)}: {OUTPUT_ERRNOS[exc.errno]} ({hint})" + (f"; {note}" if note else "")
    )


def _disk_cause(exc):
    """The OSError with an output errno in ``exc`` or the errors it was raised from, or None.

    Libraries re-raise disk errors in their own words (astropy's FITS writer
    raises a plain OSError "Not enough space on disk" from the ENOSPC), so the
    chain of causes and contexts is searched too.
    """
    seen = set()
    while exc is not None and id(exc) not in seen:
        seen.add(id(exc))
        if isinstance(exc, OSError) and exc.errno in OUTPUT_ERRNOS:
            return exc
        exc = exc.__cause__ or exc.__context__
    return None


#: Free bytes below which an OSError without errno from a writer is taken for a full disk.
NEARLY_FULL = 1 << 20


def _nearly_full(path):
    """Whether the file system holding ``path`` (or its nearest existing folder) has under 1 MiB free."""
    folder = Path(os.path.abspath(os.fspath(path)))
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    try:
        return shutil.disk_usage(folder).free < NEARLY_FULL
    except OSError:
        return False


def _resolved(path):
    return Path(os.path.abspath(os.fspath(path))).resolve()


def check_inside(path, folder, what="output"):
    """Refuse ``path`` unless it lies inside ``folder`` (both resolved, symbolic links followed).

    Parameters
    ----------
    path, folder : str or os.PathLike
    what : str, optional
        What made the path (a job key), for the message.

    Returns
    -------
    pathlib.Path
        ``path`` unchanged.

    Raises
    ------
    OutputError
        If the resolved path is the folder itself or lies outside it, e.g.
        through ``..``, an absolute name or a symbolic link pointing out.
    """
    real, root = _resolved(path), _resolved(folder)
    if real == root or root not in real.parents:
        link = "" if real == Path(os.path.abspath(os.fspath(path))) else f" (it resolves to {real})"
        raise OutputError(
            f"{what}: {os.fspath(path)} lies outside the output folder {root}{link}; "
            f"rtrace writes only inside the output folder"
        )
    return Path(path)


def check_output_paths(paths, folder, what="output"):
    """Check, before any work, that every path can be written inside ``folder``.

    Each path must lie inside the folder (:func:`check_inside`), must not be
    an existing folder, and no existing component between the folder and the
    file may be a plain file.

    Parameters
    ----------
    paths : iterable of str or os.PathLike
    folder : str or os.PathLike
    what : str, optional
        For the messages.

    Raises
    ------
    OutputError
        Naming the first offending path and how many were refused.
    """
    root = _resolved(folder)
    bad = []
    for path in paths:
        path = Path(path)
        try:
            check_inside(path, root, what)
        except OutputError as exc:
            bad.append(str(exc))
            continue
        if path.is_dir():
            bad.append(
                f"{what}: {path} is a folder; rtrace needs to write a file of that name there "
                f"(remove the folder or choose another output folder)"
            )
            continue
        parent = path.parent
        while _resolved(parent) != root:
            if parent.exists() and not parent.is_dir():
                bad.append(
                    f"{what}: {parent} is a file; rtrace needs a folder of that name for {path.name} "
                    f"(remove the file or choose another output folder)"
                )
                break
            parent = parent.parent
    if bad:
        more = f" ({len(bad)} output paths refused)" if len(bad) > 1 else ""
        raise OutputError(bad[0] + more)


def check_writable(folder, what="[output].directory"):
    """Create ``folder`` (and its parents) and prove it writable with a probe file, removed at once.

    Parameters
    ----------
    folder : str or os.PathLike
    what : str, optional
        The job key or flag that named the folder, for the message.

    Returns
    -------
    pathlib.Path
        The folder.

    Raises
    ------
    OutputError
        If the folder names an existing file, cannot be created, is
        read-only, lacks permission or has no space left for a small file.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{what}: {folder} is a file, not a folder; choose a folder for the outputs")
    probe = folder / f".rtrace-probe-{secrets.token_hex(6)}"
    try:
        folder.mkdir(parents=True, exist_ok=True)
        with open(probe, "wb") as handle:
            handle.write(b"rtrace write probe\n")
            handle.flush()
            os.fsync(handle.fileno())
    except OSError as exc:
        err = output_error(exc, folder, what)
        if err is None:
            raise
        raise err from None
    finally:
        try:
            os.unlink(probe)
        except OSError:
            pass
    return folder


def check_space(folder, need, what="[output].directory"):
    """Refuse, before any work, outputs that cannot fit: ``need`` bytes (a lower bound) against the free space.

    Parameters
    ----------
    folder : str or os.PathLike
        An existing folder on the file system that will hold the outputs.
    need : int
        Bytes the outputs will at least add (files they replace counted off).
        Give a lower bound: a run is refused only when it would surely fail.
    what : str, optional
        For the message.

    Raises
    ------
    OutputError
        Naming the folder, the bytes needed and free, and what to do.
    """
    free = shutil.disk_usage(folder).free
    if need > free:
        raise OutputError(
            f"{what}: the outputs need at least {need / 1e6:.3g} MB but {os.fspath(folder)} has "
            f"{free / 1e6:.3g} MB free; free some space, write elsewhere (--output) or ask for fewer "
            f"outputs ([output].quantities, fits = false, smaller npix)"
        )
