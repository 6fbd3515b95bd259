"""Fuzz table of the ``rtrace`` command: bad flags, bad output folders, damaged inputs.

Each case is (name, arguments, setup, expected exit code, texts the message
must contain). Every case must end with its documented exit code (see
``rtrace --help``: 2 command line, 3 job or option, 4 input data, 5 output),
one line naming the offending flag or job key and no traceback, and must leave
no file behind (an empty output folder may be created by the writability
probe). None of them traces anything: each is refused before any work.

The expectations come from the command's own contract (exit codes and
messages documented in ``rtrace/cli.py``); no physics is involved here.
"""

import errno
import os
from pathlib import Path

import jobs
import numpy as np
import pytest
from astropy.io import fits
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rtrace.cli import EXIT_CONFIG, EXIT_INPUT, EXIT_OUTPUT, EXIT_USAGE, main
from rtrace.errors import OutputError


def job_text(name="small", snapshot=None, output=None, pictures=False):
    """The small demo job, with more ``[snapshot]`` and ``[output]`` keys (dicts) where given."""
    return jobs.job_text(
        snapshot=jobs.demo(12, **(snapshot or {})),
        frequencies=jobs.TWO_FREQUENCIES,
        view=jobs.view(name, 16, "2 kpc"),
        output={"directory": "out", "pictures": pictures, **(output or {})},
    )


def observed_fits(path):
    """A small observed image in Jy/beam with a beam and a frequency (FITS standard keywords)."""
    hdu = fits.PrimaryHDU(np.ones((32, 32), np.float32))
    h = hdu.header
    h.update(
        CTYPE1="RA---SIN",
        CTYPE2="DEC--SIN",
        CDELT1=-1 / 3600,
        CDELT2=1 / 3600,
        CRPIX1=16.5,
        CRPIX2=16.5,
        CRVAL1=10.0,
        CRVAL2=20.0,
        CUNIT1="deg",
        CUNIT2="deg",
        BUNIT="Jy/beam",
        BMAJ=3 / 3600,
        BMIN=3 / 3600,
        BPA=0.0,
        RESTFRQ=1.4e9,
    )
    hdu.writeto(path)
    return path


def truncated(keep):
    """Setup writing ``obs.fits`` whole and ``bad.fits`` cut to its first ``keep`` bytes."""

    def setup(d):
        data = observed_fits(d / "obs.fits").read_bytes()
        (d / "bad.fits").write_bytes(data[:keep])

    return setup


def with_job(**kw):
    def setup(d):
        (d / "job.toml").write_text(job_text(**kw))

    return setup


def file_named(name, job=True):
    def setup(d):
        if job:
            with_job()(d)
        (d / name).write_text("not a folder\n")

    return setup


def folder_named(path, job=True, **kw):
    def setup(d):
        if job:
            with_job(**kw)(d)
        (d / path).mkdir(parents=True)

    return setup


def link_out(link, **kw):
    """The job, and ``link`` inside the output folder pointing at a file outside it."""

    def setup(d):
        with_job(**kw)(d)
        (d / "elsewhere").mkdir()
        (d / link).parent.mkdir(parents=True, exist_ok=True)
        os.symlink(d / "elsewhere" / "target", d / link)

    return setup


def link_folder_out(link, **kw):
    """The job, and a sub-folder ``link`` of the output folder that is a link to a folder outside it."""

    def setup(d):
        with_job(**kw)(d)
        (d / "elsewhere").mkdir()
        (d / link).parent.mkdir(parents=True, exist_ok=True)
        os.symlink(d / "elsewhere", d / link, target_is_directory=True)

    return setup


SERIES = {"seeds": [1, 2]}
CUT = ["cut", "job.toml"]

