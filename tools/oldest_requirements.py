"""Print the oldest supported versions of rtrace's dependencies as pip pins (``name==X``), from ``pyproject.toml``.

Each ``name>=X`` of ``[project] dependencies`` (and of the extras named on the command line) becomes
``name==X``; ``make oldest`` installs them in ``.venv-oldest`` and runs the tests there, so the lower
bounds the package states are ones it was tested with.

Usage: ``python tools/oldest_requirements.py [extra ...] > oldest.txt``
"""

import pathlib
import re
import sys
import tomllib

ROOT = pathlib.Path(__file__).resolve().parents[1]


def pins(extras=()):
    """``["name==X", ...]`` for every dependency with a lower bound; others (no bound) as given."""
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    specs = list(project["dependencies"])
    for extra in extras:
        specs += project["optional-dependencies"][extra]
    out = []
    for spec in specs:
        match = re.fullmatch(r"\s*([A-Za-z0-9_.\-\[\]]+)\s*>=\s*([0-9][0-9A-Za-z.]*)\s*", spec)
        out.append(f"{match.group(1)}=={match.group(2)}" if match else spec)
    return out


if __name__ == "__main__":
    print("\n".join(pins(sys.argv[1:])))
