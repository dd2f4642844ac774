"""Figures of the report: each function draws one figure and returns its PNG bytes.

matplotlib is imported inside the functions (Agg backend, no display needed), so importing
:mod:`limitlap.figures` or :mod:`limitlap.report` costs nothing until a figure is drawn.
Every figure has a fixed pixel size (:data:`FIGURE_SIZE_PX`); nothing is cropped to fit,
so the size is known before drawing.

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
import itertools
import math
import threading

import numpy as np

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
    "target_sheet": (1240, 1754),  # A4 portrait at 150 dpi (the sheet is drawn at 150 dpi)
}
#: Resolution of the printable target sheet: A4 = 8.27 x 11.69 in. [dots per inch]
SHEET_DPI = 150


#: Style of every figure, applied only while a figure is built and drawn (the caller's
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


# rcParams are one dict per process: threads (e.g. a Dask worker's) draw one at a time, so
# one figure's style context cannot end while another figure is being drawn.
_STYLE_LOCK = threading.RLock()


def _styled(draw):
    """Run a figure function inside the report's matplotlib style (imported on first use)."""

    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        import matplotlib

        with _STYLE_LOCK, matplotlib.rc_context(_STYLE):
            return draw(*args, **kwargs)

    return wrapper


def _figure(kind: str, **kwargs):
    """A figure of the kind's fixed size on its own Agg canvas (no pyplot, no GUI state)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w, h = FIGURE_SIZE_PX[kind]
    dpi = SHEET_DPI if kind == "target_sheet" else DPI
    fig = Figure(figsize=(w / dpi, h / dpi), dpi=dpi, **kwargs)
    FigureCanvasAgg(fig)
    return fig


def _png(fig, kind: str) -> bytes:
    """Render to PNG bytes at the figure's fixed size.

    The figure is opaque, so the PNG holds RGB without the alpha channel, at zlib level 3:
    the same pixels as matplotlib's own RGBA at level 6 in files of about the same size,
    encoded in about half the time.
    """
    from PIL import Image

    dpi = SHEET_DPI if kind == "target_sheet" else DPI
    fig.canvas.draw()
    rgb = np.asarray(fig.canvas.buffer_rgba())[..., :3]
    buf = io.BytesIO()
    Image.fromarray(rgb).save(buf, format="png", compress_level=3, dpi=(dpi, dpi))
    return buf.getvalue()


# Fixed layout (titles too: ``y=1.0`` puts a title where matplotlib's own placement would,
# above an axes without top tick labels, without measuring the axes for it). Every figure has a fixed pixel size and fixed fonts, so its axes sit at
# fixed places (pixel margins below) instead of being fitted by a layout engine, which
# draws the whole figure once more to measure it. The margins hold the tick labels and
# axis labels at the style's font sizes (11 pt = 15 px at 100 dpi); labels whose width
# depends on the data (corner and lap names) are measured first (:func:`_text_width_px`).
_TICK_PX = 10  # tick 3.5 pt + pad 3.5 pt at 100 dpi
_LABEL_PX = 22  # an 11 pt axis label and its 4 pt pad


def _axes_px(fig, left, bottom, width, height, **kwargs):
    """Axes at a fixed place, in pixels from the figure's lower-left corner."""
    w, h = fig.bbox.width, fig.bbox.height
    return fig.add_axes((left / w, bottom / h, width / w, height / h), **kwargs)


def _inset_px(fig, left, right, top, bottom, **kwargs):
    """Axes filling the figure less the given pixel margins."""
    w, h = fig.bbox.width, fig.bbox.height
    return _axes_px(fig, left, bottom, w - left - right, h - top - bottom, **kwargs)


def _text_width_px(fig, texts, fontsize) -> float:
    """Width of the widest text at ``fontsize`` points, measured by the figure's renderer."""
    from matplotlib.font_manager import FontProperties

    renderer = fig.canvas.get_renderer()
    prop = FontProperties(size=fontsize)
    return max(
        (renderer.get_text_width_height_descent(str(t), prop, ismath=False)[0] for t in texts),
        default=0.0,
    )


def _fit_left(fig, axes, pad_px: float = 6.0) -> None:
    """Move the axes' common left edge so the widest y tick label and the y label fit.

    The tick labels are the ones the axis will draw (its locator and formatter on its
    limits), measured as text: no tick artists are made.
    """
    import matplotlib

    width = 0.0
    for ax in axes:
        axis = ax.yaxis
        lo, hi = sorted(axis.get_view_interval())
        tol = 1e-9 * (hi - lo)
        locs = [x for x in axis.get_major_locator()() if lo - tol <= x <= hi + tol]
        labels = axis.get_major_formatter().format_ticks(locs)
        width = max(width, _text_width_px(fig, labels, matplotlib.rcParams["ytick.labelsize"]))
    left = (width + _TICK_PX + _LABEL_PX + pad_px) / fig.bbox.width
    for ax in axes:
        pos = ax.get_position()
        ax.set_position((left, pos.y0, pos.x1 - left, pos.height))


