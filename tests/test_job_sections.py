"""The typed job: a frozen Job of frozen sections, one parser per table, and the manifest keys they make.

The messages checked here are the job format's contract (``[section].key``,
the problem); the pinned inputs keys were computed on the code before the
sections were typed (main at 5bc883e), so that a resumed run of an existing
output folder still finds its outputs finished.
"""

import dataclasses
import tomllib
from pathlib import Path

import astropy.units as u
import h5py
import numpy as np
import pytest

from rtrace.errors import ConfigError
from rtrace.run.batch import observing_settings, output_key, unit_inputs
from rtrace.run.job import (
    BeamSection,
    ComparisonSection,
    IonizationSection,
    NoiseSection,
    OutputSection,
    ParallelSection,
    SnapshotSection,
    SynthesisSection,
    TraceSection,
    ViewSection,
    override_parallel,
    parse_job,
)
from rtrace.run.sections import parse_frequencies, parse_views
from rtrace.run.snapshot_sections import Source

DEMO = """
[snapshot]
kind = "demo"
cells = 16
seed = 3
[frequencies]
values = ["1 GHz", "5 GHz", "20 GHz"]
[trace]
background = "20 K"
tolerance = 0.02
[[view]]
name = "tilted"
los = [1, 2, 3]
north = [0, 0, 1]
npix = [24, 32]
width = "3 pc"
distance = "1 kpc"
center = ["0 pc", "0 pc", "0 pc"]
ra = "10 deg"
dec = "-30 deg"
[[view]]
npix = 16
distance = "2 kpc"
[beam]
major = "2 arcsec"
minor = "1 arcsec"
pa = "30 deg"
scaling = "inverse-frequency"
reference_frequency = "5 GHz"
[noise]
rms = ["0.1 mJy", "0.2 mJy", "0.3 mJy"]
seed = 5
[output]
prefix = "p_"
[parallel]
max_memory = "4 GiB"
"""

HDF5 = """
[snapshot]
kind = "hdf5"
path = "grid.h5"
density = "rho"
temperature = "T"
cell_size = "0.1 pc"
units = { rho = "g / cm3", T = "K" }
subvolume = [[0, 8], [0, 8], [1, 7]]
[ionization]
model = "sources"
helium = "single"
hydrogen_mass_fraction = 0.71
rays_per_cell = 8
[[ionization.sources]]
position = ["0.4 pc", "0.4 pc", "0.3 pc"]
rate = "1e48 / s"
[frequencies]
start = "1 GHz"
stop = "10 GHz"
num = 4
[trace]
supersample = 2
[[view]]
los = [0, 0, 1]
npix = 8
distance = "1 kpc"
"""


def _grid(folder):
    with h5py.File(folder / "grid.h5", "w") as f:
        f["rho"] = np.full((8, 8, 8), 1e-22)
        f["T"] = np.full((8, 8, 8), 8000.0)


def _image_keys(job):
    # the snapshot's own fingerprint is given, so the keys depend on the job's settings only
    return [
        output_key(unit_inputs(job, job.snapshots[0], spec, source={"fixed": 1}), "images", observing_settings(job))
        for spec in job.views
    ]


def test_manifest_keys_unchanged_by_typed_sections(tmp_path):
    """Pinned: computed with the same TOML on main at 5bc883e, when sections were dicts (rtrace 0.1.0).

    A change here means every output folder made before is redone on resume; if the change is meant
    (a new rtrace version or a changed setting), update the values and say so.
    """
    _grid(tmp_path)
    assert _image_keys(parse_job(tomllib.loads(DEMO), tmp_path)) == [
        "47d195e151959b733d89aaf3d712d645e2a5e9ed978dca0530fa660c59456522",
        "fd7d0d050c4efa10de40f1a4d93f679093a38809efb18f2d44a450fb3f38be37",
    ]
    assert _image_keys(parse_job(tomllib.loads(HDF5), tmp_path)) == [
        "0b0e9543e7b1cfc59d3a84d330fd65de293d5669065416716771d10b76251ba1"
    ]


def test_keys_follow_a_changed_setting(tmp_path):
    """The key is not blind: a different beam, trace setting or view gives a different key."""
    base = _image_keys(parse_job(tomllib.loads(DEMO), tmp_path))
    for old, new in (
        ('pa = "30 deg"', 'pa = "31 deg"'),
        ("tolerance = 0.02", "tolerance = 0.03"),
        ("npix = [24, 32]", "npix = [24, 31]"),
    ):
        changed = _image_keys(parse_job(tomllib.loads(DEMO.replace(old, new)), tmp_path))
        assert changed != base, old


