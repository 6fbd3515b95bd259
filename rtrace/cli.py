"""The ``rtrace`` command and its sub-commands.

Run a job file, run the demo, describe a snapshot, print or plot a spectrum,
compare a model with an observed image, take a cut through a view.

Exit codes (for scripts): 0 success; 1 unexpected internal error (a bug:
please report it with the traceback); 2 bad command line (unknown command or
flag, a flag value that cannot be read or is out of range, e.g. ``--cells
-4``, ``--frequencies "0 GHz"``); 3 job-file or option problem (unknown key,
wrong unit, missing file, a flag that does not fit the job); 4 unusable input
data (e.g. NaN temperatures, a truncated FITS file, a cut off the image); 5
output problem (the output folder or a file to write is outside the output
folder, read-only, permission denied, names a file, or the disk is full;
nothing partial is left), or another refusal of the file system
(permission denied, read-only) met on the way. Every error a user can cause is one line on
standard error, never a traceback.
"""

import argparse
import sys
import time
from importlib import resources
from pathlib import Path

import astropy.units as u
import numpy as np

from .errors import ConfigError, InputError, OutputError, RtraceError
from .quantities import parse_frequencies

__all__ = ["main", "EXIT_OK", "EXIT_INTERNAL", "EXIT_USAGE", "EXIT_CONFIG", "EXIT_INPUT", "EXIT_OUTPUT"]

EXIT_OK, EXIT_INTERNAL, EXIT_USAGE, EXIT_CONFIG, EXIT_INPUT, EXIT_OUTPUT = 0, 1, 2, 3, 4, 5
EXIT_CODES = (
    "exit codes: 0 ok; 1 internal error (a bug); 2 bad command line (unknown flag, unreadable or "
    "out-of-range value); 3 job-file or option problem; 4 unusable input data; 5 output problem "
    "(folder not writable, outside the output folder, names a file, disk full) or another "
    "file-system refusal (permission denied)"
)


class Progress:
    """A one-line progress bar on a terminal, plain lines otherwise; silent with ``quiet``."""

    def __init__(self, stream=None, quiet=False, width=24):
        self.stream = stream or sys.stderr
        self.quiet = quiet
        self.width = width
        self.t0 = time.perf_counter()
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()

    def __call__(self, step, total, message):
        if self.quiet:
            return
        filled = int(round(self.width * step / max(total, 1)))
        bar = "#" * filled + "." * (self.width - filled)
        line = f"[{bar}] {step}/{total} {time.perf_counter() - self.t0:6.1f} s  {message}"
        if self.tty:
            end = "\n" if step >= total else ""
            self.stream.write("\r" + line.ljust(100) + end)
        else:
            self.stream.write(line + "\n")
        self.stream.flush()


def _frequencies(text):
    values = [v.strip() for v in text.split(",") if v.strip()]
    if not values:
        raise argparse.ArgumentTypeError(f"no frequency in '{text}' (write e.g. '1 GHz, 5 GHz')")
    try:
        return parse_frequencies(values, f"frequencies '{text}'") * u.Hz
    except InputError as exc:
        raise argparse.ArgumentTypeError(f"{exc} (write e.g. '1 GHz, 5 GHz')") from None


def _cells(text):
    """Cells per side of the built-in scenario: a whole number >= 2."""
    try:
        n = int(text)
    except ValueError:
        n = None
    if n is None or n < 2:
        raise argparse.ArgumentTypeError(f"expected a whole number of cells per side >= 2, got '{text}'")
    return n


def _output_folder(path, flag="--output"):
    """Create the folder of ``flag`` and prove it writable before any work (OutputError otherwise)."""
    from .io.outdir import check_writable

    return check_writable(Path(path), flag)


def _output_file(path, flag, picture=False):
    """Check, before any work, that the file ``flag`` names can be written (and drawn, for a picture).

    Its folder must exist and be writable, the name must not be a folder,
    and a picture's suffix must be a format matplotlib can draw.
    """
    if path is None:
        return
    from .io.outdir import check_writable

    target = Path(path)
    if target.is_dir():
        raise OutputError(f"{flag}: {path} is a folder; give a file name")
    folder = target.parent
    if not folder.is_dir():
        raise OutputError(f"{flag}: the folder {folder} of {path} does not exist (or is a file); create it first")
    check_writable(folder, flag)
    if picture:
        from matplotlib.figure import Figure

        kinds = Figure().canvas.get_supported_filetypes()
        kind = target.suffix.lower().lstrip(".")
        if kind not in kinds:
            raise ConfigError(
                f"{flag}: cannot draw a picture of type '{target.suffix or '(no suffix)'}' "
                f"({path}); use one of {', '.join('.' + k for k in sorted(kinds))}"
            )


