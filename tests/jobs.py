"""Job files the tests share: a TOML writer for job tables, the common tables and a helper writing a job.

A job's text is built from its tables (dicts, in order), so a test states only what its job is about::

    text = job_text(snapshot=demo(16), frequencies=TWO_FREQUENCIES, view=view("a", 16, "1 kpc"))

Values are written as TOML 1.0 writes them (strings in double quotes, ``true``/``false``, lists as
``[a, b]``), one ``key = value`` a line in the order given, so a test may still patch the text with
``str.replace`` on a line it knows.
"""

import textwrap

__all__ = ["job_text", "demo", "view", "write", "TWO_FREQUENCIES", "NOISE", "BEAM"]

#: ``[frequencies]`` of most jobs: two frequencies a decade apart
TWO_FREQUENCIES = {"values": ["1 GHz", "10 GHz"]}
#: ``[noise]`` of the jobs that add noise
NOISE = {"rms": "0.1 mJy", "seed": 3}
#: ``[beam]`` of the jobs that convolve with a circular beam
BEAM = {"major": "60 arcsec"}


def _value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return repr(v)


def _table(header, keys):
    return "\n".join([header] + [f"{k} = {_value(v)}" for k, v in keys.items()]) + "\n"


def job_text(**tables):
    """TOML text of a job: each keyword a table (a dict of keys), in order; ``view`` may be a list (``[[view]]``).

    ``view`` is always written as an array of tables (``[[view]]``), a dict meaning a list of one.
    """
    parts = []
    for name, keys in tables.items():
        if name == "view":
            parts += [_table("[[view]]", v) for v in ([keys] if isinstance(keys, dict) else keys)]
        else:
            parts.append(_table(f"[{name}]", keys))
    return "\n" + "\n".join(parts)


def demo(cells, **keys):
    """``[snapshot]`` of the built-in demo scenario with ``cells`` per side (and more keys, e.g. ``seeds``)."""
    return {"kind": "demo", "cells": cells, **keys}


def view(name, npix, distance, **keys):
    """One ``[[view]]``: its name, pixels per side and distance (and more keys, e.g. ``los``, ``width``)."""
    return {"name": name, "npix": npix, "distance": distance, **keys}


def write(tmp_path, text, name="job.toml"):
    """Write ``text`` (dedented) to ``tmp_path / name``; returns the path."""
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path
