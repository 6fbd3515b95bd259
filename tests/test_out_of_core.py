"""File-backed snapshots (rtrace.open_hdf5) against the eager reader and the in-memory engine.

References: rtrace.io.read_hdf5 (tests/test_hdf5.py) builds the in-memory
snapshot of the same file; Snapshot.from_arrays defines the validation and
its messages (tests/test_snapshot.py); the tracer's physics is tested in
tests/test_transfer.py. A lazy snapshot must hold the same numbers, reject
the same bad cells with the same counts, and trace to the same images.
"""

import json
import os
import pickle
import subprocess
import sys
import textwrap

import astropy.units as u
import h5py
import numpy as np
import pytest

import rtrace
from rtrace.errors import InputError, PhysicsRangeWarning
from rtrace.io import lazy, read_hdf5
from rtrace.io.lazy import HDF5Source, open_hdf5

SHAPE = (17, 14, 19)
NU = [0.3, 3.0, 300.0] * u.GHz


def _fields(rng, shape):
    ne = 1e3 * rng.lognormal(0, 1, shape)
    return {
        "T": rng.uniform(5e3, 2e4, shape),
        "ne": ne,
        "ni": 1.1 * ne,
        "rho": ne * 2.3e-24,
        "x": rng.uniform(0, 1, shape),
    }


@pytest.fixture(scope="module")
def h5file(tmp_path_factory):
    """Units that need converting (deg_C, m**-3), float32 and float64 datasets, geometry in attributes."""
    f = _fields(np.random.default_rng(77), SHAPE)
    path = tmp_path_factory.mktemp("lazy") / "snap.h5"
    with h5py.File(path, "w") as h5:
        h5.attrs["cell_size"] = [0.01, 0.012, 0.009]
        h5.attrs["length_unit"] = "pc"
        h5.attrs["origin"] = [1.0, -2.0, 0.5]
        h5.create_dataset("gas/T", data=f["T"] - 273.15).attrs["units"] = "deg_C"
        h5.create_dataset("gas/ne", data=f["ne"] * 1e6).attrs["units"] = "m**-3"
        h5.create_dataset("gas/ni", data=f["ni"].astype(np.float32)).attrs["units"] = "cm**-3"
        h5.create_dataset("rho", data=f["rho"], chunks=(5, 7, 4)).attrs["units"] = "g/cm**3"
        h5.create_dataset("xHII", data=f["x"])
    return path


INPUTS = [
    dict(electron_density="gas/ne"),
    dict(electron_density="gas/ne", ion_density="gas/ni"),
    dict(density="rho"),
    dict(density="rho", ionization="xHII"),
    dict(density="rho", ionization="threshold", helium="double"),
    dict(density="rho", ionization="saha"),
]


@pytest.mark.parametrize("kwargs", INPUTS)
@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # Saha on thin gas: a reader test
def test_lazy_snapshot_holds_what_read_hdf5_reads(h5file, kwargs):
    # Reference: read_hdf5 of the same file (its units and attributes, tests/test_hdf5.py).
    eager = read_hdf5(h5file, temperature="gas/T", **kwargs)
    snap = open_hdf5(h5file, temperature="gas/T", **kwargs)
    assert isinstance(snap, rtrace.Snapshot) and not snap.in_memory and eager.in_memory
    assert snap.shape == eager.shape
    assert np.array_equal(snap.cell_size, eager.cell_size) and np.array_equal(snap.origin, eager.origin)
    for name in ("temperature", "electron_density", "ion_density"):
        lazy_q, eager_q = getattr(snap, name), getattr(eager, name)
        assert lazy_q.unit == eager_q.unit and lazy_q.dtype == eager_q.dtype
        assert np.array_equal(lazy_q.value, eager_q.value)  # same bits, read on demand
    # the streamed checksum and ranges equal the in-memory ones
    assert snap.checksum() == eager.checksum()
    lazy_lines, eager_lines = snap.describe().splitlines(), eager.describe().splitlines()
    assert lazy_lines[3:] == eager_lines[3:] and lazy_lines[1] == eager_lines[1]  # ranges, cell size
    assert snap.provenance["source"] == eager.provenance["source"]
    if kwargs.get("ionization") != "xHII":
        # (a fraction dataset is described by name, not by the array read_hdf5 holds)
        assert snap.provenance == eager.provenance and lazy_lines[2] == eager_lines[2]


