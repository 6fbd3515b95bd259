"""Memory known before work: sizes that would not fit are refused, by name, before anything large is made.

One table of bad inputs (API, job files, command line) runs through one
parametrized test. Each case asserts the error class (or the command's exit
code), that the message names the offending field, that the refusal came
before any large allocation (``tracemalloc`` peak), and, where something
could be written, that nothing was.

The machine's available memory is fixed at 8 GB for every case
(:func:`rtrace.memory.available_memory` patched), so the cases do not depend
on the memory free on the test machine, and a case that the check misses
cannot allocate tens of GB: it would be refused by the patched value or fail
the test on its peak.
"""

import math
import time
import tracemalloc
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.io import fits
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import erf

import rtrace
import rtrace.memory
from rtrace.cli import main
from rtrace.demo import scenario
from rtrace.errors import ConfigError, InputError
from rtrace.memory import check_memory, fft_kernel_bytes, format_bytes
from rtrace.observe.beam import BeamKernel, check_beam_fits_field
from rtrace.observe.skymap import check_observation
from rtrace.run.job import parse_job, run_job

GB = 10**9
FAKE_AVAILABLE = 8 * GB
#: A refused case may allocate at most this much before its error (the check comes first).
PEAK_LIMIT = 64 * 10**6

NU2 = [1.0, 5.0] * u.GHz


@pytest.fixture(autouse=True)
def eight_gigabytes(monkeypatch):
    monkeypatch.setattr(rtrace.memory, "available_memory", lambda: FAKE_AVAILABLE)


@pytest.fixture(scope="module")
def snap():
    return scenario(n=16)


@pytest.fixture(scope="module")
def result(snap):
    # 32 x 32 pixels of 12.9 arcsec at 1 kpc: a field of 412.5 arcsec
    return rtrace.trace(snap, rtrace.View(npix=32, distance=1 * u.kpc), NU2)


def field_arcsec(res):
    return min(res.shape[1:]) * res.pixel_scale.to_value(u.arcsec)


def beam(major, minor=None, pa=0.0):
    major = u.Quantity(major)
    return radio_beam.Beam(major=major, minor=major if minor is None else u.Quantity(minor), pa=pa * u.deg)


def observed_hdu(res, beam_deg, scale_arcsec=6.0, n=24, frequency=1.0e9):
    """An observed 2D image at the Result's sky position (TAN, Jy/beam, RESTFRQ) with BMAJ = BMIN = beam_deg."""
    pos = res.sky_position.icrs
    hdr = fits.Header()
    hdr["CTYPE1"], hdr["CTYPE2"] = "RA---TAN", "DEC--TAN"
    hdr["CUNIT1"], hdr["CUNIT2"] = "deg", "deg"
    hdr["CRPIX1"], hdr["CRPIX2"] = (n + 1) / 2, (n + 1) / 2
    hdr["CRVAL1"], hdr["CRVAL2"] = pos.ra.deg, pos.dec.deg
    hdr["CDELT1"], hdr["CDELT2"] = -scale_arcsec / 3600, scale_arcsec / 3600
    hdr["RADESYS"] = "ICRS"
    hdr["RESTFRQ"] = frequency
    hdr["BUNIT"] = "Jy/beam"
    hdr["BMAJ"], hdr["BMIN"], hdr["BPA"] = beam_deg, beam_deg, 0.0
    return fits.PrimaryHDU(np.ones((n, n)), hdr)


ARRAY = [[0, 0, 0], [300, 0, 0], [0, 400, 0], [-250, -150, 0]] * u.m


def many_antennas(n):
    rng = np.random.default_rng(3)
    return np.column_stack([rng.uniform(-500, 500, n), rng.uniform(-500, 500, n), np.zeros(n)]) * u.m


JOB = """
[snapshot]
kind = "demo"
cells = 16

[frequencies]
values = {freqs}

[[view]]
name = "a"
npix = {npix}
distance = "1 kpc"
{width}
{extra}
"""