# (id, argv, setup, exit codes accepted, texts the message must contain)
CASES = [
    # -- flag values that cannot be read or are out of range: argparse, exit 2, names the flag
    ("demo-cells-negative", ["demo", "--cells", "-4", "--output", "out"], None, {EXIT_USAGE}, ["--cells", "-4"]),
    ("demo-cells-zero", ["demo", "--cells", "0", "--output", "out"], None, {EXIT_USAGE}, ["--cells", "'0'"]),
    ("demo-cells-one", ["demo", "--cells", "1", "--output", "out"], None, {EXIT_USAGE}, ["--cells", ">= 2"]),
    ("demo-cells-fraction", ["demo", "--cells", "2.5", "--output", "out"], None, {EXIT_USAGE}, ["--cells"]),
    ("demo-cells-word", ["demo", "--cells", "many", "--output", "out"], None, {EXIT_USAGE}, ["--cells"]),
    ("inspect-cells-negative", ["inspect", "--cells", "-4"], None, {EXIT_USAGE}, ["--cells"]),
    ("inspect-cells-zero", ["inspect", "--cells", "0"], None, {EXIT_USAGE}, ["--cells"]),
    ("inspect-zero-GHz", ["inspect", "--frequencies", "0 GHz"], None, {EXIT_USAGE}, ["--frequencies", "positive"]),
    ("inspect-negative-GHz", ["inspect", "--frequencies", "-1 GHz"], None, {EXIT_USAGE}, ["--frequencies"]),
    ("inspect-nan-GHz", ["inspect", "--frequencies", "nan GHz"], None, {EXIT_USAGE}, ["--frequencies", "finite"]),
    ("inspect-inf-GHz", ["inspect", "--frequencies", "inf GHz"], None, {EXIT_USAGE}, ["--frequencies"]),
    (
        "inspect-one-zero-of-two",
        ["inspect", "--frequencies", "1 GHz, 0 GHz"],
        None,
        {EXIT_USAGE},
        ["--frequencies", "1 of 2"],
    ),
    ("inspect-no-frequency", ["inspect", "--frequencies", " , "], None, {EXIT_USAGE}, ["--frequencies"]),
    ("inspect-zero-wavelength", ["inspect", "--frequencies", "0 cm"], None, {EXIT_USAGE}, ["--frequencies"]),
    (
        "compare-zero-frequency",
        ["compare", "m.fits", "o.fits", "--frequency", "0 GHz"],
        None,
        {EXIT_USAGE},
        ["--frequency"],
    ),
    (
        "compare-beam-zero",
        ["compare", "m.fits", "o.fits", "--beam", "0 arcsec, 0 arcsec, 0 deg"],
        None,
        {EXIT_USAGE},
        ["--beam", "positive"],
    ),
    (
        "compare-beam-negative",
        ["compare", "m.fits", "o.fits", "--beam", "-1 arcsec, -3 arcsec, 0 deg"],
        None,
        {EXIT_USAGE},
        ["--beam", "positive"],
    ),
    (
        "compare-beam-nan",
        ["compare", "m.fits", "o.fits", "--beam", "nan arcsec, 3 arcsec, 0 deg"],
        None,
        {EXIT_USAGE},
        ["--beam", "finite"],
    ),
    (
        "compare-beam-inf-pa",
        ["compare", "m.fits", "o.fits", "--beam", "3 arcsec, 3 arcsec, inf deg"],
        None,
        {EXIT_USAGE},
        ["--beam", "finite"],
    ),
    (
        "compare-beam-minor-above-major",
        ["compare", "m.fits", "o.fits", "--beam", "1 arcsec, 3 arcsec, 0 deg"],
        None,
        {EXIT_USAGE},
        ["--beam", "minor FWHM", "exceeds"],
    ),
    (
        "cut-num-huge",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--num", "100000000000"],
        with_job(),
        {EXIT_CONFIG},
        ["--num", "1600"],
    ),
    # -- output folders that cannot take the outputs: exit 5, names the flag or key, nothing written
    (
        "run-output-is-file",
        ["run", "job.toml", "--output", "afile", "--quiet"],
        file_named("afile"),
        {EXIT_OUTPUT},
        ["--output", "afile", "is a file"],
    ),
    (
        "run-output-under-file",
        ["run", "job.toml", "--output", "afile/sub", "--quiet"],
        file_named("afile"),
        {EXIT_OUTPUT},
        ["--output", "afile"],
    ),
    # refused by the job validator (exit 3) before the output guard (exit 5) is reached
    (
        "run-directory-is-file",
        ["run", "job.toml", "--quiet"],
        file_named("out"),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["[output].directory", "not a folder"],
    ),
    (
        "demo-output-is-file",
        ["demo", "--output", "afile", "--quiet"],
        file_named("afile", job=False),
        {EXIT_OUTPUT},
        ["--output", "afile"],
    ),
    (
        "demo-output-under-file",
        ["demo", "--output", "afile/x/y", "--quiet"],
        file_named("afile", job=False),
        {EXIT_OUTPUT},
        ["--output"],
    ),
    (
        "compare-output-is-file",
        ["compare", "obs.fits", "obs.fits", "--output", "afile"],
        lambda d: (observed_fits(d / "obs.fits"), file_named("afile", job=False)(d)),
        {EXIT_OUTPUT},
        ["--output", "afile"],
    ),
    (
        "run-manifest-is-folder",
        ["run", "job.toml", "--quiet"],
        folder_named("out/.rtrace-manifest.json"),
        {EXIT_OUTPUT},
        ["[output].directory", ".rtrace-manifest.json", "folder"],
    ),
    (
        "run-manifest-is-folder-restart",
        ["run", "job.toml", "--quiet", "--restart"],
        folder_named("out/.rtrace-manifest.json"),
        {EXIT_OUTPUT},
        [".rtrace-manifest.json"],
    ),
    (
        "run-output-file-is-folder",
        ["run", "job.toml", "--quiet"],
        folder_named("out/small_tau.fits"),
        {EXIT_OUTPUT},
        ["small_tau.fits", "is a folder"],
    ),
    (
        "run-sed-is-folder",
        ["run", "job.toml", "--quiet"],
        folder_named("out/small_sed.ecsv"),
        {EXIT_OUTPUT},
        ["small_sed.ecsv", "is a folder"],
    ),
    (
        "run-series-label-is-file",
        ["run", "job.toml", "--quiet"],
        lambda d: (with_job(snapshot=SERIES)(d), (d / "out").mkdir(), (d / "out" / "seed2").write_text("x")),
        {EXIT_OUTPUT},
        ["seed2", "is a file"],
    ),
    (
        "run-series-cache-is-file",
        ["run", "job.toml", "--quiet"],
        lambda d: (
            with_job(snapshot=SERIES, pictures=True)(d),
            (d / "out").mkdir(),
            (d / "out" / ".rtrace-cache").write_text("x"),
        ),
        {EXIT_OUTPUT},
        [".rtrace-cache", "is a file"],
    ),
    (
        "run-job-copy-is-folder",
        ["run", "job.toml", "--quiet"],
        folder_named("out/job.toml"),
        {EXIT_CONFIG},
        ["[output].directory", "job.toml"],
    ),
    # -- names that would write outside the output folder; the job validator may refuse them first (exit 3),
    #    the writer's own guard otherwise (exit 5): either way before any work, naming the key
    (
        "run-view-name-dotdot",
        ["run", "job.toml", "--quiet"],
        with_job(name="../escape"),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["name"],
    ),
    (
        "run-view-name-deep-dotdot",
        ["run", "job.toml", "--quiet"],
        with_job(name="../../escape"),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["name"],
    ),
    (
        "run-view-name-absolute",
        ["run", "job.toml", "--quiet"],
        lambda d: with_job(name=f"{d}/abs")(d),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["name"],
    ),
    (
        "run-prefix-dotdot",
        ["run", "job.toml", "--quiet"],
        with_job(output={"prefix": "../X_"}),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["prefix"],
    ),
    (
        "run-prefix-absolute",
        ["run", "job.toml", "--quiet"],
        lambda d: with_job(output={"prefix": f"{d}/X_"})(d),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["prefix"],
    ),
    (
        "run-prefix-into-subfolder-dotdot",
        ["run", "job.toml", "--quiet"],
        with_job(output={"prefix": "a/../../X_"}),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["prefix"],
    ),
    # -- symbolic links in the output folder pointing out of it: the writer's guard, exit 5
    (
        "run-output-file-links-out",
        ["run", "job.toml", "--quiet"],
        link_out("out/small_tau.fits"),
        {EXIT_OUTPUT},
        ["small_tau.fits", "outside the output folder"],
    ),
    (
        "run-sed-links-out",
        ["run", "job.toml", "--quiet"],
        link_out("out/small_sed.ecsv"),
        {EXIT_OUTPUT},
        ["small_sed.ecsv", "outside the output folder"],
    ),
    (
        "run-job-copy-links-out",
        ["run", "job.toml", "--quiet"],
        link_out("out/job.toml"),
        {EXIT_CONFIG, EXIT_OUTPUT},
        ["job.toml"],
    ),
    (
        "run-series-label-links-out",
        ["run", "job.toml", "--quiet"],
        link_folder_out("out/seed1", snapshot=SERIES),
        {EXIT_OUTPUT},
        ["seed1", "outside the output folder"],
    ),
    # -- files named by flags: exit 5 (folder) or 3 (a picture type matplotlib cannot draw)
    (
        "cut-csv-no-folder",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--table", "nodir/x.csv"],
        with_job(),
        {EXIT_OUTPUT},
        ["--table", "nodir"],
    ),
    (
        "cut-csv-is-folder",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--table", "adir"],
        folder_named("adir"),
        {EXIT_OUTPUT},
        ["--table", "is a folder"],
    ),
    (
        "cut-csv-under-file",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--table", "afile/x.csv"],
        file_named("afile"),
        {EXIT_OUTPUT},
        ["--table"],
    ),
    (
        "cut-plot-unknown-type",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--plot", "x.xyz"],
        with_job(),
        {EXIT_CONFIG},
        ["--plot", ".xyz"],
    ),
    (
        "cut-plot-no-suffix",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--plot", "figure"],
        with_job(),
        {EXIT_CONFIG},
        ["--plot", "no suffix"],
    ),
    (
        "cut-plot-no-folder",
        CUT + ["--start", "1, 1", "--end", "5, 5", "--plot", "nodir/x.png"],
        with_job(),
        {EXIT_OUTPUT},
        ["--plot", "nodir"],
    ),
    (
        "spectrum-plot-unknown-type",
        ["spectrum", "job.toml", "--plot", "s.sed"],
        with_job(),
        {EXIT_CONFIG},
        ["--plot", ".sed"],
    ),
    (
        "spectrum-plot-no-folder",
        ["spectrum", "job.toml", "--plot", "nodir/s.png"],
        with_job(),
        {EXIT_OUTPUT},
        ["--plot", "nodir"],
    ),
    (
        "spectrum-plot-is-folder",
        ["spectrum", "job.toml", "--plot", "adir"],
        folder_named("adir"),
        {EXIT_OUTPUT},
        ["--plot", "is a folder"],
    ),
    # -- cuts off the image (16 x 16 pixels): exit 4 before tracing, naming the flag
    (
        "cut-start-left",
        CUT + ["--start", "-30, 3", "--end", "5, 5"],
        with_job(),
        {EXIT_INPUT},
        ["--start", "off the image"],
    ),
    (
        "cut-end-right",
        CUT + ["--start", "1, 1", "--end", "16, 5"],
        with_job(),
        {EXIT_INPUT},
        ["--end", "off the image", "columns 0 to 15"],
    ),
    ("cut-end-above", CUT + ["--start", "1, 1", "--end", "5, 99"], with_job(), {EXIT_INPUT}, ["--end"]),
    (
        "cut-both-off",
        CUT + ["--start", "-100, -100", "--end", "100, 100"],
        with_job(),
        {EXIT_INPUT},
        ["--start, --end", "2 end point(s)"],
    ),
    ("cut-start-nan", CUT + ["--start", "nan, 3", "--end", "5, 5"], with_job(), {EXIT_INPUT}, ["--start"]),
    ("cut-start-inf", CUT + ["--start", "inf, 3", "--end", "5, 5"], with_job(), {EXIT_INPUT}, ["--start"]),
    ("cut-half-pixel-past-edge", CUT + ["--start", "1, 1", "--end", "15.4, 3"], with_job(), {EXIT_INPUT}, ["--end"]),
    # -- damaged FITS files given to compare: exit 4, naming which argument
    (
        "compare-model-data-cut",
        ["compare", "bad.fits", "obs.fits"],
        truncated(4000),
        {EXIT_INPUT},
        ["model", "bad.fits", "truncated"],
    ),
    (
        "compare-observation-data-cut",
        ["compare", "obs.fits", "bad.fits"],
        truncated(4000),
        {EXIT_INPUT},
        ["observation", "bad.fits"],
    ),
    (
        "compare-observation-one-byte-short",
        ["compare", "obs.fits", "bad.fits"],
        truncated(2880 + 4096 - 1),
        {EXIT_INPUT},
        ["observation", "bad.fits"],
    ),
    (
        "compare-observation-header-only",
        ["compare", "obs.fits", "bad.fits"],
        truncated(2880),
        {EXIT_INPUT},
        ["observation", "bad.fits"],
    ),
    (
        "compare-observation-header-cut",
        ["compare", "obs.fits", "bad.fits"],
        truncated(1000),
        {EXIT_INPUT},
        ["observation", "bad.fits"],
    ),
    (
        "compare-observation-empty",
        ["compare", "obs.fits", "bad.fits"],
        truncated(0),
        {EXIT_INPUT},
        ["observation", "bad.fits"],
    ),
]