@pytest.mark.parametrize("kwargs", INPUTS[1:4])
@pytest.mark.parametrize("los", [(0, 0, -1), (0, 1, 0), (0.3, -0.5, 0.8), (-0.9, 0.2, 0.3)])
def test_lazy_trace_equals_in_memory_trace(h5file, kwargs, los):
    # Reference: the in-memory trace of read_hdf5's snapshot (physics: tests/test_transfer.py).
    eager = read_hdf5(h5file, temperature="gas/T", **kwargs)
    snap = open_hdf5(h5file, temperature="gas/T", **kwargs)
    view = rtrace.View(los=los, north=(1, 0, 0) if los[0] == 0 else (0, 0, 1), npix=21, distance=1 * u.kpc)
    ref = rtrace.trace(eager, view, NU, supersample=1)
    assert ref.tau[0].max() > 1 and ref.tau[-1].max() < 1e-2
    for size in (None, 6):
        res = rtrace.trace(snap, view, NU, supersample=1, brick_size=size)
        for x, y in (
            (res.intensity.value, ref.intensity.value),
            (res.tau, ref.tau),
            (res.emission_measure.value, ref.emission_measure.value),
        ):
            assert np.allclose(x, y, rtol=1e-10, atol=0)
        assert res.provenance["checksum"] == ref.provenance["checksum"]


@pytest.mark.parametrize(
    "los,width,everything", [((0.3, -0.5, 0.8), None, True), ((0, 0, 1), None, True), ((0.3, -0.5, 0.8), 0.04, False)]
)
def test_each_brick_is_read_once_per_view(h5file, monkeypatch, los, width, everything):
    # Common practice for out-of-core sweeps: one read of each needed brick per traversal.
    snap = open_hdf5(h5file, temperature="gas/T", electron_density="gas/ne", ion_density="gas/ni")
    reads = []
    original = HDF5Source.read

    def counting(self, lo, hi, **kwargs):
        reads.append((tuple(int(v) for v in lo), tuple(int(v) for v in hi)))
        return original(self, lo, hi, **kwargs)

    monkeypatch.setattr(HDF5Source, "read", counting)
    view = rtrace.View(los=los, npix=16, width=None if width is None else width * u.pc, distance=1 * u.kpc)
    rtrace.trace(snap, view, NU, brick_size=5, supersample=1)
    assert len(reads) == len(set(reads))  # no brick twice
    cells = sum(np.prod(np.subtract(hi, lo)) for lo, hi in reads)
    if everything:
        assert cells == np.prod(SHAPE)  # the whole grid, once
    else:
        assert 0 < cells < np.prod(SHAPE)  # a zoomed view skips bricks no ray reaches


def test_pieces_tile_a_box_in_c_order():
    # Common practice: the streaming pass hashes pieces in sequence: they must tile the box once, in C order.
    lo, hi = np.array([2, 3, 1]), np.array([9, 8, 12])
    for max_cells in (1, 7, 11, 55, 56, 10_000):
        index = np.arange(1000).reshape(10, 10, 10)
        order = [
            index[tuple(slice(a, b) for a, b in zip(plo, phi, strict=True))].ravel()
            for plo, phi in lazy.pieces(lo, hi, max_cells)
        ]
        assert all(p.size <= max_cells for p in order)
        assert np.array_equal(np.concatenate(order), index[2:9, 3:8, 1:12].ravel())


def _bad_file(path, field, value, cells):
    rng = np.random.default_rng(3)
    f = _fields(rng, SHAPE)
    f[field].ravel()[cells] = value
    with h5py.File(path, "w") as h5:
        h5.attrs["cell_size"] = 0.01
        h5.attrs["length_unit"] = "pc"
        for name, unit in (("T", "K"), ("ne", "cm**-3"), ("ni", "cm**-3"), ("rho", "g/cm**3"), ("x", "")):
            h5.create_dataset(name, data=f[name]).attrs["units"] = unit
    return path