def test_sections_as_dict_give_what_the_job_said(tmp_path):
    job = parse_job(tomllib.loads(DEMO), tmp_path)
    assert job.views[0].as_dict()["npix"] == [24, 32] and job.views[1].as_dict() == {
        "npix": 16,
        "distance": 2 * u.kpc.to(u.cm) * u.cm,
        "name": "view2",
    }
    assert job.trace.as_dict() == {"background": 20 * u.K, "tolerance": 0.02}
    assert job.parallel.as_dict() == {"max_memory": 4 * 1024**3}
    assert job.ionization.as_dict() == {} and job.synthesis is None and job.comparison is None
    _grid(tmp_path)
    hdf5 = parse_job(tomllib.loads(HDF5), tmp_path)
    assert hdf5.snapshot.path == (tmp_path / "grid.h5").resolve()
    assert hdf5.snapshot.as_dict()["subvolume"] == [[0, 8], [0, 8], [1, 7]]
    assert hdf5.snapshot.thermal_input == "temperature"
    sources = hdf5.ionization.as_dict()["sources"]
    assert len(sources) == 1 and sources[0]["rate"] == 1e48 / u.s
    assert hdf5.ionization.model_name == "sources" and IonizationSection().model_name == "full"


def test_job_and_sections_are_frozen(tmp_path):
    job = parse_job(tomllib.loads(DEMO), tmp_path)
    for obj, name, value in (
        (job, "trace", None),
        (job, "text", "x"),
        (job.trace, "background", None),
        (job.views[0], "name", "b"),
        (job.beam, "major", 1 * u.arcsec),
        (job.output, "prefix", "q_"),
        (job.parallel, "workers", 2),
        (job.snapshot, "cells", 8),
        (job.noise, "seed", 1),
    ):
        with pytest.raises(dataclasses.FrozenInstanceError):
            setattr(obj, name, value)
    assert isinstance(job.views, tuple) and isinstance(job.snapshots, tuple)
    assert isinstance(job.views[0].los, tuple)  # lists are kept as tuples: no change in place
    with pytest.raises(ValueError, match="read-only"):
        job.frequencies[0] = 2 * u.GHz


def test_override_parallel_returns_a_new_job(tmp_path):
    job = parse_job(tomllib.loads(DEMO), tmp_path)
    local = override_parallel(job, workers=2)
    assert local is not job and local.parallel == ParallelSection(workers=2, max_memory=4 * 1024**3)
    assert job.parallel == ParallelSection(max_memory=4 * 1024**3)
    assert local.views is job.views  # everything else is shared, not copied


def _frequencies(table):
    return parse_frequencies(table)