def listing(d):
    """Every file (not folder) under ``d``, relative."""
    return {p.relative_to(d) for p in d.rglob("*") if not p.is_dir() or p.is_symlink()}


def run_cli(argv, capsys):
    """``(exit code, standard error)`` of the command run in this process."""
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse's usage errors
        code = exc.code
    return code, capsys.readouterr().err


@pytest.mark.parametrize("name, argv, setup, codes, texts", CASES, ids=[c[0] for c in CASES])
def test_fuzz_cli(name, argv, setup, codes, texts, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    if setup is not None:
        setup(tmp_path)
    before = listing(tmp_path)
    code, err = run_cli(argv, capsys)
    assert code in codes, err
    assert "Traceback" not in err
    for text in texts:
        assert text in err, err
    assert listing(tmp_path) == before  # nothing written (an empty output folder at most)


def test_cases_are_many_and_named():
    assert len(CASES) >= 40
    assert len({c[0] for c in CASES}) == len(CASES)


# -- generated inputs (hypothesis): every non-positive or non-finite frequency, every point off the image


@pytest.fixture(scope="module")
def job_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("fuzzjob")
    (d / "job.toml").write_text(job_text())
    return d


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    value=st.one_of(
        st.floats(max_value=0.0, allow_nan=False), st.just(float("nan")), st.just(float("inf")), st.just(float("-inf"))
    ),
    unit=st.sampled_from(["Hz", "MHz", "GHz", "cm", "mm"]),
)
def test_fuzz_bad_frequencies(value, unit, capsys):
    code, err = run_cli(["inspect", "--frequencies", f"1 GHz, {value!r} {unit}"], capsys)
    assert code == EXIT_USAGE
    assert "--frequencies" in err and "1 of 2" in err


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(col=st.floats(-1e6, 1e6), row=st.floats(-1e6, 1e6))
def test_fuzz_cut_points(col, row, job_dir, capsys, monkeypatch):
    """A cut of a 16 x 16 image: end points off the pixel centres 0..15 are refused before tracing."""
    on = 0 <= col <= 15 and 0 <= row <= 15
    if on:
        # only the refusal is under test here: a point on the image would start tracing
        return
    monkeypatch.chdir(job_dir)
    before = listing(job_dir)
    code, err = run_cli(["cut", "job.toml", "--start", f"{col!r}, {row!r}", "--end", "7, 7"], capsys)
    assert code == EXIT_INPUT
    assert "--start" in err and "off the image" in err
    assert listing(job_dir) == before


