"""Tests of the figures' drawing layer (limitlap._canvas) and of the figures drawn on it.

Data land on the pixels the scales put them on; tick values and labels are matplotlib's
own (its locator and formatter on a real axes of the same size are the reference); text
is placed as matplotlib places it and its recorded box holds all its ink; the PNG is a
valid file that decodes (by Pillow) to the canvas's pixels; every figure has its fixed
size. Pixel conventions: pixel (row r, column c) covers [c, c+1) x [r, r+1) from the
image's top-left corner.
"""

from __future__ import annotations

import io
import zlib

import numpy as np
import pytest

from limitlap import _canvas as cv
from limitlap import figures, gg

matplotlib = pytest.importorskip("matplotlib")
Image = pytest.importorskip("PIL.Image")


def dark(pixels, level=128):
    """Mask of pixels darker than ``level`` in every channel."""
    return np.all(pixels < level, axis=2)


def decode(png: bytes) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(png)).convert("RGB"))


# --------------------------------------------------------------------------- scales


def test_horizontal_and_vertical_lines_land_in_the_pixel_of_their_value():
    c = cv.Canvas(500, 260, dpi=100)
    p = cv.Panel(c, 50, 20, 400, 200, xlim=(0.0, 1000.0), ylim=(-1.0, 3.0))
    # y = 1.23 -> row 20 + 200 * (3 - 1.23) / 4 = 108.5; x = 123.4 -> column 99.36
    p.hline(1.23, "#000000", lw_pt=0.72)  # 0.72 pt = 1 px at 100 dpi
    p.vline(123.4, "#000000", lw_pt=0.72)
    ink = dark(c.pixels)
    assert np.flatnonzero(ink[:, 300]).tolist() == [108]
    assert np.flatnonzero(ink[60, :]).tolist() == [99]
    # one value off by a tenth of the axis moves the line by its share of the pixels
    assert float(p.py(1.23 + 0.4)) == pytest.approx(108.5 - 20.0)
    assert float(p.px(123.4 + 100.0)) == pytest.approx(99.36 + 40.0)


def test_a_sloping_line_passes_through_its_data_points():
    c = cv.Canvas(500, 260, dpi=100)
    p = cv.Panel(c, 50, 20, 400, 200, xlim=(0.0, 1000.0), ylim=(-1.0, 3.0))
    p.line([0.0, 1000.0], [-1.0, 3.0], "#000000", lw_pt=0.72)  # corner to corner
    pix = c.pixels[..., 0].astype(float)
    for col in (100, 250, 400):
        # the line's centre in this column: the ink-weighted mean row + half a pixel
        w = 255.0 - pix[:, col]
        centre = float(np.sum(w * (np.arange(pix.shape[0]) + 0.5)) / np.sum(w))
        x_data = (col + 0.5 - 50.0) / 400.0 * 1000.0
        expected = float(p.py(-1.0 + 4.0 * x_data / 1000.0))
        assert centre == pytest.approx(expected, abs=0.25)  # antialiasing is symmetric


def test_a_reversed_axis_runs_the_other_way():
    c = cv.Canvas(200, 200)
    p = cv.Panel(c, 0, 0, 200, 200, xlim=(0.0, 1.0), ylim=(5.0, -1.0))  # 0 near the top
    assert float(p.py(-1.0)) == pytest.approx(0.0)
    assert float(p.py(5.0)) == pytest.approx(200.0)


def test_markers_are_centred_on_their_points():
    c = cv.Canvas(300, 200)
    p = cv.Panel(c, 20, 10, 260, 180, xlim=(0.0, 10.0), ylim=(0.0, 10.0))
    p.scatter([3.3], [6.1], "o", 9.0, "#000000")
    ink = 255.0 - c.pixels[..., 0].astype(float)
    rows, cols = np.indices(ink.shape)
    cy = np.sum(ink * (rows + 0.5)) / ink.sum()
    cx = np.sum(ink * (cols + 0.5)) / ink.sum()
    # Agg puts marker centres on whole pixels: within half a pixel of the point
    assert cx == pytest.approx(float(p.px(3.3)), abs=0.75)
    assert cy == pytest.approx(float(p.py(6.1)), abs=0.75)


