"""The report's figures as PNG pictures, drawn by matplotlib from the page's own specifications.

:func:`picture` draws one :class:`limitlap.figures.FigureSpec` (plotly.js's figure
schema, as the page draws it) with matplotlib's public API: a figure on an Agg canvas,
axes placed by the layout's domains and margins, lines, fills, markers with a colour
scale, bars, shapes and annotations; so a PNG looks like the page's figure and there is
one description of each figure. Only what :mod:`limitlap.figures` uses is understood.
matplotlib is imported here only, when a picture is drawn.
"""

from __future__ import annotations

import io
import re

import numpy as np

from limitlap.figures import (
    INK,
    PICTURE_WIDTH_PX,
    Columns,
    FigureSpec,
    agg_figure,
    styled,
)

#: Resolution of the pictures. [dots per inch]
DPI = 100
#: Room above the plots for the title and the legend. [px]
_TITLE_PX = 34
_DASH = {"solid": "-", "dash": "--", "dot": ":", "dashdot": "-."}
_MARKER = {"circle": "o", "square": "s", "x-thin": "x", "circle-open": "o", "x": "x"}
_PX_TO_PT = 72.0 / DPI


def _plain(text: str) -> tuple[str, bool]:
    """Text without the page's tags (``<br>`` -> a new line) and whether it was bold."""
    bold = "<b>" in text
    text = re.sub(r"<br\s*/?>", "\n", text)
    return re.sub(r"<[^>]+>", "", text), bold


def _colour(c):
    """A plotly colour (``#rrggbb`` or ``rgba(r,g,b,a)``) as a matplotlib colour."""
    if isinstance(c, str) and c.startswith("rgba("):
        r, g, b, a = (float(p) for p in c[5:-1].split(","))
        return (r / 255, g / 255, b / 255, a)
    return c


def _axis_names(subplot: str) -> tuple[str, str]:
    """``"x2y2"`` -> (``"xaxis2"``, ``"yaxis2"``); ``"xy"`` -> (``"xaxis"``, ``"yaxis"``)."""
    x, y = re.fullmatch(r"(x\d*)(y\d*)", subplot).groups()
    return "xaxis" + x[1:], "yaxis" + y[1:]


class _Frame:
    """Where the plots sit in the figure: the layout's margins, in figure fractions."""

    def __init__(self, width, height, margin, top_px):
        self.left = margin.get("l", 60) / width
        self.right = 1.0 - margin.get("r", 16) / width
        self.bottom = margin.get("b", 44) / height
        self.top = 1.0 - (margin.get("t", 28) + top_px) / height

    def rect(self, xdom, ydom):
        w, h = self.right - self.left, self.top - self.bottom
        return [
            self.left + xdom[0] * w,
            self.bottom + ydom[0] * h,
            (xdom[1] - xdom[0]) * w,
            (ydom[1] - ydom[0]) * h,
        ]

    def point(self, x, y):
        """Paper coordinates (0-1 over the plot area) as figure fractions."""
        return (
            self.left + x * (self.right - self.left),
            self.bottom + y * (self.top - self.bottom),
        )


@styled
def picture(spec: FigureSpec, cols: Columns, width_px: int = PICTURE_WIDTH_PX) -> bytes:
    """One figure of the page as PNG bytes, ``width_px`` wide, its layout's height plus a title.

    Parameters
    ----------
    spec : FigureSpec
        The figure, as the page draws it.
    cols : Columns
        The arrays its traces name.
    width_px : int
        Width of the picture. [px]

    Returns
    -------
    bytes
        PNG image, ``width_px`` x (layout height + 34) pixels, 100 dpi.
    """
    data = cols.resolve(spec.data)
    layout = cols.resolve(spec.layout)
    height = int(layout["height"]) + _TITLE_PX
    fig = agg_figure(width_px, height, DPI)
    frame = _Frame(width_px, height, layout.get("margin", {}), _TITLE_PX)
    title, _ = _plain(spec.title)
    fig.text(0.01, 1 - 6 / height, title, fontsize=12.5, fontweight="bold", va="top", color=INK)
    axes = _make_axes(fig, frame, spec.subplots, layout)
    handles = []
    categories = _categories(layout)
    bars = [t for t in data if t.get("type") == "bar" and t.get("orientation") != "h"]
    for trace in data:
        if trace.get("visible", True) is not True:
            continue  # the session's other laps: switched off at first, as on the page
        ax = axes[_trace_subplot(trace)]
        handle = _draw_trace(ax, fig, trace, categories, bars)
        drawn = len(trace.get("x", [])) > 0 or trace.get("type") == "bar"
        if handle is not None and drawn and trace.get("showlegend", True) and trace.get("name"):
            handles.append((handle, trace["name"]))
    _shapes(axes, layout.get("shapes", []))
    _annotations(fig, frame, axes, layout.get("annotations", []))
    _legend(fig, frame, layout, handles)
    return _save(fig)