def job_text(npix=16, width='width = "8 pc"', freqs='["1 GHz", "5 GHz"]', extra=""):
    return JOB.format(npix=npix, width=width, freqs=freqs, extra=extra)


def parse(text, tmp_path):
    import tomllib

    raw = tomllib.loads(text)
    raw.setdefault("output", {})["directory"] = str(tmp_path / "out")
    return parse_job(raw, base_dir=tmp_path)


def write_job(tmp_path, text):
    path = tmp_path / "job.toml"
    path.write_text(text + f'\n[output]\ndirectory = "{tmp_path / "out"}"\n')
    return path


def _parse_comparison(beam_deg, width='width = "8 pc"', run=False):
    def call(c):
        observed_hdu(c.result, beam_deg).writeto(c.tmp / "obs.fits")
        job = parse(job_text(width=width, extra='\n[comparison]\nobservation = "obs.fits"\n'), c.tmp)
        return run_job(job) if run else job

    return call


# -- the table ----------------------------------------------------------------------------------


@dataclass
class Case:
    id: str
    call: object  # ctx -> the failing call's return (run inside the test)
    expect: object  # exception class, or an int exit code of the command line
    text: str  # the message must contain this (the field)
    writes: bool = False  # the case could write into ctx.out


class Ctx:
    def __init__(self, snap, result, tmp_path):
        self.snap, self.result, self.tmp = snap, result, tmp_path
        self.out = tmp_path / "out"


def _trace(npix=32, los=(0, 0, 1), freqs=NU2, **kw):
    return lambda c: rtrace.trace(c.snap, rtrace.View(los=los, npix=npix, distance=1 * u.kpc), freqs, **kw)


def _observe(major, minor=None, pa=0.0, **kw):
    return lambda c: c.result.observe(beam(major, minor, pa), **kw)


def _observe_field(factor, **kw):
    """A beam ``factor`` times the result's field (412.5 arcsec)."""
    return lambda c: c.result.observe(beam(factor * field_arcsec(c.result) * u.arcsec), **kw)


def _check_obs(major_arcsec, shape, nfreq=1, pix=1.0, **kw):
    return lambda c: check_observation(
        [beam(major_arcsec * u.arcsec)] * nfreq, pix * u.arcsec, shape, np.linspace(1e9, 2e9, nfreq), **kw
    )


def _compare_hdu(beam_deg, **kw):
    return lambda c: rtrace.compare(c.result, observed_hdu(c.result, beam_deg), **kw)


def _synth(**kw):
    args = dict(antennas=ARRAY, latitude=30 * u.deg, n_hour_angles=16)
    args.update(kw)
    from rtrace.interferometer import synthesize

    return lambda c: synthesize(c.result, **args)


def _parse(**kw):
    return lambda c: parse(job_text(**kw), c.tmp)


def _run(**kw):
    return lambda c: run_job(parse(job_text(**kw), c.tmp))


def _cli_run(**kw):
    return lambda c: main(["run", str(write_job(c.tmp, job_text(**kw)))])


def _cli_compare(beam_deg, extra=()):
    def call(c):
        model = c.result.write_fits(c.tmp / "model.fits")
        obs = c.tmp / "obs.fits"
        observed_hdu(c.result, beam_deg).writeto(obs)
        return main(["compare", str(model), str(obs), "--output", str(c.out), *extra])

    return call


FIELD = 412.5  # arcsec, the result's field
BEAM_10DEG = '\n[beam]\nmajor = "10 deg"\n'