def test_drawing_is_clipped_to_the_panel():
    c = cv.Canvas(300, 200)
    p = cv.Panel(c, 50, 50, 100, 100, xlim=(0.0, 1.0), ylim=(0.0, 1.0))
    p.line([-1.0, 2.0], [0.5, 0.5], "#000000", lw_pt=3.0)
    cols = np.flatnonzero(dark(c.pixels).any(axis=0))
    assert cols.min() >= 50 and cols.max() <= 149


def test_fill_between_stops_where_the_curves_cross():
    c = cv.Canvas(300, 120)
    p = cv.Panel(c, 0, 10, 300, 100, xlim=(0.0, 300.0), ylim=(-1.0, 1.0))
    x = np.arange(0.0, 301.0, 10.0)
    d = (x - 155.0) / 150.0  # crosses zero at x = 155, between stations
    p.fill_between(x, 0.0, d, "#000000", where=d >= 0)
    filled = dark(c.pixels).any(axis=0)
    assert not filled[:154].any()
    assert filled[157:].all()


# --------------------------------------------------------------------------- ticks


@pytest.mark.slow
@pytest.mark.parametrize(
    ("xlim", "ylim"),
    [
        ((0.0, 3760.0), (0.0, 300.0)),
        ((110.0, 645.0), (72.0, 278.0)),
        ((-0.0125, 0.0113), (-2.3, 2.3)),
        ((0.0, 1.4), (-5.0, 110.0)),
    ],
)
def test_ticks_and_labels_are_matplotlibs_own(xlim, ylim):
    # Reference: matplotlib's default locator and formatter on an axes of the same size.
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w, h = 1200, 460
    fig = Figure(figsize=(w / 100, h / 100), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((70 / w, 52 / h, 1100 / w, 378 / h))
    ax.set_xlim(*xlim)
    ax.set_ylim(*ylim)
    fig.canvas.draw()

    def inside(values, lim):
        return [v for v in values if lim[0] - 1e-9 <= v <= lim[1] + 1e-9]

    p = cv.Panel(cv.Canvas(w, h), 70, h - 52 - 378, 1100, 378, xlim, ylim)
    assert p.auto_xticks() == pytest.approx(inside(ax.get_xticks(), xlim))
    assert p.auto_yticks() == pytest.approx(inside(ax.get_yticks(), ylim))
    labels = [
        t.get_text()
        for t in ax.get_xticklabels()
        if xlim[0] - 1e-9 <= t.get_position()[0] <= xlim[1] + 1e-9
    ]
    assert cv.tick_labels(p.auto_xticks()) == labels


def test_nice_ticks_known_sequences():
    # 1-2-2.5-5 steps (matplotlib's default steps), fewest decimals that show each value
    assert cv.nice_ticks(0.0, 3760.0, 9).tolist() == [500.0 * i for i in range(8)]
    assert cv.nice_ticks(-2.3, 2.3, 6).tolist() == [-2.0, -1.0, 0.0, 1.0, 2.0]
    assert cv.tick_labels([0.0, 0.25, 0.5]) == ["0.00", "0.25", "0.50"]
    assert cv.tick_labels([-0.01, 0.0, 0.01]) == ["−0.01", "0.00", "0.01"]


# --------------------------------------------------------------------------- text


@pytest.mark.parametrize(
    ("rotation", "ha", "va", "anchor"),
    [
        (0, "left", "baseline", False),
        (0, "right", "top", False),
        (0, "center", "center", False),
        (0, "left", "bottom", False),
        (90, "right", "top", False),  # the brake-point words of the corner figures
        (90, "center", "center", False),
        (30, "right", "top", True),  # slanted corner names under their bars
        (30, "center", "center", False),
    ],
)
def test_text_is_placed_as_matplotlib_places_it(rotation, ha, va, anchor):
    # Reference: matplotlib's own text at the same point, alignment and size.
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3, 2), dpi=100)
    FigureCanvasAgg(fig)
    fig.text(
        150 / 300,
        1 - 80 / 200,
        "ideal brakes 250",
        fontsize=10,
        rotation=rotation,
        ha=ha,
        va=va,
        rotation_mode="anchor" if anchor else "default",
    )
    fig.canvas.draw()
    ref = dark(np.asarray(fig.canvas.buffer_rgba())[..., :3], 200)
    c = cv.Canvas(300, 200)
    c.text(150, 80, "ideal brakes 250", size_pt=10, rotation=rotation, ha=ha, va=va, anchor=anchor)
    ours = dark(c.pixels, 200)

    def extent(m):
        rows, cols = np.flatnonzero(m.any(axis=1)), np.flatnonzero(m.any(axis=0))
        return np.array([cols[0], cols[-1], rows[0], rows[-1]])

    # 1 px: matplotlib positions glyphs at sub-pixel offsets, the canvas at whole pixels
    assert np.abs(extent(ours) - extent(ref)).max() <= 1