@pytest.mark.parametrize(
    "field,value,kwargs,message",
    [
        ("T", np.nan, {}, r"temperature: 3 of 4522 cells are not finite \(NaN or inf\), in dataset 'T'"),
        ("T", 0.0, {}, r"temperature: 3 of 4522 cells violate temperature > 0 \(minimum 0\)"),
        ("T", -50.0, dict(density="rho"), r"temperature: 3 of 4522 cells violate temperature > 0 \(minimum -50\)"),
        ("ne", -1.0, {}, r"electron_density: 3 of 4522 cells violate electron_density >= 0"),
        ("ne", np.inf, {}, r"electron_density: 3 of 4522 cells are not finite"),
        ("ni", np.nan, dict(ion_density="ni"), r"ion_density: 3 of 4522 cells are not finite"),
        ("rho", -1e-24, dict(density="rho"), r"density: 3 of 4522 cells violate density >= 0"),
        ("x", 1.5, dict(density="rho", ionization="x"), r"ionization field 'x': 3 of 4522 cells violate 0 <= fraction"),
    ],
)
def test_validation_pass_counts_bad_cells_before_tracing(tmp_path, monkeypatch, field, value, kwargs, message):
    # Same rules and counts as Snapshot.from_arrays (tests/test_snapshot.py), found by a streaming pass
    # in pieces far smaller than a field (the counts add up across pieces).
    path = _bad_file(tmp_path / "bad.h5", field, value, [5, 700, 4000])
    kwargs = dict(kwargs)
    if "density" not in kwargs:
        kwargs["electron_density"] = "ne"
    monkeypatch.setattr(lazy, "_SCAN_CELLS", 97)
    with pytest.raises(InputError, match=message):
        open_hdf5(path, temperature="T", **kwargs)
    with pytest.raises(ValueError):  # InputError is a ValueError
        read_hdf5(path, temperature="T", **kwargs)  # the eager reader agrees it is bad


def test_both_problems_are_counted_in_one_message(tmp_path):
    # Common practice (and DEVELOPERS.md): one error naming the field, the problems and the counts.
    path = _bad_file(tmp_path / "bad.h5", "T", np.nan, [1, 2])
    with h5py.File(path, "r+") as h5:
        h5["T"][0, 0, 5] = -3.0
    with pytest.raises(
        InputError,
        match=r"temperature: 2 of 4522 cells are not finite \(NaN or inf\) and "
        r"1 violate temperature > 0 \(minimum -3\)",
    ):
        open_hdf5(path, temperature="T", electron_density="ne")


def test_relativistic_temperatures_warn_at_open(tmp_path):
    # Same warning as Snapshot.from_arrays: relativistic corrections reach a few percent from ~1e8 K (from memory).
    path = _bad_file(tmp_path / "hot.h5", "T", 2e9, [0, 9])
    with pytest.warns(PhysicsRangeWarning, match="temperature: 2 cell"):
        open_hdf5(path, temperature="T", electron_density="ne")


def test_argument_errors(h5file, tmp_path):
    # Same argument rules as read_hdf5 / Snapshot.from_arrays (tests/test_hdf5.py, test_snapshot.py).
    with pytest.raises(InputError, match="path: HDF5 file"):
        open_hdf5(tmp_path / "missing.h5", temperature="gas/T", electron_density="gas/ne")
    with pytest.raises(InputError, match="temperature: dataset 'nope' not found"):
        open_hdf5(h5file, temperature="nope", electron_density="gas/ne")
    with pytest.raises(InputError, match="density: give either"):
        open_hdf5(h5file, temperature="gas/T", electron_density="gas/ne", density="rho")
    with pytest.raises(InputError, match="ionization: only used with density"):
        open_hdf5(h5file, temperature="gas/T", electron_density="gas/ne", ionization="full")
    with pytest.raises(InputError, match="ionization: an in-memory fraction array"):
        open_hdf5(h5file, temperature="gas/T", density="rho", ionization=np.full(SHAPE, 0.5))
    with pytest.raises(InputError, match="units: 'other'"):
        open_hdf5(h5file, temperature="gas/T", electron_density="gas/ne", units={"other": "K"})