CASES = [
    # -- trace: images x frequencies, supersampled lattices ---------------------------------------
    Case("trace npix 20000", _trace(npix=20000), InputError, "npix"),
    Case("trace npix 20000 one frequency", _trace(npix=20000, freqs=[1] * u.GHz), InputError, "npix"),
    Case("trace npix (20000, 20000)", _trace(npix=(20000, 20000)), InputError, "npix"),
    Case("trace npix (100, 2000000)", _trace(npix=(100, 2_000_000)), InputError, "npix"),
    Case(
        "trace npix 5000 x 40 frequencies", _trace(npix=5000, freqs=np.linspace(1, 40, 40) * u.GHz), InputError, "npix"
    ),
    Case("trace npix 20000 along x", _trace(npix=20000, los=(1, 0, 0)), InputError, "npix"),
    Case("trace npix 20000 oblique", _trace(npix=20000, los=(1, 1, 1)), InputError, "npix"),
    Case("trace supersample 1000", _trace(los=(1, 1, 1), supersample=1000), InputError, "supersample"),
    Case(
        "trace supersample 1000 one frequency",
        _trace(los=(1, 1, 1), supersample=1000, freqs=[1] * u.GHz),
        InputError,
        "supersample",
    ),
    Case("trace supersample 600", _trace(los=(1, 2, 3), supersample=600), InputError, "supersample"),
    Case("trace supersample 10**6", _trace(los=(0, 1, 1), supersample=10**6), InputError, "supersample"),
    Case(
        "trace supersample 1000 with max_memory",
        _trace(los=(1, 1, 1), supersample=1000, max_memory="1 GB"),
        InputError,
        "supersample",
    ),
    Case("trace npix 20000 with max_memory", _trace(npix=20000, max_memory="100 MB"), InputError, "npix"),
    Case("trace npix 2000 over max_memory", _trace(npix=2000, max_memory="10 MB"), InputError, "max_memory"),
    # -- observe: beam wider than the image, kernels that do not fit -------------------------------
    Case("observe 10 deg beam", _observe(10 * u.deg), InputError, "beam"),
    Case("observe 1 deg beam", _observe(1 * u.deg), InputError, "beam"),
    Case("observe 10 deg beam with noise", _observe(10 * u.deg, noise=1 * u.mJy / u.beam), InputError, "beam"),
    Case("observe beam 1.01 x field", _observe_field(1.01), InputError, "beam"),
    Case("observe beam 3 x field", _observe_field(3.0), InputError, "beam"),
    Case(
        "observe elongated beam wider than field",
        _observe(2 * FIELD * u.arcsec, 10 * u.arcsec, 30.0),
        InputError,
        "beam",
    ),
    Case(
        "observe beam wider than field at lowest frequency",
        _observe(0.4 * FIELD * u.arcsec, beam_scaling="inverse-frequency", reference_frequency=5 * u.GHz),
        InputError,
        "at 1 GHz",
    ),
    Case("observe 10 deg beam, max_memory", _observe(10 * u.deg, max_memory="1 GB"), InputError, "beam"),
    Case("observe small beam over max_memory", _observe(20 * u.arcsec, max_memory="100 kB"), InputError, "max_memory"),
    Case("observe bad max_memory", _observe(20 * u.arcsec, max_memory="lots"), InputError, "max_memory"),
    Case("check_observation 20000^2 image", _check_obs(30.0, (20000, 20000), nfreq=3), InputError, "result"),
    Case("check_observation huge kernel", _check_obs(9000.0, (10000, 10000), pix=1.0), InputError, "beam"),
    Case("check_observation narrow image", _check_obs(1500.0, (10, 5000), pix=100.0), InputError, "beam"),
    Case(
        "check_observation field names",
        lambda c: check_observation([beam(1 * u.deg)], 1 * u.arcsec, (64, 64), [1e9], beam_field="[beam].major"),
        InputError,
        "[beam].major",
    ),
    Case(
        "check_observation budget",
        lambda c: check_observation([beam(30 * u.arcsec)], 1 * u.arcsec, (2000, 2000), [1e9], max_memory=10**6),
        InputError,
        "max_memory",
    ),
    Case(
        "BeamKernel 10 deg on fine pixels",
        lambda c: BeamKernel(beam(10 * u.deg), 0.05 * u.arcsec, (16, 16)),
        InputError,
        "beam",
    ),
    Case(
        "BeamKernel named field",
        lambda c: BeamKernel(beam(10 * u.deg), 0.05 * u.arcsec, (16, 16), name="BMAJ"),
        InputError,
        "BMAJ",
    ),
    Case(
        "BeamKernel budget",
        lambda c: BeamKernel(beam(100 * u.arcsec), 1 * u.arcsec, (512, 512), max_memory=10**6),
        InputError,
        "max_memory",
    ),
    Case(
        "check_beam_fits_field rectangular",
        lambda c: check_beam_fits_field([beam(50 * u.arcsec)], 1 * u.arcsec, (40, 400)),
        InputError,
        "beam",
    ),
    # -- compare: the observed beam against the model's field --------------------------------------
    Case("compare BMAJ 10 deg", _compare_hdu(10.0), InputError, "BMAJ"),
    Case("compare BMAJ 1 deg", _compare_hdu(1.0), InputError, "BMAJ"),
    Case("compare BMAJ 2 x model field", _compare_hdu(2 * FIELD / 3600), InputError, "BMAJ"),
    Case(
        "compare beam= override 10 deg",
        lambda c: rtrace.compare(c.result, observed_hdu(c.result, 10 / 3600), beam=beam(10 * u.deg)),
        InputError,
        "beam=",
    ),
    Case("compare max_memory", _compare_hdu(30 / 3600, max_memory="10 kB"), InputError, "max_memory"),
    Case(
        "compare SkyMap model, BMAJ 10 deg",
        lambda c: rtrace.compare(c.result.observe(beam(20 * u.arcsec)), observed_hdu(c.result, 10.0)),
        InputError,
        "BMAJ",
    ),
    # -- synthesis: image buffers and (u, v) samples -----------------------------------------------
    Case(
        "synthesize 300 antennas x 1000 hour angles",
        _synth(antennas=many_antennas(300), n_hour_angles=1000),
        InputError,
        "n_hour_angles",
    ),
    Case(
        "synthesize 300 antennas, hour_angle_step",
        _synth(antennas=many_antennas(300), n_hour_angles=None, hour_angle_step=0.5 * u.min),
        InputError,
        "hour_angle_step",
    ),
    Case("synthesize max_memory", _synth(max_memory="1 MB"), InputError, "max_memory"),
    Case(
        "synthesize image_size 1024, max_memory", _synth(image_size=1024, max_memory="100 MB"), InputError, "image_size"
    ),
    # -- job files, at validation ------------------------------------------------------------------
    Case("job [beam] major 10 deg", _parse(extra=BEAM_10DEG), ConfigError, "[beam].major"),
    Case("job [beam] major 1 deg", _parse(extra='\n[beam]\nmajor = "1 deg"\n'), ConfigError, "[beam].major"),
    Case(
        "job [beam] major 4 arcmin on 2 arcmin field",
        _parse(npix=16, width='width = "0.5 pc"', extra='\n[beam]\nmajor = "4 arcmin"\n'),
        ConfigError,
        "[beam].major",
    ),
    Case(
        "job [beam] inverse-frequency scaling",
        _parse(
            freqs='["0.1 GHz", "10 GHz"]',
            extra='\n[beam]\nmajor = "5 arcmin"\nscaling = "inverse-frequency"\nreference_frequency = "10 GHz"\n',
        ),
        ConfigError,
        "[beam].major",
    ),
    Case("job [beam] with noise", _parse(extra=BEAM_10DEG + '\n[noise]\nrms = "1 mJy"\n'), ConfigError, "[beam].major"),
    Case("job npix 20000", _parse(npix=20000), ConfigError, "npix"),
    Case("job npix [20000, 20000]", _parse(npix="[20000, 20000]"), ConfigError, "npix"),
    Case("job npix 20000 without width", _parse(npix=20000, width=""), ConfigError, "npix"),
    Case(
        "job npix 4000 x 60 frequencies",
        _parse(npix=4000, freqs="[" + ", ".join(f'"{k} GHz"' for k in range(1, 61)) + "]"),
        ConfigError,
        "npix",
    ),
    Case(
        "job npix over [parallel].max_memory",
        _parse(npix=2000, extra='\n[parallel]\nmax_memory = "50 MB"\n'),
        ConfigError,
        "max_memory",
    ),
    Case("job npix 20000 names the view", _parse(npix=20000), ConfigError, "'a'"),
    Case(
        "job [trace] supersample 1000 oblique",
        _parse(extra="los = [1, 1, 1]\n[trace]\nsupersample = 1000\n"),
        ConfigError,
        "[trace].supersample",
    ),
    Case(
        "job [trace] supersample 1000 names the view",
        _parse(extra="los = [1, 2, 3]\n[trace]\nsupersample = 1000\n"),
        ConfigError,
        "view 'a'",
    ),
    Case(
        "job [comparison] observation BMAJ 10 deg",
        _parse_comparison(10.0),
        ConfigError,
        "[comparison].observation (obs.fits) BMAJ",
    ),
    Case("job [comparison] observation BMAJ 1 deg", _parse_comparison(1.0), ConfigError, "BMAJ"),
    # -- job files, at run time (view without width: its extent is known from the snapshot) ----------
    Case(
        "run_job 10 deg beam, fitted width", _run(width="", extra=BEAM_10DEG), ConfigError, "[beam].major", writes=True
    ),
    Case(
        "run_job 1 deg beam, fitted width",
        _run(width="", extra='\n[beam]\nmajor = "1 deg"\n'),
        ConfigError,
        "[beam].major",
        writes=True,
    ),
    Case(
        "run_job [comparison] BMAJ 10 deg, fitted width",
        _parse_comparison(10.0, width="", run=True),
        ConfigError,
        "BMAJ",
        writes=True,
    ),
    # -- command line --------------------------------------------------------------------------------
    Case("cli run [beam] 10 deg", _cli_run(extra=BEAM_10DEG), 3, "[beam].major", writes=True),
    Case("cli run [beam] 10 deg fitted width", _cli_run(width="", extra=BEAM_10DEG), 3, "[beam].major", writes=True),
    Case("cli run npix 20000", _cli_run(npix=20000), 3, "npix", writes=True),
    Case(
        "cli run supersample 1000",
        _cli_run(extra="los = [1, 1, 1]\n[trace]\nsupersample = 1000\n"),
        3,
        "[trace].supersample",
        writes=True,
    ),
    Case("cli compare BMAJ 10 deg", _cli_compare(10.0), 4, "BMAJ", writes=True),
    Case(
        "cli compare --beam 10 deg",
        _cli_compare(10 / 3600, ["--beam", "10 deg, 10 deg, 0 deg"]),
        4,
        "--beam",
        writes=True,
    ),
]