def _fit_names(fig, ax, texts, margin: float) -> None:
    """Widen an equal-aspect map's margins until every name lies inside the axes."""
    renderer = fig.canvas.get_renderer()
    ax.margins(margin)
    for _ in range(3):
        ax.apply_aspect()
        box = ax.get_window_extent(renderer)
        over = 0.0
        for t in texts:
            bb = t.get_window_extent(renderer)
            over = max(over, box.x0 - bb.x0, bb.x1 - box.x1, box.y0 - bb.y0, bb.y1 - box.y1)
        if over <= 0.5:
            return
        # the data span maps to the axes' size less both margins: widen by the overhang
        margin += (over + 4.0) / min(box.width, box.height) * (1.0 + 2.0 * margin)
        ax.margins(margin)


def _kmh(v_m_s):
    return np.asarray(v_m_s, dtype=np.float64) / KMH_TO_M_S


def _corner_bands(ax, corners, *, label_y=None, labels=True):
    """Shade every other corner segment and write each corner's name above its apex."""
    lo_x, hi_x = ax.get_xlim()
    close = 0.025 * (hi_x - lo_x)  # labels nearer than this go up a line
    last_x, raised = -math.inf, False
    for i, c in enumerate(corners):
        start, end = c["start_m"], c["end_m"]
        if i % 2 == 0:
            if end >= start:
                ax.axvspan(start, end, color=BAND, zorder=0, lw=0)
            else:  # the segment runs across the gate: shade both ends of the lap
                lo, hi = ax.get_xlim()
                ax.axvspan(start, max(hi, start), color=BAND, zorder=0, lw=0)
                ax.axvspan(min(lo, end), end, color=BAND, zorder=0, lw=0)
        if labels:
            raised = (c["apex_m"] - last_x < close) and not raised
            last_x = c["apex_m"]
            y = ax.get_ylim()[1] if label_y is None else label_y
            ax.annotate(
                c["name"],
                (c["apex_m"], y),
                xytext=(0, 12 if raised else 2),
                textcoords="offset points",
                ha="center",
                va="bottom",
                fontsize=9,
                color=INK,
                annotation_clip=False,
            )


# --------------------------------------------------------------------------- along the lap


@_styled
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
    fig = _figure("speed")
    ax = _inset_px(fig, left=66, right=22, top=30, bottom=52)
    s = np.asarray(distance_m, dtype=np.float64)
    ax.plot(s, _kmh(speed_ideal_m_s), color=IDEAL, lw=1.8, label="ideal (your envelope)")
    ax.plot(s, _kmh(speed_real_m_s), color=REAL, lw=1.3, label="your lap")
    top = np.nanmax([np.nanmax(_kmh(speed_ideal_m_s)), np.nanmax(_kmh(speed_real_m_s))])
    ax.set_ylim(0, top * 1.12)
    ax.set_xlim(s[0], s[-1])
    _corner_bands(ax, corners, label_y=top * 1.02)
    ax.set_xlabel("distance from the start/finish gate [m]")
    ax.set_ylabel("speed [km/h]")
    ax.set_title("Speed along the lap", loc="left", y=1.0)
    ax.legend(loc="lower right", ncols=2)
    _fit_left(fig, [ax])
    return _png(fig, "speed")


@_styled
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
    fig = _figure("delta")
    ax = _inset_px(fig, left=78, right=22, top=30, bottom=52)
    s = np.asarray(distance_m, dtype=np.float64)
    d = np.asarray(time_delta_s, dtype=np.float64)
    ax.fill_between(s, 0, d, where=d >= 0, color=REAL, alpha=0.18, lw=0, interpolate=True)
    ax.fill_between(s, 0, d, where=d < 0, color=IDEAL, alpha=0.18, lw=0, interpolate=True)
    ax.plot(s, d, color=REAL, lw=1.5, label="your lap behind the ideal")
    ax.axhline(0.0, color=IDEAL, lw=1.2, label="ideal")
    lo, hi = float(np.nanmin(d)), float(np.nanmax(d))
    span = max(hi - min(lo, 0.0), 1e-3)
    ax.set_ylim(min(lo, 0.0) - 0.05 * span, hi + 0.18 * span)
    ax.set_xlim(s[0], s[-1])
    _corner_bands(ax, corners, label_y=hi + 0.06 * span)
    ax.set_xlabel("distance from the start/finish gate [m]")
    ax.set_ylabel("time delta [s]")
    ax.set_title("Time delta: your lap minus the ideal (rising = losing time)", loc="left", y=1.0)
    ax.legend(loc="lower right")
    _fit_left(fig, [ax])
    return _png(fig, "delta")


