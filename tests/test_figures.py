"""Figures that do not mislead: what each figure's specification says, and its PNG picture.

Checked against things outside the figures: closed forms (the polar area of a half disc,
a circle's and a square's ray reach), the sign of each corner's time left, ColorBrewer's
and Okabe & Ito's published colours, a colour-vision simulation (Machado et al. 2009) and
CIE 1976 colour differences; the PNGs decoded by Pillow.
"""

from __future__ import annotations

import io
import itertools

import numpy as np
import pytest

from limitlap import figures, gg, pictures
from limitlap.formatting import METRIC, units_named
from limitlap.vehicle import Vehicle
from tests.test_report import make_analysis

matplotlib = pytest.importorskip("matplotlib")
Image = pytest.importorskip("PIL.Image")


@pytest.fixture(scope="module")
def analysis():
    return make_analysis()


# --------------------------------------------------------------------------- g-g: unused grip


def _half_disc(radius, n=720):
    """Points filling a half disc on the left (+ lateral): its rim and its straight edge."""
    th = np.linspace(-np.pi / 2, np.pi / 2, n)
    rim_lat, rim_lon = radius * np.cos(th), radius * np.sin(th)
    edge = np.linspace(-radius, radius, 50)
    return np.concatenate([rim_lat, np.zeros(50)]), np.concatenate([rim_lon, edge])


BIG_CAR = Vehicle(
    "Invented grippy test car",
    mass_kg=800.0,
    power_w=900e3,
    drag_area_m2=0.5,
    downforce_area_m2=0.0,
    rolling_coeff=0.0,
    mu_lat=3.0,
    mu_brk=3.0,
    mu_trac=3.0,
    exponent=2.0,
)


@pytest.mark.parametrize("share", [1.0, 0.8, 0.5])
def test_unused_grip_counts_only_the_directions_the_ideal_asks_for(share):
    # The ideal asks for a half disc of radius R on the left (left-hand corners and
    # straight-line braking and driving), never for right-hand grip; the envelope (3 g
    # each way) reaches far beyond it. A lap that reaches a half disc of radius r there
    # leaves 1 - (r/R)^2 of the asked area unused: polar area 1/2 r^2 dtheta, a closed
    # form. The empty right half of the envelope counts nothing.
    R = 12.0
    v = 30.0
    ideal_lat, ideal_lon = _half_disc(R)
    lap_lat, lap_lon = _half_disc(share * R)
    (band,) = gg.gg_bands(
        np.full(lap_lat.size, v),
        lap_lon,
        lap_lat,
        BIG_CAR,
        bands=[(25.0, 35.0)],
        asked=(np.full(ideal_lat.size, v), ideal_lon, ideal_lat),
    )
    # the 720-gon and the 0.5 degree rays cut the disc's area by well under 0.1 %
    assert band.unused_share == pytest.approx(1.0 - share**2, abs=2e-3)
    right = np.abs(gg.REACH_ANGLES_RAD) > np.pi / 2 + 0.01
    assert np.all(band.asked_reach_m_s2[right] < 1e-6)  # nothing asked on the right


def test_without_the_ideal_nothing_is_counted_unused():
    lat, lon = _half_disc(5.0)
    (band,) = gg.gg_bands(np.full(lat.size, 30.0), lon, lat, BIG_CAR, bands=[(25.0, 35.0)])
    assert np.isnan(band.unused_share) and band.asked_reach_m_s2 is None


def test_samples_beyond_the_envelope_are_counted_not_hidden():
    # A lap whose samples reach 10 % beyond the envelope in every direction: nothing is
    # unused, and the band says it reaches beyond in (nearly) every direction.
    car = Vehicle(
        "Invented circle car",
        mass_kg=1000.0,
        power_w=1e9,
        drag_area_m2=0.0,
        downforce_area_m2=0.0,
        rolling_coeff=0.0,
        mu_lat=1.0,
        mu_brk=1.0,
        mu_trac=1.0,
        exponent=2.0,
    )
    th = np.linspace(-np.pi, np.pi, 400)
    g = 9.80665
    lat, lon = 1.1 * g * np.cos(th), 1.1 * g * np.sin(th)
    (band,) = gg.gg_bands(
        np.full(th.size, 20.0),
        lon,
        lat,
        car,
        bands=[(15.0, 25.0)],
        asked=(np.full(th.size, 20.0), lon, lat),
    )
    assert band.unused_share == pytest.approx(0.0, abs=1e-9)
    assert band.beyond_share > 0.95
    assert "beyond the envelope" in figures.gg_title(band, METRIC)


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