def _products(folder):
    folder = Path(folder)
    if not folder.exists():
        return []
    return [p for p in folder.rglob("*") if p.is_file() and p.suffix.lower() in (".fits", ".png", ".ecsv", ".pdf")]


@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_refused_before_work(case, snap, result, tmp_path, capsys):
    ctx = Ctx(snap, result, tmp_path)
    capsys.readouterr()
    tracemalloc.start()
    t0 = time.perf_counter()
    try:
        if isinstance(case.expect, int):
            code = case.call(ctx)
            message = capsys.readouterr().err
            assert code == case.expect, message
        else:
            with pytest.raises(case.expect) as info:
                case.call(ctx)
            message = str(info.value)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert case.text in message, message
    assert peak < PEAK_LIMIT, f"{format_bytes(peak)} allocated before the error"
    # refused at once, not after the work (generous: first calls import and compile)
    assert time.perf_counter() - t0 < 60
    if case.writes:
        assert _products(ctx.out) == []


# -- the estimates against what numpy and scipy really allocate --------------------------------------


def test_beam_kernel_estimate_matches_tracemalloc():
    # tracemalloc sees numpy's array buffers (numpy reports them to it); the estimate
    # should be within a factor of two of the real peak of building and using a kernel
    b = beam(60 * u.arcsec)
    image = np.ones((300, 300))
    tracemalloc.start()
    k = BeamKernel(b, 1 * u.arcsec, image.shape)
    k.convolve(image)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    held, transient = fft_kernel_bytes(k.half, k.fft_shape)
    assert 0.5 * peak <= held + transient <= 2.0 * peak, (held + transient, peak)


