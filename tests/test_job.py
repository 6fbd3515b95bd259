"""Job files: validated in full before any work; errors name the key, the problem and a suggestion."""

import astropy.units as u
import numpy as np
import pytest
from jobs import demo, job_text, view, write

from rtrace.errors import ConfigError
from rtrace.run.job import load_job, override_parallel, parse_job
from rtrace.run.snapshot_sections import Member

BASE = job_text(snapshot=demo(16), frequencies={"values": ["1 GHz", "5 GHz"]}, view=view("a", 16, "1 kpc"))


def test_minimal_job_parses(tmp_path):
    job = load_job(write(tmp_path, BASE))
    assert job.frequencies.unit == u.Hz and len(job.frequencies) == 2
    assert job.views[0].distance.unit == u.cm
    assert job.output.directory == (tmp_path / "rtrace-output").resolve()


@pytest.mark.parametrize(
    "patch,message",
    [
        (("[[view]]", "[[veiw]]"), r"unknown table '\[veiw\]' \(did you mean 'view'\?\)"),
        (("cells = 16", "cels = 16"), r"\[snapshot\]: unknown key 'cels' \(did you mean 'cells'\?\)"),
        (("npix = 16", "npix = 16\nwidht = '1 pc'"), r"unknown key 'widht' \(did you mean 'width'\?\)"),
        (('distance = "1 kpc"', 'distance = "1 GHz"'), r"\[\[view\]\] #1.distance: '1 GHz' is not a length"),
        (('distance = "1 kpc"', 'distance = "1000"'), r"distance: '1000' has no unit; expected a length"),
        (('"5 GHz"', '"5 K"'), r"\[frequencies\].values\[1\]: '5 K' is not a frequency"),
        (
            ('kind = "demo"', 'kind = "hdf5"\npath = "nope.h5"\ntemperature = "T"\nelectron_density = "ne"'),
            r"\[snapshot\].path: file not found",
        ),
        (('kind = "demo"', 'kind = "movie"'), r"\[snapshot\].kind: 'movie' is not 'demo', 'hdf5' or 'yt'"),
        (("npix = 16", "npix = 16\nlos = [0, 0, 1]\nnorth = [0, 0, 1]"), r"'a': north: parallel to los"),
    ],
)
def test_validation_errors(tmp_path, patch, message):
    old, new = patch
    assert old in BASE
    with pytest.raises(ConfigError, match=message):
        load_job(write(tmp_path, BASE.replace(old, new, 1)))
    assert not (tmp_path / "rtrace-output").exists()  # nothing was written


def test_noise_needs_a_beam_and_matching_lengths(tmp_path):
    with pytest.raises(ConfigError, match=r"\[noise\]: noise is defined per beam"):
        load_job(write(tmp_path, BASE + '\n[noise]\nrms = "1 mJy"\n'))
    text = BASE + '\n[beam]\nmajor = "10 arcsec"\n[noise]\nrms = ["1 mJy", "2 mJy", "3 mJy"]\n'
    with pytest.raises(ConfigError, match=r"\[noise\].rms: 3 values for 2 frequencies"):
        load_job(write(tmp_path, text))
    text = BASE + '\n[beam]\nmajor = "10 arcsec"\npa = "3 pc"\n'
    with pytest.raises(ConfigError, match=r"\[beam\].pa: '3 pc' is not an angle"):
        load_job(write(tmp_path, text))


def test_frequency_ranges_and_duplicates(tmp_path):
    text = BASE.replace('values = ["1 GHz", "5 GHz"]', 'start = "1 GHz"\nstop = "100 GHz"\nnum = 3')
    job = load_job(write(tmp_path, text))
    assert job.frequencies.to_value(u.GHz) == pytest.approx([1, 10, 100])
    with pytest.raises(ConfigError, match="missing num"):
        load_job(write(tmp_path, BASE.replace('values = ["1 GHz", "5 GHz"]', 'start = "1 GHz"\nstop = "2 GHz"')))
    with pytest.raises(ConfigError, match="'a' is used by another view"):
        load_job(write(tmp_path, BASE + '\n[[view]]\nname = "a"\n'))