def test_a_file_changed_after_open_is_caught(tmp_path):
    # Common practice: never trace values that were not validated; name the brick.
    path = _bad_file(tmp_path / "snap.h5", "T", 1e4, [0])
    snap = open_hdf5(path, temperature="T", electron_density="ne")
    with h5py.File(path, "r+") as h5:
        h5["T"][12, 3, 4] = np.nan
    view = rtrace.View(npix=8, distance=1 * u.kpc)
    with pytest.raises(InputError, match=r"temperature: 1 of 125 cells of brick \[10:15, 0:5, 0:5\]"):
        rtrace.trace(snap, view, NU, brick_size=5)
    os.remove(path)
    with pytest.raises(InputError, match="not found"):
        rtrace.trace(snap, view, NU, brick_size=5)


@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # Saha on thin gas: a reader test
def test_source_is_small_to_ship(h5file):
    # Common practice: what a dask task receives for a file-backed snapshot: path, names, units, model; no arrays.
    snap = open_hdf5(h5file, temperature="gas/T", density="rho", ionization="saha")
    assert len(pickle.dumps(snap.field_source())) < 4000


# -- memory: a file several times the budget, traced in a child process -------------------------

_CHILD = textwrap.dedent("""
    import json, resource, sys, time, tracemalloc
    import astropy.units as u
    import numpy as np
    import rtrace
    from rtrace.io import read_hdf5

    def status(key):
        with open("/proc/self/status") as f:
            return next(int(line.split()[1]) * 1024 for line in f if line.startswith(key + ":"))

    path, tiny, budget = sys.argv[1], sys.argv[2], sys.argv[3]
    kw = dict(temperature="T", electron_density="ne", ion_density="ni")
    views = [rtrace.View(los=(0.3, -0.5, 0.8), north=(0, 0, 1), npix=96, distance=1 * u.kpc),
             rtrace.View(los=(0, 0, 1), npix=96, distance=1 * u.kpc)]
    nu = [1.0, 10.0] * u.GHz
    # warm-up on a tiny file: imports, numba caches, the Gaunt tables (a ~200 MB transient)
    small = rtrace.open_hdf5(tiny, **kw)
    for v in views:
        rtrace.trace(small, v, nu, supersample=1, max_memory=budget)
    # Forget the warm-up's peak: "5" resets the process's peak RSS (VmHWM, the counter
    # getrusage's ru_maxrss reads for a live process). ru_maxrss itself also keeps the
    # peak folded in by any thread that exited, so it cannot be reset; VmHWM is used.
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")
    base = status("VmRSS")
    rusage_base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    tracemalloc.start()
    t0 = time.perf_counter()
    snap = rtrace.open_hdf5(path, **kw)
    t_open = time.perf_counter() - t0
    results, allocated = [], []
    for v in views:
        tracemalloc.reset_peak()
        results.append(rtrace.trace(snap, v, nu, supersample=1, max_memory=budget))
        allocated.append(tracemalloc.get_traced_memory()[1])
    t_trace = time.perf_counter() - t0 - t_open
    growth = status("VmHWM") - base
    rusage_growth = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 - rusage_base
    tracemalloc.stop()
    eager = read_hdf5(path, **kw)
    diffs = []
    for v, res in zip(views, results):
        ref = rtrace.trace(eager, v, nu, supersample=1)
        for x, y in ((res.intensity.value, ref.intensity.value), (res.tau, ref.tau),
                     (res.emission_measure.value, ref.emission_measure.value)):
            diffs.append(float(np.max(np.abs(x - y)) / np.max(np.abs(y))))
    print(json.dumps({"growth": growth, "rusage_growth": rusage_growth, "allocated": allocated,
                      "t_open": t_open, "t_trace": t_trace, "diffs": diffs,
                      "same_checksum": snap.checksum() == eager.checksum()}))
""")


