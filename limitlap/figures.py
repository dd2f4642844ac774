"""Figures of the report: each function draws one figure and returns its PNG bytes.

The report's figures are drawn by :mod:`limitlap._canvas` -- fixed pixel panels, ticks,
text and legends straight onto matplotlib's Agg rasteriser, with no figure, axes or text
objects in between -- because matplotlib's artist layer alone took 60-100 ms a figure;
the printable target sheet (not drawn on every analysis) is laid out by matplotlib's
figure layer. matplotlib is imported inside the functions (Agg, no display needed), so
importing :mod:`limitlap.figures` or :mod:`limitlap.report` costs nothing until a figure
is drawn. Every figure has a fixed pixel size (:data:`FIGURE_SIZE_PX`); nothing is
cropped to fit, so the size is known before drawing.

PNG: RGB, "Up" row filter, zlib level 1, the two halves of the image deflated at once
(:meth:`limitlap._canvas.Canvas.png`): 2-5 ms a figure against Pillow's 11-27 ms at any
compress level, files 2-24 % larger than its level 3 (7 % over the report); measured on
the demo report's figures.

Inputs are plain SI arrays and records; the conversion to km/h and g for display happens
here, with the factors of :mod:`limitlap.units`.

Colours: the colour-blind-safe set of Okabe & Ito (2008), the real lap always in
vermillion, the ideal lap always in blue; the map uses a blue-grey-orange diverging scale
whose lightness runs monotonically from each end to the middle, so it also reads in grey
print.

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people", J*FLY, 2008.
"""

from __future__ import annotations

import functools
import io
import math
import threading

import numpy as np

from limitlap.formatting import NOT_AVAILABLE, distance, lap_time, seconds, speed_kmh
from limitlap.units import G0_M_S2, KMH_TO_M_S

# Okabe-Ito colours [1].
REAL = "#D55E00"  # vermillion: the driven lap
IDEAL = "#0072B2"  # blue: the ideal lap
BEST = "#009E73"  # bluish green: best of the driver's own laps
UNUSED = "#56B4E9"  # sky blue: grip the lap did not use
ACCENT = "#E69F00"  # orange
INK = "#222222"
GRID = "#d9d9d9"
BAND = "#f2f2f2"
EDGE = "#888888"  # axis lines

#: Resolution of every figure. [dots per inch]
DPI = 100
#: Pixel size (width, height) of each figure kind, fixed whatever the data.
FIGURE_SIZE_PX = {
    "speed": (1200, 460),
    "delta": (1200, 360),
    "time_left": (1200, 520),
    "map": (1000, 800),
    "gg": (1400, 520),
    "detail": (1200, 640),
    "best": (1200, 520),
    "check": (1200, 420),
    "session": (1200, 560),
    "versus_delta": (1200, 380),
    "versus_corners": (1200, 520),
    "target_sheet": (1240, 1754),  # A4 portrait at 150 dpi (the sheet is drawn at 150 dpi)
}
#: Resolution of the printable target sheet: A4 = 8.27 x 11.69 in. [dots per inch]
SHEET_DPI = 150

# Type sizes of the figures (as the target sheet's matplotlib style): tick and axis
# labels 11 pt, titles 12 pt. [pt]
_FONT_PT = 11.0
_TITLE_PT = 12.0

