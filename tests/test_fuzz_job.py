"""Fuzz table of bad job files: each is refused with a ConfigError (exit 3) naming the key, and nothing is written.

Every case is run twice: through :func:`rtrace.run.job.load_job` (the error class and the key in the message)
and through ``rtrace run`` in-process (exit code 3, the key on stderr, and no file anywhere under the
test's folder but the job file itself: a refused job writes nothing, in the output folder or above it).
Property tests (hypothesis) compare the validator with independent statements of what is valid.

Outside facts the checks rest on:
* a declination lies in [-90, 90] deg (common practice: the latitude of the equatorial system);
* a beam's minor axis (FWHM) does not exceed its major axis (common practice; the FITS BMAJ/BMIN
  convention of the AIPS and CASA headers);
* hydrogen and helium mass fractions lie in [0, 1] and sum to at most 1 (common practice, X + Y + Z = 1);
* numpy random seeds are non-negative integers (numpy.random.SeedSequence documentation);
* a file name inside a folder holds no path separator and is not '..' (POSIX.1-2017, 3.170 "Filename"
  and 4.13 "Pathname Resolution").
"""

import copy
import json
import math
from pathlib import Path

import astropy.units as u
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rtrace.cli import EXIT_CONFIG, EXIT_USAGE, main
from rtrace.errors import ConfigError
from rtrace.run.checks import check_name
from rtrace.run.job import load_job, parse_job

BASE = {
    "snapshot": {"kind": "demo", "cells": 8},
    "frequencies": {"values": ["1 GHz", "5 GHz"]},
    "trace": {"background": "cmb", "supersample": 1},
    "view": [
        {
            "name": "a",
            "los": [0, 0, 1],
            "north": [0, 1, 0],
            "npix": 8,
            "width": "2 pc",
            "distance": "1 kpc",
            "ra": "10 deg",
            "dec": "-30 deg",
        }
    ],
    "beam": {"major": "20 arcsec", "minor": "10 arcsec", "pa": "30 deg"},
    "noise": {"rms": "0.1 mJy", "seed": 3},
    "output": {"directory": "out", "prefix": "run1_", "picture_format": "png"},
}
DELETE = object()


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and not math.isfinite(v):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)  # JSON string escapes are TOML basic-string escapes
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def to_toml(raw):
    """A job dict as TOML text: tables, arrays of tables ([[view]]) and plain values only."""
    lines = []
    for name, table in raw.items():
        for entry in table if isinstance(table, list) else [table]:
            lines.append(f"[[{name}]]" if isinstance(table, list) else f"[{name}]")
            lines += [f"{k} = {_toml_value(v)}" for k, v in entry.items()]
            lines.append("")
    return "\n".join(lines)


def edit(**changes):
    """The base job with ``table__key=value`` changes (``view__npix`` edits the first view; DELETE removes)."""
    raw = copy.deepcopy(BASE)
    for path, value in changes.items():
        table, _, key = path.partition("__")
        if not key:
            if value is DELETE:
                del raw[table]
            else:
                raw[table] = value
            continue
        target = raw.setdefault(table, {})
        target = target[0] if isinstance(target, list) else target
        if value is DELETE:
            del target[key]
        else:
            target[key] = value
    return raw


def two_views(second):
    raw = edit()
    raw["view"].append(dict(BASE["view"][0], **second))
    return raw


HE = {"snapshot": {"kind": "hdf5", "path": "cloud.h5", "density": "rho", "temperature": "T"}}


def ionization(**ion):
    raw = edit(**HE)
    raw["ionization"] = ion
    return raw


def study(table, **keys):
    raw = edit()
    raw[table] = dict(
        {
            "synthesis": {
                "antennas": "five.txt",
                "latitude": "35 deg",
                "hour_angle_range": ["-2 hourangle", "2 hourangle"],
            },
            "comparison": {"observation": "observed.fits"},
        }[table],
        **keys,
    )
    return raw


