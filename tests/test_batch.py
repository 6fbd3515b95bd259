"""Series of snapshots, shared colour scales, the resume manifest and [parallel] settings.

Small demo snapshots (16 cells, 16 pixels, two frequencies); pictures only where a test is about them.
"""

import importlib.util
import inspect
import json
import os
from pathlib import Path

import astropy.units as u
import h5py
import matplotlib
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table

matplotlib.use("Agg")  # no display in tests

from jobs import BEAM, NOISE, TWO_FREQUENCIES, demo, job_text, view, write  # noqa: E402

import rtrace  # noqa: E402
import rtrace.run.engine  # noqa: E402
from rtrace import plot  # noqa: E402
from rtrace.errors import InputError  # noqa: E402
from rtrace.io import atomic  # noqa: E402
from rtrace.run import colour_scales  # noqa: E402
from rtrace.run.job import load_job, override_parallel, run_job  # noqa: E402
from rtrace.run.manifest import MANIFEST_NAME, Manifest, file_sha256, inputs_key  # noqa: E402

SERIES = job_text(
    snapshot=demo(16, seeds=[1, 2, 3]),
    frequencies=TWO_FREQUENCIES,
    view=view("a", 16, "2 kpc"),
    beam=BEAM,
    noise=NOISE,
    output={"directory": "out", "pictures": False},
)

PER_SEED = [
    "a_intensity.fits",
    "a_tau.fits",
    "a_emission_measure.fits",
    "a_brightness_temperature.fits",
    "a_observed.fits",
    "a_sed.ecsv",
    "a_observed_sed.ecsv",
]


def expected(out, seeds=(1, 2, 3), job=True):
    """The outputs of the given seeds, and the job's own copy (``job.toml``, kept with the outputs)."""
    return {str(out / f"seed{s}" / n) for s in seeds for n in PER_SEED} | ({str(out / "job.toml")} if job else set())


def stamps(paths):
    """(inode, mtime_ns) of each path: both change when a file is rewritten (atomically replaced)."""
    return {p: (os.stat(p).st_ino, os.stat(p).st_mtime_ns) for p in paths}


def hidden_leftovers(out):
    """Temporary files or caches left in the output tree (the manifest is the only hidden file kept)."""
    return [p for p in out.rglob(".*") if p.name != MANIFEST_NAME]


def recorded(out):
    data = json.loads((out / MANIFEST_NAME).read_text())
    return {str(out / name) for name in data["outputs"]}


class Counter:
    """Wraps a function and counts its calls."""

    def __init__(self, func):
        self.func, self.calls = func, 0

    def __call__(self, *args, **kwargs):
        self.calls += 1
        return self.func(*args, **kwargs)


def crashing_record(fail_after, counts=lambda path: True):
    """Manifest.record that raises once the ``fail_after``-th counted output has been recorded."""
    real = Manifest.record
    seen = []

    def record(self, path, inputs):
        entry = real(self, path, inputs)
        if counts(str(path)):
            seen.append(path)
            if len(seen) >= fail_after:
                raise RuntimeError("simulated crash")
        return entry

    return record


# --- layout -------------------------------------------------------------------------------------


def test_series_writes_one_folder_per_snapshot_and_a_verifiable_manifest(tmp_path):
    job = load_job(write(tmp_path, SERIES))
    assert job.series and [m.label for m in job.snapshots] == ["seed1", "seed2", "seed3"]
    out = tmp_path / "out"
    written = run_job(job)
    assert set(written) == expected(out) and len(written) == 22 and written.skipped == []
    assert not hidden_leftovers(out)
    # each folder holds its own snapshot: emission measures differ between seeds
    em = [fits.getdata(out / f"seed{s}" / "a_emission_measure.fits") for s in (1, 2)]
    assert em[0].shape == em[1].shape and not np.allclose(em[0], em[1])
    data = json.loads((out / MANIFEST_NAME).read_text())
    assert data["format"] == "rtrace-manifest" and data["version"] == 1
    for name, entry in data["outputs"].items():
        path = out / name
        assert entry["size"] == path.stat().st_size and entry["sha256"] == file_sha256(path)
        assert len(entry["inputs"]) == 64


def test_inputs_key_is_order_independent_and_unit_aware():
    a = inputs_key({"x": 1 * u.GHz, "y": [1, 2]})
    assert a == inputs_key({"y": [1, 2], "x": 1 * u.GHz})
    assert a != inputs_key({"x": 1 * u.MHz, "y": [1, 2]})


# --- resume ------------------------------------------------------------------------------------


