"""What each report figure shows, as plotly.js figure specifications (plain JSON dicts).

Each ``*_figure`` function returns one :class:`FigureSpec`: ``data`` (the traces) and
``layout`` in plotly.js's documented figure schema, so the page (:mod:`limitlap.report`)
hands them to the vendored plotly.js unchanged and :mod:`limitlap.pictures` draws the
same specification with matplotlib for the PNG files. No plotting library is imported
here: building the page costs the JSON and nothing else.

Long arrays are not repeated in every trace: a trace names a column of a
:class:`Columns` store (``{"$col": "speed_ideal"}``), which the page's script and the
PNG drawing resolve before drawing. Values are rounded per column to what can be seen
(0.1 km/h, 0.1 m, 1 ms), which keeps the page small.

Inputs are the report's view of an analysis (SI) and the units a person reads
(:class:`limitlap.formatting.Units`); the conversions happen here and in
:mod:`limitlap.formatting`. Nothing is computed here that a stage should compute: the
g-g bands come from :mod:`limitlap.gg`, the shares from :mod:`limitlap.limits`.

Colours, one meaning each in every view and on the target sheets: the analysed lap in
orange and the ideal in black (Okabe & Ito 2008 [1]); time lost and time gained as the
two ends of ColorBrewer's red-blue diverging scheme [2], also for the map's scale
(centred on zero); the session's other laps in grey; the best of the session's laps in
bluish green. The set stays apart under simulated protanopia, deuteranopia and
tritanopia (tests/test_page.py checks it with the simulation of Machado et al. 2009).

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people", J*FLY, 2008.
.. [2] M. Harrower and C. A. Brewer, "ColorBrewer.org: an online tool for selecting
   colour schemes for maps", The Cartographic Journal 40(1):27-37, 2003.
"""

from __future__ import annotations

import functools
import json
import math
import threading
from dataclasses import dataclass, field

import numpy as np

from limitlap.formatting import (
    NOT_AVAILABLE,
    Units,
    lap_time,
    signed_time,
)
from limitlap.units import G0_M_S2

# Colours by role (see the module's notes).
LAP = "#E69F00"  # Okabe-Ito orange: the analysed lap (your lap)
IDEAL = "#000000"  # black: the ideal lap and the envelope it runs on
LOSS = "#B2182B"  # ColorBrewer RdBu, red end: time lost, grip left unused
GAIN = "#2166AC"  # ColorBrewer RdBu, blue end: time gained on the ideal
EVEN = "#BDBDBD"  # neutral: neither (rounds to 0.00 s)
OTHER_LAPS = "#8C8C8C"  # grey: the session's other laps
BEST = "#009E73"  # Okabe-Ito bluish green: best of the session's own laps
CHECK_AY = "#56B4E9"  # Okabe-Ito sky blue: curvature from a_y / v²
CHECK_YAW = "#CC79A7"  # Okabe-Ito reddish purple: curvature from yaw rate / v
STRETCH = "#F0E442"  # Okabe-Ito yellow: the stretch shown, on the map
BETTER = "#009E73"  # Okabe-Ito bluish green: the better line, on the map
INK = "#333333"  # text, axes, neutral marks
GRID = "#E3E3E3"
BAND = "#F4F4F4"  # every other corner segment
#: The map's diverging scale, loss (1) to gain (0) through a light neutral at 0.5:
#: ColorBrewer RdBu, 7 classes [2].
LOSS_SCALE = [
    [0.0, GAIN],
    [1 / 6, "#67A9CF"],
    [2 / 6, "#D1E5F0"],
    [0.5, "#F7F7F7"],
    [4 / 6, "#FDDBC7"],
    [5 / 6, "#EF8A62"],
    [1.0, LOSS],
]
#: Every role colour, for the legend of colours and the tests.
ROLE_COLOURS = {
    "your lap": LAP,
    "ideal": IDEAL,
    "time lost": LOSS,
    "time gained": GAIN,
    "other laps": OTHER_LAPS,
    "best of your laps": BEST,
}

FONT = 'system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif'
#: Heights of the figures on the page and in the PNGs. [px]
HEIGHT_PX = {
    "speed": 340,
    "delta": 250,
    "pedals": 320,
    "map": 560,
    "time_left": 0,  # from the number of corners
    "gg": 400,
    "best": 380,
    "check": 280,
    "detail": 560,
    "session": 360,
}
#: Width of the PNG pictures (the page's figures take the page's width). [px]
PICTURE_WIDTH_PX = 1200


def rgba(colour: str, alpha: float) -> str:
    """``#rrggbb`` with an opacity, as CSS ``rgba(...)``.

    >>> rgba("#B2182B", 0.25)
    'rgba(178,24,43,0.25)'
    """
    h = colour.lstrip("#")
    r, g, b = (int(h[i : i + 2], 16) for i in (0, 2, 4))
    return f"rgba({r},{g},{b},{alpha:g})"


# --------------------------------------------------------------------------- columns


class Columns:
    """Named arrays the figures share, rounded per column; written once into the page."""

    def __init__(self):
        self.arrays: dict[str, np.ndarray] = {}

    def add(self, name: str, values, decimals: int) -> dict:
        """Store ``values`` rounded to ``decimals`` and give the reference a trace uses."""
        a = np.round(np.asarray(values, dtype=np.float64), decimals) + 0.0
        self.arrays[name] = a
        return {"$col": name}

    def json(self) -> str:
        """The columns as a JSON object (NaN as null)."""
        parts = [
            f"{json.dumps(k)}:{json.dumps(a.tolist(), allow_nan=True)}"
            for k, a in self.arrays.items()
        ]
        return ("{" + ",".join(parts) + "}").replace("NaN", "null").replace("Infinity", "null")

    def resolve(self, obj):
        """``obj`` with every column reference replaced by its array (for drawing in Python)."""
        if isinstance(obj, dict):
            if set(obj) == {"$col"}:
                return self.arrays[obj["$col"]]
            return {k: self.resolve(v) for k, v in obj.items()}
        if isinstance(obj, list):
            return [self.resolve(v) for v in obj]
        return obj


@dataclass
class FigureSpec:
    """One figure: plotly.js ``data`` and ``layout``, and what the page says about it."""

    key: str  # short name, also the PNG's file name without ".png"
    title: str
    caption: str
    data: list
    layout: dict
    linked: bool = False  # x is the distance along the lap (zoomed with the others)
    subplots: list = field(default_factory=lambda: ["xy"])
    #: Layout keys replaced on a narrow screen (under 700 px), e.g. panels one above another.
    narrow: dict | None = None

    def as_json(self) -> dict:
        """What the page's script reads."""
        out = {
            "key": self.key,
            "data": self.data,
            "layout": self.layout,
            "linked": self.linked,
            "subplots": self.subplots,
        }
        if self.narrow:
            out["narrow"] = self.narrow
        return out


# --------------------------------------------------------------------------- along the lap