@_styled
def curvature_check_figure(
    distance_m, curvature_line_1_m, curvature_ay_1_m, curvature_yaw_1_m, corners, title
) -> bytes:
    """Data check: the rebuilt line's curvature against a_y/v² and yaw rate/v.

    The three are the same quantity measured three ways (κ = a_n/v² = χ̇/v; REFERENCES §3.1
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
    fig = _figure("check")
    ax = _inset_px(fig, left=78, right=22, top=30, bottom=52)
    s = np.asarray(distance_m, dtype=np.float64)
    k_line = 1000.0 * np.asarray(curvature_line_1_m, dtype=np.float64)
    ax.plot(s, k_line, color=INK, lw=1.6, label="rebuilt line (GNSS + inertial)")
    for values, colour, label in (
        (curvature_ay_1_m, ACCENT, "a_y / v²"),
        (curvature_yaw_1_m, BEST, "yaw rate / v"),
    ):
        k = 1000.0 * np.asarray(values, dtype=np.float64)
        if np.isfinite(k).any():
            ax.plot(s, k, color=colour, lw=1.0, alpha=0.9, label=label)
    finite = np.concatenate([k_line[np.isfinite(k_line)], [0.0]])
    lo, hi = float(finite.min()), float(finite.max())
    span = max(hi - lo, 1e-3)
    ax.set_ylim(lo - 0.08 * span, hi + 0.2 * span)
    ax.set_xlim(s[0], s[-1])
    _corner_bands(ax, corners, label_y=hi + 0.08 * span)
    ax.set_xlabel("distance from the start/finish gate [m]")
    ax.set_ylabel("curvature [1/km] (+ left)")
    ax.set_title(title, loc="left", y=1.0)
    ax.legend(loc="lower right", ncol=3)
    _fit_left(fig, [ax])
    return _png(fig, "check")


@_styled
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
    fig = _figure("time_left")
    ranked = sorted(corners, key=lambda c: -c["time_left_s"])
    names = [c["name"] for c in ranked]
    name_px = _text_width_px(fig, names, 10 if len(names) <= 18 else 8)
    ax = _inset_px(fig, left=name_px + _TICK_PX + 8, right=12, top=30, bottom=52)
    values = np.array([c["time_left_s"] for c in ranked], dtype=np.float64)
    y = np.arange(len(ranked))
    colours = [
        REAL if i < 3 and v > 0 else "#e8a27a" if v > 0 else IDEAL for i, v in enumerate(values)
    ]
    ax.barh(y, values, color=colours, height=0.7)
    ax.set_yticks(y, names, fontsize=10 if len(names) <= 18 else 8)
    ax.invert_yaxis()
    span = max(float(np.max(np.abs(values))) if values.size else 0.0, 1e-3)
    for yi, v in zip(y, values, strict=True):
        ax.annotate(
            f"{v:+.2f} s",
            (max(v, 0.0), yi),
            xytext=(4, 0),
            textcoords="offset points",
            va="center",
            fontsize=9,
        )
    ax.set_xlim(min(0.0, float(values.min(initial=0.0))) - 0.02 * span, span * 1.18)
    ax.grid(axis="y", visible=False)
    ax.axvline(0.0, color="#888888", lw=0.8)
    ax.set_xlabel("time left to the ideal [s]")
    ax.set_title(
        f"Time left per corner, ranked (total {values.sum():.2f} s; top three darker)",
        loc="left",
        y=1.0,
    )
    return _png(fig, "time_left")


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


@_styled
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
    fig = _figure("map")
    from matplotlib.collections import LineCollection
    from matplotlib.colors import LinearSegmentedColormap, TwoSlopeNorm

    ax = _inset_px(fig, left=30, right=30, top=30, bottom=100)
    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    rate_ms_m = np.asarray(loss_rate_s_m, dtype=np.float64) * 1e3  # [ms/m] for the scale
    pts = np.column_stack([x, y])
    segs = np.stack([pts, np.roll(pts, -1, axis=0)], axis=1)
    finite = rate_ms_m[np.isfinite(rate_ms_m)]
    lim = max(float(np.percentile(finite, 98)) if finite.size else 1.0, 1e-3)
    gain = -finite[finite < 0]
    # The gaining side of the scale only as long as the data needs (at least a quarter).
    lim_gain = max(float(np.percentile(gain, 98)) if gain.size else 0.0, 0.25 * lim)
    cmap = LinearSegmentedColormap.from_list(
        "limitlap_loss", [IDEAL, "#9cc3dc", "#e6e6e6", "#f0b07a", REAL, "#6b2b00"]
    )
    norm = TwoSlopeNorm(vmin=-lim_gain, vcenter=0.0, vmax=lim)
    ax.plot(
        np.append(x, x[0]),
        np.append(y, y[0]),
        color="#bbbbbb",
        lw=9,
        solid_capstyle="round",
        zorder=1,
    )
    lc = LineCollection(segs, cmap=cmap, norm=norm, linewidths=5.5, zorder=2, capstyle="round")
    lc.set_array(np.clip(rate_ms_m, -lim_gain, lim))
    ax.add_collection(lc)
    s = np.asarray(distance_m, dtype=np.float64)
    span = max(np.ptp(x), np.ptp(y))
    tx, ty = np.gradient(x), np.gradient(y)
    kappa = np.gradient(np.unwrap(np.arctan2(ty, tx))) / np.maximum(np.hypot(tx, ty), 1e-9)
    names = []
    for c in corners:
        i = int(np.argmin(np.abs(s - c["apex_m"])))
        # Label on the outside of the bend: the right-hand normal of a left bend (+kappa).
        norm = math.hypot(tx[i], ty[i]) or 1.0
        side = -1.0 if kappa[i] >= 0 else 1.0
        dx, dy = -ty[i] / norm * side, tx[i] / norm * side
        off = 0.04 * span
        names.append(
            ax.annotate(
                c["name"],
                (x[i], y[i]),
                xytext=(x[i] + off * dx, y[i] + off * dy),
                ha="center",
                va="center",
                fontsize=10,
                fontweight="bold",
                color=INK,
                zorder=4,
            )
        )
    ax.plot([x[0]], [y[0]], marker="s", ms=9, color=INK, zorder=5, ls="none", label="start/finish")
    if x.size > 1:
        j = int(np.searchsorted(s, s[0] + 0.04 * (s[-1] - s[0])))  # 4 % of the lap on
        j = min(max(j, 1), x.size - 1)
        ax.annotate(
            "",
            xy=(x[j], y[j]),
            xytext=(x[0], y[0]),
            arrowprops={"arrowstyle": "->", "color": INK, "lw": 1.5},
            zorder=5,
        )
    ax.set_aspect("equal", adjustable="datalim")
    _fit_names(fig, ax, names, margin=0.08)
    ax.grid(False)
    ax.set_xticks([])
    ax.set_yticks([])
    for side in ("left", "bottom"):
        ax.spines[side].set_visible(False)
    w_px = fig.bbox.width
    cax = _axes_px(fig, 0.15 * w_px, 66, 0.70 * w_px, 17)  # 70 % of the width, 40:1
    cb = fig.colorbar(lc, cax=cax, orientation="horizontal")
    cb.set_label("time lost per metre [ms/m]: orange = time left here, blue = gaining, grey = even")
    ax.set_title("Where the time is left on the lap", loc="left", y=1.0)
    ax.legend(loc="upper right", title="arrow: direction of travel", title_fontsize=9)
    return _png(fig, "map")


# --------------------------------------------------------------------------- g-g diagram


def envelope_boundary(speed_m_s: float, vehicle, grip_scale: float = 1.0, n_points: int = 181):
    r"""Closed boundary of the g-g envelope at one speed, as (a_y, a_x) points.

    Parameters
    ----------
    speed_m_s : float
        Speed. [m/s]
    vehicle : Vehicle
        Complete vehicle (INTERFACE §3).
    grip_scale : float
        Grip scale k on the friction coefficients. [-]
    n_points : int
        Points per half (driving and braking side). [-]

    Returns
    -------
    tuple of numpy.ndarray
        Lateral acceleration (+ left) and longitudinal acceleration (+ forward) along the
        boundary, driving half left to right, then braking half back. [m/s²]

    Notes
    -----
    INTERFACE §3 on tyre forces: at lateral share :math:`u = F_y/F_{y,max}` the tyres
    leave :math:`(1-|u|^n)^{1/n}` of the longitudinal limit (superellipse); the driving
    side is also capped at :math:`P/v`, as in the solver's kernel; drag and rolling
    resistance shift both sides rearwards.

    Examples
    --------
    >>> from limitlap.vehicle import Vehicle
    >>> car = Vehicle("dot", 1000.0, math.inf, 0.0, 0.0, 0.0, mu_lat=1.0, mu_brk=1.0,
    ...               mu_trac=1.0, exponent=2.0)
    >>> ay, ax = envelope_boundary(20.0, car)
    >>> bool(np.allclose(np.hypot(ay, ax), 9.80665))  # the friction circle of radius g
    True
    """
    from limitlap import limits

    veh = vehicle.scaled(grip_scale) if grip_scale != 1.0 else vehicle
    v = float(speed_m_s)
    m = veh.mass_kg
    normal = float(limits.normal_load_n(v, veh))
    resist = float(limits.resistance_n(v, veh))
    fy_max = veh.mu_lat * normal
    n = veh.exponent
    theta = np.linspace(-0.5 * np.pi, 0.5 * np.pi, n_points)
    # Superellipse parametrisation: u = sign(sin)|sin|^(2/n), share = |cos|^(2/n).
    u = np.sign(np.sin(theta)) * np.abs(np.sin(theta)) ** (2.0 / n)
    share = np.abs(np.cos(theta)) ** (2.0 / n)
    drive_power = veh.power_w / v if v > 0 else math.inf
    fx_drive = np.minimum(veh.mu_trac * normal * share, drive_power)
    fx_brake = veh.mu_brk * normal * share
    ay = u * fy_max / m
    ax_drive = (fx_drive - resist) / m
    ax_brake = (-fx_brake - resist) / m
    return np.concatenate([ay, ay[::-1]]), np.concatenate([ax_drive, ax_brake[::-1]])


def _ray_reach(poly_x, poly_y, angles):
    """Farthest crossing of rays from the origin with a closed polygon, per angle."""
    px = np.asarray(poly_x)
    py = np.asarray(poly_y)
    ax_, ay_ = px, py
    bx, by = np.roll(px, -1), np.roll(py, -1)
    dx, dy = np.cos(angles)[:, None], np.sin(angles)[:, None]
    ex, ey = (bx - ax_)[None, :], (by - ay_)[None, :]
    denom = dx * ey - dy * ex
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (ax_[None, :] * ey - ay_[None, :] * ex) / denom  # distance along the ray
        w = (ax_[None, :] * dy - ay_[None, :] * dx) / denom  # position along the edge
    ok = (np.abs(denom) > 1e-15) & (t >= 0) & (w >= 0) & (w <= 1)
    return np.where(ok, t, 0.0).max(axis=1)


def _hull(points_x, points_y):
    """Convex hull polygon of the points, or None for fewer than 3 non-collinear points."""
    pts = np.column_stack([points_x, points_y])
    pts = pts[np.all(np.isfinite(pts), axis=1)]
    if pts.shape[0] < 3:
        return None
    from scipy.spatial import ConvexHull, QhullError

    try:
        hull = ConvexHull(pts)
    except (QhullError, ValueError):
        return None
    v = pts[hull.vertices]
    return v[:, 0], v[:, 1]


def speed_bands_m_s(speed_m_s, n_bands: int = 3):
    """Speed band edges for the g-g panels: equal sample counts, rounded to 10 km/h.

    Parameters
    ----------
    speed_m_s : array-like
        Sample speeds. [m/s]
    n_bands : int
        Number of bands. [-]

    Returns
    -------
    list of tuple
        (low, high) edges of each band. [m/s]
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    v = v[np.isfinite(v)]
    step = 10.0 * KMH_TO_M_S
    if v.size == 0:
        return []
    q = np.quantile(v, np.linspace(0.0, 1.0, n_bands + 1))
    edges = np.unique(
        np.concatenate(
            [
                [np.floor(q[0] / step) * step],
                np.round(q[1:-1] / step) * step,
                [np.ceil(q[-1] / step) * step],
            ]
        )
    )
    if edges.size < 2:
        edges = np.array([edges[0] - step, edges[0] + step])
    return [(float(a), float(b)) for a, b in itertools.pairwise(edges)]