def _save(fig) -> bytes:
    """The drawn figure as PNG bytes (no software name in the file: same input, same bytes)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _trace_subplot(trace) -> str:
    x = trace.get("xaxis", "x")
    y = trace.get("yaxis", "y")
    return f"{x}{y}"


def _categories(layout) -> dict:
    """Category axes: axis name -> {category: position}."""
    out = {}
    for name, ax in layout.items():
        if name.startswith(("xaxis", "yaxis")) and isinstance(ax, dict) and ax.get("categoryarray"):
            out[name] = {c: i for i, c in enumerate(ax["categoryarray"])}
    return out


def _make_axes(fig, frame, subplots, layout) -> dict:
    """One matplotlib axes per subplot, placed by the layout's domains."""
    axes, by_x = {}, {}
    for sub in subplots:
        xname, yname = _axis_names(sub)
        xa, ya = layout.get(xname, {}), layout.get(yname, {})
        rect = frame.rect(xa.get("domain", [0, 1]), ya.get("domain", [0, 1]))
        twin = xa.get("matches")  # an x axis that follows another's range (plotly "matches")
        ax = fig.add_axes(
            rect, sharex=by_x.get(xname) or (by_x.get("xaxis" + twin[1:]) if twin else None)
        )
        by_x.setdefault(xname, ax)
        _style_axis(ax.xaxis, ax, xa, "x")
        _style_axis(ax.yaxis, ax, ya, "y")
        anchor = xa.get("anchor", "y")
        if anchor not in ("free", yname[0] + yname[5:]):
            ax.tick_params(axis="x", labelbottom=False)
            ax.set_xlabel("")
        if ya.get("scaleanchor"):
            ax.set_aspect("equal", adjustable="box")
        axes[_key(sub)] = ax
    return axes


def _key(sub: str) -> str:
    """A subplot as the traces name it: ``"x2y2"`` from their ``xaxis``/``yaxis``."""
    x, y = re.fullmatch(r"(x\d*)(y\d*)", sub).groups()
    return f"{x}{y}"


def _style_axis(axis, ax, spec: dict, which: str) -> None:
    """Range, title, grid and visibility of one axis."""
    if spec.get("visible") is False:
        ax.axis("off") if which == "y" else None
        if which == "x":
            ax.set_xticks([])
        return
    title = spec.get("title", {}).get("text", "")
    (ax.set_xlabel if which == "x" else ax.set_ylabel)(title, fontsize=9.5, color=INK)
    rng = spec.get("range")
    if rng is not None:
        (ax.set_xlim if which == "x" else ax.set_ylim)(rng[0], rng[1])
    if spec.get("autorange") == "reversed":
        (ax.invert_xaxis if which == "x" else ax.invert_yaxis)()
    ax.grid(bool(spec.get("showgrid", True)), axis=which)
    if spec.get("showticklabels") is False:
        ax.tick_params(axis=which, labelleft=False, labelbottom=False)
    ax.tick_params(axis=which, labelsize=9, colors=INK)
    if spec.get("zeroline"):
        (ax.axvline if which == "x" else ax.axhline)(0.0, color="#AAAAAA", lw=0.8, zorder=1)


def _positions(values, mapping):
    if mapping is None:
        return np.asarray([np.nan if v is None else v for v in values], dtype=np.float64)
    return np.asarray([mapping[v] for v in values], dtype=np.float64)