@pytest.mark.parametrize(
    "start,stop,num,spacing,kind",
    [
        ("0.3 GHz", "100 GHz", 6, "log", "log"),
        ("1 GHz", "100 GHz", 8, None, "log"),
        ("90 GHz", "1 GHz", 5, "log", "log"),
        ("1 GHz", "20 GHz", 7, "linear", "linear"),
        ("1.4 GHz", "43 GHz", 2, "log", "linear"),
        ("5 GHz", "5 GHz", 1, "log", "linear"),
    ],
)
def test_frequency_ranges_are_exactly_regular(tmp_path, start, stop, num, spacing, kind):
    from rtrace.io.fits import AXIS_RTOL, spectral_layout

    lines = f'start = "{start}"\nstop = "{stop}"\nnum = {num}' + (f'\nspacing = "{spacing}"' if spacing else "")
    nu = load_job(write(tmp_path, BASE.replace('values = ["1 GHz", "5 GHz"]', lines))).frequencies.to_value(u.Hz)
    assert len(nu) == num
    first, last = u.Quantity(start).to_value(u.Hz), u.Quantity(stop).to_value(u.Hz)
    assert nu[0] == first and nu[-1] == pytest.approx(last, rel=1e-14)
    if num > 2:
        # geometric: equal ratios; even: equal steps, each to float64 rounding (common practice)
        steps = np.diff(np.log(nu)) if kind == "log" else np.diff(nu)
        assert np.allclose(steps, steps[0], rtol=1e-12, atol=0)
    assert spectral_layout(nu * u.Hz) == kind  # so cubes get a FREQ or FREQ-LOG axis
    assert AXIS_RTOL <= 1e-10


def test_frequency_count_and_spectral_axis_checked(tmp_path):
    for lines, message in [
        ('start = "1 GHz"\nstop = "2 GHz"\nnum = 0', r"\[frequencies\].num: expected at least 1"),
        ('start = "1 GHz"\nstop = "2 GHz"\nnum = 1', r"\[frequencies\].num: one frequency"),
    ]:
        with pytest.raises(ConfigError, match=message):
            load_job(write(tmp_path, BASE.replace('values = ["1 GHz", "5 GHz"]', lines)))
    assert load_job(write(tmp_path, BASE)).output.spectral_axis == "auto"
    assert load_job(write(tmp_path, BASE + '\n[output]\nspectral_axis = "tabular"\n')).output.spectral_axis == "tabular"
    with pytest.raises(ConfigError, match=r"\[output\].spectral_axis: 'log' is not 'auto' .* or 'tabular'"):
        load_job(write(tmp_path, BASE + '\n[output]\nspectral_axis = "log"\n'))
    with pytest.raises(ConfigError, match=r"\[output\]: unknown key 'spectral_axes' \(did you mean 'spectral_axis'"):
        load_job(write(tmp_path, BASE + '\n[output]\nspectral_axes = "auto"\n'))


def test_bad_toml_and_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_job(write(tmp_path, "[snapshot\n"))
    with pytest.raises(ConfigError, match="job file not found"):
        load_job(tmp_path / "missing.toml")


def test_ionization_only_with_density():
    import tomllib

    raw = tomllib.loads(BASE + '\n[ionization]\nmodel = "saha"\n')
    with pytest.raises(ConfigError, match=r"\[ionization\]: only used with \[snapshot\].density"):
        parse_job(raw)


# --- series of snapshots and [parallel] ---------------------------------------------------------

HDF5 = """
[snapshot]
kind = "hdf5"
{source}
temperature = "T"
electron_density = "ne"

[frequencies]
values = ["1 GHz"]

[[view]]
npix = 8
"""


def touch_files(tmp_path, *names):
    """Small HDF5 snapshots with the datasets HDF5 names (the job validator opens every member file)."""
    import h5py

    for name in names:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        with h5py.File(tmp_path / name, "w") as h5:
            h5.attrs["cell_size"] = 0.1
            h5.attrs["length_unit"] = "pc"
            h5.create_dataset("T", data=np.full((2, 2, 2), 1e4)).attrs["units"] = "K"
            h5.create_dataset("ne", data=np.full((2, 2, 2), 10.0)).attrs["units"] = "cm**-3"


def test_member_files_are_opened_before_any_work(tmp_path):
    """Every file of a series holds the named datasets, or the job stops naming the key and the file."""
    touch_files(tmp_path, "run/snap_0001.h5", "run/snap_0002.h5")
    with h5py_file(tmp_path / "run/snap_0002.h5") as h5:
        del h5["ne"]
    with pytest.raises(ConfigError, match=r"\[snapshot\]\.electron_density: dataset 'ne' not found in .*snap_0002"):
        load_job(write(tmp_path, HDF5.format(source='pattern = "run/snap_*.h5"')))
    (tmp_path / "run/snap_0002.h5").write_bytes(b"not an HDF5 file")
    with pytest.raises(ConfigError, match=r"cannot be opened as an HDF5 file.*snap_0002"):
        load_job(write(tmp_path, HDF5.format(source='pattern = "run/snap_*.h5"')))