# (id, job dict or bytes, text the message must contain)
CASES = [
    # --- names are names, not paths (view names and the output prefix) ---
    ("name-up", edit(view__name="../../escape"), "[[view]] #1.name"),
    ("name-absolute", edit(view__name="/tmp/escape"), "[[view]] #1.name"),
    ("name-backslash", edit(view__name="..\\x"), "[[view]] #1.name"),
    ("name-dotdot", edit(view__name=".."), "[[view]] #1.name"),
    ("name-dot", edit(view__name="."), "[[view]] #1.name"),
    ("name-hidden", edit(view__name=".hidden"), "[[view]] #1.name"),
    ("name-empty", edit(view__name=""), "[[view]] #1.name"),
    ("name-space", edit(view__name="my view"), "[[view]] #1.name"),
    ("name-colon", edit(view__name="c:x"), "[[view]] #1.name"),
    ("name-nul", edit(view__name="a\u0000b"), "[[view]] #1.name"),
    ("name-newline", edit(view__name="a\nb"), "[[view]] #1.name"),
    ("name-star", edit(view__name="a*"), "[[view]] #1.name"),
    ("name-long", edit(view__name="v" * 101), "[[view]] #1.name"),
    ("name-int", edit(view__name=3), "[[view]] #1.name"),
    ("name-second-view", two_views({"name": "../b"}), "[[view]] #2.name"),
    ("name-same-but-case", two_views({"name": "A"}), "[[view]] #2.name"),
    (
        "series-label-dotdot",
        edit(snapshot={**{k: v for k, v in HE["snapshot"].items() if k != "path"}, "paths": ["cloud.h5", "...h5"]}),
        "[snapshot].paths",
    ),
    ("prefix-up", edit(output__prefix="../../X_"), "[output].prefix"),
    ("prefix-absolute", edit(output__prefix="/tmp/X_"), "[output].prefix"),
    ("prefix-subfolder", edit(output__prefix="sub/X_"), "[output].prefix"),
    ("prefix-dotdot", edit(output__prefix=".."), "[output].prefix"),
    ("prefix-hidden", edit(output__prefix=".x"), "[output].prefix"),
    ("prefix-quote", edit(output__prefix="a'b"), "[output].prefix"),
    ("prefix-list", edit(output__prefix=["a"]), "[output].prefix"),
    ("picture-format-path", edit(output__picture_format="png/../../x"), "[output].picture_format"),
    ("picture-format-unknown", edit(output__picture_format="pnk"), "[output].picture_format"),
    # --- beam ---
    ("beam-zero", edit(beam__major="0 arcsec", beam__minor=DELETE), "[beam].major"),
    ("beam-negative", edit(beam__major="-5 arcsec", beam__minor=DELETE), "[beam].major"),
    ("beam-inf", edit(beam__major="inf arcsec", beam__minor=DELETE), "[beam].major"),
    ("beam-nan", edit(beam__major="nan arcsec"), "[beam].major"),
    ("beam-minor-zero", edit(beam__minor="0 arcsec"), "[beam].minor"),
    ("beam-minor-nan", edit(beam__minor="nan arcsec"), "[beam].minor"),
    ("beam-minor-larger", edit(beam__minor="30 arcsec"), "[beam].minor"),
    ("beam-pa-nan", edit(beam__pa="nan deg"), "[beam].pa"),
    ("beam-pa-inf", edit(beam__pa="inf deg"), "[beam].pa"),
    (
        "beam-reference-zero",
        edit(beam__scaling="inverse-frequency", beam__reference_frequency="0 GHz"),
        "[beam].reference_frequency",
    ),
    # --- frequencies ---
    ("freq-duplicate", edit(frequencies={"values": ["1 GHz", "5 GHz", "1000 MHz"]}), "[frequencies].values"),
    ("freq-zero", edit(frequencies={"values": ["0 GHz", "5 GHz"]}), "[frequencies].values"),
    ("freq-negative", edit(frequencies={"values": ["-1 GHz"]}), "[frequencies].values"),
    ("freq-inf", edit(frequencies={"values": ["1 GHz", "inf GHz"]}), "[frequencies].values"),
    ("freq-nan", edit(frequencies={"values": ["nan GHz"]}), "[frequencies].values"),
    ("freq-empty", edit(frequencies={"values": []}), "[frequencies].values"),
    ("freq-num-zero", edit(frequencies={"start": "1 GHz", "stop": "2 GHz", "num": 0}), "[frequencies].num"),
    ("freq-num-float", edit(frequencies={"start": "1 GHz", "stop": "2 GHz", "num": 2.5}), "[frequencies].num"),
    ("freq-num-bool", edit(frequencies={"start": "1 GHz", "stop": "2 GHz", "num": True}), "[frequencies].num"),
    (
        "freq-stop-inf",
        edit(frequencies={"start": "1 GHz", "stop": "inf GHz", "num": 3, "spacing": "linear"}),
        "[frequencies].stop",
    ),
    ("freq-start-nan", edit(frequencies={"start": "nan GHz", "stop": "2 GHz", "num": 3}), "[frequencies].start"),
    ("freq-equal-ends", edit(frequencies={"start": "1 GHz", "stop": "1 GHz", "num": 3}), "[frequencies]"),
    # --- views ---
    ("width-inf", edit(view__width="inf pc"), "[[view]] #1.width"),
    ("width-nan", edit(view__width="nan pc"), "[[view]] #1.width"),
    ("width-zero", edit(view__width="0 pc"), "[[view]] #1.width"),
    ("distance-inf", edit(view__distance="inf kpc"), "[[view]] #1.distance"),
    ("distance-negative", edit(view__distance="-1 kpc"), "[[view]] #1.distance"),
    ("dec-100", edit(view__dec="100 deg"), "[[view]] #1.dec"),
    ("dec-minus-91", edit(view__dec="-91 deg"), "[[view]] #1.dec"),
    ("dec-nan", edit(view__dec="nan deg"), "[[view]] #1.dec"),
    ("ra-nan", edit(view__ra="nan deg"), "[[view]] #1.ra"),
    ("ra-inf", edit(view__ra="inf hourangle"), "[[view]] #1.ra"),
    ("npix-one-item", edit(view__npix=[16]), "[[view]] #1.npix"),
    ("npix-three-items", edit(view__npix=[16, 16, 16]), "[[view]] #1.npix"),
    ("npix-float", edit(view__npix=2.7), "[[view]] #1.npix"),
    ("npix-zero", edit(view__npix=0), "[[view]] #1.npix"),
    ("npix-negative-pair", edit(view__npix=[8, -8]), "[[view]] #1.npix"),
    ("npix-str-pair", edit(view__npix=[8, "a"]), "[[view]] #1.npix"),
    ("npix-float-pair", edit(view__npix=[8, 8.5]), "[[view]] #1.npix"),
    ("npix-bool", edit(view__npix=True), "[[view]] #1.npix"),
    ("npix-bool-pair", edit(view__npix=[True, 8]), "[[view]] #1.npix"),
    ("los-str", edit(view__los=["a", 0, 1]), "[[view]] #1.los"),
    ("los-zero", edit(view__los=[0, 0, 0]), "[[view]] #1.los"),
    ("los-two", edit(view__los=[0, 1]), "[[view]] #1.los"),
    ("los-nan", edit(view__los=[0, float("nan"), 1]), "[[view]] #1.los"),
    ("los-inf", edit(view__los=[0, 0, float("inf")]), "[[view]] #1.los"),
    ("los-bool", edit(view__los=[0, 0, True]), "[[view]] #1.los"),
    ("north-zero", edit(view__north=[0, 0, 0]), "[[view]] #1.north"),
    ("north-str", edit(view__north=[0, "1", 0]), "[[view]] #1.north"),
    ("center-nan", edit(view__center=["0 pc", "nan pc", "0 pc"]), "[[view]] #1.center"),
    # --- trace ---
    ("supersample-float", edit(trace__supersample=2.5), "[trace].supersample"),
    ("supersample-zero", edit(trace__supersample=0), "[trace].supersample"),
    ("supersample-bool", edit(trace__supersample=True), "[trace].supersample"),
    ("background-nan", edit(trace__background="nan K"), "[trace].background"),
    ("background-negative", edit(trace__background="-3 K"), "[trace].background"),
    ("background-unit", edit(trace__background="3 pc"), "[trace].background"),
    ("background-word", edit(trace__background="cmbb"), "[trace].background"),
    ("background-negative-intensity", edit(trace__background="-1e-17 erg / (s cm2 Hz sr)"), "[trace].background"),
    # --- noise ---
    ("rms-nan", edit(noise__rms="nan mJy"), "[noise].rms"),
    ("rms-negative", edit(noise__rms="-0.1 mJy"), "[noise].rms"),
    ("rms-inf-in-list", edit(noise__rms=["0.1 mJy", "inf mJy"]), "[noise].rms"),
    ("noise-seed-negative", edit(noise__seed=-1), "[noise].seed"),
    ("noise-seed-bool", edit(noise__seed=False), "[noise].seed"),
    # --- snapshot ---
    ("no-snapshot", edit(snapshot=DELETE), "[snapshot]"),
    ("cells-negative", edit(snapshot__cells=-4), "[snapshot].cells"),
    ("cells-zero", edit(snapshot__cells=0), "[snapshot].cells"),
    ("cells-float", edit(snapshot__cells=16.5), "[snapshot].cells"),
    ("cells-bool", edit(snapshot__cells=True), "[snapshot].cells"),
    ("seed-negative", edit(snapshot__seed=-7), "[snapshot].seed"),
    (
        "yt-level-negative",
        edit(snapshot={"kind": "yt", "path": ".", "temperature": "T", "electron_density": "ne", "level": -1}),
        "[snapshot].level",
    ),
    ("seeds-negative", edit(snapshot__seeds=[1, -2]), "[snapshot].seeds[1]"),
    # --- ionization (an HDF5 file with mass density; the file is made by the fixture) ---
    ("helium-triple", ionization(model="full", helium="triple"), "[ionization].helium"),
    ("model-typo", ionization(model="sahaa"), "did you mean 'saha'"),
    ("hydrogen-fraction-nan", ionization(hydrogen_mass_fraction=float("nan")), "[ionization].hydrogen_mass_fraction"),
    (
        "fractions-above-one",
        ionization(hydrogen_mass_fraction=0.8, helium_mass_fraction=0.3),
        "[ionization].helium_mass_fraction",
    ),
    (
        "source-position-nan",
        ionization(model="sources", sources=[{"position": ["0.1 pc", "nan pc", "0.1 pc"], "rate": "1e40 / s"}]),
        "[ionization].sources[0].position",
    ),
    ("quantities-int", edit(output__quantities=[1]), "[output].quantities"),
    ("quantities-typo", edit(output__quantities=["intensty"]), "did you mean 'intensity'"),
    ("directory-is-a-file", edit(output__directory="afile"), "[output].directory"),
    ("directory-name-too-long", edit(output__directory="x" * 300), "[output].directory"),
    # --- the HDF5 snapshot: datasets and geometry checked from metadata, before any field is read ---
    ("dataset-missing", edit(snapshot=dict(HE["snapshot"], temperature="Tx")), "[snapshot].temperature"),
    ("dataset-group-root", edit(snapshot=dict(HE["snapshot"], density="/")), "[snapshot].density"),
    ("dataset-unit-wrong", edit(snapshot=dict(HE["snapshot"], units={"rho": "pc"})), "[snapshot].density"),
    ("units-unknown-dataset", edit(snapshot=dict(HE["snapshot"], units={"zz": "K"})), "[snapshot].units"),
    (
        "subvolume-outside",
        edit(snapshot=dict(HE["snapshot"], subvolume=[[0, 2], [0, 2], [0, 9]])),
        "[snapshot].subvolume",
    ),
    (
        "subvolume-str",
        edit(snapshot=dict(HE["snapshot"], subvolume=[[0, 2], [0, 2], [0, "a"]])),
        "[snapshot].subvolume[2]",
    ),
    ("subvolume-two-axes", edit(snapshot=dict(HE["snapshot"], subvolume=[[0, 2], [0, 2]])), "[snapshot].subvolume"),
    ("cell-size-inf", edit(snapshot=dict(HE["snapshot"], cell_size="inf pc")), "[snapshot].cell_size"),
    ("origin-nan", edit(snapshot=dict(HE["snapshot"], origin=["0 pc", "0 pc", "nan pc"])), "[snapshot].origin"),
    ("not-hdf5", edit(snapshot=dict(HE["snapshot"], path="garbage.h5")), "cannot be opened as an HDF5 file"),
    ("path-too-long", edit(snapshot=dict(HE["snapshot"], path="x" * 300 + ".h5")), "[snapshot].path"),
    ("supplied-fraction-missing", ionization(model="supplied", fraction="xH"), "[ionization].fraction"),
    # --- [synthesis] and [comparison] (an invented five-dish layout and a hand-made observed image) ---
    ("synthesis-samples-huge", study("synthesis", n_hour_angles=10**30), "[synthesis].n_hour_angles"),
    ("synthesis-samples-zero", study("synthesis", n_hour_angles=0), "[synthesis].n_hour_angles"),
    ("synthesis-elevation-nan", study("synthesis", min_elevation="nan deg"), "[synthesis].min_elevation"),
    ("synthesis-elevation-100", study("synthesis", min_elevation="100 deg"), "[synthesis].min_elevation"),
    ("synthesis-latitude-100", study("synthesis", latitude="100 deg"), "[synthesis].latitude"),
    ("synthesis-gain-zero", study("synthesis", gain=0.0), "[synthesis].gain"),
    ("synthesis-niter-zero", study("synthesis", niter=0), "[synthesis].niter"),
    ("synthesis-pixel-scale-negative", study("synthesis", pixel_scale="-1 arcsec"), "[synthesis].pixel_scale"),
    ("synthesis-views-unknown", study("synthesis", views=["b"]), "[synthesis].views"),
    ("synthesis-antennas-up", study("synthesis", antennas="../../nothere.txt"), "[synthesis].antennas"),
    ("comparison-beam-pa-nan", study("comparison", beam=["40 arcsec", "30 arcsec", "nan deg"]), "[comparison].beam"),
    ("comparison-beam-inf", study("comparison", beam=["inf arcsec", "30 arcsec", "0 deg"]), "[comparison].beam"),
    ("comparison-beam-order", study("comparison", beam=["30 arcsec", "40 arcsec", "0 deg"]), "[comparison].beam"),
    ("comparison-beam-short", study("comparison", beam=["30 arcsec"]), "[comparison].beam"),
    ("comparison-frequency-outside", study("comparison", frequency="20 GHz"), "[comparison].observation"),
    ("comparison-views-unknown", study("comparison", views=["b"]), "[comparison].views"),
    ("comparison-aperture-int", study("comparison", apertures=[1]), "[comparison].apertures[0]"),
    # --- the file itself ---
    ("not-utf8", b'[snapshot]\nkind = "d\xffemo"\n', "offset 20"),
    ("latin1", '[snapshot]\nkind = "demo" # café\n'.encode("latin-1"), "not UTF-8"),
]