def _draw_trace(ax, fig, t, categories, bars):
    """Draw one trace; its legend handle."""
    if t["type"] == "bar":
        return _draw_bar(ax, t, categories, bars)
    x = _positions(t.get("x", []), categories.get("xaxis" + t.get("xaxis", "x")[1:]))
    y = _positions(t.get("y", []), categories.get("yaxis" + t.get("yaxis", "y")[1:]))
    alpha = t.get("opacity", 1.0)
    handle = None
    if t.get("fill") in ("tozeroy", "toself"):
        colour = _colour(t.get("fillcolor", t.get("line", {}).get("color")))
        if t["fill"] == "tozeroy":
            handle = ax.fill_between(x, 0.0, y, color=colour, lw=0, zorder=2)
        else:
            keep = np.isfinite(x) & np.isfinite(y)
            (handle,) = ax.fill(x[keep], y[keep], color=colour, lw=0, zorder=2)
    mode = t.get("mode", "lines")
    line = t.get("line", {})
    if "lines" in mode and line.get("width", 2) > 0:
        (handle,) = ax.plot(
            x,
            y,
            color=_colour(line.get("color", INK)),
            lw=line.get("width", 2) * _PX_TO_PT * 1.3,
            ls=_DASH.get(line.get("dash", "solid"), "-"),
            alpha=alpha,
            zorder=3,
        )
    if "markers" in mode:
        handle = _draw_markers(ax, fig, x, y, t.get("marker", {}), alpha)
    return handle


def _draw_markers(ax, fig, x, y, m, alpha):
    symbol = m.get("symbol", "circle")
    size = (m.get("size", 6) * _PX_TO_PT * 1.3) ** 2
    colour = m.get("color", INK)
    kwargs = {"s": size, "alpha": m.get("opacity", alpha), "zorder": 4, "marker": _MARKER[symbol]}
    if isinstance(colour, np.ndarray | list) and len(colour) == len(x) and m.get("colorscale"):
        from matplotlib.colors import LinearSegmentedColormap

        cmap = LinearSegmentedColormap.from_list("scale", [(p, c) for p, c in m["colorscale"]])
        sc = ax.scatter(
            x, y, c=colour, cmap=cmap, vmin=m.get("cmin"), vmax=m.get("cmax"), lw=0, **kwargs
        )
        if m.get("showscale"):
            _colour_bar(fig, ax, sc, m.get("colorbar", {}))
        return sc
    if symbol.endswith("-open"):
        return ax.scatter(x, y, facecolors="none", edgecolors=colour, lw=1.5, **kwargs)
    if symbol.startswith("x"):
        return ax.scatter(x, y, color=colour, lw=1.0, **kwargs)
    return ax.scatter(x, y, color=colour, lw=0, **kwargs)


def _colour_bar(fig, ax, sc, cb):
    horizontal = cb.get("orientation") == "h"
    bar = fig.colorbar(
        sc,
        ax=ax,
        orientation="horizontal" if horizontal else "vertical",
        fraction=0.04,
        pad=0.02,
        shrink=cb.get("len", 0.8),
        ticks=cb.get("tickvals"),
    )
    if cb.get("ticktext"):
        bar.set_ticklabels(cb["ticktext"])
    bar.set_label(_plain(cb.get("title", {}).get("text", ""))[0], fontsize=9.5, color=INK)
    bar.ax.tick_params(labelsize=9)
    bar.outline.set_visible(False)


