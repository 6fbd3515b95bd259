"""The whole study from a job file: [synthesis] and [comparison] end to end, resumable, validated up front.

Invented antenna layout and observation; the observed image is the demo view itself seen through a
Gaussian beam (rtrace's own observe, a different code path from compare's convolution and
reprojection), so the comparison must find a model / observed flux ratio of 1.
"""

import math
import textwrap

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.io import fits
from astropy.table import Table
from astropy.wcs import WCS
from jobs import TWO_FREQUENCIES, demo, job_text, view
from jobs import write as _write

import rtrace
from rtrace.cli import EXIT_CONFIG, EXIT_OK, main
from rtrace.errors import ConfigError
from rtrace.run.job import load_job, run_job

# ra, dec: a declination for the (u, v) tracks (without one, synthesis warns and uses 0)
BASE = job_text(
    snapshot=demo(20),
    frequencies=TWO_FREQUENCIES,
    view=view("small", 24, "2 kpc", ra="150 deg", dec="20 deg"),
    output={"directory": "out", "quantities": ["intensity"]},
)

STUDY = """
[synthesis]
antennas = "five.txt"
latitude = "35 deg"
hour_angle_range = ["-2 hourangle", "2 hourangle"]
weighting = "uniform"

[comparison]
observation = "observed.fits"
apertures = ["core.reg"]
"""

# invented layout, baselines 115-300 m
ANTENNAS = """# five invented dishes
unit = m
0 0 0
120 10 0.5
-60 110 0
40 -150 1
-130 -60 0
"""
OBS_BEAM = radio_beam.Beam(major=40 * u.arcsec, minor=30 * u.arcsec, pa=20 * u.deg)


def _observed(tmp_path):
    """The demo view at 10 GHz seen through OBS_BEAM, written as a one-plane Jy/beam image."""
    job = load_job(_write(tmp_path, BASE, "base.toml"))
    from rtrace.run.inputs import build_snapshot
    from rtrace.run.job import build_views

    _, view = build_views(job)[0]
    res = rtrace.trace(build_snapshot(job, job.snapshots[0]), view, [10] * u.GHz)
    res.observe(beam=OBS_BEAM).write_fits(tmp_path / "observed.fits")
    return res


@pytest.fixture()
def study(tmp_path):
    (tmp_path / "five.txt").write_text(ANTENNAS)
    (tmp_path / "nounit.txt").write_text("0 0 0\n100 0 0\n")
    res = _observed(tmp_path)
    # a DS9-format circle of 60 arcsec on the view's centre, read with the regions package
    c = res.sky_position
    (tmp_path / "core.reg").write_text(f'# Region file format: DS9\nicrs\ncircle({c.ra.deg:.8f},{c.dec.deg:.8f},60")\n')
    return tmp_path


# five short baselines at 1 GHz: a synthesized beam of more than half the 24-pixel field, which the picture says
@pytest.mark.filterwarnings("ignore:the beam .* is larger than 0.5 of the field:UserWarning")
def test_job_with_synthesis_and_comparison_runs_and_resumes(study):
    job_path = _write(study, BASE + STUDY)
    assert main(["run", str(job_path), "--quiet"]) == EXIT_OK
    out = study / "out"
    for name in (
        "small_synthesized.fits",
        "small_synthesized.png",
        "small_comparison.fits",
        "small_comparison.png",
        "small_comparison.ecsv",
        "job.toml",
    ):
        assert (out / name).stat().st_size > 0, name
    # the job is kept, byte for byte, with its outputs
    assert (out / "job.toml").read_text() == job_path.read_text()
    # the synthesized cube: Jy/beam with a clean beam, on the array's own grid, not the model's 24 pixels
    with fits.open(out / "small_synthesized.fits") as hdul:
        hdr = hdul[0].header
        assert hdr["BUNIT"].lower().replace(" ", "") == "jy/beam" and hdr["BMAJ"] > 0
        wcs = WCS(hdr)
        assert wcs.has_celestial and hdul[0].data.shape[-1] != 24
        # 5 pixels across lambda_min / B_max (rtrace.interferometer.grid); lambda = c / nu with
        # c = 299792458 m/s (SI definition), B_max the longest baseline of the invented layout
        pos = np.loadtxt(study / "five.txt", comments=("#", "unit"))
        bmax = max(np.linalg.norm(a - b) for a in pos for b in pos)
        expect_deg = math.degrees(299792458.0 / 10e9 / bmax / 5)
        assert abs(hdr["CDELT2"]) == pytest.approx(expect_deg, rel=1e-9)
    # the comparison: the observation is the same model through a known beam, so model / observed = 1
    rows = Table.read(out / "small_comparison.ecsv")  # astropy ECSV reader: units and meta come back
    assert rows.meta["background"].startswith("subtracted from the model")
    assert rows.colnames[:5] == ["aperture", "model", "observed", "residual", "ratio"]
    assert rows["model"].unit == u.Jy and rows["observed"].unit == u.Jy and rows["pixels"].unit == u.pix
    assert rows["aperture"][0] == "common footprint" and rows["ratio"][0] == pytest.approx(1.0, abs=0.02)
    assert rows["aperture"][1] == "core.reg#0" and rows["ratio"][1] == pytest.approx(1.0, abs=0.02)
    # a rerun finds every output finished and skips it
    again = run_job(load_job(job_path))
    assert list(again) == []
    assert {p.split("/")[-1] for p in again.skipped} >= {"small_synthesized.fits", "small_comparison.ecsv", "job.toml"}
    # a changed antenna file redoes the synthesis outputs only
    (study / "five.txt").write_text(ANTENNAS + "200 200 0\n")
    third = run_job(load_job(job_path))
    assert sorted(p.split("/")[-1] for p in third) == ["small_synthesized.fits", "small_synthesized.png"]