def h5py_file(path):
    import h5py

    return h5py.File(path, "a")


def test_pattern_is_sorted_and_relative_to_the_job_file(tmp_path):
    touch_files(tmp_path, "run/snap_0020.h5", "run/snap_0003.h5", "run/snap_0010.h5", "run/other.h5")
    job = load_job(write(tmp_path, HDF5.format(source='pattern = "run/snap_*.h5"')))
    assert job.series
    assert [m.label for m in job.snapshots] == ["snap_0003", "snap_0010", "snap_0020"]
    assert job.snapshots[0].path == (tmp_path / "run/snap_0003.h5").resolve()
    job = load_job(write(tmp_path, HDF5.format(source='paths = ["run/snap_0010.h5", "run/other.h5"]')))
    assert [m.label for m in job.snapshots] == ["snap_0010", "other"]  # the order given
    job = load_job(write(tmp_path, HDF5.format(source='path = "run/other.h5"')))
    assert not job.series and job.snapshots == (Member("other", path=(tmp_path / "run/other.h5").resolve()),)


@pytest.mark.parametrize(
    "source,message",
    [
        ('pattern = "run/nothing_*.h5"', r"\[snapshot\].pattern: 'run/nothing_\*.h5' matches no file \(looked in "),
        ('paths = ["run/a.h5", "run/missing.h5"]', r"\[snapshot\].paths\[1\]: file not found: .*missing.h5"),
        ("paths = []", r"\[snapshot\].paths: expected a non-empty list"),
        ('paths = ["run/a.h5", 3]', r"\[snapshot\].paths\[1\]: expected str, got int 3"),
        ('paths = ["run/a.h5", "other/a.h5"]', r"two snapshots share the label 'a'"),
        (
            'path = "run/a.h5"\npattern = "run/*.h5"',
            r"give one of 'path', 'paths' or 'pattern', not 'path' and 'pattern'",
        ),
        ("seeds = [1, 2]", r"\[snapshot\].seeds: only used with kind = 'demo'"),
        ('patern = "run/*.h5"', r"unknown key 'patern' \(did you mean 'pattern'\?\)"),
        ("", r"\[snapshot\]: 'path' is required when kind = 'hdf5' \(or 'paths' / 'pattern'"),
    ],
)
def test_series_errors(tmp_path, source, message):
    touch_files(tmp_path, "run/a.h5", "other/a.h5")
    with pytest.raises(ConfigError, match=message):
        load_job(write(tmp_path, HDF5.format(source=source)))


@pytest.mark.parametrize(
    "patch,message",
    [
        ("seeds = [1, 1]", r"\[snapshot\].seeds: two snapshots share the label 'seed1'"),
        ("seeds = []", r"\[snapshot\].seeds: expected a non-empty list"),
        ("seeds = [1, 2.5]", r"\[snapshot\].seeds\[1\]: expected int, got float 2.5"),
        ("seeds = [1, 2]\nseed = 3", r"give either 'seed' \(one demo snapshot\) or 'seeds'"),
        ('pattern = "*.h5"', r"\[snapshot\].pattern: only used with kind = 'hdf5'"),
    ],
)
def test_demo_series_errors(tmp_path, patch, message):
    with pytest.raises(ConfigError, match=message):
        load_job(write(tmp_path, BASE.replace("cells = 16", f"cells = 16\n{patch}")))


def test_demo_seeds_make_a_series(tmp_path):
    job = load_job(write(tmp_path, BASE.replace("cells = 16", "cells = 16\nseeds = [4, 2]")))
    assert job.series and job.snapshots == (Member("seed4", seed=4), Member("seed2", seed=2))
    single = load_job(write(tmp_path, BASE))
    assert not single.series and single.parallel.as_dict() == {}