# -- the disk and the folder failing under the writer (simulated; real file systems in test_cli.py)


@pytest.mark.parametrize(
    "number, text",
    [
        (errno.EROFS, "read-only"),
        (errno.EACCES, "permission denied"),
        (errno.ENOSPC, "no space left"),
        (errno.EDQUOT, "quota"),
    ],
)
def test_probe_failure_is_an_output_error(number, text, tmp_path, monkeypatch, capsys):
    """Simulated (as root, permissions do not stop writes): the probe file of the output folder fails."""
    from rtrace.io import outdir

    def refuse(path, *args, **kwargs):
        raise OSError(number, os.strerror(number), str(path))

    monkeypatch.setattr(outdir, "open", refuse, raising=False)
    monkeypatch.chdir(tmp_path)
    with_job()(tmp_path)
    before = listing(tmp_path)
    code, err = run_cli(["run", "job.toml", "--quiet"], capsys)
    assert code == EXIT_OUTPUT
    assert "[output].directory" in err and text in err
    assert listing(tmp_path) == before


def test_output_error_is_an_rtrace_error():
    from rtrace.errors import RtraceError

    assert issubclass(OutputError, RtraceError)


# -- the writer itself: atomic_path turns disk errors into OutputError and leaves nothing behind


@pytest.mark.parametrize("number", [errno.ENOSPC, errno.EDQUOT, errno.EFBIG, errno.EROFS, errno.EACCES])
def test_atomic_path_disk_errors(number, tmp_path):
    from rtrace.io.atomic import atomic_path

    target = tmp_path / "cube.fits"
    target.write_bytes(b"old")
    with pytest.raises(OutputError, match="cube.fits") as info:
        with atomic_path(target) as tmp:
            tmp.write_bytes(b"half of the new")
            raise OSError(number, os.strerror(number))
    assert "nothing partial" in str(info.value)
    assert isinstance(info.value.__cause__, OSError)  # the original error is kept as the cause
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cube.fits"]
    assert target.read_bytes() == b"old"  # the old file is untouched