@_styled
def gg_figure(
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2, vehicle, grip_scale=1.0, bands=None, fit_points=None
) -> bytes:
    """g-g diagram per speed band: envelope, the lap's samples, the grip left unused.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        The lap's samples: speed [m/s], longitudinal (+ forward) and lateral (+ left)
        acceleration [m/s²].
    vehicle : Vehicle
        Complete envelope the lap is compared with.
    grip_scale : float
        Grip scale of the comparison. [-]
    bands : list of tuple, optional
        (low, high) speed bands [m/s]; by default three from :func:`speed_bands_m_s`.
    fit_points : list of dict, optional
        Boundary points the envelope fit used, each with ``accel_lat_m_s2``,
        ``accel_lon_m_s2`` and ``speed_m_s`` arrays; drawn as small crosses.

    Returns
    -------
    bytes
        PNG image, ``FIGURE_SIZE_PX["gg"]`` pixels.

    Notes
    -----
    The envelope is drawn at the band's middle speed (solid) and its edges (dotted). The
    shaded ring lies between the convex hull of the band's samples and the envelope at
    the middle speed: grip the lap never asked for. Its share of the envelope's area is
    in each panel's title.
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    ax_s = np.asarray(accel_lon_m_s2, dtype=np.float64)
    ay_s = np.asarray(accel_lat_m_s2, dtype=np.float64)
    if bands is None:
        bands = speed_bands_m_s(v, n_bands=4)
    bands = list(bands)[:4] or [(0.0, 1.0)]
    fig = _figure("gg")
    from matplotlib.patches import Polygon

    # Square panels side by side, centred; below them the axis labels, then the legend.
    n = len(bands)
    left, right, top, bottom, gap = 62, 12, 48, 100, 24
    avail_w, avail_h = fig.bbox.width - left - right, fig.bbox.height - top - bottom
    side = min((avail_w - (n - 1) * gap) / n, avail_h)
    x0 = left + 0.5 * (avail_w - n * side - (n - 1) * gap)
    y0 = bottom + 0.5 * (avail_h - side)
    axes = [_axes_px(fig, x0, y0, side, side)]
    for i in range(1, n):
        ax = _axes_px(fig, x0 + i * (side + gap), y0, side, side, sharex=axes[0], sharey=axes[0])
        ax.tick_params(labelleft=False)
        axes.append(ax)
    angles = np.linspace(-np.pi, np.pi, 721)
    lim = 0.0
    for ax, (lo, hi) in zip(axes, bands, strict=True):
        mid = 0.5 * (lo + hi)
        ey, ex = envelope_boundary(mid, vehicle, grip_scale)
        for edge in (lo, hi):
            if edge > 0:
                ly, lx = envelope_boundary(edge, vehicle, grip_scale)
                ax.plot(ly / G0_M_S2, lx / G0_M_S2, color=IDEAL, lw=0.7, ls="--", alpha=0.45)
        inband = (v >= lo) & (v < hi) & np.isfinite(ax_s) & np.isfinite(ay_s)
        sy, sx = ay_s[inband] / G0_M_S2, ax_s[inband] / G0_M_S2
        r_env = _ray_reach(ey / G0_M_S2, ex / G0_M_S2, angles)
        hull = _hull(sy, sx)
        title = f"{lo / KMH_TO_M_S:.0f}-{hi / KMH_TO_M_S:.0f} km/h"
        if hull is not None:
            r_hull = _ray_reach(hull[0], hull[1], angles)
            r_in = np.minimum(r_hull, r_env)
            # Ring between the samples' reach and the envelope: outer loop forward, inner
            # loop back; the angles include both -pi and pi so the seam closes exactly.
            ring_y = np.concatenate([r_env * np.cos(angles), (r_in * np.cos(angles))[::-1]])
            ring_x = np.concatenate([r_env * np.sin(angles), (r_in * np.sin(angles))[::-1]])
            # added as an artist, not a patch: the limits are set below, and a patch's
            # limits update walks its 1,442 vertices in Python (35 ms a panel)
            ring = Polygon(
                np.column_stack([ring_y, ring_x]),
                closed=True,
                color=UNUSED,
                alpha=0.45,
                lw=0,
                label="grip not used",
            )
            ax.add_artist(ring)
            hy, hx = np.append(hull[0], hull[0][0]), np.append(hull[1], hull[1][0])
            ax.plot(hy, hx, color=REAL, lw=1.2, label="reach of your samples")
            # Polar area 1/2 sum r^2 dtheta on equal steps (last angle repeats the first).
            unused = 1.0 - float(np.sum(r_in[:-1] ** 2) / np.sum(r_env[:-1] ** 2))
            title += f": {100 * unused:.0f} % of the envelope unused"
        ax.plot(ey / G0_M_S2, ex / G0_M_S2, color=IDEAL, lw=1.8, label="envelope")
        ax.scatter(sy, sx, s=5, color="#444444", alpha=0.4, lw=0, label="your samples")
        if fit_points:
            # all the fit's points in the band as one collection (one artist, not one per
            # fitted speed band: the same crosses, drawn at a fraction of the cost)
            fv, fy, fx = (
                np.concatenate([np.asarray(fp[k], dtype=np.float64) for fp in fit_points])
                for k in ("speed_m_s", "accel_lat_m_s2", "accel_lon_m_s2")
            )
            sel = (fv >= lo) & (fv < hi)
            ax.scatter(
                fy[sel] / G0_M_S2,
                fx[sel] / G0_M_S2,
                s=14,
                marker="x",
                color=ACCENT,
                lw=0.9,
                label="fit points",
            )
        lim = max(lim, float(np.max(np.abs(ey))) / G0_M_S2, float(np.max(np.abs(ex))) / G0_M_S2)
        ax.set_title(title, fontsize=10, y=1.0)
        ax.set_xlabel("lateral [g] (+ left)")
        ax.axhline(0, color="#999999", lw=0.6)
        ax.axvline(0, color="#999999", lw=0.6)
        ax.set_aspect("equal", adjustable="box")
    axes[0].set_ylabel("longitudinal [g] (+ forward)")
    lim *= 1.08
    axes[0].set_xlim(-lim, lim)
    axes[0].set_ylim(-lim, lim)
    handles, labels = axes[0].get_legend_handles_labels()
    uniq = dict(zip(labels, handles, strict=True))
    fig.legend(uniq.values(), uniq.keys(), loc="lower center", ncols=len(uniq), markerscale=3)
    return _png(fig, "gg")


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


@_styled
def detail_figure(corner, distance_m, length_m, real, ideal, caption="") -> bytes:
    """Speed, brake and throttle over one corner, real against ideal.

    Parameters
    ----------
    corner : dict
        ``name``, ``start_m``, ``apex_m``, ``end_m``, and where known
        ``brake_start_actual_m``, ``brake_start_ideal_m`` [m].
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
    fig = _figure("detail")
    # Three rows sharing the distance axis, heights 2.2 : 1 : 1, 12 px apart.
    left, right, top, bottom, gap = 66, 22, 28, 52, 12
    width = fig.bbox.width - left - right
    unit = (fig.bbox.height - top - bottom - 2 * gap) / 4.2
    heights = (2.2 * unit, unit, unit)
    y_top = fig.bbox.height - top
    axes = []
    for h in heights:
        y_top -= h
        share = {"sharex": axes[0]} if axes else {}
        axes.append(_axes_px(fig, left, y_top, width, h, **share))
        y_top -= gap
    for a in axes[:-1]:
        a.tick_params(labelbottom=False)
    idx, s = _window(distance_m, corner["start_m"], corner["end_m"], length_m)
    if idx.size < 2:
        idx = np.arange(np.asarray(distance_m).size)
        s = np.asarray(distance_m, dtype=np.float64)

    def unwrap(x):
        return x + length_m if x < s[0] - 1e-9 else x

    axes[0].plot(s, _kmh(ideal["speed_m_s"][idx]), color=IDEAL, lw=1.8, label="ideal")
    axes[0].plot(s, _kmh(real["speed_m_s"][idx]), color=REAL, lw=1.3, label="your lap")
    axes[0].set_ylabel("speed [km/h]")
    for key, colour, word, y_frac, va in (
        ("brake_start_ideal_m", IDEAL, "ideal brakes", 0.98, "top"),
        ("brake_start_actual_m", REAL, "you brake", 0.02, "bottom"),
    ):
        b = corner.get(key)
        if b is not None and np.isfinite(b):
            for a in axes:
                a.axvline(unwrap(b), color=colour, lw=1.0, ls="--")
            axes[0].annotate(
                word,
                (unwrap(b), y_frac),
                xycoords=("data", "axes fraction"),
                rotation=90,
                fontsize=8,
                color=colour,
                ha="right",
                va=va,
            )
    axes[0].axvline(unwrap(corner["apex_m"]), color="#777777", lw=0.8, ls=":")
    axes[0].annotate(
        "apex",
        (unwrap(corner["apex_m"]), 0.02),
        xycoords=("data", "axes fraction"),
        fontsize=8,
        color="#555555",
        ha="left",
        va="bottom",
    )
    axes[0].legend(loc="best", ncols=2, frameon=True, framealpha=0.85, edgecolor="none")
    for ax, key in ((axes[1], "brake"), (axes[2], "throttle")):
        ax.plot(
            s,
            100 * np.asarray(ideal[key])[idx],
            color=IDEAL,
            lw=1.6,
            label=ideal.get(f"{key}_label", "ideal"),
        )
        ax.plot(
            s,
            100 * np.asarray(real[key])[idx],
            color=REAL,
            lw=1.2,
            label=real.get(f"{key}_label", "your lap"),
        )
        ax.set_ylim(-5, 110)
        ax.set_ylabel(f"{key} [%]")
        ax.legend(
            loc="center right", fontsize=8, ncols=2, frameon=True, framealpha=0.85, edgecolor="none"
        )
    axes[2].set_xlabel("distance from the start/finish gate [m]")
    axes[0].set_xlim(s[0], s[-1])
    from matplotlib.ticker import FuncFormatter

    # Past the gate the axis runs on; the labels stay distances from the gate.
    axes[2].xaxis.set_major_formatter(FuncFormatter(lambda x, _pos: f"{x % length_m:.0f}"))
    _fit_left(fig, axes)
    title = caption or corner["name"]
    axes[0].set_title(
        title if len(title) < 130 else title[:127] + "...", loc="left", fontsize=11, y=1.0
    )
    return _png(fig, "detail")