@pytest.mark.parametrize(
    "extra, match",
    [
        (
            '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\nweigthing = "uniform"\n',
            r"\[synthesis\]: unknown key 'weigthing' \(did you mean 'weighting'\?\)",
        ),
        ('[synthesis]\nantennas = "none.txt"\nlatitude = "35 deg"\n', r"\[synthesis\]\.antennas: file not found"),
        (
            '[synthesis]\nantennas = "nounit.txt"\nlatitude = "35 deg"\n',
            r"has no 'unit =' line; give \[synthesis\]\.antenna_unit",
        ),
        ('[synthesis]\nlatitude = "35 deg"\n', r"\[synthesis\]: 'antennas' is required"),
        (
            '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\nrobust = 0.5\n',
            r"\[synthesis\]\.robust: only used with weighting = 'robust'",
        ),
        (
            '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\nhour_angle_step = "5 m"\n',
            r"\[synthesis\]\.hour_angle_step: '5 m' is not an angle",
        ),
        ('[synthesis]\nantennas = "five.txt"\nlatitude = "35 m"\n', r"\[synthesis\]\.latitude: '35 m' is not an angle"),
        (
            '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\n'
            'hour_angle_range = ["2 hourangle", "1 hourangle"]\n',
            r"\[synthesis\]\.hour_angle_range: start .* is after stop",
        ),
        (
            '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\nweighting = "briggs"\n',
            r"\[synthesis\]\.weighting: 'briggs' is not one of",
        ),
        (
            '[comparison]\nobservation = "observed.fits"\napertures = ["missing.reg"]\n',
            r"\[comparison\]\.apertures\[0\]: file not found",
        ),
        (
            '[comparison]\nobservation = "observed.fits"\nfrequency = "20 GHz"\n',
            r"\[comparison\]\.observation: observed at 20 GHz, outside the job's frequencies",
        ),
        ('[comparison]\nobservation = "observed.fits"\nveiws = ["small"]\n', r"did you mean 'views'"),
        ('[comparison]\nobservation = "observed.fits"\nviews = ["smal"]\n', r"no view named 'smal'"),
    ],
)
def test_study_sections_are_validated_before_tracing(study, extra, match):
    with pytest.raises(ConfigError, match=match):
        load_job(_write(study, BASE + extra))


def test_comparison_without_beam_names_the_job_key(tmp_path):
    # an observed image with no BMAJ/BMIN: the job error names the job key, the CLI error the flag
    hdu = fits.PrimaryHDU(np.ones((8, 8)))
    hdu.header.update(
        {
            "CTYPE1": "RA---SIN",
            "CTYPE2": "DEC--SIN",
            "CDELT1": -1e-3,
            "CDELT2": 1e-3,
            "CRPIX1": 4.5,
            "CRPIX2": 4.5,
            "CRVAL1": 0.0,
            "CRVAL2": 0.0,
            "BUNIT": "Jy/beam",
            "RESTFRQ": 5e9,
        }
    )
    hdu.writeto(tmp_path / "nobeam.fits")
    with pytest.raises(ConfigError, match=r"pass \[comparison\]\.beam"):
        load_job(_write(tmp_path, BASE + '[comparison]\nobservation = "nobeam.fits"\n'))