@pytest.mark.parametrize("exc", [OSError(errno.ENOENT, "No such file"), ValueError("a bug"), KeyError("k")])
def test_atomic_path_other_errors_pass_through(exc, tmp_path):
    """Errors that are not the disk's fault keep their type (a genuine bug exits 1 with its traceback)."""
    from rtrace.io.atomic import atomic_path

    with pytest.raises(type(exc)) as info:
        with atomic_path(tmp_path / "x.csv") as tmp:
            tmp.write_text("a,b\n")
            raise exc
    assert not isinstance(info.value, OutputError)
    assert list(tmp_path.iterdir()) == []


def test_atomic_path_onto_a_folder(tmp_path):
    from rtrace.io.atomic import atomic_path

    (tmp_path / "x.csv").mkdir()
    with pytest.raises(OutputError, match="x.csv"):
        with atomic_path(tmp_path / "x.csv") as tmp:
            tmp.write_text("a,b\n")
    assert [p.name for p in tmp_path.iterdir()] == ["x.csv"]


@pytest.mark.parametrize(
    "name, inside",
    [
        ("a.fits", True),
        ("sub/a.fits", True),
        ("sub/../a.fits", True),
        ("./a.fits", True),
        ("../a.fits", False),
        ("sub/../../a.fits", False),
        ("/etc/a.fits", False),
        (".", False),
        ("", False),
        ("link_in/a.fits", True),
        ("link_out/a.fits", False),
        ("file_link_out", False),
        ("file_link_in", True),
    ],
)
def test_check_inside(name, inside, tmp_path):
    from rtrace.io.outdir import check_inside

    out = tmp_path / "out"
    (out / "sub").mkdir(parents=True)
    (tmp_path / "outside").mkdir()
    os.symlink(out / "sub", out / "link_in")
    os.symlink(tmp_path / "outside", out / "link_out")
    os.symlink(tmp_path / "outside" / "f", out / "file_link_out")
    os.symlink("sub/f", out / "file_link_in")  # relative, stays inside
    path = out / name
    if inside:
        assert check_inside(path, out, "[[view]].name") == path
    else:
        with pytest.raises(OutputError, match=r"\[\[view\]\].name.*outside the output folder"):
            check_inside(path, out, "[[view]].name")


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(parts=st.lists(st.sampled_from(["..", ".", "a", "b", "", "/", "x_", "..a", "a..", "~"]), min_size=1, max_size=6))
def test_fuzz_check_inside_matches_normpath(parts, tmp_path):
    """Without links, a name is inside the folder exactly when the standard library's path algebra says so.

    Reference: os.path.normpath and os.path.commonpath (Python standard library), on the joined name.
    """
    from rtrace.io.outdir import check_inside

    out = tmp_path / "out"
    out.mkdir(exist_ok=True)
    name = "".join(p if p in ("/",) else p + "/" for p in parts).rstrip("/") + "_tau.fits"
    path = os.path.join(out, name)
    norm = os.path.normpath(path)
    inside = norm != str(out) and os.path.commonpath([norm, str(out)]) == str(out)
    if inside:
        assert check_inside(path, out) == Path(path)
    else:
        with pytest.raises(OutputError, match="outside the output folder"):
            check_inside(path, out)