# --------------------------------------------------------------------------- best of own laps


@_styled
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
    fig = _figure("best")
    labels = [lap_label, "best of your laps", "ideal (limit)"]
    # Whole lap on the left (width 1), per corner on the right (2.6); the gap holds the
    # right panel's tick labels and axis label.
    margin_l = _text_width_px(fig, labels, 11) + _TICK_PX + 8
    gap, margin_r, top, bottom = 84, 12, 30, 52
    unit = (fig.bbox.width - margin_l - margin_r - gap) / 3.6
    # Corner names wider than their place under the bars are set at 30 degrees.
    names = [c["name"] for c in corners]
    name_size = 10 if len(names) <= 16 else 8
    name_px = _text_width_px(fig, names, name_size)
    tilt = name_px > 0.9 * 2.6 * unit / max(len(names), 1)
    if tilt:  # the slanted names' height (w sin 30 + h cos 30) below the ticks
        bottom = max(bottom, _TICK_PX + 0.5 * name_px + 0.87 * 1.4 * name_size + 8)
    height = fig.bbox.height - top - bottom
    left = _axes_px(fig, margin_l, bottom, unit, height)
    right = _axes_px(fig, margin_l + unit + gap, bottom, 2.6 * unit, height)
    values = [lap_time_s, best_time_s, ideal_time_s]
    colours = [REAL, BEST, IDEAL]
    above = [v - ideal_time_s if v is not None and np.isfinite(v) else np.nan for v in values]
    y = np.arange(3)
    left.barh(y, np.nan_to_num(above), color=colours, height=0.6)
    top = max([a for a in above if np.isfinite(a)] + [1e-3])
    for yi, v, a in zip(y, values, above, strict=True):
        text = (
            "n/a"
            if not np.isfinite(a)
            else f"{_laptime(v)}  (+{a:.2f} s)"
            if a > 0
            else _laptime(v)
        )
        left.annotate(
            text,
            (max(a, 0.0) if np.isfinite(a) else 0.0, yi),
            xytext=(4, 0),
            textcoords="offset points",
            va="center",
            fontsize=10,
        )
    left.set_yticks(y, labels)
    left.invert_yaxis()
    left.grid(axis="y", visible=False)
    left.set_xlim(0, top * 1.9)
    left.set_xlabel("time above the ideal lap [s]")
    left.set_title("Whole lap", loc="left", y=1.0)

    x = np.arange(len(corners))
    this = np.array([c["actual_s"] - c["ideal_s"] for c in corners], dtype=np.float64)
    best = np.array([c.get("best_s", np.nan) - c["ideal_s"] for c in corners], dtype=np.float64)
    w = 0.38
    right.bar(x - w / 2, this, w, color=REAL, label=f"{lap_label} above the limit")
    right.bar(
        x + w / 2, np.nan_to_num(best), w, color=BEST, label="your best segment above the limit"
    )
    right.axhline(0.0, color=IDEAL, lw=1.5, label="ideal (limit)")
    if tilt:
        right.set_xticks(
            x, names, fontsize=name_size, rotation=30, ha="right", rotation_mode="anchor"
        )
    else:
        right.set_xticks(x, names, fontsize=name_size)
    right.set_ylabel("time above the ideal [s]")
    right.grid(axis="x", visible=False)
    right.legend(loc="upper right", fontsize=9)
    right.set_title(
        "Per corner: what you have already done against what the grip allows", loc="left", y=1.0
    )
    return _png(fig, "best")


