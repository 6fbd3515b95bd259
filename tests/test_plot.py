"""Figures: files written atomically, sky orientation, beam position angle, scale bar, errors."""

import math
import types

import astropy.units as u
import matplotlib
import numpy as np
import pytest
from matplotlib import colors
from matplotlib.patches import Ellipse
from radio_beam import Beam

matplotlib.use("Agg")  # no display in tests

import rtrace  # noqa: E402
from rtrace import demo, plot  # noqa: E402
from rtrace.analysis import sed, spectral_index  # noqa: E402
from rtrace.errors import InputError  # noqa: E402

NX = NY = 48
DISTANCE = 2 * u.kpc


@pytest.fixture(scope="module")
def tiny():
    return rtrace.trace(demo.scenario(32), rtrace.View(npix=NX, distance=DISTANCE), [0.3, 1, 3, 10, 30] * u.GHz)


def standin_skymap(res, pa=45 * u.deg, noise=None):
    """A SkyMap look-alike: the Result's intensity times the beam solid angle (Jy/beam), unconvolved."""
    beams = [Beam(major=24 * u.arcsec, minor=12 * u.arcsec, pa=pa) for _ in res.frequencies]
    data = np.stack([res.intensity.value[i] * 1e23 * b.sr.to_value(u.sr) for i, b in enumerate(beams)])
    data = data * u.Jy / u.beam

    def brightness_temperature(kind="rayleigh-jeans"):
        # Rayleigh-Jeans T = c^2 S / (2 k nu^2 Omega) via astropy's equivalency
        return u.Quantity(
            [
                data[i].to(u.K, equivalencies=u.brightness_temperature(nu, beam_area=b.sr))
                for i, (nu, b) in enumerate(zip(res.frequencies, beams, strict=True))
            ]
        )

    return types.SimpleNamespace(
        data=data,
        model=data,
        beam=beams[0],
        beams=beams,
        frequencies=res.frequencies,
        pixel_scale=res.pixel_scale,
        pixel_size=res.pixel_size,
        distance=res.view.distance,
        noise_rms=noise,
        result=res,
        brightness_temperature=brightness_temperature,
    )


def the_image(ax):
    (image,) = ax.get_images()
    return image


def by_gid(artists, gid):
    found = [a for a in artists if a.get_gid() == gid]
    assert len(found) == 1, f"expected one artist with gid {gid!r}, got {len(found)}"
    return found[0]


def assert_written(path, magic):
    data = path.read_bytes()
    assert data.startswith(magic) and len(data) > 1000
    # atomic: only the finished file, no temporary left beside it
    assert [p.name for p in path.parent.iterdir() if p.name.startswith(".")] == []


# --- files -------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "quantity, frequency",
    [
        ("intensity", None),
        ("tau", 1 * u.GHz),
        ("emission_measure", None),
        ("brightness_temperature", 2),
        ("spectral_index", (1 * u.GHz, 3 * u.GHz)),
    ],
)
def test_plot_map_writes_png_for_every_quantity(tiny, tmp_path, quantity, frequency):
    path = tmp_path / f"{quantity}.png"
    fig = plot.plot_map(tiny, quantity, frequency, path=path)
    assert isinstance(fig, matplotlib.figure.Figure)
    assert_written(path, b"\x89PNG")  # PNG signature (PNG specification)


def test_every_function_writes_pdf(tiny, tmp_path):
    plot.plot_map(standin_skymap(tiny), path=tmp_path / "map.pdf", contours=3)
    plot.plot_panels(tiny, "tau", [0, 2, 4], path=tmp_path / "panels.pdf", stretch="log")
    plot.plot_sed(*sed(tiny), path=tmp_path / "sed.pdf")
    for name in ("map.pdf", "panels.pdf", "sed.pdf"):
        assert_written(tmp_path / name, b"%PDF")  # PDF header (ISO 32000)
    plot.plot_panels(standin_skymap(tiny), path=tmp_path / "sky_panels")  # no suffix: PNG
    assert_written(tmp_path / "sky_panels", b"\x89PNG")
    plot.plot_sed(*sed(tiny), path=tmp_path / "sed.png")
    assert_written(tmp_path / "sed.png", b"\x89PNG")