def _report(paths, stream):
    stream.write(f"wrote {len(paths)} files:\n")
    for p in paths:
        stream.write(f"  {p}\n")
    skipped = getattr(paths, "skipped", [])
    if skipped:
        stream.write(f"skipped {len(skipped)} files already up to date (--restart makes them again)\n")


def _positive_int(text):
    from .run.job import check_workers

    try:
        return check_workers(int(text), "--workers")
    except (ValueError, ConfigError) as exc:
        # a bad option is a command-line mistake (exit 2), not a job-file problem
        raise argparse.ArgumentTypeError(f"expected a positive number of workers, got '{text}'") from exc


def _address(text):
    from .run.job import check_scheduler_address

    try:
        return check_scheduler_address(text, "--scheduler")
    except ConfigError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def cmd_run(args):
    from dataclasses import replace

    from .run.job import load_job, override_parallel, run_job

    job = load_job(args.job)
    if args.output:
        job = replace(job, output=replace(job.output, directory=_output_folder(args.output).resolve()))
    job = override_parallel(job, workers=args.workers, scheduler=args.scheduler)
    paths = run_job(job, progress=Progress(quiet=args.quiet), restart=args.restart)
    _report(paths, sys.stdout)
    return EXIT_OK


def _demo_job_text():
    return resources.files("rtrace").joinpath("data/demo_job.toml").read_text()


def cmd_demo(args):
    import tomllib

    from .run.job import parse_job, run_job

    raw = tomllib.loads(_demo_job_text())
    raw["output"]["directory"] = str(_output_folder(args.output).resolve())
    if args.cells is not None:
        raw["snapshot"]["cells"] = args.cells
    job = parse_job(raw)
    t0 = time.perf_counter()
    paths = run_job(job, progress=Progress(quiet=args.quiet), restart=args.restart)
    _report(paths, sys.stdout)
    print(f"demo finished in {time.perf_counter() - t0:.1f} s; the job it ran is {Path(args.output) / 'demo_job.toml'}")
    from .io.atomic import atomic_path

    with atomic_path(Path(args.output) / "demo_job.toml") as tmp:
        tmp.write_text(_demo_job_text())
    return EXIT_OK


_INSPECT_FREQUENCIES = "0.3 GHz, 1 GHz, 5 GHz, 30 GHz"


def _snapshot_from(args):
    """``(snapshot, frequencies)``: the job's snapshot and frequencies, or the built-in scenario's."""
    if args.job is None:
        from .demo import scenario

        nu = args.frequencies if args.frequencies is not None else _frequencies(_INSPECT_FREQUENCIES)
        return scenario(64 if args.cells is None else args.cells), nu
    if args.cells is not None:
        raise ConfigError("--cells: only for the built-in scenario (a job file sets [snapshot].cells)")
    from .run.job import load_job
    from .run.pipeline import build_snapshot

    job = load_job(args.job)
    if job.series:
        print(f"series of {len(job.snapshots)} snapshots; showing the first, '{job.snapshots[0].label}'")
    nu = args.frequencies if args.frequencies is not None else job.frequencies
    return build_snapshot(job), nu


def cmd_inspect(args):
    from .physics.freefree import absorption_cgs

    snap, frequencies = _snapshot_from(args)
    print(snap.describe())
    lo, hi = snap.extent
    print(f"  extent     {', '.join(f'{v:.4g}' for v in (hi - lo) / u.pc.to(u.cm))} pc")
    ne = snap.electron_density.to_value(u.cm**-3).astype(float)
    ni = snap.ion_density.to_value(u.cm**-3).astype(float)
    t = snap.temperature.to_value(u.K).astype(float)
    ionized = ne * ni > 0
    print(f"  ionized cells {int(ionized.sum())} of {ionized.size}")
    if not ionized.any():
        return EXIT_OK
    print("  estimated optical depth through the box along each axis (median and max over columns):")
    for nu in frequencies.to_value(u.Hz):
        alpha = np.zeros_like(ne)
        alpha[ionized] = absorption_cgs(nu, t[ionized], ne[ionized], ni[ionized])
        parts = []
        for ax, name in enumerate("xyz"):
            tau = alpha.sum(axis=ax) * snap.cell_size[ax]
            parts.append(f"{name}: {np.median(tau):.3g} / {tau.max():.3g}")
        print(f"    {nu / 1e9:10.4g} GHz   " + "   ".join(parts))
    return EXIT_OK