def test_text_box_holds_its_ink_and_rotation_turns_it():
    c = cv.Canvas(400, 300)
    box = c.text(200, 100, "Long Heath Hairpin (T4)", size_pt=11, ha="center", va="center")
    ink = dark(c.pixels, 250)
    rows, cols = np.flatnonzero(ink.any(axis=1)), np.flatnonzero(ink.any(axis=0))
    assert box.x0 <= cols[0] and cols[-1] < box.x1 and box.y0 <= rows[0] and rows[-1] < box.y1
    assert abs(0.5 * (box.x0 + box.x1) - 200) <= 1
    w, asc, desc = c.text_extent("Long Heath Hairpin (T4)", 11)
    assert box.width == pytest.approx(w)
    up = c.text(
        50, 250, "Long Heath Hairpin (T4)", size_pt=11, rotation=90, ha="right", va="bottom"
    )
    assert up.height == pytest.approx(w, abs=1) and up.width <= asc + desc + 1
    assert up.x1 == pytest.approx(50, abs=1) and up.y1 == pytest.approx(250, abs=1)
    assert [t for t, _ in c.texts] == ["Long Heath Hairpin (T4)"] * 2


# --------------------------------------------------------------------------- legend, bar


def test_best_legend_avoids_the_data():
    c = cv.Canvas(400, 300)
    p = cv.Panel(c, 40, 20, 340, 240, xlim=(0.0, 1.0), ylim=(0.0, 1.0))
    # points filling the upper half: the legend goes to a lower corner
    xs, ys = np.meshgrid(np.linspace(0, 1, 40), np.linspace(0.5, 1, 20))
    box = c.legend(
        [cv.Entry("ideal", "line", "#0072B2")],
        loc="best",
        within=p.box,
        avoid=(p.px(xs.ravel()), p.py(ys.ravel())),
    )
    assert box.y0 > p.py(0.5)


def test_colour_bar_runs_from_first_to_last_colour():
    c = cv.Canvas(300, 120)
    colours = np.array([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0]])
    c.colour_bar(cv.Box(50, 20, 250, 40), colours, [0.0, 1.0], ["a", "b"], "label")
    assert c.pixels[30, 52].tolist() == [0, 0, 255]
    assert c.pixels[30, 247].tolist() == [255, 0, 0]


# --------------------------------------------------------------------------- PNG