@pytest.mark.parametrize("how", ["after_output", "during_write"])
def test_interrupted_batch_resumes_with_exactly_the_missing_outputs(tmp_path, monkeypatch, how):
    job_path = write(tmp_path, SERIES)
    out = tmp_path / "out"
    with monkeypatch.context() as m:
        if how == "after_output":
            # the crash comes right after the 7th output was recorded as finished
            m.setattr(Manifest, "record", crashing_record(7))
        else:
            # the crash comes inside atomic_path, after a file's bytes are written, before its rename
            real = atomic._fsync_file
            calls = []

            def crash(path):
                calls.append(path)
                if len(calls) == 11:
                    raise RuntimeError("simulated crash")
                real(path)

            m.setattr(atomic, "_fsync_file", crash)
        with pytest.raises(RuntimeError, match="simulated crash"):
            run_job(load_job(job_path))
    assert not hidden_leftovers(out)  # no temporary file survives the crash
    done = recorded(out)
    present = {str(p) for p in out.rglob("*") if p.is_file() and p.name != MANIFEST_NAME}
    assert done and done < expected(out) and done <= present
    if how == "after_output":
        assert len(done) == 7 and present == done
    for p in done:  # what the manifest calls finished is intact
        entry = json.loads((out / MANIFEST_NAME).read_text())["outputs"][os.path.relpath(p, out)]
        assert os.stat(p).st_size == entry["size"] and file_sha256(p) == entry["sha256"]
    before = stamps(done)
    again = run_job(load_job(job_path))
    assert set(again) == expected(out) - done
    assert set(again.skipped) == done
    assert stamps(done) == before  # finished outputs were not rewritten
    assert recorded(out) == expected(out)
    for p in again:
        if p.endswith(".fits"):
            assert fits.getdata(p).shape[-2:] == (16, 16)
    assert not hidden_leftovers(out)