def test_unknown_format_is_refused_before_writing(tiny, tmp_path):
    with pytest.raises(InputError, match="path"):
        plot.plot_map(tiny, path=tmp_path / "map.xyz")
    assert list(tmp_path.iterdir()) == []


# --- orientation, beam, scale bar ------------------------------------------------------------


def test_east_is_left(tiny):
    fig = plot.plot_map(tiny, "tau")
    ax = fig.axes[0]
    half = NX / 2 * tiny.pixel_scale.to_value(u.arcsec)
    left, right = ax.get_xlim()
    assert left > right  # east offsets grow to the left
    assert np.allclose((left, right), (half, -half))
    assert np.allclose(ax.get_ylim(), (-half, half))  # north up
    # column 0 is the most easterly: offset_x = -(col + 0.5 - nx/2) * scale (the View's convention)
    image = the_image(ax)
    assert image.origin == "lower"
    assert np.allclose(image.get_extent(), (half, -half, -half, half))
    assert "east" in ax.get_xlabel() and "arcsec" in ax.get_xlabel()


@pytest.mark.parametrize("pa_deg", [0.0, 45.0, 90.0, 130.0, -30.0])
def test_beam_ellipse_follows_the_position_angle(tiny, pa_deg):
    fig = plot.plot_map(standin_skymap(tiny, pa=pa_deg * u.deg))
    fig.draw_without_rendering()
    ax = fig.axes[0]
    beam = by_gid(ax.patches, "beam")
    assert isinstance(beam, Ellipse)
    assert math.isclose(beam.height, 24.0) and math.isclose(beam.width, 12.0)  # FWHM in arcsec
    assert math.isclose(beam.angle, -pa_deg)
    # On screen the major axis must point north through east, east being left: (-sin PA, cos PA)
    # (position angle convention, common practice in radio astronomy).
    centre, tip = ax.transData.transform([beam.center, beam.get_patch_transform().transform((0.0, 1.0))])
    direction = (tip - centre) / np.hypot(*(tip - centre))
    pa = math.radians(pa_deg)
    assert np.allclose(
        direction * np.sign(direction @ [-math.sin(pa), math.cos(pa)]), [-math.sin(pa), math.cos(pa)], atol=1e-6
    )
    # lower-left corner
    left, right = ax.get_xlim()
    bottom, top = ax.get_ylim()
    assert beam.center[0] > 0.5 * left and beam.center[1] < 0.5 * bottom


def test_pa_45_points_up_left_on_screen(tiny):
    fig = plot.plot_map(standin_skymap(tiny, pa=45 * u.deg))
    fig.draw_without_rendering()
    ax = fig.axes[0]
    beam = by_gid(ax.patches, "beam")
    centre, tip = ax.transData.transform([beam.center, beam.get_patch_transform().transform((0.0, 1.0))])
    dx, dy = tip - centre
    assert dx * dy < 0 and math.isclose(abs(dx), abs(dy), rel_tol=1e-6)  # the major axis runs up-left


def test_result_maps_have_no_beam(tiny):
    ax = plot.plot_map(tiny).axes[0]
    assert [p for p in ax.patches if p.get_gid() == "beam"] == []


def test_automatic_scale_bar_length(tiny):
    ax = plot.plot_map(tiny).axes[0]
    bar = by_gid(ax.lines, "scale_bar")
    label = by_gid(ax.texts, "scale_bar_label").get_text()
    value, unit = label.split()
    length = float(value) * u.Unit(unit)
    x = bar.get_xdata()
    expected = (length / DISTANCE).decompose().value * u.rad
    assert math.isclose(abs(x[0] - x[1]), expected.to_value(u.arcsec), rel_tol=1e-12)
    # about a fifth of the 2 pc field, from the 1-2-5 sequence
    field = NX * tiny.pixel_size
    assert 0.6 < (length / (field / 5)).decompose() < 1.6
    mantissa = float(value) / 10 ** math.floor(math.log10(float(value)))
    assert round(mantissa, 9) in (1, 2, 5)
    # in the lower right (west, south)
    assert np.all(x < 0) and np.all(bar.get_ydata() < 0)