def test_cli_messages_name_flags(tmp_path, capsys):
    hdu = fits.PrimaryHDU(np.ones((8, 8)))
    hdu.header.update(
        {
            "CTYPE1": "RA---SIN",
            "CTYPE2": "DEC--SIN",
            "CDELT1": -1e-3,
            "CDELT2": 1e-3,
            "CRPIX1": 4.5,
            "CRPIX2": 4.5,
            "CRVAL1": 0.0,
            "CRVAL2": 0.0,
            "BUNIT": "Jy/beam",
        }
    )
    hdu.writeto(tmp_path / "bare.fits")
    main(["compare", str(tmp_path / "bare.fits"), str(tmp_path / "bare.fits"), "--output", str(tmp_path)])
    err = capsys.readouterr().err
    assert "pass --frequency" in err and "frequency=" not in err


def test_inspect_uses_the_job_frequencies(tmp_path, capsys):
    assert main(["inspect", str(_write(tmp_path, BASE))]) == EXIT_OK
    rows = [
        line.split()[0]
        for line in capsys.readouterr().out.splitlines()
        if line.strip().endswith("GHz") is False and "GHz" in line
    ]
    assert rows == ["1", "10"]
    assert main(["inspect", str(_write(tmp_path, BASE)), "--cells", "8"]) == EXIT_CONFIG


def test_a_synthesized_grid_too_large_is_refused_before_tracing(study):
    # a view of known width, 2 pc at 2 kpc (1 arcsec is 1 au at 1 pc: 206 arcsec), is at least two
    # synthesized beams wide at 1 GHz (2 lambda / B_max, rtrace.interferometer.grid); in 0.01 arcsec
    # pixels that is tens of thousands of pixels
    text = BASE.replace('distance = "2 kpc"', 'distance = "2 kpc"\nwidth = "2 pc"')
    extra = '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\npixel_scale = "0.01 arcsec"\n'
    pos = np.loadtxt(study / "five.txt", comments=("#", "unit"))
    bmax = max(np.linalg.norm(a - b) for a in pos for b in pos)
    field = max(206.2648, math.degrees(2 * 299792458.0 / 1e9 / bmax) * 3600)  # arcsec; c (SI definition)
    n = math.ceil(field / 0.01)
    with pytest.raises(
        ConfigError,
        match=rf"\[synthesis\] for view 'small': image_size: the synthesized image "
        rf"would be ({n}|{n - 1}|{n + 1}) x",
    ):
        load_job(_write(study, text + extra))
    extra = '[synthesis]\nantennas = "five.txt"\nlatitude = "35 deg"\ndish_diameter = "150 m"\n'
    with pytest.raises(ConfigError, match=r"\[synthesis\]\.dish_diameter: antennas 0 and 1 stand"):
        load_job(_write(study, text + extra))


def test_cut_messages_name_flags_before_tracing(tmp_path, capsys, monkeypatch):
    import rtrace as package

    def no_trace(*args, **kwargs):
        raise AssertionError("not reached: the cut is refused before tracing")

    monkeypatch.setattr(package.transfer, "trace", no_trace)
    job = _write(tmp_path, BASE)
    assert main(["cut", str(job), "--start", "3, 4", "--end", "3, 4"]) == 4
    assert "--start, --end: the cut has zero length" in capsys.readouterr().err
    with pytest.raises(SystemExit) as exc:
        main(["cut", str(job), "--start", "3, 4", "--end", "9, 4", "--num", "1"])
    assert exc.value.code == 2 and "--num" in capsys.readouterr().err


def test_a_foreign_job_toml_in_the_output_folder_is_not_overwritten(tmp_path):
    # the user's own file of that name is left alone, with an error before any tracing
    (tmp_path / "out").mkdir()
    mine = tmp_path / "out" / "job.toml"
    mine.write_text("# someone else's notes\n")
    with pytest.raises(ConfigError, match=r"\[output\]\.directory: .*job.toml exists and was not written by rtrace"):
        run_job(load_job(_write(tmp_path, BASE, "other.toml")))
    assert mine.read_text() == "# someone else's notes\n"
    assert not (tmp_path / "out" / "small_intensity.fits").exists()
    # a job whose own file is that one (the output folder is the job's folder) runs
    inside = BASE.replace('directory = "out"', 'directory = "."')
    job_path = _write(tmp_path / "out", inside)
    written = run_job(load_job(job_path))
    assert str(job_path) in written and job_path.read_text() == textwrap.dedent(inside)