def _trace_job_view(path, view_name, frequencies=None, before=None):
    """Trace one view of a job (the first snapshot of a series): ``(job, view name, Result)``.

    ``before(view)``, if given, checks the chosen `~rtrace.View` before any tracing.
    """
    from .run.job import build_views, load_job
    from .run.pipeline import build_snapshot
    from .transfer import trace

    job = load_job(path)
    views = dict(build_views(job))
    name = view_name or next(iter(views))
    if name not in views:
        raise ConfigError(f"--view: no view named '{name}' (the job has: {', '.join(views)})")
    if before is not None:
        before(views[name])
    nu = job.frequencies if frequencies is None else frequencies
    from .compiling import watch_compilation

    with watch_compilation(lambda message: print(f"rtrace: {message}", file=sys.stderr, flush=True)):
        res = trace(build_snapshot(job), views[name], nu, background=job.trace.background)
    return job, name, res


def cmd_spectrum(args):
    from .analysis.spectra import sed, spectral_index

    _output_file(args.plot, "--plot", picture=True)
    job, name, res = _trace_job_view(args.job, args.view)
    nu, flux = sed(res)
    alpha = spectral_index(nu, flux)
    if job.series:
        print(f"# first snapshot of the series: '{job.snapshots[0].label}'")
    print(f"# model spectrum of view '{name}' ({res.provenance.get('source', '')}): no beam, no noise")
    print(f"{'nu (GHz)':>12} {'S (Jy)':>12} {'alpha':>8}")
    for i, (f, s) in enumerate(zip(nu.to_value(u.GHz), flux.to_value(u.Jy), strict=True)):
        a = f"{alpha[i]:+8.3f}" if i < len(alpha) else ""
        print(f"{f:12.5g} {s:12.5g} {a}")
    if args.plot:
        from .plot import plot_sed

        plot_sed(nu, flux, path=args.plot, label=name)
        print(f"wrote {args.plot}")
    return EXIT_OK


def _cut_point(text):
    """``"col, row"`` (pixels) or ``"RA, Dec"`` with angle units (ICRS), e.g. ``"150.1 deg, -30.2 deg"``."""
    parts = [v.strip() for v in text.split(",")]
    if len(parts) != 2:
        raise argparse.ArgumentTypeError(f"cannot read point '{text}' (write 'column, row' or 'RA, Dec' with units)")
    try:
        return tuple(float(v) for v in parts)
    except ValueError:
        pass
    try:
        from astropy.coordinates import SkyCoord

        ra, dec = (u.Quantity(v) for v in parts)
        return SkyCoord(ra=ra.to(u.deg), dec=dec.to(u.deg), frame="icrs")
    except (TypeError, ValueError, u.UnitsError):
        raise argparse.ArgumentTypeError(
            f"cannot read point '{text}' (write 'column, row' or 'RA, Dec' with units, e.g. '150.1 deg, -30.2 deg')"
        ) from None


def _sample_count(text):
    try:
        n = int(text)
    except ValueError:
        n = None
    if n is None or n < 2:
        raise argparse.ArgumentTypeError(f"expected a whole number of samples >= 2, got '{text}'")
    return n


def _flags(exc, names):
    """The same InputError with the leading Python names (``"start, end: ..."``) replaced by CLI flags."""
    head, sep, rest = str(exc).partition(": ")
    parts = [p.strip() for p in head.split(",")]
    if sep and all(p in names for p in parts):
        return InputError(", ".join(names[p] for p in parts) + ": " + rest)
    return exc


def _check_on_image(points, shape):
    """Refuse end points (``{flag: (column, row)}``) outside the image's pixel centres, where profiles are NaN."""
    ny, nx = shape
    off = {flag: p for flag, p in points.items() if not (0 <= p[0] <= nx - 1 and 0 <= p[1] <= ny - 1)}
    if off:
        where = "; ".join(f"{flag} at column {p[0]:.4g}, row {p[1]:.4g}" for flag, p in off.items())
        raise InputError(
            f"{', '.join(off)}: {len(off)} end point(s) off the image ({where}); the image has "
            f"columns 0 to {nx - 1} and rows 0 to {ny - 1} (pixel centres), and a cut samples "
            f"only inside it"
        )