def test_given_scale_bar_length(tiny):
    ax = plot.plot_map(tiny, scale_bar=1000 * u.AU).axes[0]
    x = by_gid(ax.lines, "scale_bar").get_xdata()
    # 1 AU at 1 pc subtends 1 arcsec (definition of the parsec): 1000 AU at 2000 pc is 0.5 arcsec
    assert math.isclose(abs(x[0] - x[1]), 0.5, rel_tol=1e-9)
    assert by_gid(ax.texts, "scale_bar_label").get_text() == "1000 AU"
    ax = plot.plot_map(tiny, scale_bar=False).axes[0]
    assert [line for line in ax.lines if line.get_gid() == "scale_bar"] == []
    with pytest.raises(InputError, match="scale_bar"):
        plot.plot_map(tiny, scale_bar=3 * u.s)


@pytest.mark.parametrize(
    "field, expected",
    [
        (100 * u.AU, 20 * u.AU),
        (0.01 * u.pc, 500 * u.AU),
        (1 * u.pc, 0.2 * u.pc),
        (3 * u.pc, 0.5 * u.pc),
        (10 * u.kpc, 2 * u.kpc),
    ],
)
def test_choose_scale_bar(field, expected):
    # ~1/5 of the field rounded to the nearest of 1, 2, 5 x 10^k (common practice)
    got = plot.choose_scale_bar(field)
    assert got.unit == expected.unit and math.isclose(got.value, expected.value)


# --- quantities, units, stretches --------------------------------------------------------------


def test_intensity_units_and_prefix(tiny):
    fig = plot.plot_map(tiny, frequency=0.3 * u.GHz)
    image = the_image(fig.axes[0])
    label = fig.axes[1].get_ylabel()
    # peak Jy/pixel: I * Omega_pix (erg s-1 cm-2 Hz-1 -> Jy is x 1e23)
    peak_jy = (tiny.intensity.value[0] * tiny.pixel_solid_angle.to_value(u.sr) * 1e23).max()
    assert 1e-3 <= peak_jy < 1  # so mJy is the sensible prefix
    assert "mJy pixel" in label
    assert math.isclose(np.nanmax(image.get_array()), peak_jy * 1e3, rel_tol=1e-12)
    sky_label = plot.plot_map(standin_skymap(tiny), frequency=1).axes[1].get_ylabel()
    assert "Jy beam" in sky_label


@pytest.mark.parametrize(
    "stretch, norm_class",
    [
        ("linear", colors.Normalize),
        ("log", colors.LogNorm),
        ("asinh", colors.AsinhNorm),
    ],
)
def test_stretches(tiny, stretch, norm_class):
    norm = the_image(plot.plot_map(tiny, "emission_measure", stretch=stretch).axes[0]).norm
    assert type(norm) is norm_class


def test_spectral_index_map_is_diverging_around_the_thin_value(tiny):
    fig = plot.plot_map(tiny, "spectral_index", (1 * u.GHz, 3 * u.GHz))
    image = the_image(fig.axes[0])
    # thin free-free alpha = -0.1 sits at the centre of the colour map (Condon & Ransom 2016, from memory),
    # with equal halves on either side
    norm = image.norm
    assert type(norm) is colors.Normalize
    assert norm.vmin + norm.vmax == pytest.approx(2 * -0.1, abs=1e-12)
    # it reaches the farther of the 1st and 99th percentiles of the drawn values
    values = image.get_array().compressed()
    half = max(-0.1 - np.percentile(values, 1), np.percentile(values, 99) + 0.1)
    assert norm.vmax == pytest.approx(-0.1 + half, rel=1e-12)
    assert image.get_cmap().name.startswith("RdBu")
    # a plain colour-bar label; what is blanked is said on the map in words
    assert fig.axes[1].get_ylabel() == r"spectral index $\alpha$"
    note = by_gid(fig.axes[0].texts, "note")
    assert "peak" in note.get_text() and "rms" not in note.get_text()


