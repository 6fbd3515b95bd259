"""The rtrace command end to end on small jobs in a temporary directory."""

import os
import textwrap

import astropy.units as u
import h5py
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table
from astropy.wcs import WCS
from jobs import NOISE, TWO_FREQUENCIES, demo, job_text, view, write

from rtrace.cli import EXIT_CONFIG, EXIT_INPUT, EXIT_OK, EXIT_OUTPUT, main

JOB = job_text(
    snapshot=demo(20),
    frequencies=TWO_FREQUENCIES,
    view=view("small", 24, "2 kpc"),
    beam={"major": "60 arcsec", "minor": "40 arcsec", "pa": "30 deg"},
    noise=NOISE,
    output={"directory": "out"},
)


def test_run_writes_fits_pictures_and_sed(tmp_path, capsys):
    job = write(tmp_path, JOB)
    assert main(["run", str(job), "--quiet"]) == EXIT_OK
    out = tmp_path / "out"
    names = sorted(p.name for p in out.iterdir())
    for expected in (
        "small_intensity.fits",
        "small_tau.fits",
        "small_observed.fits",
        "small_sed.ecsv",
        "small_intensity.png",
        "small_sed.png",
    ):
        assert expected in names
    assert [n for n in names if n.startswith(".")] == [".rtrace-manifest.json"]  # no temporary files left
    with fits.open(out / "small_observed.fits") as hdul:
        header = hdul[0].header
        assert hdul[0].data.shape == (2, 24, 24)
        # FITS beam keywords in degrees (common practice of radio FITS files)
        assert header["BMAJ"] == pytest.approx(60 / 3600)
        assert WCS(header).naxis == 3
    sed = Table.read(out / "small_sed.ecsv")  # astropy ECSV reader
    assert len(sed) == 2 and sed["flux_density"].unit == u.Jy
    # every product says its background convention (rtrace.transfer.background): FITS cards and table meta
    for path in out.glob("*.fits"):
        header = fits.getheader(path)
        assert (header["BKGSUB"], header["BKGKIND"], header["BKGTEMP"]) == (True, "NONE", 0.0), path.name
    assert sed.meta["background"] == "subtracted (none): empty sky reads 0"
    assert "wrote" in capsys.readouterr().out


def test_bad_job_exits_3_and_writes_nothing(tmp_path, capsys):
    job = write(tmp_path, JOB.replace("npix = 24", "npx = 24"))
    assert main(["run", str(job), "--quiet"]) == EXIT_CONFIG
    assert "did you mean 'npix'" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_bad_data_exits_4(tmp_path, capsys):
    t = np.full((8, 8, 8), 1e4)
    t[0, 0, :3] = np.nan
    with h5py.File(tmp_path / "bad.h5", "w") as f:
        f.create_dataset("T", data=t).attrs["units"] = "K"
        f.create_dataset("ne", data=np.ones((8, 8, 8))).attrs["units"] = "cm**-3"
    text = JOB.replace(
        'kind = "demo"\ncells = 20',
        'kind = "hdf5"\npath = "bad.h5"\ntemperature = "T"\nelectron_density = "ne"\ncell_size = "0.01 pc"',
    )
    assert main(["run", str(write(tmp_path, text)), "--quiet"]) == EXIT_INPUT
    assert "temperature: 3 of 512 cells are not finite" in capsys.readouterr().err


def test_inspect_and_sed(tmp_path, capsys):
    assert main(["inspect", "--cells", "16", "--frequencies", "1 GHz, 30 GHz"]) == EXIT_OK
    out = capsys.readouterr().out
    assert "estimated optical depth" in out and "30 GHz" in out
    job = write(tmp_path, JOB)
    assert main(["spectrum", str(job), "--plot", str(tmp_path / "sed.png")]) == EXIT_OK
    out = capsys.readouterr().out
    assert "S (Jy)" in out and (tmp_path / "sed.png").stat().st_size > 1000