# --------------------------------------------------------------------------- scales and colours


@pytest.mark.parametrize("limit", [0.003, 0.37, 1.0, 1.3, 4.2, 17.0, 260.0])
def test_map_scale_is_centred_on_zero_with_even_ticks(limit):
    end, ticks = figures.even_ticks(limit)
    steps = np.diff(ticks)
    assert end >= limit and ticks[0] == -end and ticks[-1] == end
    assert ticks[len(ticks) // 2] == 0.0 and len(ticks) % 2 == 1
    assert np.allclose(steps, steps[0], rtol=1e-9)  # even
    assert 2 <= len(ticks) // 2 <= 4
    # a 1-2-2.5-5 step (the usual "nice" steps of axis labelling)
    mantissa = steps[0] / 10.0 ** np.floor(np.log10(steps[0]))
    assert min(abs(mantissa - m) for m in (1.0, 2.0, 2.5, 5.0, 10.0)) < 1e-6


def test_the_map_scale_puts_the_neutral_colour_at_zero():
    # ColorBrewer RdBu (7 classes): #F7F7F7 is its middle class; both ends of the map's
    # scale are the loss and gain colours used everywhere else.
    stops = dict((p, c) for p, c in figures.LOSS_SCALE)
    assert stops[0.5] == "#F7F7F7"
    assert stops[0.0] == figures.GAIN and stops[1.0] == figures.LOSS


def _corner(name, t):
    return {"name": name, "time_left_s": t, "actual_s": 10.0 + t, "ideal_s": 10.0}


def test_time_left_bars_take_the_colour_and_sign_of_their_time():
    corners = [
        _corner("T1", 0.48),
        _corner("T2", -0.004),  # rounds to 0.00: neither lost nor gained
        _corner("T3", -0.02),
        _corner("T8", 0.003),
    ]
    spec = figures.time_left_figure(corners)
    seen = {}
    for trace in spec.data:
        for name, x, text in zip(trace["y"], trace["x"], trace["text"], strict=True):
            seen[name] = (trace["marker"]["color"], x, text, trace["name"])
    assert seen["T1"][0] == figures.LOSS and seen["T1"][2] == "+0.48 s"
    assert seen["T3"][0] == figures.GAIN and seen["T3"][2] == "-0.02 s" and seen["T3"][1] < 0
    for even in ("T2", "T8"):
        assert seen[even][0] == figures.EVEN and seen[even][2] == "0.00 s"
    # every colour is in the legend (one trace per meaning)
    assert all(t.get("showlegend", True) and t["name"] for t in spec.data)


# Machado, Oliveira & Fernandes (2009), "A physiologically-based model for simulation of
# color vision deficiency", IEEE TVCG 15(6):1291-1298, severity 1.0 matrices, applied to
# linear sRGB (checked against the colorspacious package's copy of the same table).
CVD = {
    "protanopia": [
        [0.152286, 1.052583, -0.204868],
        [0.114503, 0.786281, 0.099216],
        [-0.003882, -0.048116, 1.051998],
    ],
    "deuteranopia": [
        [0.367322, 0.860646, -0.227968],
        [0.280085, 0.672501, 0.047413],
        [-0.011820, 0.042940, 0.968881],
    ],
    "tritanopia": [
        [1.255528, -0.076749, -0.178779],
        [-0.078411, 0.930809, 0.147602],
        [0.004733, 0.691367, 0.303900],
    ],
}


def _lab(hex_colour, cvd=None):
    """CIE 1976 L*a*b* (D65) of an sRGB colour (IEC 61966-2-1), as a colour-blind eye sees it."""
    h = hex_colour.lstrip("#")
    c = np.array([int(h[i : i + 2], 16) for i in (0, 2, 4)]) / 255.0
    rgb = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    if cvd is not None:
        rgb = np.clip(np.array(CVD[cvd]) @ rgb, 0.0, 1.0)
    xyz = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    t = (xyz @ rgb) / np.array([0.95047, 1.0, 1.08883])
    f = np.where(t > (6 / 29) ** 3, np.cbrt(t), t / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


#: The roles that share a figure: the lap views (lap, ideal, other laps, loss and gain
#: fills), the best-of-laps figure.
TOGETHER = [
    {
        "lap": figures.LAP,
        "ideal": figures.IDEAL,
        "other": figures.OTHER_LAPS,
        "loss": figures.LOSS,
        "gain": figures.GAIN,
    },
    {"lap": figures.LAP, "ideal": figures.IDEAL, "best": figures.BEST},
]


@pytest.mark.parametrize("cvd", [None, *CVD])
def test_colours_that_share_a_figure_stay_apart_for_colour_blind_eyes(cvd):
    # Delta E*ab (CIE 1976) of 2.3 is about a just noticeable difference (Sharma, Digital
    # Color Imaging Handbook, 2003); 25 asks for clearly different colours on a line
    # chart (common practice, no published source).
    for group in TOGETHER:
        for (a, ca), (b, cb) in itertools.combinations(group.items(), 2):
            d = float(np.linalg.norm(_lab(ca, cvd) - _lab(cb, cvd)))
            assert d >= 25.0, (cvd, a, b, d)


def test_role_colours_are_the_published_ones():
    # Okabe & Ito (2008): orange E69F00, bluish green 009E73, sky blue 56B4E9, reddish
    # purple CC79A7, yellow F0E442; ColorBrewer RdBu ends B2182B and 2166AC (7 classes).
    assert figures.LAP == "#E69F00" and figures.BEST == "#009E73"
    assert (figures.LOSS, figures.GAIN) == ("#B2182B", "#2166AC")
    assert len(set(figures.ROLE_COLOURS.values())) == len(figures.ROLE_COLOURS)


# --------------------------------------------------------------------------- legends


def _specs(analysis, units=METRIC):
    from limitlap import outputs, report

    v = outputs.report_view(analysis)
    cols, specs = report.page_figures(v, units)
    return v, cols, specs + report.detail_figures(v, cols, units)


def test_every_line_is_in_a_legend(analysis):
    _, _, specs = _specs(analysis)
    for spec in specs:
        shown = {
            t.get("legendgroup", t.get("name")) for t in spec.data if t.get("showlegend", True)
        }
        for t in spec.data:
            draws_a_line = t["type"] == "scatter" and (
                ("lines" in t.get("mode", "") and t.get("line", {}).get("width", 2) > 0)
                or t.get("fill")
            )
            if draws_a_line:
                assert t.get("name"), (spec.key, t)
                assert t.get("legendgroup", t["name"]) in shown, (spec.key, t["name"])


def test_imperial_units_reach_every_axis_and_the_data(analysis):
    v, cols, specs = _specs(analysis, units_named("imperial"))
    speed = next(s for s in specs if s.key == "speed")
    assert speed.layout["yaxis"]["title"]["text"] == "speed [mph]"
    assert "[ft]" in speed.layout["xaxis"]["title"]["text"]
    # 1 mph = 0.44704 m/s, 1 ft = 0.3048 m exactly (international yard and pound, 1959)
    ideal = cols.resolve(speed.data[0]["y"])
    axis = figures.LapAxis.of(v.distance_m, v.length_m, v.corners)
    assert ideal == pytest.approx(v.speed_ideal_m_s[axis.order] / 0.44704, abs=0.051)
    assert cols.arrays["x"][-1] == pytest.approx(v.distance_m[-1] / 0.3048, abs=0.51)


# --------------------------------------------------------------------------- PNG pictures


def decode(png: bytes) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(png)).convert("RGB"))


