"""Tables with units: astropy ``Table`` written as ECSV, atomically.

ECSV (the Enhanced Character Separated Values format, astropy proposal APE 6,
Aldcroft 2014, from memory) keeps each column's unit, type and description,
and the table's ``meta`` (here: what the table is, where it came from, its
background convention) in a YAML header of ``#`` lines, above plain
comma-separated rows. ``astropy.table.Table.read(path)`` gives the columns back
as Quantities' values with their units; any CSV reader that skips ``#`` lines
reads the numbers.
"""

import os

from .atomic import atomic_path

__all__ = ["write_ecsv", "TABLE_SUFFIX"]

#: The file suffix of every table rtrace writes.
TABLE_SUFFIX = ".ecsv"


def write_ecsv(path, table):
    """Write ``table`` to ``path`` as comma-delimited ECSV, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination; written to a temporary file beside it and renamed onto it.
    table : `astropy.table.Table`
        Columns with ``unit`` and ``description``; ``meta`` goes to the header.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    from pathlib import Path

    with atomic_path(path) as tmp:
        table.write(os.fspath(tmp), format="ascii.ecsv", delimiter=",", overwrite=True)
    return Path(path)