@pytest.mark.parametrize(
    "table,message",
    [
        (
            'scheduler = "localhost:8786"',
            r"\[parallel\].scheduler: 'localhost:8786' is not a scheduler address of "
            r"the form scheme://host:port",
        ),
        ('scheduler = "tcp://host:99999"', r"'tcp://host:99999' is not a scheduler address"),
        ('scheduler = "tcp://host"', r"'tcp://host' is not a scheduler address"),
        ("workers = 0", r"\[parallel\].workers: expected a positive number of workers, got 0"),
        ("workers = true", r"\[parallel\].workers: expected int, got bool True"),
        ('workers = "4"', r"\[parallel\].workers: expected int, got str '4'"),
        ('workers = 2\nscheduler = "tcp://h:1"', r"\[parallel\]: give either 'scheduler' .* or 'workers' .*, not both"),
        ('max_memory = "2 GHz"', r"\[parallel\].max_memory: '2 GHz' is not a memory size"),
        ("max_memory = 2000", r"\[parallel\].max_memory: '2000' has no unit; expected a memory size"),
        ('max_memory = "-1 GB"', r"\[parallel\].max_memory: must be a positive amount of memory"),
        ("worker = 2", r"\[parallel\]: unknown key 'worker' \(did you mean 'workers'\?\)"),
    ],
)
def test_parallel_errors(tmp_path, table, message):
    with pytest.raises(ConfigError, match=message):
        load_job(write(tmp_path, BASE + f"\n[parallel]\n{table}\n"))


def test_parallel_settings_and_overrides(tmp_path):
    job = load_job(write(tmp_path, BASE + '\n[parallel]\nscheduler = "tls://10.0.0.5:8786"\nmax_memory = "2 GiB"\n'))
    assert job.parallel.as_dict() == {"scheduler": "tls://10.0.0.5:8786", "max_memory": 2 * 1024**3}
    assert load_job(write(tmp_path, BASE + '\n[parallel]\nscheduler = "tcp://[::1]:8786"\n')).parallel.cluster
    # the Job is frozen: an override returns a new Job and leaves the loaded one as it was
    local = override_parallel(job, workers=3)
    assert local.parallel.as_dict() == {"workers": 3, "max_memory": 2 * 1024**3}
    assert job.parallel.as_dict() == {"scheduler": "tls://10.0.0.5:8786", "max_memory": 2 * 1024**3}
    remote = override_parallel(local, scheduler="tcp://node7:8786")
    assert remote.parallel.as_dict() == {"scheduler": "tcp://node7:8786", "max_memory": 2 * 1024**3}
    assert override_parallel(job) is job
    with pytest.raises(ConfigError, match="--workers: expected a positive number of workers, got -1"):
        override_parallel(job, workers=-1)
    with pytest.raises(ConfigError, match="--scheduler: 'node7' is not a scheduler address"):
        override_parallel(job, scheduler="node7")


def test_background_temperature_is_read_for_the_tracer(tmp_path):
    """``[trace] background = "20 K"`` reaches the tracer as a blackbody (once refused when tracing began)."""
    from astropy.modeling.models import BlackBody

    from rtrace.transfer.background import background_from_spec

    job = load_job(write(tmp_path, BASE + '\n[trace]\nbackground = "20 K"\n'))
    assert job.trace.background == 20 * u.K
    nu = job.frequencies.to_value(u.Hz)
    intensity, info = background_from_spec(job.trace.background, nu)
    # Planck's law as astropy implements it (astropy.modeling.physical_models.BlackBody)
    expected = BlackBody(temperature=20 * u.K)(nu * u.Hz).to_value(u.erg / (u.s * u.cm**2 * u.Hz * u.sr))
    assert intensity == pytest.approx(expected, rel=1e-10)
    assert info.kind == "blackbody" and info.temperature == 20.0
    assert load_job(write(tmp_path, BASE + '\n[trace]\nbackground = "none"\n')).trace.background is None
    assert load_job(write(tmp_path, BASE + '\n[trace]\nbackground = "CMB"\n')).trace.background == "cmb"


def test_plain_names_with_dots_and_dashes_are_accepted(tmp_path):
    text = BASE.replace('name = "a"', 'name = "face-on_v2.1"') + '\n[output]\nprefix = "run-3."\n'
    job = load_job(write(tmp_path, text))
    assert job.views[0].name == "face-on_v2.1" and job.output.prefix == "run-3."


def test_duplicate_frequencies_are_named(tmp_path):
    text = BASE.replace('values = ["1 GHz", "5 GHz"]', 'values = ["1 GHz", "5 GHz", "5000 MHz", "1 GHz"]')
    with pytest.raises(
        ConfigError,
        match=r"\[frequencies\]\.values: 2 frequencies are given more than once "
        r"\(1 GHz, 5 GHz\)",
    ):
        load_job(write(tmp_path, text))
    assert not (tmp_path / "rtrace-output").exists()