def test_png_decodes_to_the_canvas_pixels_with_its_resolution():
    c = cv.Canvas(320, 181, dpi=100)  # odd height: the two halves differ
    p = cv.Panel(c, 30, 10, 280, 150, xlim=(0.0, 1.0), ylim=(0.0, 1.0))
    x = np.linspace(0, 1, 500)
    p.line(x, 0.5 + 0.4 * np.sin(9 * x), "#D55E00", 1.5)
    c.text(40, 175, "time delta [s]", size_pt=9)
    png = c.png()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    img = Image.open(io.BytesIO(png))
    assert img.size == (320, 181) and img.mode == "RGB"
    assert img.info["dpi"] == pytest.approx((100, 100), abs=0.01)
    assert np.array_equal(decode(png), c.pixels)


def test_adler32_of_two_parts_combines_to_that_of_the_whole():
    # Reference: zlib's own Adler-32 of the concatenation (RFC 1950).
    rng = np.random.default_rng(7)
    data = rng.integers(0, 256, 200_003, dtype=np.uint8).tobytes()
    for cut in (0, 1, 65_521, 100_000, 200_003):
        a, b = data[:cut], data[cut:]
        assert cv._adler32_combine(zlib.adler32(a), zlib.adler32(b), len(b)) == zlib.adler32(data)


# --------------------------------------------------------------------------- figures


S = np.arange(0.0, 1000.0, 2.0)
V_IDEAL = 40.0 + 15.0 * np.cos(2 * np.pi * S / 500.0)
V_REAL = V_IDEAL - 2.0 * np.exp(-(((S - 300.0) / 40.0) ** 2))
CORNERS = [
    {
        "name": "Heath",
        "start_m": 200.0,
        "apex_m": 300.0,
        "end_m": 380.0,
        "time_left_s": 0.3,
        "actual_s": 10.0,
        "ideal_s": 9.7,
        "best_s": 9.8,
        "brake_start_actual_m": 240.0,
        "brake_start_ideal_m": 255.0,
    },
    {
        "name": "Kink",
        "start_m": 900.0,
        "apex_m": 960.0,
        "end_m": 40.0,
        "time_left_s": -0.05,
        "actual_s": 11.0,
        "ideal_s": 11.05,
        "best_s": 10.9,
    },
]


def _car():
    from limitlap.vehicle import Vehicle

    return Vehicle(
        "Invented figure car",
        900.0,
        150e3,
        0.7,
        0.8,
        0.012,
        mu_lat=1.4,
        mu_brk=1.5,
        mu_trac=1.2,
        exponent=2.0,
    )


def _every_figure():
    real = {
        "speed_m_s": V_REAL,
        "brake": np.clip(-np.gradient(V_REAL), 0, 1),
        "throttle": np.clip(np.gradient(V_REAL), 0, 1),
    }
    ideal = {
        "speed_m_s": V_IDEAL,
        "brake": np.clip(-np.gradient(V_IDEAL), 0, 1),
        "throttle": np.clip(np.gradient(V_IDEAL), 0, 1),
    }
    th = 2 * np.pi * S / 1000
    rng = np.random.default_rng(3)
    ay = 9.0 * np.sin(3 * th) + rng.normal(0, 0.3, S.size)
    ax = 6.0 * np.cos(3 * th)
    return {
        "speed": figures.speed_figure(S, V_REAL, V_IDEAL, CORNERS),
        "delta": figures.delta_figure(S, 2e-4 * S - 0.05, CORNERS),
        "check": figures.curvature_check_figure(
            S, 1e-3 * np.sin(th), 1e-3 * np.sin(th), np.full(S.size, np.nan), CORNERS, "check"
        ),
        "time_left": figures.time_left_figure(CORNERS),
        "map": figures.map_figure(
            300 * np.cos(th), 200 * np.sin(th), np.gradient(2e-4 * S), CORNERS, S
        ),
        "gg": figures.gg_figure(
            gg.gg_bands(V_REAL, ax, ay, _car()),
            fit_points=[
                {"speed_m_s": V_REAL[::25], "accel_lat_m_s2": ay[::25], "accel_lon_m_s2": ax[::25]}
            ],
        ),
        "detail": figures.detail_figure(CORNERS[0], S, 1000.0, real, ideal, caption="Heath"),
        "detail_across_the_gate": figures.detail_figure(CORNERS[1], S, 1000.0, real, ideal),
        "best": figures.best_figure(CORNERS, 21.0, 20.7, 20.75),
    }