@pytest.fixture
def folder(tmp_path):
    """A job folder two levels below ``tmp_path`` (so writes above the output folder stay visible)."""
    import h5py
    import numpy as np
    from astropy.io import fits
    from astropy.wcs import WCS

    jobs = tmp_path / "jobs" / "deep"
    jobs.mkdir(parents=True)
    with h5py.File(jobs / "cloud.h5", "w") as h5:
        h5.attrs["cell_size"] = 0.1
        h5.attrs["length_unit"] = "pc"
        h5.create_dataset("rho", data=np.full((4, 4, 4), 1e-22)).attrs["units"] = "g/cm**3"
        h5.create_dataset("T", data=np.full((4, 4, 4), 1e4)).attrs["units"] = "K"
    (jobs / "garbage.h5").write_bytes(b"not an HDF5 file")
    (jobs / "...h5").write_bytes((jobs / "cloud.h5").read_bytes())  # its stem, the series label, is '..'
    (jobs / "afile").write_text("a file where the output folder should be")
    (jobs / "five.txt").write_text("unit = m\n0 0 0\n120 10 0.5\n-60 110 0\n40 -150 1\n-130 -60 0\n")
    wcs = WCS(naxis=2)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    wcs.wcs.crval, wcs.wcs.crpix, wcs.wcs.cdelt = [10, -30], [8.5, 8.5], [-10 / 3600, 10 / 3600]
    header = wcs.to_header()
    header.update(BUNIT="Jy/beam", BMAJ=40 / 3600, BMIN=30 / 3600, BPA=20.0, RESTFRQ=1e9)
    fits.PrimaryHDU(np.ones((16, 16), np.float32), header).writeto(jobs / "observed.fits")
    return jobs