# (parser, table as written, message the ConfigError must match): an unknown key and a bad value each
_CASES = [
    (
        lambda t: SnapshotSection.parse(t, "."),
        {"kind": "demo", "cels": 8},
        r"\[snapshot\]: unknown key 'cels' \(did you mean 'cells'\?\)",
    ),
    (
        lambda t: SnapshotSection.parse(t, "."),
        {"kind": "demo", "cells": 1},
        r"\[snapshot\]\.cells: the demo needs at least 2 cells per side, got 1",
    ),
    (lambda t: SnapshotSection.parse(t, "."), {"kind": "fits"}, r"\[snapshot\]\.kind: 'fits' is not"),
    (
        lambda t: IonizationSection.parse(t, SnapshotSection(kind="hdf5", density="rho")),
        {"modle": "full"},
        r"\[ionization\]: unknown key 'modle' \(did you mean 'model'\?\)",
    ),
    (
        lambda t: IonizationSection.parse(t, SnapshotSection(kind="hdf5", density="rho")),
        {"model": "sahaa"},
        r"\[ionization\]\.model: 'sahaa' \(did you mean 'saha'\?\)",
    ),
    (
        lambda t: IonizationSection.parse(t, SnapshotSection(kind="hdf5", density="rho")),
        {"model": "full", "hydrogen_mass_fraction": 1.5},
        r"\[ionization\]\.hydrogen_mass_fraction: a mass fraction",
    ),
    (
        lambda t: Source.parse(t, 0),
        {"position": ["0 pc", "0 pc", "0 pc"], "rate": "1e48 / s", "rte": 1},
        r"\[ionization\]\.sources\[0\]: unknown key 'rte'",
    ),
    (
        lambda t: Source.parse(t, 1),
        {"position": ["0 pc", "0 pc", "0 pc"], "rate": "-1 / s"},
        r"\[ionization\]\.sources\[1\]\.rate: must be finite and >= 0",
    ),
    (_frequencies, {"value": ["1 GHz"]}, r"\[frequencies\]: unknown key 'value' \(did you mean 'values'\?\)"),
    (_frequencies, {"values": ["1 GHz", "1 GHz"]}, r"\[frequencies\]\.values: 1 frequency is given more than once"),
    (TraceSection.parse, {"supersampel": 2}, r"\[trace\]: unknown key 'supersampel' \(did you mean 'supersample'"),
    (TraceSection.parse, {"tolerance": 2.0}, r"\[trace\]\.tolerance: expected a relative error per pixel"),
    (lambda t: ViewSection.parse(t, 1), {"npx": 8}, r"\[\[view\]\] #2: unknown key 'npx' \(did you mean 'npix'"),
    (lambda t: ViewSection.parse(t, 0), {"los": [0, 0, 0]}, r"\[\[view\]\] #1\.los: \[0, 0, 0\] has no direction"),
    (parse_views, [{"name": "a"}, {"name": "A"}], r"\[\[view\]\] #2\.name: 'A' differs from view 'a' only in case"),
    (BeamSection.parse, {"major": "1 arcsec", "mnior": "1 arcsec"}, r"\[beam\]: unknown key 'mnior'"),
    (BeamSection.parse, {"major": "1 arcsec", "minor": "2 arcsec"}, r"\[beam\]\.minor: '2 arcsec' is larger than"),
    (
        lambda t: NoiseSection.parse(t, BeamSection(major=1 * u.arcsec), [1, 2] * u.GHz),
        {"rsm": "1 mJy"},
        r"\[noise\]: unknown key 'rsm' \(did you mean 'rms'\?\)",
    ),
    (
        lambda t: NoiseSection.parse(t, BeamSection(major=1 * u.arcsec), [1, 2] * u.GHz),
        {"rms": ["1 mJy", "1 mJy", "1 mJy"]},
        r"\[noise\]\.rms: 3 values for 2 frequencies",
    ),
    (lambda t: OutputSection.parse(t, "."), {"prefx": "a"}, r"\[output\]: unknown key 'prefx' \(did you mean 'prefix'"),
    (lambda t: OutputSection.parse(t, "."), {"prefix": "../a"}, r"\[output\]\.prefix: '\.\./a' contains"),
    (ParallelSection.parse, {"worker": 2}, r"\[parallel\]: unknown key 'worker' \(did you mean 'workers'\?\)"),
    (ParallelSection.parse, {"workers": 0}, r"\[parallel\]\.workers: expected a positive number of workers, got 0"),
    (
        lambda t: SynthesisSection.parse(t, ".", ["a"]),
        {"antenas": "x"},
        r"\[synthesis\]: unknown key 'antenas' \(did you mean 'antennas'\?\)",
    ),
    (lambda t: SynthesisSection.parse(t, ".", ["a"]), {"latitude": "30 deg"}, r"\[synthesis\]: 'antennas' is required"),
    (
        lambda t: ComparisonSection.parse(t, ".", ["a"], [1] * u.GHz),
        {"observaton": "x.fits"},
        r"\[comparison\]: unknown key 'observaton' \(did you mean 'observation'\?\)",
    ),
    (
        lambda t: ComparisonSection.parse(t, ".", ["a"], [1] * u.GHz),
        {"observation": 3},
        r"\[comparison\]\.observation: expected str, got int 3",
    ),
]


@pytest.mark.parametrize("parse,table,message", _CASES)
def test_each_section_parser_names_its_key(parse, table, message):
    with pytest.raises(ConfigError, match=message):
        parse(table)


def test_absent_tables_give_defaults_or_none():
    assert TraceSection.parse(None) == TraceSection()
    assert BeamSection.parse(None) is None
    assert NoiseSection.parse(None, None, [1] * u.GHz) is None
    assert ParallelSection.parse(None) == ParallelSection() and not ParallelSection().cluster
    out = OutputSection.parse(None, "/tmp")
    assert out.directory == Path("/tmp/rtrace-output").resolve() and out.spectral_axis == "auto"
    assert SynthesisSection.parse(None, ".", ["a"]) is None
    assert ComparisonSection.parse(None, ".", ["a"], [1] * u.GHz) is None
    with pytest.raises(ConfigError, match=r"job: the \[frequencies\] table is required"):
        parse_frequencies(None)
    with pytest.raises(ConfigError, match=r"job: the \[snapshot\] table is required"):
        SnapshotSection.parse(None, ".")
    with pytest.raises(ConfigError, match=r"\[trace\]: expected a table"):
        TraceSection.parse(3)
