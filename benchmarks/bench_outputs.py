"""Outputs benchmark: writing a view's files against tracing that view, at the demo's size.

Runs the built-in demo job (``rtrace/data/demo_job.toml``: 96^3 cells, 6 frequencies, 160^2
pixels, a beam and noise) view by view, as ``rtrace run`` does, into a temporary folder that is
removed at the end. For each view, in rounds after a first-use round (numba compilation or
loading from numba's cache, first imports of matplotlib and astropy.io.fits; shown apart):

* ``trace``: ``rtrace.trace`` of the view (the reference);
* ``observe``: the beam convolution and noise of the job (``Result.observe``);
* each output of the view, as the run writes it: the FITS cubes, the pictures, the SED table (ECSV) and
  picture; and, apart, ``manifest``: recording every output in the folder's manifest (size and
  SHA-256 of each file, the manifest rewritten atomically each time).

Printed: median and [min, max] of each timing over the rounds, the view's whole writing time
(every output plus the manifest), and the ratio writing / trace as the ratio of medians and the
median [min, max] of the per-round ratios (also writing / (trace + observe)). All figures are
measured in the same run; nothing is asserted.

Usage: ``python benchmarks/bench_outputs.py [--rounds 5] [--cells 96] [--view NAME]``
The first-use round includes kernel compilation only when numba's cache is cold (delete the
``*.nbi``/``*.nbc`` files under ``rtrace/**/__pycache__``, or run with
``NUMBA_CACHE_DIR=$(mktemp -d)``).
"""

import argparse
import shutil
import statistics
import tempfile
import time
import tomllib
from importlib import resources
from pathlib import Path

from rtrace import trace
from rtrace.run.batch import Snapshots, plan_units
from rtrace.run.engine import _observe
from rtrace.run.job import build_views, parse_job
from rtrace.run.manifest import Manifest
from rtrace.run.products import QUANTITIES, data_outputs, picture_outputs


def demo_job(directory, cells):
    raw = tomllib.loads(resources.files("rtrace").joinpath("data/demo_job.toml").read_text())
    raw["output"]["directory"] = str(directory)
    if cells:
        raw["snapshot"]["cells"] = cells
    return parse_job(raw)


def one_round(job, unit, snap, manifest):
    """``{name: seconds}`` of one trace, observe and write of ``unit``."""
    times = {}
    t0 = time.perf_counter()
    res = trace(
        snap, unit.view, job.frequencies, background=job.trace.background, supersample=job.trace.supersample or 1
    )
    times["trace"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    sky = _observe(res, job) if job.beam is not None else None
    times["observe"] = time.perf_counter() - t0
    fmt = job.output.picture_format
    quantities = list(QUANTITIES) if job.output.quantities is None else list(job.output.quantities)
    cubes, spectra = data_outputs(job, unit, quantities, fmt)
    times["manifest"] = 0.0
    for output in cubes + picture_outputs(job, unit, fmt, None) + spectra:
        t0 = time.perf_counter()
        output.make(output.path, res, sky)
        times[output.path.name[len(unit.name) + 1 :]] = time.perf_counter() - t0
        t0 = time.perf_counter()
        manifest.record(output.path, output.inputs)
        times["manifest"] += time.perf_counter() - t0
    times["writing"] = sum(v for k, v in times.items() if k not in ("trace", "observe"))
    return times


def summary(values):
    return f"{statistics.median(values):8.3f} s  [{min(values):.3f}, {max(values):.3f}]"


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--cells", type=int, default=0, help="cells per side (default: the demo job's)")
    parser.add_argument("--view", default=None, help="one view of the demo job (default: each)")
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="rtrace-bench-outputs-"))
    try:
        job = demo_job(folder, args.cells)
        units = plan_units(job, build_views(job), folder)
        if args.view:
            units = [x for x in units if x.name == args.view]
        snap = Snapshots(job, lambda *a: None).get(units[0].member, 0, 1)
        manifest = Manifest(folder)
        print(
            f"demo job: {snap.shape[0]}^3 cells, {len(job.frequencies)} frequencies, "
            f"{args.rounds} rounds after a first-use round"
        )
        for unit in units:
            first = one_round(job, unit, snap, manifest)
            rounds = [one_round(job, unit, snap, manifest) for _ in range(args.rounds)]
            print(
                f"\nview '{unit.name}' ({unit.view.shape[1]}x{unit.view.shape[0]} pixels): "
                f"median [min, max] over {args.rounds} rounds; first use apart"
            )
            for name in first:
                print(f"  {name:32s}{summary([r[name] for r in rounds])}   first use {first[name]:7.3f} s")
            for ref in ("trace", "trace+observe"):

                def reference(r, ref=ref):
                    return r["trace"] + (r["observe"] if ref == "trace+observe" else 0.0)

                per_round = [r["writing"] / reference(r) for r in rounds]
                of_medians = statistics.median([r["writing"] for r in rounds]) / statistics.median(
                    [reference(r) for r in rounds]
                )
                print(
                    f"  writing / {ref:14s} ratio of medians {of_medians:7.2f}; per round "
                    f"{statistics.median(per_round):.2f} [{min(per_round):.2f}, {max(per_round):.2f}]"
                )
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