def test_cut_writes_profiles_and_figure(tmp_path, capsys):
    job = write(tmp_path, JOB)
    csv, png = tmp_path / "cut.ecsv", tmp_path / "cut.png"
    # --csv: the former name of --table, still accepted (the fuzz tests use --table)
    assert (
        main(["cut", str(job), "--start", "2, 12", "--end", "21, 12", "--csv", str(csv), "--plot", str(png)]) == EXIT_OK
    )
    out = capsys.readouterr().out
    assert "max tau" in out and png.stat().st_size > 1000
    rows = Table.read(csv)  # astropy ECSV reader: units and meta come back
    assert len(rows) == 20 and rows["offset"].unit == u.arcsec and rows["Tb_1GHz"].unit == u.K
    assert rows["I_1GHz"].unit == u.Unit("erg s-1 cm-2 Hz-1 sr-1")
    # with absorption the intensity never exceeds the emission-only one (R&L 1979 eq. 1.30: (1 - e^-tau)/tau <= 1)
    assert np.all(rows["I_1GHz"] <= rows["I_unabsorbed_1GHz"] * (1 + 1e-6))
    assert rows.meta["background"].startswith("subtracted")
    with pytest.raises(SystemExit) as exc:
        main(["cut", str(job), "--start", "2", "--end", "3, 4"])
    assert exc.value.code == 2


def test_help_everywhere():
    for argv in (
        ["--help"],
        ["run", "--help"],
        ["demo", "--help"],
        ["inspect", "--help"],
        ["spectrum", "--help"],
        ["compare", "--help"],
        ["cut", "--help"],
    ):
        with pytest.raises(SystemExit) as exc:
            main(argv)
        assert exc.value.code == 0
    with pytest.raises(SystemExit) as exc:
        main(["frobnicate"])
    assert exc.value.code == 2


QUICK = JOB.replace('directory = "out"', 'directory = "out"\npictures = false').replace(
    "cells = 20", "cells = 16\nseeds = [1, 2]"
)


def test_rerun_skips_finished_outputs_and_restart_redoes_them(tmp_path, capsys):
    job = write(tmp_path, QUICK)
    assert main(["run", str(job), "--quiet"]) == EXIT_OK
    out = tmp_path / "out"
    assert sorted(p.name for p in out.iterdir()) == [".rtrace-manifest.json", "job.toml", "seed1", "seed2"]
    assert "wrote 15 files" in capsys.readouterr().out  # 14 outputs and the job's copy, job.toml
    assert (out / "job.toml").read_text() == job.read_text()
    assert main(["run", str(job)]) == EXIT_OK  # with progress lines
    captured = capsys.readouterr()
    assert "wrote 0 files" in captured.out and "skipped 15 files already up to date" in captured.out
    assert "seed1 / view 'small': 7 of 7 outputs up to date, skipped" in captured.err
    assert "done: 0 written, 15 up to date (skipped)" in captured.err
    assert main(["run", str(job), "--quiet", "--restart"]) == EXIT_OK
    assert "wrote 15 files" in capsys.readouterr().out


@pytest.mark.parametrize(
    "argv,message",
    [
        (["--workers", "0"], "expected a positive number of workers, got '0'"),
        (["--workers", "two"], "expected a positive number of workers, got 'two'"),
        (["--scheduler", "localhost:8786"], "is not a scheduler address of the form scheme://host:port"),
        (["--workers", "2", "--scheduler", "tcp://h:8786"], "not allowed with argument"),
    ],
)
def test_bad_parallel_options_are_usage_errors(tmp_path, capsys, argv, message):
    job = write(tmp_path, QUICK)
    with pytest.raises(SystemExit) as exc:
        main(["run", str(job), "--quiet", *argv])
    assert exc.value.code == 2 and message in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_workers_option_overrides_the_job(tmp_path, monkeypatch):
    import dask.distributed

    import rtrace.run.engine

    made, seen = [], []

    class Cluster:
        def __init__(self, **kw):
            self.kw = kw
            made.append(self)

        def close(self):
            pass

    class Client:
        def __init__(self, target):
            self.target = target

        def close(self):
            pass

    real = rtrace.run.engine.trace

    def recorded(*args, client=None, **kwargs):
        seen.append(client)
        return real(*args, **kwargs)

    monkeypatch.setattr(dask.distributed, "LocalCluster", Cluster)
    monkeypatch.setattr(dask.distributed, "Client", Client)
    monkeypatch.setattr(rtrace.run.engine, "trace", recorded)
    job = write(tmp_path, QUICK)  # the job itself asks for no cluster
    assert main(["run", str(job), "--quiet", "--workers", "3"]) == EXIT_OK
    assert [c.kw for c in made] == [{"n_workers": 3, "threads_per_worker": 1}]
    assert seen and all(isinstance(c, Client) and c.target is made[0] for c in seen)