def _files(root):
    return sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_file())


def test_base_job_is_valid(folder):
    """The cases differ from a valid job by one change only."""
    job = parse_job(copy.deepcopy(BASE), base_dir=folder)
    assert job.views[0].name == "a" and job.output.prefix == "run1_"
    (folder / "job.toml").write_text(to_toml(BASE))
    assert load_job(folder / "job.toml").views[0].npix == 8
    assert parse_job(edit(**HE), base_dir=folder).snapshot.kind == "hdf5"
    assert parse_job(ionization(model="full"), base_dir=folder).ionization.model == "full"
    assert parse_job(study("synthesis"), base_dir=folder).synthesis.views == ("a",)
    assert parse_job(study("comparison"), base_dir=folder).comparison.views == ("a",)


def test_case_count():
    assert 40 <= len(CASES) <= 150
    assert len({c[0] for c in CASES}) == len(CASES)


@pytest.mark.parametrize("raw,text", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_job_is_refused_before_any_work(folder, raw, text, capsys):
    path = folder / "job.toml"
    if isinstance(raw, bytes):
        path.write_bytes(raw)
    else:
        path.write_text(to_toml(raw), encoding="utf-8")
    before = _files(folder.parent.parent)
    with pytest.raises(ConfigError) as err:
        load_job(path)
    assert text in str(err.value)
    assert main(["run", str(path), "--quiet"]) == EXIT_CONFIG
    stderr = capsys.readouterr().err
    assert text in stderr and "Traceback" not in stderr
    assert _files(folder.parent.parent) == before  # nothing written, here or above
    assert not (folder / "out").exists()


def test_demo_cells_on_the_command_line(tmp_path, capsys):
    out = tmp_path / "demo"
    # exit 3 from the job validator ([snapshot].cells), or 2 should argparse refuse the flag itself
    try:
        code = main(["demo", "--cells", "-4", "--output", str(out), "--quiet"])
    except SystemExit as exc:  # argparse refuses the flag itself: exit 2
        code = exc.code
    assert code in (EXIT_CONFIG, EXIT_USAGE)
    assert "cells" in capsys.readouterr().err
    assert not out.exists()


def test_non_utf8_message_names_the_file_and_offset(tmp_path):
    path = tmp_path / "job.toml"
    path.write_bytes(b"[snapshot]\n# \xe9\n")
    with pytest.raises(ConfigError, match=r"job\.toml: not UTF-8 text: byte 0xe9 at offset 13 \(line 2\)"):
        load_job(path)


def test_byte_order_mark_is_accepted(tmp_path):
    path = tmp_path / "job.toml"
    path.write_bytes(b"\xef\xbb\xbf" + to_toml(BASE).encode())
    assert load_job(path).views[0].name == "a"


# --- properties: the validator against independent statements of what is valid -------------------


def _safe_by_definition(name):
    """POSIX.1-2017 3.282 portable filename character set, without '..' or a leading '.'."""
    portable = set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789._-")
    return 0 < len(name) <= 100 and set(name) <= portable and not name.startswith(".") and ".." not in name


@settings(max_examples=300, deadline=None)
@given(
    st.one_of(
        st.text(max_size=12),
        st.text(alphabet="./\\_-ab9", max_size=8),
        st.from_regex(r"[a-z0-9_.-]{0,6}", fullmatch=True),
    )
)
def test_names_accepted_are_exactly_the_safe_ones(tmp_path_factory, name):
    out = Path("/nonexistent/out")
    if _safe_by_definition(name):
        assert check_name(name, "[[view]] #1.name") == name
        assert (out / f"{name}_intensity.fits").parent == out  # one file name, inside the folder
    else:
        with pytest.raises(ConfigError, match=r"\[\[view\]\] #1\.name"):
            check_name(name, "[[view]] #1.name")


# beams of 0.01-100 arcsec (sizes no other check of a job refuses), their negatives, and the specials
_FLOATS = st.one_of(
    st.floats(0.01, 100), st.floats(-100, -0.01), st.sampled_from([0.0, -0.0, math.inf, -math.inf, math.nan])
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(major=_FLOATS, minor=_FLOATS, pa=_FLOATS)
def test_beam_accepted_iff_axes_finite_positive_and_ordered(tmp_path, major, minor, pa):
    raw = edit(beam__major=f"{major!r} arcsec", beam__minor=f"{minor!r} arcsec", beam__pa=f"{pa!r} deg")
    valid = all(math.isfinite(v) for v in (major, minor, pa)) and 0 < minor <= major
    if valid:
        assert parse_job(raw, base_dir=tmp_path).beam.major.to_value(u.arcsec) == pytest.approx(major)
    else:
        with pytest.raises(ConfigError, match=r"\[beam\]\.(major|minor|pa)"):
            parse_job(raw, base_dir=tmp_path)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    st.lists(
        st.one_of(st.sampled_from([0.0, -1.0, math.inf, -math.inf, math.nan]), st.integers(1, 100_000).map(float)),
        min_size=1,
        max_size=5,
    )
)
def test_frequencies_accepted_iff_finite_positive_and_distinct(tmp_path, mhz):
    # whole MHz: distinct values stay distinct in Hz, so distinctness is judged on what was written
    raw = edit(frequencies={"values": [f"{v!r} MHz" for v in mhz]})
    valid = all(math.isfinite(v) and v > 0 for v in mhz) and len(set(mhz)) == len(mhz)
    if valid:
        assert parse_job(raw, base_dir=tmp_path).frequencies.size == len(mhz)
    else:
        with pytest.raises(ConfigError, match=r"\[frequencies\]\.values"):
            parse_job(raw, base_dir=tmp_path)


_NPIX_ITEM = st.one_of(st.integers(-3, 40), st.booleans(), st.floats(0, 40), st.text(max_size=2))


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.one_of(_NPIX_ITEM, st.lists(_NPIX_ITEM, max_size=3)))
def test_npix_accepted_iff_positive_int_or_pair(tmp_path, npix):
    def positive_int(v):
        return type(v) is int and v >= 1

    valid = positive_int(npix) or (isinstance(npix, list) and len(npix) == 2 and all(map(positive_int, npix)))
    raw = edit(view__npix=npix)
    if valid:
        assert parse_job(raw, base_dir=tmp_path).views[0].as_dict()["npix"] == npix
    else:
        with pytest.raises(ConfigError, match=r"\[\[view\]\] #1\.npix"):
            parse_job(raw, base_dir=tmp_path)