def _draw_bar(ax, t, categories, bars):
    colour = t.get("marker", {}).get("color", INK)
    texts = t.get("text")
    if t.get("orientation") == "h":
        cat = categories.get("yaxis" + t.get("yaxis", "y")[1:])
        y = _positions(t["y"], cat) if cat else np.arange(len(t["y"]), dtype=float)
        if not cat:
            ax.set_yticks(y, t["y"])
        x = np.asarray([0.0 if v is None else v for v in t["x"]], dtype=np.float64)
        handle = ax.barh(y, x, height=0.7, color=colour, zorder=3)
        for xi, yi, text in zip(x, y, texts or [], strict=False):
            ax.text(
                max(xi, 0.0),
                yi,
                "  " + text,
                va="center",
                ha="left",
                fontsize=8.5,
                color=INK,
                clip_on=False,
            )
        if cat:
            ax.set_yticks(list(cat.values()), list(cat))
        return handle
    n = max(len(bars), 1)
    i = next((j for j, b in enumerate(bars) if b is t), 0)
    width = 0.8 / n
    cat = categories.get("xaxis" + t.get("xaxis", "x")[1:])
    centre = _positions(t["x"], cat) if cat else np.arange(len(t["x"]), dtype=float)
    pos = centre + (i - 0.5 * (n - 1)) * width
    y = np.asarray([np.nan if v is None else v for v in t["y"]], dtype=np.float64)
    handle = ax.bar(pos, np.nan_to_num(y), width=width, color=colour, zorder=3)
    ax.set_xticks(centre, t["x"], rotation=30 if len(t["x"]) > 14 else 0)
    return handle


def _shapes(axes, shapes) -> None:
    for s in shapes:
        for key, ax in axes.items():
            if not key.startswith(s.get("xref", "x") + "y"):
                continue
            line = s.get("line", {})
            if s["type"] == "rect":
                ax.axvspan(s["x0"], s["x1"], color=s.get("fillcolor", "#eeeeee"), lw=0, zorder=0)
            elif s["type"] == "line":
                ax.axvline(
                    s["x0"],
                    color=line.get("color", INK),
                    lw=line.get("width", 1) * _PX_TO_PT * 1.3,
                    ls=_DASH.get(line.get("dash", "solid"), "-"),
                    zorder=2,
                )


def _annotations(fig, frame, axes, notes) -> None:
    for a in notes:
        text, bold = _plain(a.get("text", ""))
        size = a.get("font", {}).get("size", 12) * _PX_TO_PT * 1.1
        weight = "bold" if bold else "normal"
        va = {"top": "top", "bottom": "bottom"}.get(a.get("yanchor"), "center")
        if a.get("xref") == "paper" and a.get("yref") == "paper":
            fx, fy = frame.point(a["x"], a["y"])
            fig.text(fx, fy + 0.005, text, ha="center", va=va, fontsize=size, color=INK)
            continue
        ax = axes.get(f"{a.get('xref', 'x')}y") or next(iter(axes.values()))
        if a.get("showarrow"):
            ax.annotate(
                "",
                xy=(a["x"], a["y"]),
                xytext=(a["ax"], a["ay"]),
                arrowprops={"arrowstyle": "->", "color": a.get("arrowcolor", INK), "lw": 1.8},
                zorder=6,
            )
            continue
        transform = ax.transData
        if a.get("yref") == "paper":
            from matplotlib.transforms import blended_transform_factory

            transform = blended_transform_factory(ax.transData, ax.transAxes)
        ax.text(
            a["x"],
            a["y"],
            text,
            transform=transform,
            ha="center",
            va=va,
            fontsize=size,
            fontweight=weight,
            color=INK,
            clip_on=False,
            zorder=5,
        )


def _legend(fig, frame, layout, handles) -> None:
    if not handles or not layout.get("showlegend", True):
        return
    leg = layout.get("legend", {})
    below = leg.get("y", 1.0) < 0
    x = frame.left + leg.get("x", 0.0) * (frame.right - frame.left)
    y = 0.005 if below else frame.top + 0.005
    # columns as wide as the longest name (8.5 pt type: about 6.5 px a character, and the
    # handle and gaps 50 px), as many as fit in the width left of the legend's start
    width_px = fig.bbox.width * (1.0 - x) - 10
    column_px = 6.5 * max(len(n) for _, n in handles) + 50
    fig.legend(
        [h for h, _ in handles],
        [n for _, n in handles],
        loc="lower left",
        bbox_to_anchor=(x, y),
        ncol=max(1, min(len(handles), 4, int(width_px // column_px))),
        fontsize=8.5,
        frameon=False,
        handlelength=1.8,
        columnspacing=1.2,
    )