@pytest.mark.slow
def test_pictures_have_their_size_and_the_roles_colours(analysis):
    _, cols, specs = _specs(analysis)
    pngs = {s.key: (s, pictures.picture(s, cols)) for s in specs}
    for key, (spec, png) in pngs.items():
        img = decode(png)
        assert img.shape[:2] == (spec.layout["height"] + 34, figures.PICTURE_WIDTH_PX), key
        assert img.std() > 5.0, key  # not a blank image

    def has(png, colour, tol=8):
        h = colour.lstrip("#")
        target = np.array([int(h[i : i + 2], 16) for i in (0, 2, 4)], dtype=float)
        return bool((np.abs(decode(png).astype(float) - target).max(axis=2) <= tol).any())

    for key in ("speed", "corner_1", "best_of_laps"):
        assert has(pngs[key][1], figures.LAP) and has(pngs[key][1], figures.IDEAL), key
    assert has(pngs["time_left"][1], figures.LOSS)
    assert has(pngs["best_of_laps"][1], figures.BEST)


def test_pictures_leave_matplotlib_settings_alone(analysis):
    _, cols, specs = _specs(analysis)
    before = matplotlib.rcParams.copy()
    pictures.picture(specs[0], cols)
    after = matplotlib.rcParams.copy()  # a copy: reading "backend" itself would resolve it
    assert {k for k in before if before[k] != after[k]} == set()