def test_truncated_edited_and_missing_outputs_are_redone(tmp_path, monkeypatch):
    job_path = write(tmp_path, SERIES)
    out = tmp_path / "out"
    run_job(load_job(job_path))
    truncated, edited, deleted = out / "seed2/a_tau.fits", out / "seed3/a_sed.ecsv", out / "seed1/a_intensity.fits"
    full_size = truncated.stat().st_size
    with open(truncated, "r+b") as f:
        f.truncate(full_size // 2)
    text = bytearray(edited.read_bytes())
    text[-2] = ord("7") if text[-2] != ord("7") else ord("8")  # same size, different content
    edited.write_bytes(bytes(text))
    deleted.unlink()
    damaged = {str(truncated), str(edited), str(deleted)}
    untouched = expected(out) - damaged
    before = stamps(untouched)
    traces = Counter(rtrace.trace)
    monkeypatch.setattr(rtrace.run.engine, "trace", traces)
    again = run_job(load_job(job_path))
    assert set(again) == damaged and set(again.skipped) == untouched
    assert traces.calls == 3  # one view of each damaged snapshot
    assert stamps(untouched) == before
    assert truncated.stat().st_size == full_size and fits.getdata(truncated).shape == (2, 16, 16)
    assert len(Table.read(edited)) == 2  # astropy's ECSV reader parses the rewritten table


def test_changed_settings_redo_only_the_outputs_they_affect(tmp_path):
    job_path = write(tmp_path, SERIES)
    out = tmp_path / "out"
    run_job(load_job(job_path))
    observed = {str(out / f"seed{s}" / n) for s in (1, 2, 3) for n in ("a_observed.fits", "a_observed_sed.ecsv")}
    before = stamps(expected(out, job=False) - observed)
    # the noise changes the observed map and its SED, not the model cubes (and the job's copy, whose
    # text changed)
    again = run_job(load_job(write(tmp_path, SERIES.replace('rms = "0.1 mJy"', 'rms = "0.3 mJy"'))))
    assert set(again) == observed | {str(out / "job.toml")}
    assert stamps(expected(out, job=False) - observed) == before
    # a different set of snapshots: only the new one is made
    again = run_job(
        load_job(
            write(tmp_path, SERIES.replace("[1, 2, 3]", "[1, 2, 3, 4]").replace('rms = "0.1 mJy"', 'rms = "0.3 mJy"'))
        )
    )
    assert set(again) == expected(out, seeds=(4,))
    # the view geometry changes every output
    again = run_job(load_job(write(tmp_path, SERIES.replace("npix = 16", "npix = 12"))))
    assert set(again) == expected(out)
    assert fits.getdata(out / "seed1/a_tau.fits").shape == (2, 12, 12)


def test_restart_ignores_the_manifest(tmp_path):
    job_path = write(tmp_path, SERIES)
    out = tmp_path / "out"
    run_job(load_job(job_path))
    before = stamps(expected(out))
    again = run_job(load_job(job_path), restart=True)
    assert set(again) == expected(out) and again.skipped == []
    after = stamps(expected(out))
    assert all(after[p] != before[p] for p in before)
    assert recorded(out) == expected(out)


def test_unreadable_manifest_is_ignored_with_a_warning(tmp_path):
    job_path = write(tmp_path, SERIES.replace("[1, 2, 3]", "[1]"))
    out = tmp_path / "out"
    run_job(load_job(job_path))
    (out / MANIFEST_NAME).write_text("{not json")
    with pytest.warns(UserWarning, match="unreadable"):
        again = run_job(load_job(job_path))
    assert set(again) == expected(out, seeds=(1,))


# --- HDF5 series -------------------------------------------------------------------------------


def snapshot_file(path, scale):
    x = np.linspace(-1, 1, 8)
    r2 = x[:, None, None] ** 2 + x[None, :, None] ** 2 + x[None, None, :] ** 2
    with h5py.File(path, "w") as f:
        f.create_dataset("T", data=np.full((8, 8, 8), 1e4)).attrs["units"] = "K"
        f.create_dataset("ne", data=scale * 100.0 * np.exp(-r2)).attrs["units"] = "cm**-3"


# width: twice the grid, so no emission at the image edge (it would warn)
HDF5_SERIES = job_text(
    snapshot={
        "kind": "hdf5",
        "pattern": "run/snap_*.h5",
        "temperature": "T",
        "electron_density": "ne",
        "cell_size": "0.01 pc",
    },
    frequencies={"values": ["1 GHz"]},
    view=view("z", 16, "1 kpc", width="0.16 pc"),
    output={"directory": "out", "pictures": False},
)


def test_hdf5_pattern_series_and_a_rewritten_snapshot(tmp_path):
    (tmp_path / "run").mkdir()
    for i, scale in ((20, 2.0), (10, 1.0)):
        snapshot_file(tmp_path / "run" / f"snap_{i:04d}.h5", scale)
    job = load_job(write(tmp_path, HDF5_SERIES))
    assert [m.label for m in job.snapshots] == ["snap_0010", "snap_0020"]  # sorted
    out = tmp_path / "out"
    names = ["z_intensity.fits", "z_tau.fits", "z_emission_measure.fits", "z_brightness_temperature.fits", "z_sed.ecsv"]
    all_outputs = {str(out / lab / n) for lab in ("snap_0010", "snap_0020") for n in names}
    assert set(run_job(job)) == all_outputs | {str(out / "job.toml")}  # and the job's copy
    em10, em20 = (fits.getdata(out / lab / "z_emission_measure.fits") for lab in ("snap_0010", "snap_0020"))
    assert em20.max() == pytest.approx(4 * em10.max(), rel=1e-5)  # EM ~ n_e^2: each file was traced
    # a snapshot written again (new mtime) redoes its own outputs only
    snapshot_file(tmp_path / "run" / "snap_0010.h5", 3.0)
    st = os.stat(tmp_path / "run" / "snap_0010.h5")
    os.utime(tmp_path / "run" / "snap_0010.h5", ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))
    again = run_job(load_job(tmp_path / "job.toml"))
    assert set(again) == {p for p in all_outputs if "snap_0010" in p}
    assert fits.getdata(out / "snap_0010/z_emission_measure.fits").max() == pytest.approx(9 * em10.max(), rel=1e-5)


# --- shared colour scales ----------------------------------------------------------------------