def _sky_to_pixel(res, point):
    """``(column, row)`` of a point: pixels as given, a SkyCoord through the image's WCS."""
    if isinstance(point, tuple):
        return point
    from .io.fits import sky_wcs

    col, row = sky_wcs(res.shape[1:], res.pixel_scale, res.sky_position).world_to_pixel(point)
    return float(col), float(row)


#: The most samples a cut may take per pixel of the image's longer side (more only interpolates, and costs memory).
MAX_SAMPLES_PER_PIXEL = 100


def cmd_cut(args):
    if isinstance(args.start, tuple) and args.start == args.end:
        # checked before tracing (points given in pixels); sky points are checked after
        raise InputError("--start, --end: the cut has zero length")
    _output_file(args.table, "--table")
    _output_file(args.plot, "--plot", picture=True)
    pixels = {flag: p for flag, p in (("--start", args.start), ("--end", args.end)) if isinstance(p, tuple)}

    def before(view):
        _check_on_image(pixels, view.shape)
        most = MAX_SAMPLES_PER_PIXEL * max(view.shape)
        if args.num is not None and args.num > most:
            raise ConfigError(
                f"--num: {args.num} samples is more than {most} ({MAX_SAMPLES_PER_PIXEL} per pixel "
                f"of the image's longer side, {max(view.shape)} pixels); finer sampling only "
                f"interpolates between the same pixels"
            )

    job, name, res = _trace_job_view(args.job, args.view, before=before)
    _check_on_image({"--start": _sky_to_pixel(res, args.start), "--end": _sky_to_pixel(res, args.end)}, res.shape[1:])
    try:
        c = res.cut(args.start, args.end, num=args.num)
    except InputError as exc:
        raise _flags(exc, {"start": "--start", "end": "--end", "num": "--num"}) from None
    print(
        f"# cut through view '{name}' ({res.provenance.get('source', '')}), {c.columns.size} samples, "
        f"{c.offset[-1].to_value(u.arcsec):.4g} arcsec = {c.distance[-1].to_value(u.pc):.4g} pc"
    )
    print(f"{'nu (GHz)':>10} {'max tau':>10} {'min tau':>10} {'max I/I_thin':>13} {'min I/I_thin':>13}")
    thin = c.unabsorbed_intensity.value
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = c.intensity.value / thin
    for k, f in enumerate(c.frequencies.to_value(u.GHz)):
        print(
            f"{f:10.5g} {np.nanmax(c.tau[k]):10.4g} {np.nanmin(c.tau[k]):10.4g} "
            f"{np.nanmax(ratio[k]):13.4g} {np.nanmin(ratio[k]):13.4g}"
        )
    if args.table:
        c.write(args.table)
        print(f"wrote {args.table}")
    if args.plot:
        c.plot(args.plot)
        print(f"wrote {args.plot}")
    return EXIT_OK


def _one_frequency(text):
    nu = _frequencies(text)
    if nu.size != 1:
        raise argparse.ArgumentTypeError(f"expected one frequency, got '{text}'")
    return nu[0]


def _beam_option(text):
    import radio_beam

    try:
        major, minor, pa = (u.Quantity(v.strip()) for v in text.split(","))
        major, minor, pa = major.to(u.arcsec), minor.to(u.arcsec), pa.to(u.deg)
    except (TypeError, ValueError, u.UnitsError):
        raise argparse.ArgumentTypeError(
            f"cannot read beam '{text}' (write e.g. '6 arcsec, 4 arcsec, 30 deg': major and minor FWHM, position angle)"
        ) from None
    values = (major.value, minor.value, pa.value)
    if not (np.all(np.isfinite(values)) and major.value > 0 and minor.value > 0):
        raise argparse.ArgumentTypeError(
            f"beam '{text}': major and minor FWHM must be positive and finite, and the position angle finite"
        )
    if minor > major:
        raise argparse.ArgumentTypeError(
            f"beam '{text}': the minor FWHM ({minor:.4g}) exceeds the major ({major:.4g}); give the major axis first"
        )
    try:
        return radio_beam.Beam(major=major, minor=minor, pa=pa)
    except (TypeError, ValueError) as exc:
        raise argparse.ArgumentTypeError(f"cannot use beam '{text}': {exc}") from None