#: Style of the target sheet, applied only while it is built and drawn (the caller's
#: matplotlib settings are left as they were).
_STYLE = {
    "font.size": 11,
    "axes.titlesize": 12,
    "axes.labelsize": 11,
    "axes.edgecolor": "#888888",
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
_STYLE_LOCK = threading.RLock()


def _styled(draw):
    """Run a matplotlib figure function inside the sheet's style (imported on first use)."""

    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        import matplotlib

        with _STYLE_LOCK, matplotlib.rc_context(_STYLE):
            return draw(*args, **kwargs)

    return wrapper


def _figure(kind: str, **kwargs):
    """A matplotlib figure of the kind's fixed size on its own Agg canvas (no pyplot)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w, h = FIGURE_SIZE_PX[kind]
    dpi = SHEET_DPI if kind == "target_sheet" else DPI
    fig = Figure(figsize=(w / dpi, h / dpi), dpi=dpi, **kwargs)
    FigureCanvasAgg(fig)
    return fig


def _canvas(kind: str):
    """A blank canvas of the kind's fixed size."""
    from limitlap._canvas import Canvas

    w, h = FIGURE_SIZE_PX[kind]
    return Canvas(w, h, DPI)


def _png(canvas, kind: str) -> bytes:
    """The finished canvas as PNG bytes (see the module's notes on the encoding)."""
    return canvas.png(DPI)


# Fixed layout: every figure has a fixed pixel size and fixed fonts, so its panels sit at
# fixed places (pixel margins below). The margins hold the tick labels and axis labels
# (11 pt = 15 px at 100 dpi); labels whose width depends on the data (y tick labels,
# corner and lap names) are measured first.
_TICK_PX = 10  # tick 3.5 pt + pad 3.5 pt at 100 dpi
_LABEL_PX = 22  # an 11 pt axis label and its 4 pt pad


def _pt(points: float) -> float:
    """Points as pixels at the figures' resolution. [px]."""
    return points * DPI / 72.0


def _y_ticks(lo, hi, height_px):
    """Y tick values and labels for a panel of this height (matplotlib's default rule)."""
    from limitlap._canvas import auto_bins, nice_ticks, tick_labels

    values = nice_ticks(lo, hi, auto_bins(height_px, _FONT_PT, 2.0, DPI))
    return values, tick_labels(values)


def _left_margin(c, labels, pad_px: float = 6.0) -> float:
    """Left margin that holds the widest y tick label and the y axis label. [px]."""
    return c.text_width(labels, _FONT_PT) + _TICK_PX + _LABEL_PX + pad_px


def _kmh(v_m_s):
    return np.asarray(v_m_s, dtype=np.float64) / KMH_TO_M_S


def _finite_max(*arrays) -> float:
    vals = [np.asarray(a, dtype=np.float64) for a in arrays]
    vals = [v[np.isfinite(v)] for v in vals]
    vals = [v for v in vals if v.size]
    return max((float(v.max()) for v in vals), default=1.0)


def _axes(p, xt, yt, xlabel, ylabel, title, *, xlabels=None, ylabels=None, title_pt=_TITLE_PT):
    """Axis lines, ticks and their labels, axis labels and the title of a panel."""
    p.frame(colour=EDGE)
    bottom = p.xticks(xt, xlabels, size_pt=_FONT_PT, colour=INK)
    left = p.yticks(yt, ylabels, size_pt=_FONT_PT, colour=INK)
    if xlabel:
        p.xlabel(xlabel, bottom, size_pt=_FONT_PT)
    if ylabel:
        p.ylabel(ylabel, left, size_pt=_FONT_PT)
    if title:
        p.title(title, size_pt=title_pt)


def _corner_bands(p, corners) -> None:
    """Shade every other corner segment (both ends of the lap for one across the gate)."""
    lo, hi = p.xlim
    for i, c in enumerate(corners):
        if i % 2:
            continue
        start, end = c["start_m"], c["end_m"]
        if end >= start:
            p.vband(start, end, BAND)
        else:  # the segment runs across the gate: shade both ends of the lap
            p.vband(start, max(hi, start), BAND)
            p.vband(min(lo, end), end, BAND)


def _corner_names(p, corners, label_y) -> None:
    """Each corner's name above its apex; a name that would touch the one before it on its line goes up a line (measured in pixels, 4 px apart)."""
    ends = [-math.inf, -math.inf]  # right end of the last name on each line [px]
    for c in corners:
        x = float(p.px(c["apex_m"]))
        half = 0.5 * p.canvas.text_extent(c["name"], 9)[0]
        clear = [x - half - ends[k] >= 4.0 for k in (0, 1)]
        level = 0 if clear[0] else 1 if clear[1] else int(ends[1] < ends[0])
        ends[level] = x + half
        p.text(
            c["apex_m"],
            label_y,
            c["name"],
            dy=_pt(12 if level else 2),
            size_pt=9,
            colour=INK,
            ha="center",
            va="bottom",
        )


def _lap_panel(c, s, ylim, *, right=22, top=30, bottom=52):
    """A panel over the lap's distance, its left margin fitted to its y tick labels; returns (panel, x ticks, y ticks)."""
    from limitlap._canvas import Panel

    height = c.height - top - bottom
    yt, ylabels = _y_ticks(ylim[0], ylim[1], height)
    left = _left_margin(c, ylabels)
    p = Panel(c, left, top, c.width - left - right, height, (s[0], s[-1]), ylim)
    return p, p.auto_xticks(_FONT_PT), yt


# --------------------------------------------------------------------------- along the lap


def speed_figure(distance_m, speed_real_m_s, speed_ideal_m_s, corners) -> bytes:
    """Speed along the lap, real against ideal, with the corners named at their apexes.

    Parameters
    ----------
    distance_m : array-like
        Stations along the lap from the gate. [m]
    speed_real_m_s, speed_ideal_m_s : array-like
        Driven and ideal speed at the stations. [m/s]
    corners : list of dict
        ``name``, ``start_m``, ``apex_m``, ``end_m`` [m] of each corner segment.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["speed"]`` pixels.
    """
    from limitlap._canvas import Entry

    c = _canvas("speed")
    s = np.asarray(distance_m, dtype=np.float64)
    v_ideal, v_real = _kmh(speed_ideal_m_s), _kmh(speed_real_m_s)
    top = _finite_max(v_ideal, v_real)
    p, xt, yt = _lap_panel(c, s, (0.0, top * 1.12))
    _corner_bands(p, corners)
    p.grid(xt, yt, GRID, 0.6)
    p.line(s, v_ideal, IDEAL, 1.8)
    p.line(s, v_real, REAL, 1.3)
    _axes(
        p, xt, yt, "distance from the start/finish gate [m]", "speed [km/h]", "Speed along the lap"
    )
    _corner_names(p, corners, top * 1.02)
    c.legend(
        [Entry("ideal (your envelope)", "line", IDEAL, 1.8), Entry("your lap", "line", REAL, 1.3)],
        loc="lower right",
        within=p.box,
        ncols=2,
    )
    return _png(c, "speed")


def delta_figure(distance_m, time_delta_s, corners) -> bytes:
    """Time delta along the lap: how far the driven lap is behind the ideal.

    Parameters
    ----------
    distance_m : array-like
        Stations along the lap. [m]
    time_delta_s : array-like
        Elapsed time of the driven lap minus that of the ideal at each station;
        + = behind the ideal. [s]
    corners : list of dict
        Corner segments as for :func:`speed_figure`.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["delta"]`` pixels.
    """
    from limitlap._canvas import Entry

    c = _canvas("delta")
    s = np.asarray(distance_m, dtype=np.float64)
    d = np.asarray(time_delta_s, dtype=np.float64)
    lo, hi = float(np.nanmin(d)), float(np.nanmax(d))
    span = max(hi - min(lo, 0.0), 1e-3)
    p, xt, yt = _lap_panel(c, s, (min(lo, 0.0) - 0.05 * span, hi + 0.18 * span))
    _corner_bands(p, corners)
    with np.errstate(invalid="ignore"):
        p.fill_between(s, 0.0, d, REAL, alpha=0.18, where=d >= 0)
        p.fill_between(s, 0.0, d, IDEAL, alpha=0.18, where=d < 0)
    p.grid(xt, yt, GRID, 0.6)
    p.line(s, d, REAL, 1.5)
    p.hline(0.0, IDEAL, 1.2)
    _axes(
        p,
        xt,
        yt,
        "distance from the start/finish gate [m]",
        "time delta [s]",
        "Time delta: your lap minus the ideal (rising = losing time)",
    )
    _corner_names(p, corners, hi + 0.06 * span)
    c.legend(
        [Entry("your lap behind the ideal", "line", REAL, 1.5), Entry("ideal", "line", IDEAL, 1.2)],
        loc="lower right",
        within=p.box,
    )
    return _png(c, "delta")


def curvature_check_figure(
    distance_m, curvature_line_1_m, curvature_ay_1_m, curvature_yaw_1_m, corners, title
) -> bytes:
    """Data check: the rebuilt line's curvature against a_y/v² and yaw rate/v.

    The three are the same quantity measured three ways (κ = a_n/v² = χ̇/v; docs/methods.md, Driven line
    identities), so they should lie on top of one another; where they part, the line, and
    every result built on it, is less certain there.

    Parameters
    ----------
    distance_m : array-like
        Stations along the lap. [m]
    curvature_line_1_m, curvature_ay_1_m, curvature_yaw_1_m : array-like
        Curvature of the rebuilt line, from lateral acceleration and from yaw rate
        (NaN where a channel is missing or the car is slow). [1/m]
    corners : list of dict
        Corner segments as for :func:`speed_figure`.
    title : str
        Figure title (the agreement figures).

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["check"]`` pixels.
    """
    from limitlap._canvas import Entry

    c = _canvas("check")
    s = np.asarray(distance_m, dtype=np.float64)
    k_line = 1000.0 * np.asarray(curvature_line_1_m, dtype=np.float64)
    finite = np.concatenate([k_line[np.isfinite(k_line)], [0.0]])
    lo, hi = float(finite.min()), float(finite.max())
    span = max(hi - lo, 1e-3)
    p, xt, yt = _lap_panel(c, s, (lo - 0.08 * span, hi + 0.2 * span))
    _corner_bands(p, corners)
    p.grid(xt, yt, GRID, 0.6)
    p.line(s, k_line, INK, 1.6)
    entries = [Entry("rebuilt line (GNSS + inertial)", "line", INK, 1.6)]
    for values, colour, label in (
        (curvature_ay_1_m, ACCENT, "a_y / v²"),
        (curvature_yaw_1_m, BEST, "yaw rate / v"),
    ):
        k = 1000.0 * np.asarray(values, dtype=np.float64)
        if np.isfinite(k).any():
            p.line(s, k, colour, 1.0, alpha=0.9)
            entries.append(Entry(label, "line", colour, 1.0, alpha=0.9))
    _axes(p, xt, yt, "distance from the start/finish gate [m]", "curvature [1/km] (+ left)", title)
    _corner_names(p, corners, hi + 0.08 * span)
    c.legend(entries, loc="lower right", within=p.box, ncols=3)
    return _png(c, "check")


def time_left_figure(corners) -> bytes:
    """Time left per corner, ranked, largest on top.

    Parameters
    ----------
    corners : list of dict
        ``name`` and ``time_left_s`` [s] of each corner segment.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["time_left"]`` pixels.
    """
    from limitlap._canvas import Panel
    from limitlap.formatting import hundredths  # the figure's labels as the tables print them

    c = _canvas("time_left")
    ranked = sorted(corners, key=lambda r: -r["time_left_s"])
    names = [r["name"] for r in ranked]
    name_pt = 10 if len(names) <= 18 else 8
    left = c.text_width(names, name_pt) + _TICK_PX + 8
    values = np.array([r["time_left_s"] for r in ranked], dtype=np.float64)
    n = len(ranked)
    span = max(float(np.max(np.abs(values))) if values.size else 0.0, 1e-3)
    xlim = (min(0.0, float(values.min(initial=0.0))) - 0.02 * span, span * 1.18)
    # bars 0.7 high on rows 0..n-1, 5 % margins (matplotlib's default), largest on top
    lo_y, hi_y = -0.35, max(n - 1, 0) + 0.35
    m = 0.05 * (hi_y - lo_y)
    top, bottom = 30, 52
    p = Panel(
        c, left, top, c.width - left - 12, c.height - top - bottom, xlim, (hi_y + m, lo_y - m)
    )
    xt = p.auto_xticks(_FONT_PT)
    p.grid(xticks=xt, colour=GRID, lw_pt=0.6)
    y = np.arange(n)
    colours = [
        REAL if i < 3 and v > 0 else "#e8a27a" if v > 0 else IDEAL for i, v in enumerate(values)
    ]
    p.barh(y, values, colours, height=0.7)
    p.vline(0.0, EDGE, 0.8)
    for yi, v in zip(y, values, strict=True):
        p.text(
            max(v, 0.0),
            yi,
            f"{hundredths(v):+.2f} s",
            dx=_pt(4),
            size_pt=9,
            colour=INK,
            va="center",
        )
    p.frame(colour=EDGE)
    below = p.xticks(xt, size_pt=_FONT_PT, colour=INK)
    p.yticks(y, names, size_pt=name_pt, colour=INK)
    p.xlabel("time left to the ideal [s]", below, size_pt=_FONT_PT)
    p.title(
        f"Time left per corner, ranked (total {values.sum():.2f} s; top three darker)",
        size_pt=_TITLE_PT,
    )
    return _png(c, "time_left")


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


def _loss_colours():
    """256 colours of the map's diverging scale (blue, grey, orange, linear between)."""
    from limitlap._canvas import rgb

    nodes = np.array([rgb(h) for h in (IDEAL, "#9cc3dc", "#e6e6e6", "#f0b07a", REAL, "#6b2b00")])
    t = (np.arange(256) + 0.0) / 255.0
    pos = np.linspace(0.0, 1.0, nodes.shape[0])
    return np.column_stack([np.interp(t, pos, nodes[:, k]) for k in range(3)])


def _extent(k, lo, hi, anchors, half):
    """(low edge, spread) [px] of the padded line extent [lo, hi] [m] and of the name boxes (anchors [m] +- half [px]) at a scale of ``k`` px/m."""
    a = np.concatenate([[lo, hi], np.asarray(anchors, dtype=np.float64)])
    w = np.concatenate([[0.0, 0.0], np.asarray(half, dtype=np.float64)])
    low = float(np.min(k * a - w))
    return low, float(np.max(k * a + w)) - low


def _fit_scale(lo, hi, anchors, half, length_px):
    """Largest scale [px/m] at which the padded line extent and the name boxes fit in ``length_px`` (see :func:`_extent`); their spread grows with the scale, so bisect."""
    k_lo, k_hi = 0.0, length_px / max(hi - lo, 1e-9)
    if _extent(k_hi, lo, hi, anchors, half)[1] <= length_px:
        return k_hi
    for _ in range(60):
        mid = 0.5 * (k_lo + k_hi)
        if _extent(mid, lo, hi, anchors, half)[1] <= length_px:
            k_lo = mid
        else:
            k_hi = mid
        if (k_hi - k_lo) * (hi - lo) < 1e-2:  # a hundredth of a pixel over the map
            break
    return k_lo


def _arrow(c, x0, y0, x1, y1, colour, lw_pt):
    """An open arrow from (x0, y0) to (x1, y1) [px], ends 2 pt short, head 4.4 pt long and 2.2 pt each side (matplotlib's "->" at 11 pt)."""
    length = math.hypot(x1 - x0, y1 - y0)
    if length < 1e-9:
        return
    ux, uy = (x1 - x0) / length, (y1 - y0) / length
    shrink = _pt(2.0)
    ax_, ay_ = x0 + shrink * ux, y0 + shrink * uy
    bx, by = x1 - shrink * ux, y1 - shrink * uy
    c.polyline([ax_, bx], [ay_, by], colour, lw_pt, cap="butt")
    hl, hw = _pt(4.4), _pt(2.2)
    c.polyline(
        [bx - hl * ux - hw * uy, bx, bx - hl * ux + hw * uy],
        [by - hl * uy + hw * ux, by, by - hl * uy - hw * ux],
        colour,
        lw_pt,
        cap="butt",
        join="miter",
    )


def map_figure(x_m, y_m, loss_rate_s_m, corners, distance_m) -> bytes:
    """Map of the line coloured by where time is left (local time-loss rate).

    Parameters
    ----------
    x_m, y_m : array-like
        Line position, east and north. [m]
    loss_rate_s_m : array-like
        Time lost per metre, + = losing on the ideal (see :func:`time_loss_rate`). [s/m]
    corners : list of dict
        ``name`` and ``apex_m`` [m] of each corner, labelled on the map.
    distance_m : array-like
        Stations' distance, to place the labels. [m]

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["map"]`` pixels.
    """
    from limitlap._canvas import Box, Entry, Panel, auto_bins, nice_ticks, tick_labels

    c = _canvas("map")
    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    rate_ms_m = np.asarray(loss_rate_s_m, dtype=np.float64) * 1e3  # [ms/m] for the scale
    finite = rate_ms_m[np.isfinite(rate_ms_m)]
    lim = max(float(np.percentile(finite, 98)) if finite.size else 1.0, 1e-3)
    gain = -finite[finite < 0]
    # The gaining side of the scale only as long as the data needs (at least a quarter).
    lim_gain = max(float(np.percentile(gain, 98)) if gain.size else 0.0, 0.25 * lim)

    # Names on the outside of each bend (the right-hand normal of a left bend, +kappa),
    # 4 % of the map's span from the apex.
    s = np.asarray(distance_m, dtype=np.float64)
    span = max(np.ptp(x), np.ptp(y))
    tx, ty = np.gradient(x), np.gradient(y)
    kappa = np.gradient(np.unwrap(np.arctan2(ty, tx))) / np.maximum(np.hypot(tx, ty), 1e-9)
    names, nx, ny = [], [], []
    for corner in corners:
        i = int(np.argmin(np.abs(s - corner["apex_m"])))
        norm = math.hypot(tx[i], ty[i]) or 1.0
        side = -1.0 if kappa[i] >= 0 else 1.0
        off = 0.04 * span
        names.append(str(corner["name"]))
        nx.append(x[i] + off * (-ty[i] / norm * side))
        ny.append(y[i] + off * (tx[i] / norm * side))
    extents = [c.text_extent(n, 10, "bold") for n in names]
    half_w = np.array([0.5 * e[0] + 1.0 for e in extents])
    half_h = np.array([0.5 * (e[1] + e[2]) + 1.0 for e in extents])

    # Equal scales on both axes, as large as the map area allows with 8 % of the line's
    # span as margin each side and every name inside.
    box = Box(30.0, 30.0, c.width - 30.0, c.height - 100.0)
    mx, my = 0.08 * np.ptp(x), 0.08 * np.ptp(y)
    lo_x, hi_x = x.min() - mx, x.max() + mx
    lo_y, hi_y = y.min() - my, y.max() + my
    k = min(
        _fit_scale(lo_x, hi_x, nx, half_w, box.width),
        _fit_scale(lo_y, hi_y, ny, half_h, box.height),
    )
    low_x, spread_x = _extent(k, lo_x, hi_x, nx, half_w)
    low_y, spread_y = _extent(k, lo_y, hi_y, ny, half_h)
    x0 = (low_x - 0.5 * (box.width - spread_x)) / k  # the content centred in the box
    y0 = (low_y - 0.5 * (box.height - spread_y)) / k
    p = Panel(
        c,
        box.x0,
        box.y0,
        box.width,
        box.height,
        (x0, x0 + box.width / k),
        (y0, y0 + box.height / k),
    )
    X, Y = p.px(x), p.py(y)
    c.polyline(np.r_[X, X[0]], np.r_[Y, Y[0]], "#bbbbbb", 9.0, cap="round")
    colours = _loss_colours()
    clipped = np.clip(np.nan_to_num(rate_ms_m, nan=0.0), -lim_gain, lim)
    frac = np.interp(clipped, [-lim_gain, 0.0, lim], [0.0, 0.5, 1.0])
    group = np.minimum((frac * 64).astype(np.int64), 63)  # 64 shades: 4 of the 256 each
    # segment i runs from point i to point i+1 (the last one back to the first)
    Xc, Yc = np.r_[X, X[0]], np.r_[Y, Y[0]]
    change = np.flatnonzero(group[1:] != group[:-1]) + 1
    run_start = np.r_[0, change]
    run_stop = np.r_[change, group.size]
    run_group = group[run_start]
    for g in np.unique(run_group):
        sel = run_group == g
        shade = colours[4 * g : 4 * g + 4].mean(axis=0)
        c.runs(Xc, Yc, run_start[sel], run_stop[sel] + 1, shade, 5.5, cap="round")
    for name, ax_, ay_ in zip(names, nx, ny, strict=True):
        p.text(ax_, ay_, name, size_pt=10, weight="bold", colour=INK, ha="center", va="center")
    c.markers([X[0]], [Y[0]], "s", _pt(9), INK)
    if x.size > 1:
        j = int(np.searchsorted(s, s[0] + 0.04 * (s[-1] - s[0])))  # 4 % of the lap on
        j = min(max(j, 1), x.size - 1)
        _arrow(c, X[0], Y[0], X[j], Y[j], INK, 1.5)
    p.title("Where the time is left on the lap", size_pt=_TITLE_PT)
    c.legend(
        [Entry("start/finish", "marker", INK, marker="s", size_px=_pt(9))],
        loc="upper right",
        within=p.box,
        title="arrow: direction of travel",
        title_size_pt=9,
    )
    bar = Box(0.15 * c.width, c.height - 66 - 17, 0.85 * c.width, c.height - 66)
    ticks = nice_ticks(-lim_gain, lim, auto_bins(bar.width, _FONT_PT, 3.0, DPI))
    c.colour_bar(
        bar,
        colours,
        np.interp(ticks, [-lim_gain, 0.0, lim], [0.0, 0.5, 1.0]),
        tick_labels(ticks),
        "time lost per metre [ms/m]: orange = time left here, blue = gaining, grey = even",
        size_pt=_FONT_PT,
    )
    return _png(c, "map")


# --------------------------------------------------------------------------- g-g diagram


def gg_figure(bands, fit_points=None) -> bytes:
    """g-g diagram per speed band: envelope, the lap's samples, the grip left unused.

    Parameters
    ----------
    bands : list of limitlap.gg.GGBand
        What each panel shows, computed by :func:`limitlap.gg.gg_bands`.
    fit_points : list of dict, optional
        Boundary points the envelope fit used, each with ``accel_lat_m_s2``,
        ``accel_lon_m_s2`` and ``speed_m_s`` arrays; drawn as small crosses.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["gg"]`` pixels.

    Notes
    -----
    The envelope is drawn at the band's middle speed (solid) and its edges (dashed). The
    shaded ring lies between the samples' reach (their convex hull) and the envelope at
    the middle speed: grip the lap never asked for. Its share of the envelope's area is
    in each panel's title.
    """
    from limitlap._canvas import Entry, Panel, auto_bins, nice_ticks
    from limitlap.gg import REACH_ANGLES_RAD

    c = _canvas("gg")
    angles = REACH_ANGLES_RAD
    if fit_points:
        fv, fy, fx = (
            np.concatenate([np.asarray(fp[k], dtype=np.float64) for fp in fit_points])
            for k in ("speed_m_s", "accel_lat_m_s2", "accel_lon_m_s2")
        )
    panels = []
    lim = 0.0
    for b in bands:
        lo, hi = b.speed_lo_m_s, b.speed_hi_m_s
        ey, ex = b.envelope_lat_m_s2 / G0_M_S2, b.envelope_lon_m_s2 / G0_M_S2
        edges = [(lat / G0_M_S2, lon / G0_M_S2) for lon, lat in b.edge_boundaries]
        sy, sx = b.sample_lat_m_s2 / G0_M_S2, b.sample_lon_m_s2 / G0_M_S2
        title = f"{lo / KMH_TO_M_S:.0f}-{hi / KMH_TO_M_S:.0f} km/h"
        ring = hull = None
        if b.hull_lat_m_s2 is not None:
            r_env, r_in = b.envelope_reach_m_s2 / G0_M_S2, b.sample_reach_m_s2 / G0_M_S2
            # Ring between the samples' reach and the envelope: outer loop forward, inner
            # loop back; the angles include both -pi and pi so the seam closes exactly.
            ring = (
                np.concatenate([r_env * np.cos(angles), (r_in * np.cos(angles))[::-1]]),
                np.concatenate([r_env * np.sin(angles), (r_in * np.sin(angles))[::-1]]),
            )
            hull = (b.hull_lat_m_s2 / G0_M_S2, b.hull_lon_m_s2 / G0_M_S2)
            title += f": {100 * b.unused_share:.0f} % of the envelope unused"
        fit = None
        if fit_points:
            sel = (fv >= lo) & (fv < hi)
            fit = (fy[sel] / G0_M_S2, fx[sel] / G0_M_S2)
        panels.append((ey, ex, edges, sy, sx, ring, hull, fit, title))
        lim = max(lim, float(np.max(np.abs(ey))), float(np.max(np.abs(ex))))
    lim *= 1.08

    # Square panels side by side, centred; below them the axis labels, then the legend.
    n = len(bands)
    left, right, top, bottom, gap = 62, 12, 48, 100, 24
    avail_w, avail_h = c.width - left - right, c.height - top - bottom
    side = min((avail_w - (n - 1) * gap) / n, avail_h)
    x0 = left + 0.5 * (avail_w - n * side - (n - 1) * gap)
    y_top = top + 0.5 * (avail_h - side)
    xt = nice_ticks(-lim, lim, auto_bins(side, _FONT_PT, 3.0, DPI))
    yt = nice_ticks(-lim, lim, auto_bins(side, _FONT_PT, 2.0, DPI))
    used = set()
    for i, (ey, ex, edges, sy, sx, ring, hull, fit, title) in enumerate(panels):
        p = Panel(c, x0 + i * (side + gap), y_top, side, side, (-lim, lim), (-lim, lim))
        # matplotlib's order: patches and markers, then the grid, then lines
        if ring is not None:
            p.canvas.polygon(p.px(ring[0]), p.py(ring[1]), UNUSED, alpha=0.45, clip=p.box)
            used.update(("ring", "hull"))
        p.scatter(sy, sx, "o", _pt(math.sqrt(5.0)), "#444444", alpha=0.4)
        if fit is not None and fit[0].size:
            p.scatter(fit[0], fit[1], "x", _pt(math.sqrt(14.0)), ACCENT, lw_pt=0.9)
            used.add("fit")
        p.grid(xt, yt, GRID, 0.6)
        for ly, lx in edges:
            p.line(ly, lx, IDEAL, 0.7, dash="--", alpha=0.45)
        if hull is not None:
            p.line(hull[0], hull[1], REAL, 1.2)
        p.line(ey, ex, IDEAL, 1.8)
        p.hline(0.0, "#999999", 0.6)
        p.vline(0.0, "#999999", 0.6)
        p.frame(colour=EDGE)
        below = p.xticks(xt, size_pt=_FONT_PT, colour=INK)
        p.xlabel("lateral [g] (+ left)", below, size_pt=_FONT_PT)
        p_left = p.yticks(yt, size_pt=_FONT_PT, colour=INK, show_labels=(i == 0))
        if i == 0:
            p.ylabel("longitudinal [g] (+ forward)", p_left, size_pt=_FONT_PT)
        p.title(title, size_pt=10, loc="center")
    entries = []
    if "ring" in used:
        entries += [
            Entry("grip not used", "patch", UNUSED, alpha=0.45),
            Entry("reach of your samples", "line", REAL, 1.2),
        ]
    entries += [
        Entry("envelope", "line", IDEAL, 1.8),
        # markers three times their size in the panels, as the legend's markerscale
        Entry("your samples", "marker", "#444444", alpha=0.4, size_px=3 * _pt(math.sqrt(5.0))),
    ]
    if "fit" in used:
        entries.append(
            Entry(
                "fit points",
                "marker",
                ACCENT,
                lw_pt=0.9,
                marker="x",
                size_px=3 * _pt(math.sqrt(14.0)),
            )
        )
    c.legend(entries, loc="lower center", ncols=len(entries))
    return _png(c, "gg")


# --------------------------------------------------------------------------- corner detail


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


def detail_figure(corner, distance_m, length_m, real, ideal, caption="") -> bytes:
    """Speed, brake and throttle over one corner, real against ideal.

    Parameters
    ----------
    corner : dict
        ``name``, ``start_m``, ``apex_m``, ``end_m``, and where known
        ``brake_points_actual_m``, ``brake_points_ideal_m`` (lists; or the first only,
        ``brake_start_actual_m``, ``brake_start_ideal_m``) [m].
    distance_m : array-like
        Stations of the lap. [m]
    length_m : float
        Lap length, to unwrap a segment across the gate. [m]
    real, ideal : dict
        ``speed_m_s`` [m/s], ``brake`` and ``throttle`` as shares 0-1 [-] (NaN where
        unknown), and ``brake_label`` / ``throttle_label`` saying what the share is of.
    caption : str
        The corner's plain-language line, printed as the title.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["detail"]`` pixels.
    """
    from limitlap._canvas import Entry, Panel

    c = _canvas("detail")
    idx, s = _window(distance_m, corner["start_m"], corner["end_m"], length_m)
    if idx.size < 2:
        idx = np.arange(np.asarray(distance_m).size)
        s = np.asarray(distance_m, dtype=np.float64)

    def unwrap(x):
        return x + length_m if x < s[0] - 1e-9 else x

    v_ideal = _kmh(ideal["speed_m_s"][idx])
    v_real = _kmh(real["speed_m_s"][idx])
    shares = {
        key: (100 * np.asarray(ideal[key])[idx], 100 * np.asarray(real[key])[idx])
        for key in ("brake", "throttle")
    }
    # Three rows sharing the distance axis, heights 2.2 : 1 : 1, 12 px apart; the speed
    # row's limits as matplotlib's automatic ones (5 % margins), the shares -5 to 110 %.
    right, top, bottom, gap = 22, 28, 52, 12
    unit = (c.height - top - bottom - 2 * gap) / 4.2
    heights = (2.2 * unit, unit, unit)
    lo = min(float(np.nanmin(v_ideal)), float(np.nanmin(v_real)))
    hi = max(float(np.nanmax(v_ideal)), float(np.nanmax(v_real)))
    pad = 0.05 * max(hi - lo, 1e-6)
    ylims = [(lo - pad, hi + pad), (-5.0, 110.0), (-5.0, 110.0)]
    ticks = [_y_ticks(a, b, h) for (a, b), h in zip(ylims, heights, strict=True)]
    left = _left_margin(c, [t for _, labels in ticks for t in labels])
    xlim = (s[0], s[-1])
    panels, y = [], top
    for h, yl in zip(heights, ylims, strict=True):
        panels.append(Panel(c, left, y, c.width - left - right, h, xlim, yl))
        y += h + gap
    xt = panels[0].auto_xticks(_FONT_PT)
    brakes = []
    for key, colour, word, y_frac, va in (
        ("ideal", IDEAL, "ideal brakes", 0.98, "top"),
        ("actual", REAL, "you brake", 0.02, "bottom"),
    ):
        points = corner.get(f"brake_points_{key}_m")
        if points is None:  # a record with the first brake point only
            points = [corner.get(f"brake_start_{key}_m")]
        for b in points:
            if b is not None and np.isfinite(b):
                brakes.append((unwrap(b), colour, word, y_frac, va))
    apex = unwrap(corner["apex_m"])
    rows = [
        ("speed [km/h]", v_ideal, v_real, (1.8, 1.3), None),
        ("brake [%]", *shares["brake"], (1.6, 1.2), "brake"),
        ("throttle [%]", *shares["throttle"], (1.6, 1.2), "throttle"),
    ]
    for i, (p, (yt, ylabels), (ylabel, y_ideal, y_real, lws, key)) in enumerate(
        zip(panels, ticks, rows, strict=True)
    ):
        p.grid(xt, yt, GRID, 0.6)
        p.line(s, y_ideal, IDEAL, lws[0])
        p.line(s, y_real, REAL, lws[1])
        for b, colour, *_ in brakes:
            p.vline(b, colour, 1.0, dash="--")
        if i == 0:
            p.vline(apex, "#777777", 0.8, dash=":")
        p.frame(colour=EDGE)
        last = i == len(panels) - 1
        below = p.xticks(
            xt,
            [f"{x % length_m:.0f}" for x in xt],  # past the gate, distances from the gate
            size_pt=_FONT_PT,
            colour=INK,
            show_labels=last,
        )
        p.ylabel(ylabel, p.yticks(yt, ylabels, size_pt=_FONT_PT, colour=INK), size_pt=_FONT_PT)
        if last:
            p.xlabel("distance from the start/finish gate [m]", below, size_pt=_FONT_PT)
        if key is not None:
            c.legend(
                [
                    Entry(ideal.get(f"{key}_label", "ideal"), "line", IDEAL, lws[0]),
                    Entry(real.get(f"{key}_label", "your lap"), "line", REAL, lws[1]),
                ],
                loc="center right",
                within=p.box,
                ncols=2,
                size_pt=8,
                frame=True,
            )
    top_panel = panels[0]
    words = []
    for b, colour, word, y_frac, va in brakes:
        words.append(
            c.text(
                float(top_panel.px(b)) - 2.0,  # clear of the 1 px line
                top_panel.fy(y_frac),
                word,
                size_pt=8,
                colour=colour,
                rotation=90.0,
                ha="right",
                va=va,
            )
        )
    words.append(
        c.text(
            float(top_panel.px(apex)),
            top_panel.fy(0.02),
            "apex",
            size_pt=8,
            colour="#555555",
            ha="left",
            va="bottom",
        )
    )
    # the legend keeps off the curves, the brake and apex lines and their words
    keep = np.isfinite(v_ideal) | np.isfinite(v_real)
    box = top_panel.box
    down = np.arange(box.y0, box.y1, 4.0)
    marks = [top_panel.px(x) for x in [b for b, *_ in brakes] + [apex]]
    avoid_x = np.concatenate(
        [top_panel.px(s[keep]), top_panel.px(s[keep])] + [np.full(down.size, m) for m in marks]
    )
    avoid_y = np.concatenate(
        [top_panel.py(np.nan_to_num(v_ideal[keep])), top_panel.py(np.nan_to_num(v_real[keep]))]
        + [down] * len(marks)
    )
    c.legend(
        [Entry("ideal", "line", IDEAL, 1.8), Entry("your lap", "line", REAL, 1.3)],
        loc="best",
        within=top_panel.box,
        ncols=2,
        frame=True,
        avoid=(avoid_x, avoid_y),
        avoid_boxes=words,
    )
    title = caption or corner["name"]
    top_panel.title(title if len(title) < 130 else title[:127] + "...", size_pt=11)
    return _png(c, "detail")


# --------------------------------------------------------------------------- best of own laps


def best_figure(corners, lap_time_s, best_time_s, ideal_time_s, lap_label="this lap") -> bytes:
    """Best of the driver's own laps beside the analysed lap and the limit.

    Parameters
    ----------
    corners : list of dict
        Per segment: ``name``, ``actual_s``, ``ideal_s`` and ``best_s`` (the best time
        over the session's complete laps, NaN when unknown). [s]
    lap_time_s, best_time_s, ideal_time_s : float
        Analysed lap, the composite of own best segments, and the ideal lap. [s]
    lap_label : str
        Name of the analysed lap in the legend.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["best"]`` pixels.
    """
    from limitlap._canvas import Entry, Panel

    c = _canvas("best")
    labels = [lap_label, "best of your laps", "ideal (limit)"]
    # Whole lap on the left (width 1), per corner on the right (2.6); the gap holds the
    # right panel's tick labels and axis label.
    margin_l = c.text_width(labels, _FONT_PT) + _TICK_PX + 8
    gap, margin_r, top, bottom = 84, 12, 30, 52
    unit = (c.width - margin_l - margin_r - gap) / 3.6
    # Corner names wider than their place under the bars are set at 30 degrees.
    names = [r["name"] for r in corners]
    name_pt = 10 if len(names) <= 16 else 8
    name_px = c.text_width(names, name_pt)
    tilt = name_px > 0.9 * 2.6 * unit / max(len(names), 1)
    if tilt:  # the slanted names' height (w sin 30 + h cos 30) below the ticks
        bottom = max(bottom, _TICK_PX + 0.5 * name_px + 0.87 * 1.4 * name_pt + 8)
    height = c.height - top - bottom

    # Whole lap: time above the ideal, bars 0.6 high on rows 0-2 with 5 % margins.
    values = [lap_time_s, best_time_s, ideal_time_s]
    above = [v - ideal_time_s if v is not None and np.isfinite(v) else np.nan for v in values]
    x_top = max([a for a in above if np.isfinite(a)] + [1e-3])
    m = 0.05 * 2.6
    left = Panel(c, margin_l, top, unit, height, (0.0, x_top * 1.9), (2.3 + m, -0.3 - m))
    xt = left.auto_xticks(_FONT_PT)
    left.grid(xticks=xt, colour=GRID, lw_pt=0.6)
    y = np.arange(3)
    left.barh(y, np.nan_to_num(above), [REAL, BEST, IDEAL], height=0.6)
    for yi, v, a in zip(y, values, above, strict=True):
        text = (
            NOT_AVAILABLE
            if not np.isfinite(a)
            else f"{lap_time(v, decimals=2)}  (+{a:.2f} s)"
            if a > 0
            else lap_time(v, decimals=2)
        )
        left.text(
            max(a, 0.0) if np.isfinite(a) else 0.0,
            yi,
            text,
            dx=_pt(4),
            size_pt=10,
            colour=INK,
            va="center",
        )
    left.frame(colour=EDGE)
    below = left.xticks(xt, size_pt=_FONT_PT, colour=INK)
    left.yticks(y, labels, size_pt=_FONT_PT, colour=INK)
    left.xlabel("time above the ideal lap [s]", below, size_pt=_FONT_PT)
    left.title("Whole lap", size_pt=_TITLE_PT)

    # Per corner: pairs of bars 0.38 wide, limits as matplotlib's automatic ones (5 %
    # margins; the bars' zero base is not padded when all are above it).
    x = np.arange(len(corners))
    this = np.array([r["actual_s"] - r["ideal_s"] for r in corners], dtype=np.float64)
    best = np.array([r.get("best_s", np.nan) - r["ideal_s"] for r in corners], dtype=np.float64)
    w = 0.38
    both = np.concatenate([this[np.isfinite(this)], np.nan_to_num(best), [0.0]])
    lo, hi = float(both.min()), float(both.max())
    span = max(hi - lo, 1e-3)
    ylim = (lo - 0.05 * span if lo < 0 else 0.0, hi + 0.05 * span if hi > 0 else 0.05 * span)
    xs = max(len(corners) - 1, 0) + 2 * w
    xlim = (-w - 0.05 * xs, max(len(corners) - 1, 0) + w + 0.05 * xs)
    r_yt, r_ylabels = _y_ticks(ylim[0], ylim[1], height)
    right = Panel(c, margin_l + unit + gap, top, 2.6 * unit, height, xlim, ylim)
    right.grid(yticks=r_yt, colour=GRID, lw_pt=0.6)
    right.bar(x - w / 2, this, REAL, width=w)
    right.bar(x + w / 2, np.nan_to_num(best), BEST, width=w)
    right.hline(0.0, IDEAL, 1.5)
    right.frame(colour=EDGE)
    if tilt:
        right.xticks(x, names, size_pt=name_pt, rotation=30, ha="right", anchor=True, colour=INK)
    else:
        right.xticks(x, names, size_pt=name_pt, colour=INK)
    right.ylabel(
        "time above the ideal [s]",
        right.yticks(r_yt, r_ylabels, size_pt=_FONT_PT, colour=INK),
        size_pt=_FONT_PT,
    )
    right.title(
        "Per corner: what you have already done against what the grip allows", size_pt=_TITLE_PT
    )
    c.legend(
        [
            Entry("ideal (limit)", "line", IDEAL, 1.5),
            Entry(f"{lap_label} above the limit", "patch", REAL),
            Entry("your best segment above the limit", "patch", BEST),
        ],
        loc="upper right",
        within=right.box,
        size_pt=9,
    )
    return _png(c, "best")


# --------------------------------------------------------------------------- target sheet


def _sheet_rows(condition) -> list[list[str]]:
    """The sheet's table cells, in the one rounding of every output (limitlap.formatting)."""
    rows = []
    for c in condition["corners"]:
        points = [p for p in c.get("brake_points_m", []) if np.isfinite(p)]
        if not points and np.isfinite(c.get("brake_start_m", np.nan)):
            points = [c["brake_start_m"]]
        rows.append(
            [
                str(c["name"]),
                str(c.get("label", "")),
                distance(c["apex_m"]),
                " + ".join(distance(p) for p in points) if points else "no braking",
                distance(c.get("before_apex_m")),
                speed_kmh(c.get("entry_speed_m_s")),
                speed_kmh(c["min_speed_m_s"]),
                speed_kmh(c["exit_speed_m_s"]),
                seconds(c["segment_time_s"]),
            ]
        )
    return rows


@_styled
def target_sheet(condition, circuit_name: str, caution: str, fmt: str = "png") -> bytes:
    """One printable A4 page of targets for one condition, to take to the car.

    Parameters
    ----------
    condition : dict
        ``label`` (e.g. "wet"), ``grip_scale`` [-], ``lap_time_s`` [s], optionally
        ``car`` and ``date`` (printed under the heading), and ``corners``: records with
        ``name``, ``label``, ``apex_m``, ``brake_points_m`` (or ``brake_start_m``),
        ``before_apex_m`` [m], ``entry_speed_m_s``, ``min_speed_m_s``,
        ``exit_speed_m_s`` [m/s] and ``segment_time_s`` [s].
    circuit_name : str
        Printed in the heading.
    caution : str
        Safety caution printed at the foot of the page.
    fmt : {"png", "pdf"}
        Output format.

    Returns
    -------
    bytes
        The page; PNG is ``FIGURE_SIZE_PX["target_sheet"]`` pixels (A4 at 150 dpi).
    """
    import textwrap

    fig = _figure("target_sheet")
    from matplotlib.lines import Line2D
    from matplotlib.patches import Rectangle

    fig.text(0.06, 0.965, f"{circuit_name}", fontsize=20, fontweight="bold", va="top")
    label = condition.get("label") or f"grip {condition['grip_scale']:.2f}"
    fig.text(
        0.06,
        0.93,
        f"Targets: {label}  (grip scale {condition['grip_scale']:.2f})",
        fontsize=15,
        va="top",
    )
    about = [x for x in (condition.get("car"), condition.get("date")) if x]
    if about:
        fig.text(0.06, 0.905, "  ·  ".join(about), fontsize=11, va="top", color="#444444")
    fig.text(0.94, 0.965, "target lap", fontsize=12, ha="right", va="top", color="#555555")
    fig.text(
        0.94,
        0.945,
        lap_time(condition["lap_time_s"], decimals=2),
        fontsize=30,
        fontweight="bold",
        ha="right",
        va="top",
        color=IDEAL,
    )
    header = [
        "corner",
        "",
        "apex\n[m]",
        "brake at\n[m]",
        "before\napex [m]",
        "entry\n[km/h]",
        "min\n[km/h]",
        "exit\n[km/h]",
        "segment\n[s]",
    ]
    rows = _sheet_rows(condition)
    n = max(len(rows), 1)
    top, bottom = 0.875, 0.215
    header_h = 0.04
    row_h = min(0.055, (top - header_h - bottom) / n)
    font = max(7.0, min(13.0, row_h * 11.69 * 72 * 0.34))
    cols_x = [0.06, 0.115, 0.38, 0.55, 0.645, 0.725, 0.8, 0.865, 0.95]
    aligns = ["left", "left"] + ["right"] * 7
    y = top
    for x, h, al in zip(cols_x, header, aligns, strict=True):
        fig.text(x, y, h, fontsize=10, ha=al, va="top", color="#444444", linespacing=1.1)
    y -= header_h
    fig.add_artist(Line2D([0.05, 0.95], [y, y], color=INK, lw=1.2))
    y -= 0.2 * row_h
    for i, row in enumerate(rows):
        if i % 2 == 0:
            fig.add_artist(
                Rectangle((0.05, y - row_h), 0.90, row_h, color="#eef3f8", lw=0, zorder=0)
            )
        for j, (x, cell, al) in enumerate(zip(cols_x, row, aligns, strict=True)):
            weight = "bold" if j in (0, 6) else "normal"
            size = font * (0.75 if cell == "no braking" or j == 1 or "+" in cell else 1.0)
            fig.text(
                x,
                y - row_h * 0.5,
                cell,
                fontsize=size,
                ha=al,
                va="center",
                fontweight=weight,
                color=INK,
            )
        y -= row_h
    note = (
        "Brake at: where the ideal's speed starts falling into the corner (a lift counts), "
        "from the start/finish gate, one per braking zone; before apex: from the first "
        "brake point to the apex. Entry: speed at the first brake point; minimum: the "
        "lowest in the corner (at the apex where it is taken without slowing); exit: "
        f"where the corner's curve ends. {NOT_AVAILABLE}: none."
    )
    fig.text(0.06, 0.2, textwrap.fill(note, 105), fontsize=9, va="top", color="#444444")
    fig.add_artist(
        Rectangle((0.05, 0.025), 0.90, 0.115, facecolor="#fff4e0", edgecolor=ACCENT, lw=1.5)
    )
    fig.text(0.07, 0.128, "Caution", fontsize=12, fontweight="bold", va="top", color="#7a4a00")
    fig.text(
        0.07,
        0.105,
        textwrap.fill(caution, 88),
        fontsize=10.5,
        va="top",
        color=INK,
        linespacing=1.35,
    )
    buf = io.BytesIO()
    meta = (
        {"Software": None}
        if fmt == "png"
        else {"Creator": None, "Producer": None, "CreationDate": None}
    )
    fig.savefig(buf, format=fmt, dpi=SHEET_DPI, metadata=meta)
    return buf.getvalue()


# --------------------------------------------------------------------------- the session


def _number_ticks(lo: int, hi: int, width_px: float) -> np.ndarray:
    """Whole-number ticks for lap numbers, as many as fit the width."""
    from limitlap._canvas import auto_bins, nice_ticks

    ticks = nice_ticks(lo, hi, auto_bins(width_px, _FONT_PT, 3.0, DPI))
    ticks = ticks[(ticks == np.round(ticks)) & (ticks >= lo) & (ticks <= hi)]
    return ticks if ticks.size else np.array([lo])


def session_figure(lap_numbers, grip_estimates, time_left_s, analysed: int) -> bytes:
    """Grip found and time left against lap number, every lap timed gate to gate.

    Parameters
    ----------
    lap_numbers : array-like of int
        The laps. [-]
    grip_estimates : array-like
        Grip scale each lap showed against the envelope (NaN where unknown). [-]
    time_left_s : array-like
        Each lap's time left to the ideal on its own line. [s]
    analysed : int
        The analysed lap (drawn darker). [-]

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["session"]`` pixels.
    """
    from limitlap._canvas import Panel

    c = _canvas("session")
    n = np.asarray(lap_numbers, dtype=np.float64)
    k = np.asarray(grip_estimates, dtype=np.float64)
    left_s = np.asarray(time_left_s, dtype=np.float64)
    xlim = (float(n.min()) - 0.6, float(n.max()) + 0.6) if n.size else (0.0, 1.0)
    kf = k[np.isfinite(k)]
    k_lo, k_hi = (float(kf.min()), float(kf.max())) if kf.size else (0.9, 1.1)
    k_pad = max(0.1 * (k_hi - k_lo), 0.05 - 0.5 * (k_hi - k_lo))  # 0.1 at least: noise stays small
    lf = np.concatenate([left_s[np.isfinite(left_s)], [0.0]])
    l_span = max(float(lf.max() - lf.min()), 1e-3)
    limits = (
        (k_lo - k_pad, k_hi + k_pad),
        (min(float(lf.min()), 0.0) - 0.05 * l_span, float(lf.max()) + 0.12 * l_span),
    )
    top, gap, bottom, right = 30, 58, 52, 22
    height = (c.height - top - gap - bottom) / 2
    ticks = [_y_ticks(lo, hi, height) for lo, hi in limits]
    left = max(_left_margin(c, labels) for _, labels in ticks)
    width = c.width - left - right
    xt = _number_ticks(int(n.min()) if n.size else 0, int(n.max()) if n.size else 1, width)
    grip_p = Panel(c, left, top, width, height, xlim, limits[0])
    time_p = Panel(c, left, top + height + gap, width, height, xlim, limits[1])
    for p, (yt, _) in zip((grip_p, time_p), ticks, strict=True):
        p.grid(xt, yt, GRID, 0.6)
    ok = np.isfinite(k)
    grip_p.line(n[ok], k[ok], ACCENT, 1.2)
    grip_p.scatter(n[ok], k[ok], "o", 7.0, ACCENT)
    mine = n == analysed
    grip_p.scatter(n[mine & ok], k[mine & ok], "o", 10.0, REAL)
    time_p.bar(n[~mine], np.nan_to_num(left_s[~mine]), "#e8a27a", width=0.6)
    time_p.bar(n[mine], np.nan_to_num(left_s[mine]), REAL, width=0.6)
    time_p.hline(0.0, IDEAL, 1.2)
    for p, (yt, ylabels), label, title in (
        (grip_p, ticks[0], "grip found [-]", "Grip found on each lap (the envelope's grip = 1)"),
        (
            time_p,
            ticks[1],
            "time left [s]",
            f"Time left to the ideal on each lap's own line (lap {analysed} darker)",
        ),
    ):
        below = p.xticks(xt, [f"{int(x)}" for x in xt], size_pt=_FONT_PT, colour=INK)
        p.frame(colour=EDGE)
        p.ylabel(label, p.yticks(yt, ylabels, size_pt=_FONT_PT, colour=INK), size_pt=_FONT_PT)
        p.title(title, size_pt=_TITLE_PT)
    time_p.xlabel("lap number", below, size_pt=_FONT_PT)
    return _png(c, "session")


# --------------------------------------------------------------------------- lap against lap


def versus_delta_figure(distance_m, delta_s, corners, label_a: str, label_b: str) -> bytes:
    """Time delta of lap B against lap A along the common line (rising = B losing time).

    Parameters
    ----------
    distance_m : array-like
        Stations of the common line. [m]
    delta_s : array-like
        B's elapsed time minus A's at each station. [s]
    corners : list of dict
        Corner segments (``name``, ``start_m``, ``apex_m``, ``end_m``) on the common line. [m]
    label_a, label_b : str
        What A and B are ("lap 3 of dry.csv").

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["versus_delta"]`` pixels.
    """
    c = _canvas("versus_delta")
    s = np.asarray(distance_m, dtype=np.float64)
    d = np.asarray(delta_s, dtype=np.float64)
    fin = np.concatenate([d[np.isfinite(d)], [0.0]])
    lo, hi = float(fin.min()), float(fin.max())
    span = max(hi - lo, 1e-3)
    p, xt, yt = _lap_panel(c, s, (lo - 0.05 * span, hi + 0.2 * span))
    _corner_bands(p, corners)
    with np.errstate(invalid="ignore"):
        p.fill_between(s, 0.0, d, REAL, alpha=0.18, where=d >= 0)
        p.fill_between(s, 0.0, d, IDEAL, alpha=0.18, where=d < 0)
    p.grid(xt, yt, GRID, 0.6)
    p.line(s, d, INK, 1.5)
    p.hline(0.0, EDGE, 1.0)
    _axes(
        p,
        xt,
        yt,
        "distance along the common line from the start/finish gate [m]",
        "B minus A [s]",
        f"Time delta: B ({label_b}) minus A ({label_a}); rising = B losing time",
    )
    _corner_names(p, corners, hi + 0.08 * span)
    return _png(c, "versus_delta")


def versus_corner_figure(names, delta_s, left_a_s, left_b_s, label_a: str, label_b: str) -> bytes:
    """Per corner: B minus A, and each lap's time left to its ideal at the common envelope.

    Parameters
    ----------
    names : sequence of str
        Corner names in driving order.
    delta_s : array-like
        B's corner time minus A's. [s]
    left_a_s, left_b_s : array-like
        Each lap's time left in the corner. [s]
    label_a, label_b : str
        What A and B are.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["versus_corners"]`` pixels.
    """
    from limitlap._canvas import Entry, Panel

    c = _canvas("versus_corners")
    x = np.arange(len(names), dtype=np.float64)
    series = [np.asarray(a, dtype=np.float64) for a in (delta_s, left_a_s, left_b_s)]
    allv = np.concatenate([np.nan_to_num(a) for a in series] + [[0.0]])
    lo, hi = float(allv.min()), float(allv.max())
    span = max(hi - lo, 1e-3)
    ylim = (lo - 0.05 * span, hi + 0.25 * span)
    top, bottom, right = 30, 52, 22
    height = c.height - top - bottom
    yt, ylabels = _y_ticks(ylim[0], ylim[1], height)
    left = _left_margin(c, ylabels)
    w = 0.27
    p = Panel(c, left, top, c.width - left - right, height, (-0.6, len(names) - 0.4), ylim)
    p.grid(yticks=yt, colour=GRID, lw_pt=0.6)
    colours = (INK, ACCENT, BEST)
    for off, values, colour in zip((-w, 0.0, w), series, colours, strict=True):
        p.bar(x + off, np.nan_to_num(values), colour, width=w)
    p.hline(0.0, EDGE, 1.0)
    p.frame(colour=EDGE)
    name_pt = 10 if len(names) <= 16 else 8
    below = p.xticks(x, list(names), size_pt=name_pt, colour=INK)
    p.xlabel("corner", below, size_pt=_FONT_PT)
    p.ylabel("[s]", p.yticks(yt, ylabels, size_pt=_FONT_PT, colour=INK), size_pt=_FONT_PT)
    p.title("Per corner: B minus A, and each lap's time left to its ideal", size_pt=_TITLE_PT)
    c.legend(
        [
            Entry("B minus A (+ = B slower)", "patch", INK),
            Entry(f"A ({label_a}): time left", "patch", ACCENT),
            Entry(f"B ({label_b}): time left", "patch", BEST),
        ],
        loc="upper right",
        within=p.box,
        size_pt=9,
    )
    return _png(c, "versus_corners")