def test_series_pictures_share_colour_scales_and_resume_from_the_cache(tmp_path, monkeypatch):
    from rtrace.analysis import middle_frequency_index

    QUANTITIES = (
        "intensity",
        "tau",
        "tau_unity_frequency",
        "brightness_temperature",
        "emission_measure",
        "spectral_index",
    )
    text = SERIES.replace("[1, 2, 3]", "[1, 2]").replace("pictures = false", "pictures = true\nfits = false")
    job_path = write(tmp_path, text)
    out = tmp_path / "out"
    drawn = []

    def spy(func, quantity=None):
        def wrapper(obj, *args, **kwargs):
            fig = func(obj, *args, **kwargs)
            image = fig.axes[0].get_images()[0]
            drawn.append(
                {
                    "path": kwargs["path"],
                    "obj": obj,
                    "kw": kwargs,
                    "norm": image.norm,
                    "quantity": kwargs.get("quantity", quantity),
                }
            )
            return fig

        return wrapper

    monkeypatch.setattr(plot, "plot_panels", spy(plot.plot_panels))
    monkeypatch.setattr(plot, "plot_map", spy(plot.plot_map))
    monkeypatch.setattr(plot, "plot_tau_unity", spy(plot.plot_tau_unity, "tau_unity_frequency"))
    traces = Counter(rtrace.trace)
    monkeypatch.setattr(rtrace.run.engine, "trace", traces)
    with monkeypatch.context() as m:
        # interrupted after the second series picture (all tracing done, pictures half drawn)
        m.setattr(Manifest, "record", crashing_record(2, lambda p: p.endswith(".png") and not p.endswith("_sed.png")))
        with pytest.raises(RuntimeError, match="simulated crash"):
            run_job(load_job(job_path))
    assert traces.calls == 2 and len(drawn) == 2
    first = recorded(out)
    again = run_job(load_job(job_path))
    assert traces.calls == 2  # resumed from the cached results: nothing traced again
    stems = QUANTITIES + ("observed", "observed_spectral_index")
    pictures = {str(out / f"seed{s}" / f"a_{q}.png") for s in (1, 2) for q in stems}
    assert set(again) == pictures - first and len(drawn) == 16
    assert not hidden_leftovers(out)  # the cache is gone once the series is complete

    by_q = {}
    for d in drawn:
        by_q.setdefault(Path(d["path"]).stem.split("_", 1)[1], []).append(d)
    assert set(by_q) == set(stems)
    for q, items in by_q.items():
        assert len(items) == 2, q  # one per snapshot, across the two runs
        a, b = (d["norm"] for d in items)
        assert (a.vmin, a.vmax) == pytest.approx((b.vmin, b.vmax)), q
    # the shared scale spans both snapshots' images, so at least one is drawn on a wider scale than alone
    # the tau picture is one map, at the frequency nearest the geometric middle of the range
    tau_max = [float(np.max(d["obj"].tau[middle_frequency_index(d["obj"])])) for d in by_q["tau"]]
    assert by_q["tau"][0]["norm"].vmax == pytest.approx(max(tau_max))
    assert min(tau_max) < 0.9 * max(tau_max)
    em_max = [float(d["obj"].emission_measure.to_value(u.pc * u.cm**-6).max()) for d in by_q["emission_measure"]]
    assert by_q["emission_measure"][0]["norm"].vmax == pytest.approx(max(em_max))
    jy = [float(d["obj"].data.to_value(u.Jy / u.beam).max()) for d in by_q["observed"]]
    for d in by_q["observed"]:
        assert d["obj"] is not d["obj"].result and d["kw"]["vmax"].to_value(u.Jy / u.beam) == pytest.approx(max(jy))
    for d in by_q["intensity"]:  # the model: the traced Result, not the observed map
        assert isinstance(d["obj"], rtrace.Result)

    # a deleted picture: only it is drawn again, from one retraced view (the cache is gone)
    (out / "seed1/a_tau.png").unlink()
    again = run_job(load_job(job_path))
    assert list(again) == [str(out / "seed1/a_tau.png")] and traces.calls == 3
    assert drawn[-1]["norm"].vmax == pytest.approx(max(tau_max))


@pytest.fixture(scope="module")
def observed():
    from rtrace import demo

    res = rtrace.trace(demo.scenario(n=16, seed=2), rtrace.View(npix=16, distance=2 * u.kpc), [1, 10] * u.GHz)
    import radio_beam

    # noise well above the faintest emission, so that the intensity map has negative pixels
    sky = res.observe(beam=radio_beam.Beam(60 * u.arcsec), noise=0.3 * u.Jy / u.beam, seed=1)
    return res, sky


@pytest.mark.parametrize(
    "stem,quantity,kind",
    [
        ("intensity", "intensity", "panels"),
        ("tau", "tau", "map"),
        ("observed", "intensity", "panels"),
        ("spectral_index", "spectral_index", "map"),
        ("observed_spectral_index", "spectral_index", "map"),
        ("tau_unity_frequency", "tau_unity_frequency", "tau_unity"),
    ],
)
def test_a_series_of_one_gets_the_automatic_scale(observed, stem, quantity, kind):
    """The series limits follow the automatic rules: one snapshot alone looks as it would without them."""
    res, sky = observed
    lim = colour_scales.series_limits([colour_scales.view_ranges(res, sky, 2)])[stem]
    obj = sky if stem.startswith("observed") else res
    kw = {"quantity": quantity}
    if quantity == "spectral_index":
        kw["frequency"] = (1 * u.GHz, 10 * u.GHz)
    elif quantity == "tau":
        kw.update(frequency=0, stretch="log")  # the middle of two frequencies: the lower one
    elif quantity == "tau_unity_frequency":
        kw = {}
    draw = {"map": plot.plot_map, "panels": plot.plot_panels, "tau_unity": plot.plot_tau_unity}[kind]
    auto = draw(obj, **kw).axes[0].get_images()[0].norm
    given = (
        draw(obj, vmin=u.Quantity(lim["vmin"], lim["unit"]), vmax=u.Quantity(lim["vmax"], lim["unit"]), **kw)
        .axes[0]
        .get_images()[0]
        .norm
    )
    assert type(given) is type(auto)
    assert (given.vmin, given.vmax) == pytest.approx((auto.vmin, auto.vmax), rel=1e-12)
    if stem == "observed":
        assert lim["vmin"] < 0  # noise: negative pixels set the lower end