def test_trace_estimate_matches_tracemalloc(snap):
    # an oblique view: the ray lattice and images the check estimates
    from rtrace.transfer import tracer

    view = rtrace.View(los=(1, 1, 1), npix=48, distance=1 * u.kpc)
    seen = {}
    real = tracer._check_ray_memory

    def spy(route, supersample):
        seen["need"] = route.segment_bytes(route.ray_count) + route.finish_bytes()
        return real(route, supersample)

    tracer._check_ray_memory = spy
    try:
        rtrace.trace(snap, view, NU2, supersample=3)  # compiled (and cached) outside the measurement
        tracemalloc.start()
        rtrace.trace(snap, view, NU2, supersample=3)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    finally:
        tracer._check_ray_memory = real
    # the estimate is a lower bound of the per-ray state and images: the real peak adds the
    # snapshot's per-call temporaries, but not many times over
    assert 0.5 * peak <= seen["need"] <= 1.5 * peak, (seen["need"], peak)


def test_synthesis_estimate_matches_tracemalloc(result):
    import warnings

    from rtrace.interferometer import synthesis

    seen = {}
    real = synthesis._check_size

    def spy(*args):
        seen["need"] = real(*args)
        return seen["need"]

    kw = dict(antennas=ARRAY, latitude=30 * u.deg, n_hour_angles=400, image_size=192)
    synthesis._check_size = spy
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            synthesis.synthesize(result, **kw)  # compiled outside the measurement
            tracemalloc.start()
            synthesis.synthesize(result, **kw)
            _, peak = tracemalloc.get_traced_memory()
            tracemalloc.stop()
    finally:
        synthesis._check_size = real
    assert 0.5 * peak <= seen["need"] <= 2.0 * peak, (seen["need"], peak)