def _write_grid(path, n, rng):
    """Three float32 fields of n^3 cells, written slab by slab (the writer never holds a field)."""
    with h5py.File(path, "w") as h5:
        h5.attrs["cell_size"] = 0.01
        h5.attrs["length_unit"] = "pc"
        ds = {name: h5.create_dataset(name, (n, n, n), np.float32) for name in ("T", "ne", "ni")}
        ds["T"].attrs["units"] = "K"
        ds["ne"].attrs["units"] = ds["ni"].attrs["units"] = "cm**-3"
        step = max(1, (1 << 22) // (n * n))
        for i in range(0, n, step):
            m = min(step, n - i)
            ne = (100.0 * rng.lognormal(0.0, 1.0, (m, n, n))).astype(np.float32)
            ds["ne"][i : i + m] = ne
            ds["ni"][i : i + m] = 1.1 * ne
            ds["T"][i : i + m] = rng.uniform(5e3, 2e4, (m, n, n)).astype(np.float32)


@pytest.mark.skipif(not os.path.exists("/proc/self/clear_refs"), reason="needs Linux /proc to reset the peak RSS")
def test_out_of_core_trace_stays_within_the_budget(tmp_path):
    # 3 fields x 300^3 float32 = 324 MB on disk, traced under max_memory = 100 MB. Reference: the
    # in-memory trace of read_hdf5's snapshot; memory from /proc (common practice on Linux).
    rng = np.random.default_rng(1)
    big, tiny = tmp_path / "big.h5", tmp_path / "tiny.h5"
    _write_grid(big, 300, rng)
    _write_grid(tiny, 12, rng)
    size = os.path.getsize(big)
    budget = 100e6
    assert size > 3 * budget
    script = tmp_path / "child.py"
    script.write_text(_CHILD)
    out = subprocess.run(
        [sys.executable, str(script), str(big), str(tiny), "100 MB"],
        capture_output=True,
        text=True,
        timeout=300,
        env=dict(os.environ, PYTHONWARNINGS="ignore"),
    )
    assert out.returncode == 0, out.stderr[-3000:]
    report = json.loads(out.stdout.strip().splitlines()[-1])
    print(
        f"file {size / 1e6:.0f} MB, budget {budget / 1e6:.0f} MB: peak RSS growth {report['growth'] / 1e6:.1f} MB "
        f"(ru_maxrss growth {report['rusage_growth'] / 1e6:.1f} MB), "
        f"numpy allocations at peak {[round(a / 1e6, 1) for a in report['allocated']]} MB, "
        f"open {report['t_open']:.1f} s, traces {report['t_trace']:.1f} s"
    )
    assert report["growth"] < size / 2
    # what the planner budgets (brick fields, per-ray state, images) is what numpy allocated
    assert all(a < budget for a in report["allocated"])
    assert max(report["diffs"]) < 1e-6
    assert report["same_checksum"]


def test_file_backed_result_diagnostics(h5file):
    # The unabsorbed image retraces the file brick by brick; the ray-marching diagnostics refuse
    # a file-backed snapshot (they would read every field whole) and say what to do instead.
    from rtrace.errors import InputError

    snap = open_hdf5(h5file, temperature="gas/T", electron_density="gas/ne", cell_size=0.01 * u.pc)
    eager = read_hdf5(h5file, temperature="gas/T", electron_density="gas/ne", cell_size=0.01 * u.pc)
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=12, distance=1 * u.kpc)
    res = rtrace.trace(snap, view, NU, max_memory="20 MB")
    ref = rtrace.trace(eager, view, NU, supersample=1)
    assert np.allclose(res.unabsorbed_intensity.value, ref.unabsorbed_intensity.value, rtol=1e-10, atol=0)
    with pytest.raises(InputError, match="file-backed"):
        res.tau_unity_depth()