def test_plot_vmin_vmax(observed):
    res, sky = observed
    norm = plot.plot_map(res, quantity="tau", vmin=0.0, vmax=20.0, stretch="linear").axes[0].get_images()[0].norm
    assert (norm.vmin, norm.vmax) == (0.0, 20.0)
    # a limit in any flux unit is converted to the plotted one: Jy/beam for this map, mJy/pixel
    # (the prefix of its peak) for the unconvolved one
    peak = float(sky.data[0].to_value(u.Jy / u.beam).max())
    fig = plot.plot_map(sky, quantity="intensity", vmax=2e3 * peak * u.mJy / u.beam, stretch="linear")
    image = fig.axes[0].get_images()[0]
    assert "(Jy beam" in fig.axes[1].get_ylabel() and image.norm.vmax == pytest.approx(2 * image.get_array().max())
    pix = float(res.flux_density().to_value(u.Jy).max())  # more than any one pixel
    fig = plot.plot_map(res, quantity="intensity", vmax=pix * u.Jy / u.pix, stretch="linear")
    assert "(mJy pixel" in fig.axes[1].get_ylabel()
    assert fig.axes[0].get_images()[0].norm.vmax == pytest.approx(1e3 * pix)
    with pytest.raises(InputError, match="vmax: '1.0 K' cannot be converted"):
        plot.plot_map(sky, quantity="intensity", vmax=1 * u.K)
    with pytest.raises(InputError, match="vmax: must exceed vmin"):
        plot.plot_panels(res, quantity="tau", vmin=2.0, vmax=1.0)


# --- [parallel] --------------------------------------------------------------------------------


class RealTrace:
    func = staticmethod(rtrace.trace)


def test_parallel_client_is_made_lazily_and_passed_to_trace(tmp_path, monkeypatch):
    import dask.distributed

    seen, made = [], []

    def new_trace(
        snapshot, view, frequencies, *, background=None, supersample=1, tolerance=None, client=None, max_memory=None
    ):
        seen.append((client, max_memory))
        return RealTrace.func(
            snapshot, view, frequencies, background=background, supersample=supersample, tolerance=tolerance
        )

    class Cluster:
        def __init__(self, **kw):
            self.kw, self.closed = kw, False
            made.append(self)

        def close(self):
            self.closed = True

    class Client:
        def __init__(self, target):
            self.target, self.closed = target, False
            made.append(self)

        def close(self):
            self.closed = True

    monkeypatch.setattr(rtrace.run.engine, "trace", new_trace)
    monkeypatch.setattr(dask.distributed, "LocalCluster", Cluster)
    monkeypatch.setattr(dask.distributed, "Client", Client)
    text = SERIES.replace("[1, 2, 3]", "[1, 2]") + '\n[parallel]\nworkers = 3\nmax_memory = "2 GB"\n'
    job = load_job(write(tmp_path, text))
    run_job(job)
    cluster, client = made
    assert cluster.kw == {"n_workers": 3, "threads_per_worker": 1} and client.target is cluster
    assert [c for c, _ in seen] == [client, client]  # one client for the whole series
    assert all(m == 2_000_000_000 * u.byte for _, m in seen)
    assert cluster.closed and client.closed
    run_job(job)  # everything up to date: no cluster started
    assert len(made) == 2
    job = override_parallel(job, scheduler="tcp://127.0.0.1:8786")
    run_job(job, restart=True)
    assert made[2].target == "tcp://127.0.0.1:8786" and seen[-1][0] is made[2]


def _trace_takes(keyword, module=None):
    if keyword not in inspect.signature(rtrace.trace).parameters:
        return False
    return module is None or importlib.util.find_spec(module) is not None


def _same_images(serial, other):
    for a, b in zip(sorted(serial), sorted(other), strict=True):
        if a.endswith(("_tau.fits", "_emission_measure.fits", "_intensity.fits")):
            np.testing.assert_allclose(fits.getdata(b), fits.getdata(a), rtol=1e-5, atol=1e-30)