def test_contours(tiny):
    ax = plot.plot_map(tiny, contours=4).axes[0]
    cs = by_gid(ax.collections, "contours")
    norm = the_image(ax).norm
    assert len(cs.levels) == 4 and np.all(np.diff(cs.levels) > 0)
    assert norm.vmin < cs.levels[0] and cs.levels[-1] < norm.vmax
    # evenly spaced in the stretch
    assert np.allclose(np.diff(norm(cs.levels)), 0.2)
    # values in the plotted unit, or Quantities converted to it (the 0.3 GHz map is in mJy/pixel)
    for levels in ([1.0, 5.0], [1, 5] * u.mJy, [0.001, 0.005] * u.Jy / u.pix):
        cs = by_gid(plot.plot_map(tiny, contours=levels).axes[0].collections, "contours")
        assert np.allclose(cs.levels, [1.0, 5.0])
    for bad in (0, [np.nan], [1, 2] * u.K, "many"):
        with pytest.raises(InputError, match="contours"):
            plot.plot_map(tiny, contours=bad)


@pytest.mark.parametrize(
    "kwargs, name",
    [
        (dict(quantity="flux"), "quantity"),
        (dict(quantity="Tau"), "quantity"),
        (dict(stretch="sqrt"), "stretch"),
        (dict(quantity="spectral_index"), "frequency"),
        (dict(quantity="spectral_index", frequency=1 * u.GHz), "frequency"),
        (dict(frequency=2 * u.GHz), "frequency"),
        (dict(frequency=9), "frequency"),
        (dict(cmap="no-such-map"), "cmap"),
    ],
)
def test_bad_arguments_raise(tiny, kwargs, name):
    with pytest.raises(InputError, match=name):
        plot.plot_map(tiny, **kwargs)


def test_bad_quantity_in_panels_and_bad_object():
    with pytest.raises(InputError, match="obj"):
        plot.plot_map(np.zeros((2, 3, 3)))
    with pytest.raises(InputError, match="obj"):
        plot.plot_panels(object(), "intensity")


# --- panels ------------------------------------------------------------------------------------


def image_axes(fig):
    return [ax for ax in fig.axes if ax.get_images()]


def test_panels_shared_and_separate_scales(tiny):
    fig = plot.plot_panels(tiny, shared_scale=True)
    axes = image_axes(fig)
    assert len(axes) == 5
    norms = {(the_image(ax).norm.vmin, the_image(ax).norm.vmax) for ax in axes}
    assert len(norms) == 1  # one colour scale
    assert len(fig.axes) == 6  # five maps and one colour bar
    assert [ax.get_title() for ax in axes] == ["300 MHz", "1 GHz", "3 GHz", "10 GHz", "30 GHz"]
    for ax in axes:
        assert ax.get_xlim()[0] > ax.get_xlim()[1]
    fig = plot.plot_panels(tiny, "tau", shared_scale=False)
    axes = image_axes(fig)
    assert len({the_image(ax).norm.vmax for ax in axes}) == 5
    assert len(fig.axes) == 10  # a colour bar per map


def test_spectral_index_panels_take_consecutive_pairs(tiny):
    fig = plot.plot_panels(standin_skymap(tiny), "spectral_index", [0.3, 1, 3] * u.GHz)
    titles = [ax.get_title() for ax in image_axes(fig)]
    assert titles == ["300 MHz \N{EN DASH} 1 GHz", "1 GHz \N{EN DASH} 3 GHz"]
    # one beam per panel, none of the pixels outside the map
    for ax in image_axes(fig):
        by_gid(ax.patches, "beam")


# --- SED -------------------------------------------------------------------------------------


def test_plot_sed_is_log_log_with_index_labels(tiny):
    nu, flux = sed(tiny)
    fig = plot.plot_sed(nu, flux, label="demo")
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    (line,) = ax.lines
    assert np.allclose(line.get_xdata(), nu.to_value(u.GHz))
    labels = [t.get_text() for t in ax.texts if t.get_gid() == "spectral_index"]
    expected = [f"{a:+.2f}".replace("-", "\N{MINUS SIGN}") for a in spectral_index(nu, flux)]
    assert len(labels) == 4 and all(e in lab for e, lab in zip(expected, labels, strict=True))
    assert ax.get_legend() is not None
    bare = plot.plot_sed(nu, flux, annotate_index=False).axes[0]
    assert [t for t in bare.texts if t.get_gid() == "spectral_index"] == []
    with pytest.raises(InputError, match="flux"):
        plot.plot_sed(nu, -flux)
    with pytest.raises(InputError, match="flux"):
        plot.plot_sed(nu, flux.value * u.K)