@dataclass
class LapAxis:
    """The stations of the lap views, with the stretch before the gate put in front.

    A corner whose segment runs across the gate is shown from its start (a negative
    distance: metres before the gate) to its end; the stations of that stretch are
    repeated in front of the lap, so every corner is one unbroken range.
    """

    order: np.ndarray  # station index of each point shown
    x: np.ndarray  # distance shown [m]: negative before the gate
    length_m: float

    @classmethod
    def of(cls, distance_m, length_m: float, corners) -> LapAxis:
        """The axis for these stations and corners (see the class notes)."""
        s = np.asarray(distance_m, dtype=np.float64)
        pad = max(
            [length_m - c["start_m"] for c in corners if c["end_m"] < c["start_m"]], default=0.0
        )
        before = np.flatnonzero(s >= length_m - pad) if pad > 0 else np.array([], dtype=np.int64)
        order = np.concatenate([before, np.arange(s.size)])
        x = np.concatenate([s[before] - length_m, s])
        return cls(order, x, float(length_m))

    def corner_range_m(self, corner) -> tuple[float, float]:
        """(from, to) of a corner's segment on this axis. [m]."""
        start, end = corner["start_m"], corner["end_m"]
        return (start - self.length_m, end) if end < start else (start, end)


def _axis(title: str, **kw) -> dict:
    out = {
        "title": {"text": title, "standoff": 6},
        "showgrid": True,
        "gridcolor": GRID,
        "zeroline": False,
        "linecolor": "#999999",
        "ticks": "outside",
        "ticklen": 4,
        "tickcolor": "#999999",
        "automargin": True,
    }
    out.update(kw)
    return out


def _layout(height: int, **kw) -> dict:
    out = {
        "height": height,
        "margin": {"l": 64, "r": 16, "t": 28, "b": 44},
        "font": {"family": FONT, "size": 12, "color": INK},
        "paper_bgcolor": "#ffffff",
        "plot_bgcolor": "#ffffff",
        "showlegend": True,
        "legend": {
            "orientation": "h",
            "x": 0,
            "xanchor": "left",
            "y": 1.0,
            "yanchor": "bottom",
            "font": {"size": 11},
        },
    }
    out.update(kw)
    return out


def _distance_title(units: Units) -> str:
    return f"distance from the gate [{units.distance}]"


def _corner_marks(axis: LapAxis, corners, units: Units, *, yref: str = "paper"):
    """Shapes shading every other corner segment and its name at the apex."""
    shapes, notes = [], []
    k = 1.0 / units.m_per_distance
    for i, c in enumerate(corners):
        lo, hi = axis.corner_range_m(c)
        pieces = [(lo, hi)]
        if lo < 0:  # also shade its end after the gate and its start before the lap's end
            pieces += [(lo + axis.length_m, axis.length_m)]
        if i % 2 == 0:
            shapes += [
                {
                    "type": "rect",
                    "xref": "x",
                    "yref": yref,
                    "x0": a * k,
                    "x1": b * k,
                    "y0": 0,
                    "y1": 1,
                    "fillcolor": BAND,
                    "line": {"width": 0},
                    "layer": "below",
                }
                for a, b in pieces
            ]
        near = notes and abs(c["apex_m"] * k - notes[-1]["x"]) < 0.025 * axis.length_m * k
        notes.append(
            {
                "x": c["apex_m"] * k,
                "y": 0.92 if near and notes[-1]["y"] == 1.0 else 1.0,
                "xref": "x",
                "yref": yref,
                "yanchor": "top",
                "text": c["name"],
                "showarrow": False,
                "font": {"size": 10, "color": INK},
            }
        )
    return shapes, notes


def _lap_layout(height: int, axis: LapAxis, corners, units: Units, ytitle: str, **yaxis) -> dict:
    k = 1.0 / units.m_per_distance
    shapes, notes = _corner_marks(axis, corners, units)
    return _layout(
        height,
        hovermode="x unified",
        xaxis=_axis(_distance_title(units), range=[0.0, axis.length_m * k]),
        yaxis=_axis(ytitle, **yaxis),
        shapes=shapes,
        annotations=notes,
    )


def _line(x, y, name: str, colour: str, width: float, **kw) -> dict:
    trace = {
        "type": "scatter",
        "mode": "lines",
        "x": x,
        "y": y,
        "name": name,
        "line": {"color": colour, "width": width},
    }
    trace.update(kw)
    return trace


@dataclass
class LapData:
    """What the lap views draw: the view's arrays as shown, in the page's units."""

    axis: LapAxis
    x: dict  # column reference of the distance shown
    corners: list
    units: Units
    lap_name: str
    every: int = 1  # the session's other laps: every n-th point
    x_laps: dict | None = None  # column reference of their distance


#: The session's other laps are drawn every this many metres (a speed trace is smooth
#: at that step; 40 laps of a long session stay a small part of the page). [m]
OTHER_LAP_STEP_M = 4.0


def lap_data(cols: Columns, v, units: Units) -> LapData:
    """The distance axis of the lap views, stored once in ``cols``."""
    axis = LapAxis.of(v.distance_m, v.length_m, v.corners)
    decimals = 1 if units.distance == "m" else 0
    x = cols.add("x", units.distance_value(axis.x), decimals)
    s = np.asarray(v.distance_m, dtype=np.float64)
    spacing = float(np.median(np.diff(s))) if s.size > 1 else 1.0
    every = max(1, round(OTHER_LAP_STEP_M / max(spacing, 1e-9)))
    x_laps = cols.add("x_laps", units.distance_value(axis.x[::every]), decimals)
    return LapData(axis, x, v.corners, units, f"lap {v.lap_number}", every, x_laps)


def _series(cols: Columns, d: LapData, name: str, values, decimals: int) -> dict:
    return cols.add(name, np.asarray(values, dtype=np.float64)[d.axis.order], decimals)


def _other_lap(cols: Columns, d: LapData, key: str, lap, values, decimals: int) -> dict:
    """One of the session's other laps as a grey trace, off until switched on."""
    y = cols.add(
        f"{key}_lap{lap.number}",
        np.asarray(values, dtype=np.float64)[d.axis.order[:: d.every]],
        decimals,
    )
    return _line(
        d.x_laps,
        y,
        f"lap {lap.number}",
        OTHER_LAPS,
        1.0,
        visible="legendonly",
        meta={"lap": lap.number},
    )


def speed_figure(cols: Columns, d: LapData, v, other_laps=()) -> FigureSpec:
    """Speed along the lap: the ideal, your lap and (switched off at first) the other laps."""
    u = d.units
    data = [
        _line(
            d.x,
            _series(cols, d, "speed_ideal", u.speed_value(v.speed_ideal_m_s), 1),
            "ideal (your envelope on your line)",
            IDEAL,
            2.0,
        ),
        _line(
            d.x,
            _series(cols, d, "speed_lap", u.speed_value(v.speed_real_m_s), 1),
            f"{d.lap_name} (analysed)",
            LAP,
            2.0,
        ),
    ]
    data += [
        _other_lap(cols, d, "speed", lap, u.speed_value(lap.speed_m_s), 1) for lap in other_laps
    ]
    layout = _lap_layout(HEIGHT_PX["speed"], d.axis, d.corners, u, f"speed [{u.speed}]")
    return FigureSpec(
        "speed",
        "Speed along the lap",
        "Your lap against the ideal on your own line. The session's other laps can be "
        "switched on (legend or the lap switches above); their distance is scaled to this "
        "lap's length.",
        data,
        layout,
        linked=True,
    )