def _check_fits_complete(path, name):
    """Refuse, before any work, a FITS file whose data are cut short or unreadable (InputError naming it).

    Files that do not exist are left to the readers (a model may be given
    by its plane files); a job file (TOML) is not FITS.
    """
    import warnings

    from astropy.io import fits

    path = Path(path)
    if path.suffix.lower() == ".toml" or not path.is_file():
        return
    problem = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with fits.open(path, memmap=False) as hdul:
                for hdu in hdul:
                    _ = hdu.data  # reading the data is what notices a short file
        except (OSError, ValueError, TypeError, IndexError, EOFError) as exc:
            problem = str(exc)
    short = [str(w.message) for w in caught if "truncated" in str(w.message).lower()]
    if short or problem is not None:
        raise InputError(
            f"{name}: '{path}' is truncated or damaged ({short[0] if short else problem}); copy or download it again"
        )


def cmd_compare(args):
    import warnings

    from .comparison import ComparisonWarning, compare, read_observation

    out = _output_folder(args.output)
    _check_fits_complete(args.model, "model")
    _check_fits_complete(args.observation, "observation")
    with warnings.catch_warnings():
        # every warning is also a note, which the summary prints
        warnings.simplefilter("ignore", ComparisonWarning)
        obs = read_observation(
            args.observation,
            frequency=args.frequency,
            beam=args.beam,
            options={"frequency": "--frequency", "beam": "--beam", "unit": "BUNIT"},
        )
        if Path(args.model).suffix.lower() == ".toml":
            # traced at the observed frequency itself: no interpolation between planes
            job, name, model = _trace_job_view(args.model, args.view, u.Quantity([obs.frequency]))
            if job.series:
                print(f"series of {len(job.snapshots)} snapshots; compared the first, '{job.snapshots[0].label}'")
        elif args.view:
            raise ConfigError("--view: only for a job file (TOML) model")
        else:
            model = args.model
        result = compare(model, obs, model_name="model")
    stem = Path(args.observation).name
    for suffix in (".gz", ".fits", ".fit", ".fts"):
        stem = stem[: -len(suffix)] if stem.lower().endswith(suffix) else stem
    paths = [result.write_fits(out / f"{stem}_residual.fits"), out / f"{stem}_comparison.png"]
    result.plot(paths[1])
    print(result.summary())
    _report(paths, sys.stdout)
    return EXIT_OK