# --------------------------------------------------------------------------- target sheet


@_styled
def target_sheet(condition, circuit_name: str, caution: str, fmt: str = "png") -> bytes:
    """One printable A4 page of targets for one condition, to take to the car.

    Parameters
    ----------
    condition : dict
        ``label`` (e.g. "wet"), ``grip_scale`` [-], ``lap_time_s`` [s], optionally
        ``length_m`` [m], and ``corners``: records with ``name``, ``apex_m``,
        ``brake_start_m`` and optionally ``before_apex_m`` [m], ``entry_speed_kmh``,
        ``min_speed_kmh``, ``exit_speed_kmh`` [km/h] and ``segment_time_s`` [s].
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

    corners = list(condition["corners"])
    fig.text(0.06, 0.965, f"{circuit_name}", fontsize=20, fontweight="bold", va="top")
    label = condition.get("label") or f"grip {condition['grip_scale']:.2f}"
    fig.text(
        0.06,
        0.93,
        f"Targets: {label}  (grip scale {condition['grip_scale']:.2f})",
        fontsize=15,
        va="top",
    )
    fig.text(0.94, 0.965, "target lap", fontsize=12, ha="right", va="top", color="#555555")
    fig.text(
        0.94,
        0.945,
        _laptime(condition["lap_time_s"]),
        fontsize=30,
        fontweight="bold",
        ha="right",
        va="top",
        color=IDEAL,
    )
    header = [
        "corner",
        "brake at\n[m from gate]",
        "brake\n[m before apex]",
        "entry\n[km/h]",
        "minimum\n[km/h]",
        "exit\n[km/h]",
        "segment\n[s]",
    ]
    rows = []
    for c in corners:
        brake = c.get("brake_start_m")
        has_brake = brake is not None and np.isfinite(brake)
        before = c.get("before_apex_m", c["apex_m"] - brake) if has_brake else None
        length = condition.get("length_m")
        if before is not None and before < 0 and length and np.isfinite(length):
            before += length  # braking starts before the gate, the apex is after it
        if before is not None and not (np.isfinite(before) and before >= 0):
            before = None
        rows.append(
            [
                str(c["name"]),
                f"{brake:.0f}" if has_brake else "no braking",
                f"{before:.0f}" if before is not None else "-",
                f"{c['entry_speed_kmh']:.0f}",
                f"{c['min_speed_kmh']:.0f}",
                f"{c['exit_speed_kmh']:.0f}",
                f"{c['segment_time_s']:.2f}",
            ]
        )
    n = max(len(rows), 1)
    top, bottom = 0.89, 0.19
    header_h = 0.04
    row_h = min(0.055, (top - header_h - bottom) / n)
    font = max(7.0, min(18.0, row_h * 11.69 * 72 * 0.42))
    cols_x = [0.06, 0.24, 0.40, 0.56, 0.68, 0.81, 0.94]
    aligns = ["left"] + ["right"] * 6
    y = top
    for x, h, al in zip(cols_x, header, aligns, strict=True):
        fig.text(x, y, h, fontsize=11, ha=al, va="top", color="#444444", linespacing=1.1)
    y -= header_h
    fig.add_artist(Line2D([0.05, 0.95], [y, y], color=INK, lw=1.2))
    y -= 0.2 * row_h
    for i, row in enumerate(rows):
        if i % 2 == 0:
            fig.add_artist(
                Rectangle((0.05, y - row_h), 0.90, row_h, color="#eef3f8", lw=0, zorder=0)
            )
        for j, (x, cell, al) in enumerate(zip(cols_x, row, aligns, strict=True)):
            weight = "bold" if j in (0, 4) else "normal"
            size = font * (0.7 if cell == "no braking" else 1.0)
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
        "Brake points are where the ideal starts braking, from the start/finish gate and "
        "before the apex; speeds are the ideal's at the segment's entry, minimum and exit."
    )
    fig.text(0.06, 0.17, textwrap.fill(note, 100), fontsize=9, va="top", color="#444444")
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


def _laptime(t_s: float) -> str:
    """Lap time as m:ss.ss (or s.ss under a minute)."""
    if t_s is None or not np.isfinite(t_s):
        return "n/a"
    minutes, seconds = divmod(float(t_s), 60.0)
    return f"{int(minutes)}:{seconds:05.2f}" if minutes >= 1 else f"{seconds:.2f} s"