@pytest.mark.skipif(not _trace_takes("max_memory"), reason="this rtrace build cannot bound trace memory yet")
def test_max_memory_gives_the_images_of_an_unbounded_run(tmp_path):
    # the same lattice in both (bricked traces have no split: see trace's tolerance)
    text = (
        SERIES.replace("[1, 2, 3]", "[1]").replace("npix = 16", "npix = 16\nlos = [0, 0.6, 0.8]")
        + "\n[trace]\nsupersample = 1\n"
    )
    serial = run_job(load_job(write(tmp_path, text)))
    bounded = run_job(
        load_job(
            write(
                tmp_path, text.replace('directory = "out"', 'directory = "mem"') + '\n[parallel]\nmax_memory = "1 MB"\n'
            )
        )
    )
    assert len(bounded) == len(serial)
    _same_images(serial, bounded)


@pytest.mark.skipif(
    not _trace_takes("client", "rtrace.transfer.parallel"),
    reason="this rtrace build has no cluster support in rtrace.trace yet",
)
def test_local_cluster_gives_the_serial_images(tmp_path):
    text = SERIES.replace("[1, 2, 3]", "[1]")
    serial = run_job(load_job(write(tmp_path, text)))
    par = load_job(
        write(tmp_path, text.replace('directory = "out"', 'directory = "par"') + "\n[parallel]\nworkers = 1\n")
    )
    parallel = run_job(par)
    assert len(parallel) == len(serial)
    _same_images(serial, parallel)


# --- the series cache: plain arrays, checksummed and signed, never code ------------------------

PICTURE_SERIES = SERIES.replace("[1, 2, 3]", "[1, 2]").replace("pictures = false", "pictures = true\nfits = false")


def _pixels(path):
    import matplotlib.image as mimage

    return mimage.imread(path)


@pytest.fixture(scope="module")
def traced_unit(tmp_path_factory):
    """A unit of a picture series and its traced (Result, SkyMap), made the way a run makes them."""
    from rtrace.run.batch import plan_units
    from rtrace.run.engine import Engine, parallel_keywords
    from rtrace.run.inputs import build_snapshot
    from rtrace.run.job import build_views

    tmp = tmp_path_factory.mktemp("cache")
    job = load_job(write(tmp, PICTURE_SERIES))
    units = plan_units(job, build_views(job), tmp / "out")
    with Engine(job, parallel_keywords(job)) as engine:
        value = engine.trace(build_snapshot(job, units[0].member), units[0].view, "seed1", "a")
    return job, units, value, tmp


def test_series_cache_gives_back_what_draws_the_same_pictures(traced_unit, tmp_path):
    # The round trip must keep everything the pictures and the shared colour scales use: compared
    # against pictures drawn from the traced objects themselves (pixel by pixel).
    from rtrace.run.batch import Cache
    from rtrace.run.products import picture_outputs

    job, units, (res, sky), _ = traced_unit
    cache = Cache(tmp_path / ".rtrace-cache")
    cache.put(units[0], (res, sky))
    assert cache._file(units[0]).suffix == ".npz"
    got_res, got_sky = Cache(cache.folder).get(units[0])  # as a resumed run reads it
    assert got_res is not res and got_sky.result is got_res
    np.testing.assert_array_equal(got_res.intensity, res.intensity)
    np.testing.assert_array_equal(got_sky.data, sky.data)
    assert got_sky.beams == sky.beams and got_sky.seed == sky.seed and got_res.provenance == res.provenance
    assert colour_scales.view_ranges(got_res, got_sky, 2) == colour_scales.view_ranges(res, sky, 2)
    plan = picture_outputs(job, units[0], "png", None)
    assert len(plan) == 8
    for output in plan:
        a, b = tmp_path / f"live_{output.path.name}", tmp_path / f"cached_{output.path.name}"
        output.make(a, res, sky)
        output.make(b, got_res, got_sky)
        np.testing.assert_array_equal(_pixels(a), _pixels(b), err_msg=output.path.name)