# -- output folder and disk problems: exit 5 (EXIT_OUTPUT), nothing partial left under a final name

SMALL = JOB.replace('directory = "out"', 'directory = "out"\npictures = false').replace("cells = 20", "cells = 12")


def _leftovers(folder):
    """Temporary files of atomic_path (hidden, '.tmp' in the name) and probe files left in ``folder``."""
    return [p.name for p in folder.rglob(".*") if ".tmp" in p.name or p.name.startswith(".rtrace-probe")]


def _complete(folder, job_text):
    """Every file under a final name is whole: FITS data read in full, the job copy equal to the job."""
    import warnings

    for path in folder.rglob("*"):
        if path.name.startswith(".") or path.is_dir():
            continue
        if path.suffix == ".fits":
            with warnings.catch_warnings():
                warnings.simplefilter("error")  # astropy warns about a truncated file
                with fits.open(path, memmap=False) as hdul:
                    assert np.isfinite(hdul[0].data).all(), path.name
        elif path.name == "job.toml":
            assert path.read_text() == textwrap.dedent(job_text)
        elif path.suffix == ".ecsv":
            assert path.read_text().endswith("\n"), path.name


@pytest.fixture
def tmpfs(tmp_path):
    """Mount a tiny tmpfs (``size``, ``ro``) under tmp_path; skipped where mounting is not allowed."""
    import subprocess

    mounts = []

    def mount(size="16k", read_only=False):
        point = tmp_path / f"mnt{len(mounts)}"
        point.mkdir()
        options = f"size={size}" + (",ro" if read_only else "")
        done = subprocess.run(
            ["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(point)], capture_output=True, check=False
        )
        if done.returncode != 0:
            pytest.skip(f"cannot mount a tmpfs here (needs root or CAP_SYS_ADMIN): {done.stderr.decode().strip()}")
        mounts.append(point)
        return point

    yield mount
    for point in mounts:
        subprocess.run(["umount", "-l", str(point)], capture_output=True, check=False)


def test_full_disk_exits_5_and_leaves_nothing_partial(tmp_path, tmpfs, capsys, monkeypatch):
    """A real full disk: a 16 KiB tmpfs takes the probe file but not the outputs.

    The up-front space check is switched off here, so that the disk fills up in the middle of writing.
    """
    import rtrace.run.pipeline

    monkeypatch.setattr(rtrace.run.pipeline, "check_space", lambda *a, **k: None)
    job = write(tmp_path, SMALL)
    disk = tmpfs("16k")
    code = main(["run", str(job), "--output", str(disk / "out"), "--quiet"])
    err = capsys.readouterr().err
    assert code == EXIT_OUTPUT, err
    assert "no space left" in err and str(disk / "out") in err and "Traceback" not in err
    assert _leftovers(disk) == []
    _complete(disk / "out", SMALL)


def test_outputs_larger_than_the_free_space_refused_before_tracing(tmp_path, tmpfs, capsys, monkeypatch):
    """A 256-pixel view at 2 frequencies makes 512 KiB float32 cubes: a 64 KiB tmpfs cannot hold one."""
    import rtrace.run.engine

    monkeypatch.setattr(rtrace.run.engine.Engine, "trace", lambda *a, **k: pytest.fail("traced before the check"))
    job = write(tmp_path, SMALL.replace("npix = 24", "npix = 256"))
    disk = tmpfs("64k")
    assert main(["run", str(job), "--output", str(disk), "--quiet"]) == EXIT_OUTPUT
    err = capsys.readouterr().err
    assert "[output].directory" in err and "MB free" in err
    # at least 4 cubes of 2 x 256 x 256 float32 and the emission measure (FITS standard 4.0: float32 = 4 bytes)
    need = float(err.split("need at least ")[1].split(" MB")[0])
    assert need >= (4 * 2 + 1) * 256 * 256 * 4 / 1e6
    assert list(disk.iterdir()) == []


def test_read_only_output_folder_exits_5_before_tracing(tmp_path, tmpfs, capsys, monkeypatch):
    """A real read-only file system, found by the probe before any tracing."""
    import rtrace.run.engine

    monkeypatch.setattr(rtrace.run.engine.Engine, "trace", lambda *a, **k: pytest.fail("traced before the check"))
    job = write(tmp_path, SMALL)
    disk = tmpfs("16k", read_only=True)
    for out in (disk, disk / "sub" / "folder"):
        assert main(["run", str(job), "--output", str(out), "--quiet"]) == EXIT_OUTPUT
        err = capsys.readouterr().err
        assert "--output" in err and "read-only file system" in err
    assert list(disk.iterdir()) == []


@pytest.mark.skipif(
    not hasattr(os, "geteuid") or os.geteuid() == 0,
    reason="root ignores file permissions; test_fuzz_cli.py simulates EACCES instead",
)
def test_permission_denied_output_folder_exits_5(tmp_path, capsys):
    job = write(tmp_path, SMALL)
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    try:
        assert main(["run", str(job), "--output", str(locked), "--quiet"]) == EXIT_OUTPUT
        assert "permission denied" in capsys.readouterr().err
        assert list(locked.iterdir()) == []
    finally:
        locked.chmod(0o700)


def test_disk_full_while_writing_is_reported_and_nothing_partial_left(tmp_path, capsys, monkeypatch):
    """Simulated full disk (ENOSPC at the fsync of the third file, where write-back errors surface).

    Runs everywhere, unlike the tmpfs test above; the temporary file exists when the error comes.
    """
    import errno

    from rtrace.io import atomic

    real, calls = atomic._fsync_file, []

    def fsync(path):
        calls.append(path)
        assert path.exists()  # the writer finished its temporary file
        if len(calls) == 3:
            raise OSError(errno.ENOSPC, "No space left on device", str(path))
        real(path)

    monkeypatch.setattr(atomic, "_fsync_file", fsync)
    job = write(tmp_path, SMALL)
    assert main(["run", str(job), "--quiet"]) == EXIT_OUTPUT
    err = capsys.readouterr().err
    assert "no space left" in err and "nothing partial" in err
    assert len(calls) == 3
    assert _leftovers(tmp_path / "out") == []
    _complete(tmp_path / "out", SMALL)


def test_writer_guard_refuses_paths_out_of_the_folder_behind_the_validator(tmp_path, monkeypatch):
    """Defence in depth: names changed after validation are still refused where the paths are made."""
    from dataclasses import replace

    import rtrace.run.engine
    from rtrace.errors import OutputError
    from rtrace.run.job import load_job
    from rtrace.run.pipeline import run

    monkeypatch.setattr(rtrace.run.engine.Engine, "trace", lambda *a, **k: pytest.fail("traced before the check"))
    for change in ({"name": "../escape"}, {"name": str(tmp_path / "abs")}, {"prefix": "../../X_"}):
        job = load_job(write(tmp_path, SMALL))
        # the Job is frozen: a changed copy stands for a name changed after validation
        if "name" in change:
            job = replace(job, views=(replace(job.views[0], name=change["name"]),) + job.views[1:])
        else:
            job = replace(job, output=replace(job.output, prefix=change["prefix"]))
        with pytest.raises(OutputError, match="outside the output folder"):
            run(job)
        assert sorted(p.name for p in tmp_path.iterdir()) == ["job.toml", "out"]
        assert list((tmp_path / "out").iterdir()) == []


def test_cut_with_sky_points_off_the_image_exits_4(tmp_path, capsys):
    """Sky end points are placed on the image after tracing; one off the image is refused, naming its flag."""
    job = write(tmp_path, SMALL)
    # the view's default sky position is RA 0, Dec 0; 10 deg away is far off a 24-pixel image of 2 kpc
    code = main(["cut", str(job), "--start", "10 deg, 10 deg", "--end", "3, 3"])
    err = capsys.readouterr().err
    assert code == EXIT_INPUT, err
    assert "--start" in err and "off the image" in err


def test_help_lists_exit_codes(capsys):
    with pytest.raises(SystemExit):
        main(["--help"])
    text = " ".join(capsys.readouterr().out.split())
    for code in ("0 ok", "1 internal error", "2 bad command line", "3 job-file", "4 unusable input", "5 output"):
        assert code in text