def delta_figure(cols: Columns, d: LapData, v, other_laps=()) -> FigureSpec:
    """Time delta along the lap: where the ideal pulls away (red) or falls back (blue)."""
    delta = np.asarray(v.time_delta_s, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        behind, ahead = np.maximum(delta, 0.0), np.minimum(delta, 0.0)
    zero = cols.add("zero", np.zeros(d.axis.order.size), 0)
    data = [
        _line(
            d.x,
            _series(cols, d, "delta_behind", behind, 3),
            "behind the ideal (time lost)",
            LOSS,
            0.0,
            fill="tozeroy",
            fillcolor=rgba(LOSS, 0.25),
            hoverinfo="skip",
        ),
        _line(
            d.x,
            _series(cols, d, "delta_ahead", ahead, 3),
            "ahead of the ideal (time gained)",
            GAIN,
            0.0,
            fill="tozeroy",
            fillcolor=rgba(GAIN, 0.25),
            hoverinfo="skip",
        ),
        _line(d.x, zero, "ideal (0 s)", IDEAL, 1.2),
        _line(d.x, _series(cols, d, "delta_lap", delta, 3), f"{d.lap_name} (analysed)", LAP, 2.0),
    ]
    data += [_other_lap(cols, d, "delta", lap, lap.time_delta_s, 3) for lap in other_laps]
    layout = _lap_layout(
        HEIGHT_PX["delta"], d.axis, d.corners, d.units, "time delta [s] (+ = behind)"
    )
    return FigureSpec(
        "time_delta",
        "Time delta: your lap minus the ideal",
        "Rising: the ideal pulls away (time lost, red); falling: you gain on it (blue).",
        data,
        layout,
        linked=True,
    )


def pedals_figure(cols: Columns, d: LapData, real: dict, ideal: dict) -> FigureSpec:
    """Brake and throttle along the lap, real against ideal, in two rows on one axis."""
    data = []
    for key, yaxis, decimals in (("brake", "y", 1), ("throttle", "y2", 1)):
        for who, colour, width in ((ideal, IDEAL, 1.6), (real, LAP, 1.4)):
            tag = "ideal" if who is ideal else "lap"
            trace = _line(
                d.x,
                _series(cols, d, f"{key}_{tag}", 100.0 * np.asarray(who[key]), decimals),
                who[f"{key}_label"],
                colour,
                width,
                yaxis=yaxis,
            )
            if key == "throttle":
                trace["line"]["dash"] = "dot" if who is ideal else "solid"
            data.append(trace)
    layout = _lap_layout(HEIGHT_PX["pedals"], d.axis, d.corners, d.units, "brake [%]")
    layout["yaxis"].update(domain=[0.54, 1.0], range=[-5, 110])
    layout["yaxis2"] = _axis("throttle [%]", domain=[0.0, 0.46], range=[-5, 110], anchor="x")
    layout["xaxis"]["anchor"] = "y2"
    layout["hoversubplots"] = "axis"
    for s in layout["shapes"]:
        s["yref"] = "paper"
    return FigureSpec(
        "pedals",
        "Brake and throttle",
        "Your pedals (or, without a pedal channel, the share of the limit your "
        "acceleration needs) against the share of the limit the ideal uses.",
        data,
        layout,
        linked=True,
        subplots=["xy", "xy2"],
    )


def curvature_check_figure(cols: Columns, d: LapData, v, title: str) -> FigureSpec:
    """Data check: the rebuilt line's curvature against a_y/v² and yaw rate/v."""
    check = v.curvature_check
    data = [
        _line(
            d.x,
            _series(cols, d, "k_line", 1000.0 * v.curvature_1_m, 3),
            "rebuilt line (GNSS + inertial)",
            "#555555",
            1.6,
        )
    ]
    for values, colour, label, key in (
        (check.from_accel_lat_1_m, CHECK_AY, "a_y / v²", "k_ay"),
        (check.from_yaw_rate_1_m, CHECK_YAW, "yaw rate / v", "k_yaw"),
    ):
        values = np.asarray(values, dtype=np.float64)
        if np.isfinite(values).any():
            data.append(_line(d.x, _series(cols, d, key, 1000.0 * values, 3), label, colour, 1.0))
    layout = _lap_layout(
        HEIGHT_PX["check"], d.axis, d.corners, d.units, "curvature [1/km] (+ left)"
    )
    return FigureSpec(
        "data_check",
        title,
        "The rebuilt line's curvature against lateral acceleration / v² and yaw rate / v. "
        "They measure the same thing and should lie on one another; where they part, the "
        "line and every result on it are less certain.",
        data,
        layout,
        linked=True,
    )


# --------------------------------------------------------------------------- map


def time_loss_rate(distance_m, time_delta_s, *, window_m: float = 20.0, closed: bool = True):
    """Local rate of time loss d(delta)/ds, smoothed over ``window_m``.

    Parameters
    ----------
    distance_m, time_delta_s : array-like
        Stations [m] and time delta (+ = behind) [s].
    window_m : float
        Width of the moving average (wrapping round a closed lap). [m]
    closed : bool
        Whether the lap is a loop (the average then wraps).

    Returns
    -------
    numpy.ndarray
        Time lost per metre at each station, + = losing. [s/m]

    Examples
    --------
    >>> s = np.arange(0.0, 100.0, 1.0)
    >>> bool(np.allclose(time_loss_rate(s, 0.002 * s, closed=False)[10:-10], 0.002))
    True
    """
    s = np.asarray(distance_m, dtype=np.float64)
    d = np.asarray(time_delta_s, dtype=np.float64)
    rate = np.gradient(d, s)
    step = float(np.median(np.diff(s))) if s.size > 1 else 1.0
    n = max(1, round(window_m / step))
    if n <= 1 or s.size < 3 * n:
        return rate
    kernel = np.ones(n) / n
    if closed:
        padded = np.concatenate([rate[-n:], rate, rate[:n]])
        return np.convolve(padded, kernel, mode="same")[n:-n]
    return np.convolve(rate, kernel, mode="same")


def even_ticks(limit: float) -> tuple[float, list[float]]:
    """A symmetric scale about zero with even ticks: (the scale's end, its ticks).

    The end is the next multiple of a 1-2-2.5-5 step at or above ``limit``, with two to
    four steps each side of zero, so zero sits in the middle and every step is equal.

    >>> even_ticks(0.37)
    (0.4, [-0.4, -0.2, 0.0, 0.2, 0.4])
    >>> even_ticks(1.3)[1]
    [-1.5, -1.0, -0.5, 0.0, 0.5, 1.0, 1.5]
    """
    limit = max(float(limit), 1e-6)
    step = limit / 3.0
    mag = 10.0 ** math.floor(math.log10(step))
    step = next(m * mag for m in (1.0, 2.0, 2.5, 5.0, 10.0) if m * mag >= step - 1e-12)
    n = max(1, math.ceil(limit / step - 1e-9))
    end = round(n * step, 10)
    ticks = [round(i * step, 10) + 0.0 for i in range(-n, n + 1)]
    return end, ticks


def _outside_points(x, y, s, corners, span):
    """Where each corner's name goes on the map: 4 % of the map's span outside its apex."""
    tx, ty = np.gradient(x), np.gradient(y)
    kappa = np.gradient(np.unwrap(np.arctan2(ty, tx))) / np.maximum(np.hypot(tx, ty), 1e-9)
    out = []
    for c in corners:
        i = int(np.argmin(np.abs(s - c["apex_m"])))
        norm = math.hypot(tx[i], ty[i]) or 1.0
        side = -1.0 if kappa[i] >= 0 else 1.0  # the outside of a left bend is to the right
        off = 0.04 * span
        out.append(
            (x[i] + off * (-ty[i] / norm * side), y[i] + off * (tx[i] / norm * side), c["name"])
        )
    return out


def map_figure(cols: Columns, v, units: Units) -> FigureSpec:
    """The line coloured by the local rate of time loss; red losing, blue gaining."""
    k = 1.0 / units.m_per_distance
    rate = time_loss_rate(v.distance_m, v.time_delta_s) * 1e3 * units.m_per_distance  # ms/unit
    every = max(1, math.ceil(np.asarray(v.distance_m).size / MAP_POINTS))
    x, y = np.asarray(v.x_m)[::every] * k, np.asarray(v.y_m)[::every] * k
    s, rate = np.asarray(v.distance_m)[::every], rate[::every]
    span = max(np.ptp(x), np.ptp(y), 1.0)
    data = [
        _line(
            cols.add("map_x_closed", np.append(x, x[0]), 1),
            cols.add("map_y_closed", np.append(y, y[0]), 1),
            "your line",
            "#C8C8C8",
            9.0,
            hoverinfo="skip",
        ),
        _line(
            [], [], "stretch shown in the other views", STRETCH, 14.0, hoverinfo="skip", opacity=0.9
        ),
        _loss_markers(cols, x, y, s * k, rate, units),
        {
            "type": "scatter",
            "mode": "markers",
            "x": [float(x[0])],
            "y": [float(y[0])],
            "name": "start/finish",
            "marker": {"symbol": "square", "size": 11, "color": INK},
            "hoverinfo": "name",
        },
    ]
    data += _better_line_traces(cols, v, every, k)
    return FigureSpec(
        "map",
        "Where the time is left on the lap",
        "The line coloured by the local rate of time loss: red where the ideal pulls away, "
        "blue where you gain on it, white where you are level (the scale is centred on "
        "zero). The arrow shows the direction of travel from the start/finish square. Drag "
        "a box on the map to show that stretch in the other views."
        + _better_line_words(getattr(v, "line", None)),
        data,
        _map_layout(x, y, span, _map_notes(x, y, s, v.corners, span)),
    )


def _loss_markers(cols: Columns, x, y, shown_s, rate, units: Units) -> dict:
    """The map's points coloured by the rate of time loss [ms per distance unit], with its colour bar (the scale centred on zero, to the 98th percentile)."""
    finite = np.abs(rate[np.isfinite(rate)])
    end, ticks = even_ticks(float(np.percentile(finite, 98)) if finite.size else 0.1)
    unit = f"ms/{units.distance}"
    return {
        "type": "scatter",
        "mode": "markers",
        "x": cols.add("map_x", x, 1),
        "y": cols.add("map_y", y, 1),
        "name": "time lost per " + units.distance,
        "showlegend": False,  # the colour bar under the map is its legend
        "customdata": cols.add("map_s", shown_s, 1),
        "hovertemplate": f"%{{customdata}} {units.distance}<br>%{{marker.color:.2f}} {unit}"
        "<extra></extra>",
        "marker": {
            "color": cols.add("map_rate", np.clip(rate, -end, end), 3),
            "colorscale": LOSS_SCALE,
            "cmin": -end,
            "cmax": end,
            "cmid": 0.0,
            "size": 5,
            "showscale": True,
            "colorbar": {
                "orientation": "h",
                "x": 0.5,
                "xanchor": "center",
                "y": -0.02,
                "yanchor": "top",
                "len": 0.8,
                "thickness": 14,
                "tickmode": "array",
                "tickvals": ticks,
                "ticktext": [f"{t:+g}" if t else "0" for t in ticks],
                "title": {"text": f"time lost [{unit}]: red losing, blue gaining", "side": "top"},
            },
        },
    }


def _map_notes(x, y, s, corners, span) -> list[dict]:
    """The map's annotations: the arrow of the direction of travel from the start/finish, and each corner's name outside its apex."""
    j = min(max(int(np.searchsorted(s, s[0] + 0.04 * (s[-1] - s[0]))), 1), x.size - 1)
    arrow = {
        "x": float(x[j]),
        "y": float(y[j]),
        "ax": float(x[0]),
        "ay": float(y[0]),
        "xref": "x",
        "yref": "y",
        "axref": "x",
        "ayref": "y",
        "showarrow": True,
        "arrowhead": 2,
        "arrowwidth": 1.5,
        "arrowcolor": INK,
        "text": "",
    }
    names = [
        {
            "x": float(nx),
            "y": float(ny),
            "text": f"<b>{name}</b>",
            "showarrow": False,
            "font": {"size": 11, "color": INK},
        }
        for nx, ny, name in _outside_points(x, y, s, corners, span)
    ]
    return [arrow, *names]


def _map_layout(x, y, span, notes) -> dict:
    """The map's layout: equal scales, no axes, 8 % of the span round the line, box selection."""
    pad = 0.08 * span
    return _layout(
        HEIGHT_PX["map"],
        hovermode="closest",
        dragmode="select",
        margin={"l": 8, "r": 8, "t": 28, "b": 70},
        xaxis={
            "visible": False,
            "range": [float(x.min() - pad), float(x.max() + pad)],
            "constrain": "domain",
        },
        yaxis={
            "visible": False,
            "range": [float(y.min() - pad), float(y.max() + pad)],
            "scaleanchor": "x",
            "scaleratio": 1,
        },
        annotations=notes,
    )


def _better_line_words(line) -> str:
    """The map caption's sentence on the better line; empty without one."""
    if line is None:
        return ""
    where = (
        "between the track's edges"
        if line.corridor.source == "track edges"
        else "inside the band the session's laps drove"
    )
    return (
        f" The green line is a better line {where} (thin grey lines: the corridor it kept "
        "to); click a corner to see it close."
    )


def _better_line_traces(cols: Columns, v, every: int, k: float) -> list:
    """The corridor's edges and the better line on the map (after the map's own traces, whose order the page's script relies on); none without a better line."""
    line = getattr(v, "line", None)
    if line is None or line.corridor_xy is None:
        return []

    def closed(a, name):
        a = np.asarray(a)[::every] * k
        return cols.add(name, np.append(a, a[0]), 1)

    lx, ly, rx, ry = line.corridor_xy
    edge = {"hoverinfo": "skip", "line": {"color": "#9A9A9A", "width": 1.0}}
    return [
        _line(
            closed(lx, "corridor_lx"), closed(ly, "corridor_ly"), "corridor", "#9A9A9A", 1.0, **edge
        ),
        _line(
            closed(rx, "corridor_rx"),
            closed(ry, "corridor_ry"),
            "corridor",
            "#9A9A9A",
            1.0,
            showlegend=False,
            **edge,
        ),
        _line(
            closed(line.x_m, "better_x"),
            closed(line.y_m, "better_y"),
            "better line",
            BETTER,
            2.0,
            hoverinfo="skip",
        ),
    ]


# --------------------------------------------------------------------------- per corner


def time_left_figure(corners) -> FigureSpec:
    """Time left per corner, ranked, largest on top; red where the ideal is quicker."""
    ranked = sorted(corners, key=lambda r: -r["time_left_s"])
    groups = (
        ("time left (the ideal is quicker)", LOSS, lambda t: t > 0),
        ("quicker than the ideal", GAIN, lambda t: t < 0),
        ("even (0.00 s)", EVEN, lambda t: t == 0),
    )
    data = []
    for name, colour, keep in groups:
        rows = [r for r in ranked if keep(_hundredths_value(r["time_left_s"]))]
        if not rows:
            continue
        data.append(
            {
                "type": "bar",
                "orientation": "h",
                "name": name,
                "x": [round(float(r["time_left_s"]), 3) for r in rows],
                "y": [r["name"] for r in rows],
                "text": [f"{signed_time(r['time_left_s'])} s" for r in rows],
                "textposition": "outside",
                "cliponaxis": False,
                "marker": {"color": colour},
                "hovertemplate": "%{y}: %{text}<extra></extra>",
            }
        )
    total = sum(float(r["time_left_s"]) for r in ranked)
    values = [abs(float(r["time_left_s"])) for r in ranked] or [0.0]
    top = max(values) * 1.25 + 1e-3
    lo = min([float(r["time_left_s"]) for r in ranked] + [0.0])
    layout = _layout(
        max(220, 26 * len(ranked) + 90),
        hovermode="closest",
        barmode="overlay",
        bargap=0.3,
        xaxis=_axis(
            "time left to the ideal [s]",
            range=[lo * 1.3 - 0.12 * top if lo < 0 else -0.02 * top, top],
            zeroline=True,
            zerolinecolor="#999999",
        ),
        yaxis=_axis(
            "",
            categoryorder="array",
            categoryarray=[r["name"] for r in ranked],
            autorange="reversed",
            showgrid=False,
        ),
    )
    return FigureSpec(
        "time_left",
        f"Time left per corner, ranked (total {signed_time(total)} s)",
        "Red: the ideal is quicker through the corner by that much; blue: you were quicker "
        "than the ideal there; grey: level to the hundredth.",
        data,
        layout,
    )


def _hundredths_value(t: float) -> float:
    """The time as shown, to 0.01 s (0 when it rounds to 0.00). [s]."""
    return round(float(t), 2) + 0.0


# --------------------------------------------------------------------------- g-g diagram


#: At most this many of a band's samples are drawn as dots (every n-th); the hull and the
#: counts use all of them.
GG_DOTS_PER_BAND = 300
#: At most this many points of the line are drawn as coloured dots on the map. [-]
MAP_POINTS = 1200


def _gg_band_traces(b, i: int, fit) -> list:
    """The traces of one speed band's panel, back to front: the grip not used, your samples and their reach, what the ideal asks for and the envelope."""
    trace = _panel_trace(i)
    return [*_unused_grip(b, trace), *_your_reach(b, fit, trace), *_band_limits(b, trace, i == 0)]


def _panel_trace(i: int):
    """A maker of scatter traces on panel ``i``'s axes (legend entries from the first panel only)."""
    ax_x, ax_y = ("x", "y") if i == 0 else (f"x{i + 1}", f"y{i + 1}")
    common = {"xaxis": ax_x, "yaxis": ax_y, "showlegend": i == 0}

    def trace(name, **kw):
        t = {"type": "scatter", "name": name, "legendgroup": name, **common}
        t.update(kw)
        return t

    return trace


def _unused_grip(b, trace) -> list:
    """The ring between what the ideal asks for and your samples' reach (none without both)."""
    from limitlap.gg import REACH_ANGLES_RAD

    if b.asked_reach_m_s2 is None or b.sample_reach_m_s2 is None:
        return []
    cos, sin = np.cos(REACH_ANGLES_RAD), np.sin(REACH_ANGLES_RAD)
    g = 1.0 / G0_M_S2
    outer = b.asked_reach_m_s2 * g
    inner = np.minimum(b.sample_reach_m_s2 * g, outer)
    ring_x = np.concatenate([outer * cos, (inner * cos)[::-1]])
    ring_y = np.concatenate([outer * sin, (inner * sin)[::-1]])
    return [
        trace(
            "grip not used where the ideal asks for it",
            mode="lines",
            x=_r(ring_x),
            y=_r(ring_y),
            fill="toself",
            fillcolor=rgba(LOSS, 0.3),
            line={"width": 0},
            hoverinfo="skip",
        )
    ]


def _your_reach(b, fit, trace) -> list:
    """Your samples (at most :data:`GG_DOTS_PER_BAND`), the fit's boundary points and the reach of your samples."""
    g = 1.0 / G0_M_S2
    step = max(1, math.ceil(b.sample_lat_m_s2.size / GG_DOTS_PER_BAND))
    out = [
        trace(
            "your samples",
            mode="markers",
            x=_r(b.sample_lat_m_s2[::step] * g),
            y=_r(b.sample_lon_m_s2[::step] * g),
            marker={"color": LAP, "size": 3, "opacity": 0.35},
            hoverinfo="skip",
        )
    ]
    if fit is not None and fit[0].size:
        out.append(
            trace(
                "boundary points of the envelope fit",
                mode="markers",
                x=_r(fit[0] * g),
                y=_r(fit[1] * g),
                marker={
                    "color": "#555555",
                    "size": 6,
                    "symbol": "x-thin",
                    "line": {"width": 1.2, "color": "#555555"},
                },
                hoverinfo="skip",
            )
        )
    if b.hull_lat_m_s2 is not None:
        out.append(
            trace(
                "reach of your samples",
                mode="lines",
                x=_r(b.hull_lat_m_s2 * g),
                y=_r(b.hull_lon_m_s2 * g),
                line={"color": LAP, "width": 1.8},
                hoverinfo="skip",
            )
        )
    return out


def _band_limits(b, trace, first: bool) -> list:
    """What the ideal asks for at the band's speeds, and the envelope at its lowest, highest and middle speed."""
    from limitlap.gg import REACH_ANGLES_RAD

    g = 1.0 / G0_M_S2
    out = []
    if b.asked_reach_m_s2 is not None:
        r = np.where(b.asked_reach_m_s2 > 0, b.asked_reach_m_s2 * g, np.nan)
        out.append(
            trace(
                "what the ideal asks for at these speeds",
                mode="lines",
                x=_r(r * np.cos(REACH_ANGLES_RAD)),
                y=_r(r * np.sin(REACH_ANGLES_RAD)),
                line={"color": IDEAL, "width": 1.2, "dash": "dot"},
                hoverinfo="skip",
            )
        )
    for j, (lon, lat) in enumerate(b.edge_boundaries):
        out.append(
            trace(
                "envelope at the band's lowest and highest speed",
                mode="lines",
                x=_r(lat * g),
                y=_r(lon * g),
                line={"color": IDEAL, "width": 0.8, "dash": "dash"},
                opacity=0.6,
                hoverinfo="skip",
                showlegend=first and j == 0,
            )
        )
    out.append(
        trace(
            "envelope at the band's middle speed",
            mode="lines",
            x=_r(b.envelope_lat_m_s2 * g),
            y=_r(b.envelope_lon_m_s2 * g),
            line={"color": IDEAL, "width": 2.0},
            hoverinfo="skip",
        )
    )
    return out


def _r(a, decimals: int = 3) -> list:
    """A short array as a JSON-ready list, rounded, NaN as None."""
    a = np.round(np.asarray(a, dtype=np.float64), decimals) + 0.0
    return [None if not math.isfinite(x) else x for x in a.tolist()]


def gg_title(b, units: Units) -> str:
    """A band's panel title: its speeds and what the lap left unused there."""
    lo, hi = units.speed_value(b.speed_lo_m_s), units.speed_value(b.speed_hi_m_s)
    title = f"{lo:.0f}–{hi:.0f} {units.speed}"
    if math.isfinite(b.unused_share):
        title += f": {100 * b.unused_share:.0f} % unused"
    elif b.hull_lat_m_s2 is not None:
        title += ": the ideal does not run at these speeds"
    if math.isfinite(b.beyond_share) and b.beyond_share >= 0.005:
        title += f"<br>samples beyond the envelope<br>in {100 * b.beyond_share:.0f} % of directions"
    return title


def gg_figure(bands, units: Units, fit_points=None) -> FigureSpec:
    """g-g diagram per speed band: envelope, the lap's samples, the grip left unused."""
    data, notes, layout_axes = [], [], {}
    n = max(len(bands), 1)
    gap = 0.04
    width = (1.0 - gap * (n - 1)) / n
    lim = 0.0
    for i, b in enumerate(bands):
        fit = None
        if fit_points:
            fv, fy, fx = (
                np.concatenate([np.asarray(fp[k], dtype=np.float64) for fp in fit_points])
                for k in ("speed_m_s", "accel_lat_m_s2", "accel_lon_m_s2")
            )
            sel = (fv >= b.speed_lo_m_s) & (fv < b.speed_hi_m_s)
            fit = (fy[sel], fx[sel])
        data += _gg_band_traces(b, i, fit)
        lim = max(
            lim,
            float(np.max(np.abs(b.envelope_lat_m_s2))),
            float(np.max(np.abs(b.envelope_lon_m_s2))),
        )
        x0 = i * (width + gap)
        sx = "" if i == 0 else str(i + 1)
        layout_axes[f"xaxis{sx}"] = _axis(
            "lateral [g] (+ left)",
            domain=[x0, x0 + width],
            anchor=f"y{sx}",
            zeroline=True,
            zerolinecolor="#AAAAAA",
        )
        layout_axes[f"yaxis{sx}"] = _axis(
            "longitudinal [g] (+ forward)" if i == 0 else "",
            anchor=f"x{sx}",
            scaleanchor=f"x{sx}",
            scaleratio=1,
            zeroline=True,
            zerolinecolor="#AAAAAA",
            showticklabels=i == 0,
        )
        notes.append(
            {
                "text": gg_title(b, units),
                "x": x0 + 0.5 * width,
                "y": 1.0,
                "xref": "paper",
                "yref": "paper",
                "yanchor": "bottom",
                "showarrow": False,
                "font": {"size": 11},
            }
        )
    lim = 1.08 * lim / G0_M_S2
    for ax in layout_axes.values():
        ax["range"] = [-lim, lim]
    layout = _layout(
        HEIGHT_PX["gg"],
        hovermode=False,
        margin={"l": 64, "r": 16, "t": 48, "b": 44},
        legend={"orientation": "h", "x": 0, "y": -0.18, "yanchor": "top", "font": {"size": 11}},
        annotations=notes,
        **layout_axes,
    )
    layout["height"] = HEIGHT_PX["gg"] + 60
    narrow = _gg_narrow(layout, n)
    return FigureSpec(
        "gg",
        "g-g diagram by speed band",
        "Your lap's samples against the envelope. Grip is counted as unused only in the "
        "directions and at the speeds the ideal lap on your line asks for (dotted line: "
        "the reach of the ideal's own samples in the band), so a direction no corner "
        "needs at these speeds counts nothing. The shaded area is that grip: asked for by "
        "the ideal, not reached by your samples. Where your samples reach beyond the envelope "
        "the title says in how many directions: the envelope is fitted with the accelerations' "
        "noise taken out, so noisy samples on the limit scatter a little outside it.",
        data,
        layout,
        subplots=[("xy" if i == 0 else f"x{i + 1}y{i + 1}") for i in range(n)],
        narrow=narrow,
    )


def _gg_narrow(layout: dict, n: int) -> dict:
    """The g-g layout on a narrow screen: one speed band a row, the legend below."""
    row_px, legend_px = 330, 150
    height = n * row_px + legend_px
    plot = 1.0 - legend_px / height  # the rows' share of the paper, legend below
    out = {"height": height, "margin": {"l": 56, "r": 10, "t": 40, "b": legend_px}}
    notes = []
    for i in range(n):
        sx = "" if i == 0 else str(i + 1)
        top = 1.0 - i / n
        bottom = top - 1.0 / n + 0.12 / n
        out[f"xaxis{sx}"] = {**layout[f"xaxis{sx}"], "domain": [0.0, 1.0]}
        out[f"yaxis{sx}"] = {
            **layout[f"yaxis{sx}"],
            "domain": [bottom, top - 0.1 / n],
            "showticklabels": True,
            "title": {"text": "longitudinal [g]", "standoff": 6},
        }
        notes.append({**layout["annotations"][i], "x": 0.5, "y": top - 0.1 / n})
    out["annotations"] = notes
    out["legend"] = {**layout["legend"], "y": -0.02 * plot, "yanchor": "top"}
    return out


# --------------------------------------------------------------------------- best of laps


def best_figure(corners, lap_time_s, best_time_s, ideal_time_s, lap_label) -> FigureSpec:
    """Best of the driver's own laps beside the analysed lap and the limit."""
    names = [r["name"] for r in corners]
    above = [
        t - ideal_time_s if t is not None and math.isfinite(t) else None
        for t in (lap_time_s, best_time_s, ideal_time_s)
    ]
    data = _whole_lap_bars(lap_label, (lap_time_s, best_time_s, ideal_time_s), above)
    data += _corner_bars(corners, names, lap_label)
    top = max([a for a in above if a is not None] + [1e-3])
    layout = _layout(
        HEIGHT_PX["best"],
        hovermode="closest",
        barmode="group",
        margin={"l": 120, "r": 16, "t": 48, "b": 60},
        xaxis=_axis("time above the ideal lap [s]", domain=[0.0, 0.3], range=[0, top * 1.9]),
        yaxis=_axis("", autorange="reversed", showgrid=False),
        xaxis2=_axis(
            "",
            domain=[0.42, 1.0],
            anchor="y2",
            showgrid=False,
            categoryorder="array",
            categoryarray=names,
        ),
        yaxis2=_axis("time above the ideal [s]", anchor="x2"),
        legend={"orientation": "h", "x": 0.42, "y": 1.0, "yanchor": "bottom", "font": {"size": 11}},
    )
    return FigureSpec(
        "best_of_laps",
        "Your best segments from the session beside the limit",
        "Left: the whole lap; right: per corner, what you have already done against what "
        "the grip allows.",
        data,
        layout,
        subplots=["xy", "x2y2"],
    )


def _whole_lap_bars(lap_label, times, above) -> list:
    """The left panel: the analysed lap, the best of your laps and the ideal, each as its time above the ideal."""
    whole = [lap_label, "best of your laps", "ideal"]
    texts = [
        lap_time(t, decimals=2) + (f" (+{a:.2f} s)" if a else "")
        if a is not None
        else NOT_AVAILABLE
        for t, a in zip(times, above, strict=True)
    ]
    return [
        {
            "type": "bar",
            "orientation": "h",
            "name": name,
            "x": [0.0 if a is None else round(a, 3)],
            "y": [name],
            "text": [text],
            "textposition": "outside",
            "cliponaxis": False,
            "marker": {"color": colour},
            "xaxis": "x",
            "yaxis": "y",
            "showlegend": False,
            "hovertemplate": "%{y}: %{text}<extra></extra>",
        }
        for name, a, text, colour in zip(whole, above, texts, (LAP, BEST, IDEAL), strict=True)
    ]


def _corner_bars(corners, names, lap_label) -> list:
    """The right panel: each corner's time above the ideal on the analysed lap and in your best segment, and the ideal's zero line."""
    this = [round(r["actual_s"] - r["ideal_s"], 3) for r in corners]
    best = [
        round(r["best_s"] - r["ideal_s"], 3) if math.isfinite(r.get("best_s", math.nan)) else None
        for r in corners
    ]
    return [
        {
            "type": "bar",
            "name": f"{lap_label} above the ideal",
            "x": names,
            "y": this,
            "marker": {"color": LAP},
            "xaxis": "x2",
            "yaxis": "y2",
            "hovertemplate": "%{x}: %{y:.2f} s<extra>" + lap_label + "</extra>",
        },
        {
            "type": "bar",
            "name": "your best segment above the ideal",
            "x": names,
            "y": best,
            "marker": {"color": BEST},
            "xaxis": "x2",
            "yaxis": "y2",
            "hovertemplate": "%{x}: %{y:.2f} s<extra>best</extra>",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "name": "ideal (0 s)",
            "x": [names[0], names[-1]] if names else [],
            "y": [0, 0],
            "line": {"color": IDEAL, "width": 1.5},
            "xaxis": "x2",
            "yaxis": "y2",
            "hoverinfo": "skip",
        },
    ]


# --------------------------------------------------------------------------- corner detail (PNG)


def _window(distance_m, start_m, end_m, length_m):
    """Indices of a corner segment in driving order and its distance unwrapped past the gate."""
    s = np.asarray(distance_m, dtype=np.float64)
    if end_m >= start_m:
        idx = np.flatnonzero((s >= start_m) & (s <= end_m))
        return idx, s[idx]
    first = np.flatnonzero(s >= start_m)
    second = np.flatnonzero(s <= end_m)
    idx = np.concatenate([first, second])
    return idx, np.concatenate([s[first], s[second] + length_m])


def detail_figure(corner, v, real: dict, ideal: dict, units: Units, key: str) -> FigureSpec:
    """Speed, brake and throttle over one corner, real against ideal (the PNG pictures).

    The page shows the same over any corner by zooming its lap views to it.
    """
    idx, s = _window(v.distance_m, corner["start_m"], corner["end_m"], v.length_m)
    if idx.size < 2:
        idx = np.arange(np.asarray(v.distance_m).size)
        s = np.asarray(v.distance_m, dtype=np.float64)
    k = 1.0 / units.m_per_distance
    x = _r(s * k, 1)
    rows = [
        ("speed", "y", [0.5, 1.0], f"speed [{units.speed}]", units.speed_value),
        ("brake", "y2", [0.26, 0.46], "brake [%]", lambda a: 100.0 * a),
        ("throttle", "y3", [0.0, 0.2], "throttle [%]", lambda a: 100.0 * a),
    ]
    data, layout_axes = [], {}
    for key_, yaxis, domain, title, conv in rows:
        for who, colour, width in ((ideal, IDEAL, 1.8), (real, LAP, 1.5)):
            tag = "ideal" if who is ideal else "lap"
            values = np.asarray(who["speed_m_s" if key_ == "speed" else key_])[idx]
            name = (
                ("ideal" if tag == "ideal" else f"lap {v.lap_number}")
                if key_ == "speed"
                else who[f"{key_}_label"]
            )
            data.append(_line(x, _r(conv(values), 2), name, colour, width, yaxis=yaxis))
        ax_name = "yaxis" if yaxis == "y" else f"yaxis{yaxis[1:]}"
        layout_axes[ax_name] = _axis(title, domain=domain, anchor="x")
        if key_ != "speed":
            layout_axes[ax_name]["range"] = [-5, 110]
    shapes = []
    for which, colour, word in (("ideal", IDEAL, "ideal brakes"), ("actual", LAP, "you brake")):
        points = [b for b in _brake_points(corner, which) if b is not None and math.isfinite(b)]
        for b in points:
            b = b + v.length_m if b < s[0] - 1e-9 else b
            shapes.append(_vline(b * k, colour, "dash"))
        if points:
            data.append(
                _line(
                    [None],
                    [None],
                    word,
                    colour,
                    1.0,
                    line={"color": colour, "width": 1.0, "dash": "dash"},
                )
            )
    apex = corner["apex_m"] + (v.length_m if corner["apex_m"] < s[0] - 1e-9 else 0.0)
    shapes.append(_vline(apex * k, "#777777", "dot"))
    data.append(
        _line(
            [None],
            [None],
            "apex",
            "#777777",
            1.0,
            line={"color": "#777777", "width": 1.0, "dash": "dot"},
        )
    )
    layout = _layout(
        HEIGHT_PX["detail"],
        hovermode="x unified",
        xaxis=_axis(
            f"distance from the start/finish gate [{units.distance}] (past the gate: lap "
            "length added)",
            anchor="y3",
        ),
        shapes=shapes,
        legend={"orientation": "h", "x": 0, "y": 1.0, "yanchor": "bottom", "font": {"size": 10}},
        margin={"l": 64, "r": 16, "t": 70, "b": 44},
        **layout_axes,
    )
    return FigureSpec(
        key, corner["plain"], corner["plain"], data, layout, subplots=["xy", "xy2", "xy3"]
    )


def _brake_points(corner: dict, which: str) -> list:
    """A corner's brake points (``actual`` or ``ideal``): every braking zone's, or the first only."""
    points = corner.get(f"brake_points_{which}_m")
    if points is None:
        points = (corner.get("_summary") or {}).get(f"brake_points_{which}_m")
    return list(points) if points is not None else [corner.get(f"brake_start_{which}_m")]


def _vline(x: float, colour: str, dash: str) -> dict:
    return {
        "type": "line",
        "xref": "x",
        "yref": "paper",
        "x0": x,
        "x1": x,
        "y0": 0,
        "y1": 1,
        "line": {"color": colour, "width": 1.0, "dash": dash},
    }


# --------------------------------------------------------------------------- target sheet

#: Style of the target sheet and the PNG pictures, applied only while one is built and
#: drawn (the caller's matplotlib settings are left as they were).
STYLE = {
    "font.size": 11,
    "axes.titlesize": 12,
    "axes.labelsize": 11,
    "axes.edgecolor": "#999999",
    "axes.grid": True,
    "grid.color": GRID,
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "legend.frameon": False,
    "svg.hashsalt": "limitlap",
}


# rcParams are one dict per process: threads (e.g. a Dask worker's) draw one sheet at a
# time, so one sheet's style context cannot end while another is being drawn.
STYLE_LOCK = threading.RLock()


def styled(draw):
    """Run a matplotlib figure function inside the sheets' style (imported on first use)."""

    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        import matplotlib

        with STYLE_LOCK, matplotlib.rc_context(STYLE):
            return draw(*args, **kwargs)

    return wrapper


def agg_figure(width_px: int, height_px: int, dpi: float):
    """A matplotlib figure of that size on its own Agg canvas (no pyplot)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_px / dpi, height_px / dpi), dpi=dpi)
    FigureCanvasAgg(fig)
    return fig


# --------------------------------------------------------------------------- the session


def session_figure(lap_numbers, grip_estimates, time_left_s, analysed: int) -> FigureSpec:
    """Grip found and time left against lap number, every lap timed gate to gate.

    Parameters
    ----------
    lap_numbers : sequence of int
        The laps. [-]
    grip_estimates : sequence of float or None
        Grip scale each lap showed against the envelope (None where unknown). [-]
    time_left_s : sequence of float
        Each lap's time left to the ideal on its own line. [s]
    analysed : int
        The analysed lap (drawn in the lap colour). [-]
    """
    n = [str(int(x)) for x in lap_numbers]
    k = [None if g is None or not math.isfinite(g) else round(float(g), 3) for g in grip_estimates]
    left = [None if t is None or not math.isfinite(t) else round(float(t), 3) for t in time_left_s]
    colours = [LAP if x == str(analysed) else OTHER_LAPS for x in n]
    known = [g for g in k if g is not None] or [1.0]
    lo, hi = min(known), max(known)
    pad = max(0.1 * (hi - lo), 0.05 - 0.5 * (hi - lo))  # lap-to-lap noise stays small
    data = [
        {
            "type": "scatter",
            "mode": "lines+markers",
            "name": "grip found",
            "x": n,
            "y": k,
            "line": {"color": BEST, "width": 1.5},
            "marker": {"color": colours, "size": 8},
            "xaxis": "x",
            "yaxis": "y",
            "hovertemplate": "lap %{x}: grip %{y:.2f}<extra></extra>",
        },
        {
            "type": "bar",
            "name": "time left to the ideal on the lap's own line",
            "x": n,
            "y": left,
            "marker": {"color": colours},
            "xaxis": "x2",
            "yaxis": "y2",
            "hovertemplate": "lap %{x}: %{y:.2f} s<extra></extra>",
        },
    ]
    laps = {"type": "category", "categoryorder": "array", "categoryarray": n}
    layout = _layout(
        HEIGHT_PX["session"],
        hovermode="closest",
        xaxis=_axis("", anchor="y", showticklabels=False, **laps),
        yaxis=_axis("grip found [-]", domain=[0.56, 1.0], range=[lo - pad, hi + pad]),
        xaxis2=_axis("lap number", anchor="y2", matches="x", **laps),
        yaxis2=_axis("time left [s]", domain=[0.0, 0.44], anchor="x2", rangemode="tozero"),
    )
    return FigureSpec(
        "session",
        "Grip found and time left, lap by lap",
        f"Grip found: the grip scale each lap showed against the envelope (1 = the "
        f"envelope's); a drying or rubbering-in track shows as grip rising. Time left: to "
        f"the ideal on each lap's own line. Lap {analysed} (orange) is analysed below.",
        data,
        layout,
        subplots=["xy", "x2y2"],
    )


# --------------------------------------------------------------------------- lap against lap


def versus_delta_figure(distance_m, delta_s, corners, label_a: str, label_b: str) -> FigureSpec:
    """Time delta of lap B against lap A along A's line (rising = B losing time).

    ``corners``: records with ``name``, ``start_m``, ``apex_m``, ``end_m`` on A's line. [m]
    """
    s = np.asarray(distance_m, dtype=np.float64)
    d = np.asarray(delta_s, dtype=np.float64)
    step = max(1, s.size // 2000)
    x, y = _r(s[::step], 1), _r(d[::step], 3)
    shapes, notes = [], []
    for i, c in enumerate(corners):
        if i % 2 == 0 and c["end_m"] >= c["start_m"]:
            shapes.append(
                {
                    "type": "rect", "xref": "x", "yref": "paper", "x0": c["start_m"],
                    "x1": c["end_m"], "y0": 0, "y1": 1, "fillcolor": BAND,
                    "line": {"width": 0}, "layer": "below",
                }
            )  # fmt: skip
        notes.append(
            {
                "x": c["apex_m"], "y": 1.0, "xref": "x", "yref": "paper", "yanchor": "top",
                "text": c["name"], "showarrow": False, "font": {"size": 10, "color": INK},
            }
        )  # fmt: skip
    data = [_line(x, y, "B minus A", INK, 1.5, hovertemplate="%{x:.0f} m: %{y:+.3f} s")]
    layout = _layout(
        HEIGHT_PX["delta"],
        hovermode="x unified",
        xaxis=_axis("distance along A's line from the start/finish gate [m]"),
        yaxis=_axis("B minus A [s]", zeroline=True, zerolinecolor="#999999"),
        shapes=shapes,
        annotations=notes,
    )
    return FigureSpec(
        "versus_delta",
        f"Time delta: B ({label_b}) minus A ({label_a})",
        "Rising: B losing time to A; falling: B gaining. Along A's line.",
        data,
        layout,
    )


def versus_corner_figure(names, delta_s, left_a_s, left_b_s, label_a: str, label_b: str):
    """Per corner: B minus A, and each lap's time left to its ideal at the common envelope."""
    names = list(names)
    series = (
        ("B minus A (+ = B slower)", delta_s, INK),
        (f"A ({label_a}): time left", left_a_s, LAP),
        (f"B ({label_b}): time left", left_b_s, BEST),
    )
    data = [
        {
            "type": "bar",
            "name": name,
            "x": names,
            "y": [
                None if v is None or not math.isfinite(v) else round(float(v), 3) for v in values
            ],
            "marker": {"color": colour},
            "hovertemplate": "%{x}: %{y:.2f} s<extra></extra>",
        }
        for name, values, colour in series
    ]
    layout = _layout(
        HEIGHT_PX["best"],
        hovermode="closest",
        barmode="group",
        xaxis=_axis("corner", categoryorder="array", categoryarray=names, showgrid=False),
        yaxis=_axis("[s]", zeroline=True, zerolinecolor="#999999"),
    )
    return FigureSpec(
        "versus_corners",
        "Per corner: B minus A, and each lap's time left to its ideal",
        "Each lap's time left is to the ideal on its own line at the common envelope.",
        data,
        layout,
    )