class _Planted:
    """Unpickling this would create a file: proof that no code ran."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return (Path(self.marker).touch, ())


def _tamper(path, how, tmp_path, units):
    import io
    import pickle

    from rtrace.run.batch import Cache

    data = path.read_bytes()
    if how == "flipped":  # one byte a third of the way in (array data)
        k = len(data) // 3
        path.write_bytes(data[:k] + bytes([data[k] ^ 0x40]) + data[k + 1 :])
    elif how == "truncated":
        path.write_bytes(data[: len(data) // 2])
    elif how == "empty":
        path.write_bytes(b"")
    elif how == "pickle":
        path.write_bytes(pickle.dumps(_Planted(tmp_path / "ran")))
    elif how == "npz_with_object_array":
        with np.load(path) as npz:
            arrays = {k: npz[k] for k in npz.files}
        arrays["meta"] = np.array([_Planted(tmp_path / "ran")], dtype=object)
        buf = io.BytesIO()
        np.savez(buf, **arrays)
        path.write_bytes(buf.getvalue())
    elif how == "checksum_recomputed":  # a forger who edits the data and fixes the SHA-256 but lacks the key
        from rtrace.run.series_cache import content_digest

        with np.load(path) as npz:
            arrays = {k: npz[k] for k in npz.files}
        arrays["intensity"] = arrays["intensity"] * 2
        digest = content_digest({k: v for k, v in arrays.items() if k != "checksum"})
        sig = arrays["checksum"].tobytes().decode().split(" ")[1]
        arrays["checksum"] = np.frombuffer(f"{digest} {sig}".encode(), np.uint8)
        buf = io.BytesIO()
        np.savez(buf, **arrays)
        path.write_bytes(buf.getvalue())
    elif how == "another_view":  # a valid entry of another snapshot, copied under this name
        other = Cache(path.parent.parent)
        res, sky = other.get(units[0])
        other.put(units[1], (res, sky))
        path.write_bytes(other._file(units[1]).read_bytes())
    else:
        raise AssertionError(how)


TAMPERING = [
    "flipped",
    "truncated",
    "empty",
    "pickle",
    "npz_with_object_array",
    "checksum_recomputed",
    "another_view",
    "another_user",
]


@pytest.mark.parametrize("how", TAMPERING)
def test_series_cache_never_uses_a_damaged_or_foreign_entry(traced_unit, tmp_path, monkeypatch, how):
    # Common practice for caches in shared folders: read no pickles, verify a checksum (SHA-256, FIPS 180-4)
    # and a signature (HMAC-SHA256, RFC 2104) with a key kept outside the output folder.
    from rtrace.run.batch import Cache

    _, units, value, _ = traced_unit
    monkeypatch.setenv("RTRACE_KEY_DIR", str(tmp_path / "key"))
    cache = Cache(tmp_path / ".rtrace-cache")
    cache.put(units[0], value)
    path = cache._file(units[0])
    assert cache.get(units[0]) is not None
    if how == "another_user":  # the same entry, written by a run holding another key
        monkeypatch.setenv("RTRACE_KEY_DIR", str(tmp_path / "someone-else"))
        Cache(cache.folder).put(units[0], value)
        monkeypatch.setenv("RTRACE_KEY_DIR", str(tmp_path / "key"))
    else:
        _tamper(path, how, tmp_path, units)
    assert Cache(cache.folder).get(units[0]) is None
    assert not (tmp_path / "ran").exists()  # nothing in the file was executed
    assert oct((tmp_path / "key" / "series-cache.key").stat().st_mode & 0o777) == "0o600"


@pytest.mark.parametrize("how", ["flipped", "truncated", "pickle"])
def test_a_tampered_cache_entry_is_retraced_and_draws_the_clean_runs_pictures(tmp_path, monkeypatch, how):
    job_path = write(tmp_path, PICTURE_SERIES)
    clean = run_job(
        load_job(write(tmp_path, PICTURE_SERIES.replace('directory = "out"', 'directory = "clean"'), "clean.toml"))
    )
    traces = Counter(rtrace.trace)
    monkeypatch.setattr(rtrace.run.engine, "trace", traces)
    with monkeypatch.context() as m:
        # interrupted after the first series picture (seed1/a_intensity.png): both views traced and cached
        m.setattr(Manifest, "record", crashing_record(1, lambda p: p.endswith(".png") and not p.endswith("_sed.png")))
        with pytest.raises(RuntimeError, match="simulated crash"):
            run_job(load_job(job_path))
    assert traces.calls == 2
    entries = sorted((tmp_path / "out" / ".rtrace-cache").rglob("*.npz"))
    assert [e.parent.name for e in entries] == ["seed1", "seed2"]
    _tamper(entries[1], how, tmp_path, None)
    again = run_job(load_job(job_path))
    assert traces.calls == 3  # seed2 traced again; seed1 drawn from its intact entry
    assert not (tmp_path / "ran").exists()
    pictures = sorted(p for p in clean if p.endswith(".png") and not p.endswith("_sed.png"))
    assert len(pictures) == 16
    assert {p.replace("/clean/", "/out/") for p in pictures} == set(again) | {
        str(tmp_path / "out/seed1/a_intensity.png")
    }
    for p in pictures:
        np.testing.assert_array_equal(_pixels(p), _pixels(p.replace("/clean/", "/out/")), err_msg=p)
    assert not hidden_leftovers(tmp_path / "out")


def test_a_snapshot_edited_with_its_size_and_mtime_kept_is_traced_again(tmp_path):
    # The manifest once keyed snapshots on name, size and mtime only: an edit that restores the mtime was missed.
    (tmp_path / "run").mkdir()
    snap = tmp_path / "run" / "snap_0010.h5"
    snapshot_file(snap, 1.0)
    job_path = write(tmp_path, HDF5_SERIES)
    out = tmp_path / "out"
    run_job(load_job(job_path))
    em = fits.getdata(out / "snap_0010/z_emission_measure.fits").max()
    st = os.stat(snap)
    with h5py.File(snap, "r+") as f:  # same datasets, same size: only values change
        f["ne"][...] = 2 * f["ne"][...]
    os.utime(snap, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert (os.stat(snap).st_size, os.stat(snap).st_mtime_ns) == (st.st_size, st.st_mtime_ns)
    again = run_job(load_job(job_path))
    assert str(out / "snap_0010/z_emission_measure.fits") in again
    assert fits.getdata(out / "snap_0010/z_emission_measure.fits").max() == pytest.approx(4 * em, rel=1e-5)
    # a copy or touch that keeps the bytes is no change: nothing is traced again
    os.utime(snap, ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))
    assert list(run_job(load_job(job_path))) == []


def test_snapshot_identity_of_large_files_samples_them(tmp_path):
    # What a sampled hash can and cannot see, on a file above the full-hash limit (made small for the test).
    from rtrace.run.manifest import snapshot_identity

    path = tmp_path / "big.bin"
    block = 1 << 20
    path.write_bytes(bytes(40 * block))
    limit = 4 * block
    first = snapshot_identity(path, full_limit=limit)
    assert set(first) == {"file", "size", "mtime_ns", "sampled_sha256"}
    assert snapshot_identity(path) == {"file": "big.bin", "size": 40 * block, "sha256": file_sha256(path)}
    st = os.stat(path)

    def edit(offset):
        with open(path, "r+b") as f:
            f.seek(offset)
            old = f.read(1)
            f.seek(offset)
            f.write(bytes([old[0] ^ 1]))
        os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
        return snapshot_identity(path, full_limit=limit)["sampled_sha256"]

    assert edit(0) != first["sampled_sha256"]  # first MiB
    assert edit(0) == first["sampled_sha256"]  # put back
    assert edit(40 * block - 1) != first["sampled_sha256"]  # last MiB
    edit(40 * block - 1)
    # the 16 samples start at round(39 MiB * k / 17): the byte just before the second sample lies in no block
    gap = int(round(39 * block * 2 / 17)) - 1
    assert gap > int(round(39 * block / 17)) + block
    assert edit(gap) == first["sampled_sha256"]  # documented as not detected


def test_an_unreadable_snapshot_is_named_before_any_work(tmp_path):
    from rtrace.run.batch import fingerprint

    (tmp_path / "run").mkdir()
    snapshot_file(tmp_path / "run" / "snap_0010.h5", 1.0)
    job = load_job(write(tmp_path, HDF5_SERIES))
    (tmp_path / "run" / "snap_0010.h5").unlink()
    with pytest.raises(InputError, match=r"\[snapshot\] path: .*snap_0010.h5.* not a regular file"):
        fingerprint(job, job.snapshots[0])


def test_each_snapshot_of_a_series_gets_its_own_reproducible_noise(tmp_path):
    # Identical noise in every snapshot would show as persistent structure in differences between them.
    from rtrace.run.engine import noise_seed

    series = load_job(write(tmp_path, SERIES))
    seeds = [noise_seed(series, m.label) for m in series.snapshots]
    assert len(set(seeds)) == len(seeds) and seeds == [noise_seed(series, m.label) for m in series.snapshots]
    single = load_job(write(tmp_path, SERIES.replace("seeds = [1, 2, 3]", "seed = 1"), "single.toml"))
    assert noise_seed(single, single.snapshots[0].label) == 3  # a single snapshot keeps [noise].seed
    out = tmp_path / "out"
    run_job(series)
    # the observed SED of each snapshot says what it was computed from; the model's says it is the model
    assert Table.read(out / "seed1" / "a_observed_sed.ecsv").meta["computed from"].startswith("observed map")
    assert Table.read(out / "seed1" / "a_sed.ecsv").meta["computed from"].startswith("model")