def test_observed_skymap_noise_contours_and_delegated_quantities(tiny):
    from rtrace.observe import observe

    rms = 2e-3
    sky = observe(
        tiny, Beam(major=20 * u.arcsec, minor=10 * u.arcsec, pa=60 * u.deg), noise=rms * u.Jy / u.beam, seed=5
    )
    ax = plot.plot_map(sky, frequency=1 * u.GHz, contours=3).axes[0]
    levels = by_gid(ax.collections, "contours").levels
    # lowest contour at 3 rms (common practice for radio maps), in the unit the colour bar names
    label = ax.figure.axes[1].get_ylabel()
    scale = {"mJy beam": 1e3, "(Jy beam": 1.0}[next(k for k in ("mJy beam", "(Jy beam") if k in label)]
    assert math.isclose(levels[0], 3 * rms * scale, rel_tol=1e-9) and len(levels) == 3
    assert math.isclose(by_gid(ax.patches, "beam").angle, -60.0)
    # optical depth is not observed: it comes from the Result behind the map, drawn without a beam
    ax = plot.plot_map(sky, "tau").axes[0]
    assert np.array_equal(the_image(ax).get_array().data, tiny.tau[0])
    assert [p for p in ax.patches if p.get_gid() == "beam"] == []
    tb = the_image(plot.plot_map(sky, "brightness_temperature", 1).axes[0]).get_array()
    assert np.allclose(tb, sky.brightness_temperature("rayleigh-jeans")[1].to_value(u.K))


def test_drawing_into_given_axes(tiny):
    fig = matplotlib.figure.Figure(figsize=(9, 4), layout="constrained")
    left, right = fig.subplots(1, 2)
    assert plot.plot_map(tiny, "emission_measure", ax=left) is fig
    assert plot.plot_sed(*sed(tiny), ax=right) is fig
    assert left.get_images() and right.get_xscale() == "log"
    assert len(fig.axes) == 3  # two panels and the map's colour bar


def test_shared_scale_uses_one_unit_across_panels():
    # A shared colour scale must express every panel in the same unit (regression: per-panel SI prefixes).
    import astropy.units as u

    import rtrace
    from rtrace import demo
    from rtrace.plot.core import common_prefix, plane_of

    res = rtrace.trace(demo.scenario(24), rtrace.View(npix=32, distance=2 * u.kpc), [0.3, 30] * u.GHz)
    planes = common_prefix([plane_of(res, "intensity", k) for k in range(2)])
    assert planes[0].unit == planes[1].unit
    jy = [p.values * u.Quantity(p.unit).to_value(u.Jy / u.pix) for p in planes]
    flux = res.flux_density().to_value(u.Jy)
    assert np.allclose([j.sum() for j in jy], flux, rtol=1e-6)


# --- pictures a new user reads ------------------------------------------------------------------