def test_every_figure_has_its_fixed_size_and_is_drawn():
    for name, png in _every_figure().items():
        kind = name.split("_across")[0]
        img = decode(png)
        assert img.shape[:2] == figures.FIGURE_SIZE_PX[kind][::-1], name
        assert img.std() > 5.0, name  # not a blank image


@pytest.mark.slow
def test_figures_keep_their_colours():
    pngs = _every_figure()

    def has(png, colour, tol=6):
        target = np.array(cv.rgb(colour)) * 255
        return bool((np.abs(decode(png).astype(float) - target).max(axis=2) <= tol).any())

    # the real lap in vermillion, the ideal in blue (Okabe & Ito), on the lap figures
    for name in ("speed", "detail", "best"):
        assert has(pngs[name], figures.REAL) and has(pngs[name], figures.IDEAL), name
    # the unused grip shaded on the g-g diagram (sky blue at 45 % on white)
    shade = 1.0 - 0.45 * (1.0 - np.array(cv.rgb(figures.UNUSED)))
    assert has(pngs["gg"], tuple(shade), tol=3)
    assert has(pngs["gg"], figures.ACCENT)  # the fit's boundary points


def test_figures_leave_matplotlib_settings_alone():
    before = matplotlib.rcParams.copy()
    figures.speed_figure(S, V_REAL, V_IDEAL, CORNERS)
    after = matplotlib.rcParams.copy()  # a copy: reading "backend" itself would resolve it
    assert {k for k in before if before[k] != after[k]} == set()


def test_ray_reach_of_a_circle_and_a_square():
    # Analytic: a circle of radius 2 about the origin is reached at 2 in every direction
    # (to the chord error of a 720-gon); a square of half-side 1 at 1 / max(|cos|, |sin|).
    angles = np.linspace(-np.pi, np.pi, 721)
    t = np.linspace(0, 2 * np.pi, 720, endpoint=False)
    r = gg.ray_reach(2 * np.cos(t), 2 * np.sin(t), angles)
    assert r == pytest.approx(2.0, abs=2.0 * (1 - np.cos(np.pi / 720)) + 1e-12)
    sq = gg.ray_reach([1.0, -1.0, -1.0, 1.0], [1.0, 1.0, -1.0, -1.0], angles)
    assert sq == pytest.approx(1.0 / np.maximum(np.abs(np.cos(angles)), np.abs(np.sin(angles))))
    # origin outside a polygon: rays that miss it reach 0, the farthest crossing counts
    off = gg.ray_reach([2.0, 3.0, 3.0, 2.0], [-0.5, -0.5, 0.5, 0.5], angles)
    assert off[np.abs(angles) > 0.3].max() == 0.0
    assert off[360] == pytest.approx(3.0)  # angle 0: in at x = 2, out at x = 3


@pytest.mark.skipif(not hasattr(__import__("os"), "fork"), reason="needs os.fork")
# Python 3.12+ warns on any fork of a process with threads; the fork is the point here
@pytest.mark.filterwarnings("ignore:This process .* is multi-threaded:DeprecationWarning")
def test_png_encodes_in_a_forked_child_after_the_parent_encoded():
    # The parent's helper thread does not survive a fork; a child that reused its pool
    # would wait for ever on the lower half of the image.
    import multiprocessing

    c = cv.Canvas(200, 100)
    c.text(10, 50, "lap 3", size_pt=11)
    parent = c.png()
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(1) as pool:
        child = pool.apply_async(_encode_small).get(timeout=20)
    assert child == parent


def _encode_small():
    c = cv.Canvas(200, 100)
    c.text(10, 50, "lap 3", size_pt=11)
    return c.png()
