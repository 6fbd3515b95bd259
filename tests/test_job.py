"""Job files: validated in full before any work; errors name the key, the problem and a suggestion."""

import textwrap

import astropy.units as u
import pytest

from rtrace.errors import ConfigError
from rtrace.job import load_job, parse_job

BASE = """
[snapshot]
kind = "demo"
cells = 16

[frequencies]
values = ["1 GHz", "5 GHz"]

[[view]]
name = "a"
npix = 16
distance = "1 kpc"
"""


def write(tmp_path, text, name="job.toml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path


def test_minimal_job_parses(tmp_path):
    job = load_job(write(tmp_path, BASE))
    assert job.frequencies.unit == u.Hz and len(job.frequencies) == 2
    assert job.views[0]["distance"].unit == u.cm
    assert job.output["directory"] == (tmp_path / "rtrace-output").resolve()


@pytest.mark.parametrize("patch,message", [
    (("[[view]]", "[[veiw]]"), r"unknown table '\[veiw\]' \(did you mean 'view'\?\)"),
    (("cells = 16", "cels = 16"), r"\[snapshot\]: unknown key 'cels' \(did you mean 'cells'\?\)"),
    (("npix = 16", "npix = 16\nwidht = '1 pc'"), r"unknown key 'widht' \(did you mean 'width'\?\)"),
    (('distance = "1 kpc"', 'distance = "1 GHz"'), r"\[\[view\]\] #1.distance: '1 GHz' is not a length"),
    (('distance = "1 kpc"', 'distance = "1000"'), r"distance: '1000' has no unit; expected a length"),
    (('"5 GHz"', '"5 K"'), r"\[frequencies\].values\[1\]: '5 K' is not a frequency"),
    (('kind = "demo"', 'kind = "hdf5"\npath = "nope.h5"\ntemperature = "T"\nelectron_density = "ne"'),
     r"\[snapshot\].path: file not found"),
    (('kind = "demo"', 'kind = "movie"'), r"\[snapshot\].kind: 'movie' is not 'demo' or 'hdf5'"),
    (("npix = 16", "npix = 16\nlos = [0, 0, 1]\nnorth = [0, 0, 1]"), r"'a': north: parallel to los"),
])
def test_validation_errors(tmp_path, patch, message):
    old, new = patch
    assert old in BASE
    with pytest.raises(ConfigError, match=message):
        load_job(write(tmp_path, BASE.replace(old, new, 1)))
    assert not (tmp_path / "rtrace-output").exists()          # nothing was written


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