def test_observe_estimate_matches_tracemalloc(snap):
    from rtrace.memory import observe_bytes
    from rtrace.observe.beam import kernel_geometry

    res = rtrace.trace(snap, rtrace.View(npix=256, distance=1 * u.kpc), [1, 2, 5] * u.GHz)
    b = beam(40 * u.arcsec)
    geo = kernel_geometry(b, res.pixel_scale.to_value(u.arcsec), res.shape[1:])
    need = observe_bytes(3, res.shape[1:], [(geo["half"], geo["fft_shape"])], noise=True)
    tracemalloc.start()
    sky = res.observe(b, noise=1 * u.mJy / u.beam, seed=1)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert sky.shape == res.shape
    assert 0.5 * peak <= need <= 2.0 * peak, (need, peak)


# -- where the line for a beam wider than the image is drawn --------------------------------------


def test_point_source_keeps_58_percent_when_the_beam_fwhm_equals_the_field():
    # The share of a circular Gaussian inside a centred square of side L = FWHM is
    # erf(L / (2 sqrt(2) sigma))^2 with FWHM = 2 sqrt(2 ln 2) sigma, i.e. erf(sqrt(ln 2))^2
    # (Gaussian integral, Abramowitz & Stegun 1964, 7.1.1): 0.579, the figure the error quotes.
    n = 65
    pix = 1.0
    k = BeamKernel(beam(n * pix * u.arcsec), pix * u.arcsec, (n, n))
    img = np.zeros((n, n))
    img[n // 2, n // 2] = 1.0
    kept = k.convolve(img).sum()
    expected = erf(math.sqrt(math.log(2.0))) ** 2
    assert abs(expected - 0.579) < 1e-3
    assert kept == pytest.approx(expected, rel=0.02)
    # at half the field the share is erf(2 sqrt(ln 2))^2 = 0.964 (same source), the warning's figure
    k2 = BeamKernel(beam(n * pix / 2 * u.arcsec), pix * u.arcsec, (n, n))
    assert k2.convolve(img).sum() == pytest.approx(erf(2 * math.sqrt(math.log(2.0))) ** 2, rel=0.01)


@settings(max_examples=60, deadline=None)
@given(ratio=st.floats(1.0001, 1.0e4), ny=st.integers(1, 4096), nx=st.integers(1, 4096), pix=st.floats(1e-3, 1e3))
def test_any_beam_wider_than_the_field_is_refused(ratio, ny, nx, pix):
    major = ratio * min(ny, nx) * pix
    with pytest.raises(InputError, match="^beam: .* wider than the image"):
        check_beam_fits_field([beam(major * u.arcsec)], pix * u.arcsec, (ny, nx))


@settings(max_examples=60, deadline=None)
@given(ratio=st.floats(1e-3, 0.4999), ny=st.integers(1, 4096), nx=st.integers(1, 4096), pix=st.floats(1e-3, 1e3))
def test_a_beam_within_half_the_field_passes_silently(ratio, ny, nx, pix):
    import warnings

    major = ratio * min(ny, nx) * pix
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        check_beam_fits_field([beam(major * u.arcsec)], pix * u.arcsec, (ny, nx))


def test_beam_between_half_and_whole_field_warns(result):
    with pytest.warns(UserWarning, match="more than half the image"):
        result.observe(beam(0.7 * field_arcsec(result) * u.arcsec))


# -- the memory check itself -----------------------------------------------------------------------


def test_check_memory_message_says_what_how_much_and_how_to_reduce():
    with pytest.raises(InputError) as info:
        check_memory(10 * GB, field="npix", what="images", hint="use a smaller npix")
    text = str(info.value)
    assert text.startswith("npix: images would need about 10 GB")
    assert "8 GB of memory available" in text and "use a smaller npix" in text


def test_check_memory_honours_the_budget_below_the_available_memory():
    check_memory(GB, field="x", what="y", hint="z")  # fits in 80% of 8 GB
    with pytest.raises(InputError, match="max_memory = 500 MB"):
        check_memory(GB, field="x", what="y", hint="z", budget=500 * 10**6)


def test_unknown_available_memory_refuses_only_against_max_memory(monkeypatch):
    monkeypatch.setattr(rtrace.memory, "available_memory", lambda: None)
    assert check_memory(10**15, field="x", what="y", hint="z") == 10**15
    with pytest.raises(InputError, match="max_memory"):
        check_memory(10**15, field="x", what="y", hint="z", budget=10**9)


def test_available_memory_agrees_with_psutil(monkeypatch):
    # psutil (a general system library) reads the same kernel figure (MemAvailable on Linux)
    psutil = pytest.importorskip("psutil")
    monkeypatch.undo()
    found = rtrace.memory.available_memory()
    assert found is not None
    if rtrace.memory._cgroup_available() is None:
        assert found == pytest.approx(psutil.virtual_memory().available, rel=0.1)


def test_meminfo_fallbacks(tmp_path):
    meminfo = tmp_path / "meminfo"
    meminfo.write_text("MemTotal:       16000000 kB\nMemAvailable:    1000 kB\n")
    assert rtrace.memory._meminfo_available(str(meminfo)) == 1000 * 1024
    meminfo.write_text("MemTotal: 16000000 kB\n")
    assert rtrace.memory._meminfo_available(str(meminfo)) is None
    assert rtrace.memory._meminfo_available(str(tmp_path / "missing")) is None


def test_legitimate_sizes_still_run(result):
    # a beam well inside the field and ordinary images are not refused
    sky = result.observe(beam(40 * u.arcsec), max_memory="1 GB")
    assert sky.shape == result.shape