def build_parser():
    parser = argparse.ArgumentParser(
        prog="rtrace",
        description="Synthetic thermal free-free radio images from hydrodynamics snapshots.",
        epilog=EXIT_CODES,
    )
    from ._version import __version__

    parser.add_argument("--version", action="version", version=f"rtrace {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="command")

    p = sub.add_parser(
        "run",
        help="run a job file",
        description="Validate a TOML job file, then trace and write every output it asks for.",
    )
    p.add_argument("job", help="the job file (TOML)")
    p.add_argument("--output", help="write outputs here instead of the job's [output].directory")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument(
        "--restart",
        action="store_true",
        help="ignore the output folder's manifest and make every "
        "output again (default: skip outputs already finished from the same inputs)",
    )
    where = p.add_mutually_exclusive_group()
    where.add_argument(
        "--workers",
        type=_positive_int,
        metavar="N",
        help="trace on a local dask cluster of N single-threaded workers (overrides [parallel])",
    )
    where.add_argument(
        "--scheduler",
        type=_address,
        metavar="ADDRESS",
        help="trace on the dask cluster at ADDRESS, e.g. tcp://10.0.0.5:8786 (overrides [parallel])",
    )
    p.set_defaults(func=cmd_run)

    p = sub.add_parser(
        "demo",
        help="run the built-in scenario",
        description="Trace the built-in HII-bubble scenario and write FITS cubes, pictures and an SED.",
    )
    p.add_argument("--output", default="demo-output", help="output folder (default: ./demo-output)")
    p.add_argument("--cells", type=_cells, default=None, help="cells per side of the scenario (at least 2)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--restart", action="store_true", help="make every output again, even those already finished")
    p.set_defaults(func=cmd_demo)

    p = sub.add_parser(
        "inspect",
        help="describe a snapshot",
        description="Describe the snapshot of a job "
        "file (or the built-in scenario): fields, ranges, units, estimated optical depths.",
    )
    p.add_argument("job", nargs="?", help="job file whose snapshot to describe (default: the built-in scenario)")
    p.add_argument(
        "--frequencies",
        type=_frequencies,
        default=None,
        help="comma-separated frequencies for the optical-depth estimate (default: the job's "
        f"[frequencies]; for the built-in scenario '{_INSPECT_FREQUENCIES}')",
    )
    p.add_argument("--cells", type=_cells, default=None, help="cells per side of the built-in scenario (at least 2)")
    p.set_defaults(func=cmd_inspect)

    p = sub.add_parser(
        "spectrum",
        help="print or plot the spectrum of a view",
        description="Trace one view of "
        "a job at the job's frequencies and print its spectrum: flux density and spectral index "
        "of the model (no beam, no noise) at each frequency.",
    )
    p.add_argument("job", help="the job file (TOML)")
    p.add_argument("--view", help="name of the view (default: the first)")
    p.add_argument("--plot", help="also draw the spectrum to this file (PNG, PDF, ...)")
    p.set_defaults(func=cmd_spectrum)

    p = sub.add_parser(
        "compare",
        help="compare a model with an observed image",
        description="Take a model at "
        "an observed image's frequency, convolve it with the observed beam, put it on the observed "
        "pixel grid and write the residual (observed - model) as FITS, a figure and a summary.",
    )
    p.add_argument(
        "model",
        help="a model FITS cube written by rtrace (Jy/pixel or Jy/beam), or a job file (TOML) "
        "whose view is traced at the observed frequency",
    )
    p.add_argument("observation", help="the observed image (FITS; Jy/beam or K)")
    p.add_argument("--view", help="job file only: name of the view (default: the first)")
    p.add_argument(
        "--frequency", type=_one_frequency, help="observed frequency, e.g. '1.4 GHz' (replaces the header's)"
    )
    p.add_argument(
        "--beam",
        type=_beam_option,
        help="observed beam 'MAJOR, MINOR, PA', e.g. '6 arcsec, 4 arcsec, 30 deg' (replaces BMAJ/BMIN/BPA)",
    )
    p.add_argument("--output", default=".", help="folder for the residual FITS and the figure (default: .)")
    p.set_defaults(func=cmd_compare)

    p = sub.add_parser(
        "cut",
        help="profiles along a cut through a view",
        description="Trace one view of a job "
        "and take a straight cut through the images: intensity with and without absorption, "
        "optical depth, brightness temperature, emission measure and spectral index.",
    )
    p.add_argument("job", help="the job file (TOML)")
    p.add_argument("--view", help="name of the view (default: the first)")
    p.add_argument(
        "--start",
        type=_cut_point,
        required=True,
        help="'column, row' (pixels, 0 = centre of the first pixel) or 'RA, Dec' with units",
    )
    p.add_argument("--end", type=_cut_point, required=True, help="as --start")
    p.add_argument(
        "--num", type=_sample_count, default=None, help="number of samples, at least 2 (default: one per pixel)"
    )
    p.add_argument(
        "--table",
        "--csv",
        dest="table",
        help="write the profiles to this table (ECSV: comma-separated rows with units, e.g. cut.ecsv; "
        "--csv is the former name)",
    )
    p.add_argument("--plot", help="draw full and unabsorbed profiles to this file (PNG, PDF, ...)")
    p.set_defaults(func=cmd_cut)
    return parser


def main(argv=None):
    """Run the ``rtrace`` command.

    Parameters
    ----------
    argv : list of str, optional
        The arguments after the command name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        The exit code (see the module docstring); argparse itself exits with 2 on a bad command line.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except ConfigError as exc:
        print(f"rtrace: job problem: {exc}", file=sys.stderr)
        return EXIT_CONFIG
    except InputError as exc:
        print(f"rtrace: input problem: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except OutputError as exc:
        print(f"rtrace: output problem: {exc}", file=sys.stderr)
        return EXIT_OUTPUT
    except OSError as exc:
        # a disk or permission error met outside rtrace's own writers (e.g. a plotting library's): still the
        # output folder's fault, not a bug; anything else is re-raised and shows its traceback (exit 1)
        from .io.outdir import OUTPUT_ERRNOS

        if exc.errno not in OUTPUT_ERRNOS:
            raise
        print(f"rtrace: file-system problem: {exc.filename or ''}: {OUTPUT_ERRNOS[exc.errno]}", file=sys.stderr)
        return EXIT_OUTPUT
    except RtraceError as exc:
        # any other kind a user can cause (a subclass added later): a problem with what was asked
        print(f"rtrace: problem: {exc}", file=sys.stderr)
        return EXIT_CONFIG
    except KeyboardInterrupt:
        print("rtrace: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