def rendered(fig):
    """Lay the figure out and draw it as savefig to PNG does (Agg), so that text extents are final."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer()


def inside(inner, outer, tol=0.5):
    return (
        inner.x0 >= outer.x0 - tol
        and inner.x1 <= outer.x1 + tol
        and inner.y0 >= outer.y0 - tol
        and inner.y1 <= outer.y1 + tol
    )


@pytest.fixture(scope="module")
def strip():
    """A wide, short view (24 x 160 pixels): the vertical axis label is longer than the map is tall."""
    return rtrace.trace(demo.scenario(16), rtrace.View(npix=(24, 160), distance=DISTANCE), [1, 3] * u.GHz)


@pytest.mark.parametrize("quantity", ["emission_measure", "intensity", "spectral_index"])
def test_axis_labels_lie_inside_the_saved_figure(tiny, strip, quantity):
    frequency = (1 * u.GHz, 3 * u.GHz) if quantity == "spectral_index" else None
    for res in (tiny, strip):
        fig = plot.plot_map(res, quantity, frequency)
        renderer = rendered(fig)
        ax = fig.axes[0]
        for text in (ax.xaxis.label, ax.yaxis.label, ax.title, fig.axes[1].yaxis.label):
            assert text.get_text()
            assert inside(text.get_window_extent(renderer), fig.bbox), text.get_text()
    # the strip's figure is shorter than a square map's, not padded with empty space
    square = plot.plot_map(tiny, "emission_measure").get_size_inches()[1]
    assert plot.plot_map(strip, "emission_measure").get_size_inches()[1] < 0.7 * square


def test_titles_name_the_snapshot_and_the_ionization_model(tiny):
    source = tiny.provenance["source"]
    model = tiny.provenance["ionization"].split("(")[0]
    for fig in (
        plot.plot_map(tiny, "emission_measure"),
        plot.plot_panels(tiny, "tau", [0, 1]),
        plot.plot_tau_unity(tiny),
    ):
        heading = fig.get_suptitle()
        assert source in heading and f"ionization: {model}" in heading
    # a title given by the caller is used as it is
    assert plot.plot_map(tiny, "emission_measure", title="EM").get_suptitle() == ""


def test_frequency_labels_use_as_few_figures_as_tell_them_apart():
    nu = np.geomspace(0.5, 50, 8) * u.GHz  # 0.5 * 100^(k/7) GHz: 0.9653, 1.8639, 3.5988, ...
    assert plot.frequency_labels(nu) == [
        "500 MHz",
        "965 MHz",
        "1.86 GHz",
        "3.6 GHz",
        "6.95 GHz",
        "13.4 GHz",
        "25.9 GHz",
        "50 GHz",
    ]
    assert plot.frequency_labels([1.931] * u.GHz) == ["1.93 GHz"]
    assert plot.frequency_labels([1.0, 1.001] * u.GHz) == ["1 GHz", "1.001 GHz"]  # kept distinct
    # every label reads back within 0.25 % of its frequency
    for f, text in zip(nu.to_value(u.GHz), plot.frequency_labels(nu), strict=True):
        value = float(text.split()[0]) * (1e-3 if text.endswith("MHz") else 1.0)
        assert abs(value / f - 1) <= 0.0025


def test_eight_panels_fill_their_grid_without_stray_axes_or_labels():
    res = rtrace.trace(demo.scenario(16), rtrace.View(npix=16, distance=DISTANCE), np.geomspace(0.5, 50, 8) * u.GHz)
    for n, shape in ((8, (2, 4)), (7, (2, 4)), (4, (2, 2)), (6, (2, 3))):
        fig = plot.plot_panels(res, "intensity", list(range(n)), shared_scale=True)
        maps = image_axes(fig)
        assert len(maps) == n
        assert len(fig.axes) == n + 1  # the maps and one colour bar: no empty axes
        rows = {round(ax.get_position().y0, 3) for ax in maps}
        cols = {round(ax.get_position().x0, 3) for ax in maps}
        assert (len(rows), len(cols)) == shape
        # one x and one y label for the grid, none on the panels
        assert all(ax.get_xlabel() == "" and ax.get_ylabel() == "" for ax in maps)
        assert "east offset" in fig._supxlabel.get_text() and "north offset" in fig._supylabel.get_text()
        renderer = rendered(fig)
        # tick labels on the bottom panel of each column only
        bottom = {}
        for ax in maps:
            x0 = round(ax.get_position().x0, 3)
            bottom[x0] = min(bottom.get(x0, 2.0), ax.get_position().y0)
        for ax in maps:
            shown = [t for t in ax.get_xticklabels() if t.get_visible() and t.get_text()]
            assert bool(shown) == (ax.get_position().y0 == bottom[round(ax.get_position().x0, 3)])
        assert inside(fig._supylabel.get_window_extent(renderer), fig.bbox)


def test_panels_differing_by_more_than_a_decade_get_their_own_scales(tiny):
    fig = plot.plot_panels(tiny, "brightness_temperature")
    maps = image_axes(fig)
    peaks = [np.nanmax(the_image(ax).get_array()) for ax in maps]
    assert max(peaks) > 10 * min(peaks)  # the thick-to-thin demo spans decades in T_b
    norms = [the_image(ax).norm for ax in maps]
    assert [n.vmax for n in norms] == pytest.approx(peaks)
    assert len(fig.axes) == 2 * len(maps)  # a colour bar each
    # limits given (a series' shared scale) still give one scale
    fig = plot.plot_panels(tiny, "brightness_temperature", vmin=0, vmax=3000)
    assert {(the_image(ax).norm.vmin, the_image(ax).norm.vmax) for ax in image_axes(fig)} == {(0.0, 3000.0)}
    # panels within a decade of each other share one scale
    fig = plot.plot_panels(tiny, "brightness_temperature", [3, 4])
    assert len({the_image(ax).norm.vmax for ax in image_axes(fig)}) == 1


def test_a_beam_larger_than_the_field_is_not_drawn_and_a_warning_says_so(tiny):
    sky = standin_skymap(tiny)
    field = NX * tiny.pixel_scale
    sky.beams = [Beam(major=1.2 * field, minor=0.8 * field, pa=0 * u.deg) for _ in sky.beams]
    sky.beam = sky.beams[0]
    with pytest.warns(UserWarning, match="beam .* larger than"):
        ax = plot.plot_map(sky).axes[0]
    assert not [p for p in ax.patches if p.get_gid() == "beam"]
    by_gid(plot.plot_map(standin_skymap(tiny)).axes[0].patches, "beam")  # a normal beam still is


def test_spectral_index_limits_are_honoured(tiny):
    sky = standin_skymap(tiny)
    fig = plot.plot_map(sky, "spectral_index", (10 * u.GHz, 30 * u.GHz), vmin=-0.2, vmax=0.0)
    assert fig.axes[1].get_ylim() == pytest.approx((-0.2, 0.0))  # the colour bar
    assert (the_image(fig.axes[0]).norm.vmin, the_image(fig.axes[0]).norm.vmax) == (-0.2, 0.0)
    fig = plot.plot_panels(sky, "spectral_index", [1, 3, 10] * u.GHz, vmin=-0.3, vmax=0.1)
    assert {(the_image(ax).norm.vmin, the_image(ax).norm.vmax) for ax in image_axes(fig)} == {(-0.3, 0.1)}
    # one end given: the other mirrored about the thin value, -0.1
    norm = the_image(plot.plot_map(sky, "spectral_index", (1, 3), vmin=-0.5).axes[0]).norm
    assert (norm.vmin, norm.vmax) == pytest.approx((-0.5, 0.3))
    # thin gas (-0.08 to -0.15) spreads over the colours instead of all sitting at the white centre
    norm = the_image(plot.plot_map(tiny, "spectral_index", (10 * u.GHz, 30 * u.GHz)).axes[0]).norm
    assert norm.vmax - norm.vmin < 0.5


def test_spectral_index_picture_says_the_planes_were_smoothed_to_one_beam(tiny):
    sky = standin_skymap(tiny)
    sky.beams = [Beam(major=(24 / f) * u.arcsec, minor=(12 / f) * u.arcsec, pa=45 * u.deg) for f in (0.3, 1, 3, 10, 30)]
    sky.beam = sky.beams[0]
    ax = plot.plot_map(sky, "spectral_index", (1 * u.GHz, 3 * u.GHz)).axes[0]
    assert "beams matched: 24\N{DOUBLE PRIME}\N{MULTIPLICATION SIGN}12\N{DOUBLE PRIME}" in ax.get_title()
    assert by_gid(ax.patches, "beam").get_height() == pytest.approx(24.0)  # the 1 GHz beam, in arcsec


def test_short_log_axes_have_tick_labels_and_index_labels_stay_off_them():
    # a spectrum spanning less than a decade in both axes: 18 to 12 Jy between 10 and 40 GHz
    nu = [10, 15, 25, 40] * u.GHz
    flux = [18.0, 16.5, 14.0, 12.0] * u.Jy
    fig = plot.plot_sed(nu, flux)
    renderer = rendered(fig)
    ax = fig.axes[0]
    lo, hi = ax.get_ylim()
    assert hi / lo < 10
    shown = [
        t
        for t in ax.yaxis.get_ticklabels(which="both")
        if t.get_visible() and t.get_text() and lo <= t.get_position()[1] <= hi
    ]
    assert len(shown) >= 2
    frame = ax.get_window_extent(renderer)
    tick_boxes = [
        t.get_window_extent(renderer)
        for t in ax.get_xticklabels() + ax.get_yticklabels()
        if t.get_visible() and t.get_text()
    ]
    labels = [t for t in ax.texts if t.get_gid() == "spectral_index"]
    assert len(labels) == 3
    for text in labels:
        box = text.get_window_extent(renderer)
        assert inside(box, frame), text.get_text()
        assert not any(box.overlaps(b) for b in tick_boxes)


def test_tau_unity_picture_names_the_pixels_outside_the_traced_range(tiny):
    from rtrace.analysis import tau_unity_frequency

    fig = plot.plot_tau_unity(tiny)
    image = the_image(fig.axes[0])
    ghz = tau_unity_frequency(tiny)[0].to_value(u.GHz)
    tau = np.asarray(tiny.tau)
    # the scale is the traced range, logarithmic
    assert isinstance(image.norm, colors.LogNorm) and (image.norm.vmin, image.norm.vmax) == pytest.approx((0.3, 30))
    values = image.get_array()
    found = np.isfinite(ghz)
    assert found.any()
    assert np.allclose(values[found], ghz[found])
    no_gas = np.all(tau == 0, axis=0)
    below = ~found & ~no_gas & (tau[-1] < 1)
    # not left blank: below the range drawn in the colour under the scale, named in the legend
    assert below.any() and np.all(values[below] < image.norm.vmin)
    assert np.all(values.mask[no_gas])
    legend = by_gid(fig.legends, "categories")
    words = [t.get_text() for t in legend.get_texts()]
    assert any(w.startswith("below the traced range") for w in words) and "no absorbing gas" in words
    # a slab thick at every traced frequency is "above the traced range"
    thick = plot.plot_tau_unity(tiny, vmin=0.3 * u.GHz, vmax=3e4 * u.MHz)
    assert the_image(thick.axes[0]).norm.vmax == pytest.approx(30)
    with pytest.raises(InputError, match="vmax"):
        plot.plot_tau_unity(tiny, vmin=3, vmax=1)


# --- the package's shape ------------------------------------------------------------------------


def test_nothing_outside_plot_imports_its_private_names():
    # Other modules use plot's internal API (rtrace.plot.core) or its public names, never an
    # underscore name of a plot module (issue 16: one internal API instead of private helpers).
    import ast
    import pathlib

    root = pathlib.Path(__file__).resolve().parents[1]
    offenders = []
    for path in [
        *(root / "rtrace").rglob("*.py"),
        *(root / "tests").rglob("*.py"),
        *(root / "examples").rglob("*.py"),
        *(root / "benchmarks").rglob("*.py"),
    ]:
        if (root / "rtrace" / "plot") in path.parents:
            continue
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and node.module and "plot" in node.module.split("."):
                offenders += [f"{path.relative_to(root)}: {a.name}" for a in node.names if a.name.startswith("_")]
    assert not offenders, f"private names of rtrace.plot imported elsewhere: {offenders}"


def test_public_names_and_the_internal_api_resolve():
    import rtrace.plot.core as core

    # README and the API reference import these from rtrace.plot
    for name in plot.__all__:
        assert getattr(plot, name) is not None, name
    for name in core.__all__:
        assert getattr(core, name) is not None, name
    # the conveniences of lower layers draw through the plot package's own functions
    from rtrace.analysis.cuts import Cut
    from rtrace.comparison import Comparison

    assert "plot_cut" in Cut.plot.__code__.co_names
    assert "plot_comparison" in Comparison.figure.__code__.co_names
    assert "plot_comparison" in Comparison.plot.__code__.co_names
