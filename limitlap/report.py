"""The report page: report.html, one self-contained interactive file built from what the stages computed.

:func:`report_html` lays out the analysed lap's headline numbers, the corner table, a
detail panel per corner and the figures for a driver and an engineer. The figures are
plotly.js figure specifications (:mod:`limitlap.figures`) drawn in the browser by the
vendored plotly.js (``limitlap/vendor/plotly-basic.min.js``, inlined), with a short
script of our own that links the views along the lap: zoom or select a stretch in one
and the others follow, hover reads every trace at that distance, a click on a corner
zooms every view to it and shows its detail, and the session's laps switch on and off.
Nothing is loaded from the network (the page's content security policy forbids it).

The page is written by :func:`limitlap.outputs.write_outputs`, which writes every file
of a run; this module writes nothing itself.
"""

from __future__ import annotations

import functools
import html
import json
import math
import re
from importlib import resources

from limitlap import figures as fg
from limitlap.advice import line_advice
from limitlap.formatting import (
    METRIC,
    NOT_AVAILABLE,
    Units,
    brake_points,
    distance,
    grip,
    grip_used,
    lap_time,
    number,
    signed_time,
    speed_kmh,
    time_left,
    with_band,
)
from limitlap.outputs import ReportView
from limitlap.units import G0_M_S2, KMH_TO_M_S

#: The safety caution every report and target sheet carries.
SAFETY_CAUTION = (
    "These targets are theoretical estimates from a point-mass model of your own laps, "
    "not instructions. Approach them progressively, a step at a time. Wet grip changes "
    "from corner to corner and from lap to lap. The circuit's regulations, its officials "
    "and qualified instructors come first."
)

#: The plotly.js bundle inlined into the page (limitlap/vendor/README.md).
PLOTLY_VERSION = "4.1.1"


@functools.cache
def plotly_js() -> str:
    """The vendored plotly.js basic bundle's text (read once per process)."""
    return (resources.files("limitlap") / "vendor" / "plotly-basic.min.js").read_text("utf-8")


# --------------------------------------------------------------------------- paths


_PART = r"[^\s\\/:;,'\"()<>]+"
#: A path to a file: absolute (from / or a drive letter), or relative with a file
#: extension in its last part (so "m/s" and "a_y/v²" are left alone).
_PATH = re.compile(
    rf"(?:[A-Za-z]:)?(?:[\\/]{_PART})+[\\/]({_PART})|(?:{_PART}[\\/])+({_PART}\.[A-Za-z0-9]+)"
)


def file_names_only(text: str) -> str:
    r"""``text`` with every path to a file cut to the file's name.

    >>> file_names_only("/home/ana/logs/dry.csv.gz: speed band 10-15 m/s: few samples")
    'dry.csv.gz: speed band 10-15 m/s: few samples'
    >>> file_names_only(r"C:\Users\ana\dry.csv: bad row"), file_names_only("logs/wet.csv")
    ('dry.csv: bad row', 'wet.csv')
    """
    return _PATH.sub(lambda m: m.group(1) or m.group(2), str(text))


# --------------------------------------------------------------------------- figures


#: How the figures name each pedal trace's source (outputs._pedals).
_PEDAL_WORDS = {
    "ideal": ("ideal: share of braking grip", "ideal: share of drive limit"),
    "pedal": (None, "you: throttle pedal"),
    "pressure": ("you: brake pressure, share of the lap's peak", None),
    "acceleration": ("you: braking share from deceleration", "you: drive share from acceleration"),
}


def _pedal_trace(speed_m_s, pedals: dict) -> dict:
    """One lap's traces for the figures: speed and the pedals the comparison drew."""
    import numpy as np

    n = np.asarray(speed_m_s).shape[0]
    blank = np.full(n, np.nan)
    brake_src, drive_src = pedals.get("brake_source"), pedals.get("drive_source")
    return {
        "speed_m_s": speed_m_s,
        "brake": pedals.get("brake", blank),
        "throttle": pedals.get("drive", blank),
        "brake_label": _PEDAL_WORDS.get(brake_src, ("", ""))[0] or "",
        "throttle_label": _PEDAL_WORDS.get(drive_src, ("", ""))[1] or "",
    }


def _pedal_traces(v: ReportView):
    """(real, ideal): brake and throttle shares 0-1 along the lap and what each is of."""
    return (
        _pedal_trace(v.speed_real_m_s, v.pedals_real),
        _pedal_trace(v.speed_ideal_m_s, v.pedals_ideal),
    )


def _fitbrake_points(fit):
    """Boundary points of an envelope fit per speed band, for the g-g figure."""
    import numpy as np

    if fit is None or not fit.bands:
        return None
    return [
        {
            "speed_m_s": np.atleast_1d(np.asarray(band.speed_m_s, dtype=np.float64)),
            "accel_lon_m_s2": np.atleast_1d(np.asarray(band.accel_lon_m_s2, dtype=np.float64)),
            "accel_lat_m_s2": np.atleast_1d(np.asarray(band.accel_lat_m_s2, dtype=np.float64)),
        }
        for band in fit.bands
    ]


def _curvature_title(v: ReportView):
    """The data-check figure's title with the agreement figures; None without inertial channels."""
    check = v.curvature_check
    if check is None or not check.available:
        return None
    parts = []
    agreement = v.agreement or {}
    for name, label in (("accel_lat", "a_y/v²"), ("yaw_rate", "yaw rate/v")):
        fig = agreement.get(f"line_vs_{name}")
        if isinstance(fig, dict) and "correlation" in fig:
            parts.append(
                f"{label}: correlation {fig['correlation']:.3f}, RMS "
                f"{fig.get('relative_rms', float('nan')):.0%}"
            )
    return "Data check: curvature three ways" + (" — " + "; ".join(parts) if parts else "")


def page_figures(v: ReportView, units: Units = METRIC):
    """The page's figures in order, and the arrays they share.

    Returns
    -------
    cols : figures.Columns
    specs : list of figures.FigureSpec
        Speed, time delta, pedals, map (with positions), time left per corner, g-g,
        best of laps (with a composite), data check (with inertial channels).
    """
    cols = fg.Columns()
    d = fg.lap_data(cols, v, units)
    real, ideal = _pedal_traces(v)
    specs = [
        *_session_figures(v),
        fg.speed_figure(cols, d, v, v.other_laps),
        fg.delta_figure(cols, d, v, v.other_laps),
        fg.pedals_figure(cols, d, real, ideal),
    ]
    if v.x_m is not None and v.y_m is not None:
        specs.append(fg.map_figure(cols, v, units))
    specs.append(fg.time_left_figure(v.corners))
    if v.gg_bands:
        specs.append(fg.gg_figure(v.gg_bands, units, fit_points=_fitbrake_points(v.fit)))
    if math.isfinite(v.best_time_s) and v.corners:
        specs.append(
            fg.best_figure(
                v.corners, v.lap_time_s, v.best_time_s, v.ideal_time_s, f"lap {v.lap_number}"
            )
        )
    title = _curvature_title(v)
    if title is not None:
        specs.append(fg.curvature_check_figure(cols, d, v, title))
    return cols, specs


def _session_figures(v: ReportView) -> list:
    """The grip-by-lap figure when the session has laps timed gate to gate."""
    timed = v.session.timed() if v.session is not None else []
    if not timed:
        return []
    return [
        fg.session_figure(
            [r.number for r in timed],
            [r.grip_estimate for r in timed],
            [r.time_left_s for r in timed],
            v.lap_number,
        )
    ]


def detail_figures(v: ReportView, cols, units: Units = METRIC, n: int = 3):
    """Speed, brake and throttle over the ``n`` corners with the most time left (the PNGs)."""
    real, ideal = _pedal_traces(v)
    ranked = sorted(v.corners, key=lambda c: -c["time_left_s"])[:n]
    return [
        fg.detail_figure(_worded(c, units), v, real, ideal, units, f"corner_{i}")
        for i, c in enumerate(ranked, start=1)
    ]


# --------------------------------------------------------------------------- the page


def _worded(c: dict, units: Units) -> dict:
    """The corner with its advice line in ``units`` (the stage words it in km/h and m)."""
    if units is METRIC or c.get("_differences") is None:
        return c
    from limitlap.advice import advice_line
    from limitlap.bands import advice_shown

    plain = advice_line(c["_differences"], units)
    plain = advice_shown(c["name"], c["time_left_s"], c.get("time_left_band_s"), plain)
    return {**c, "plain": plain}


def _page_corners(v: ReportView, units: Units, axis) -> list[dict]:
    """Per corner, in driving order: its summary.json numbers and where the views zoom to."""
    from limitlap.outputs import summary_corner

    k = 1.0 / units.m_per_distance
    out = []
    for c in v.corners:
        x0, x1 = axis.corner_range_m(c)
        rec = summary_corner(c)
        rec["zoom"] = [round(x0 * k, 1), round(x1 * k, 1)]
        rec["marks"] = {
            key: round(c[key] * k, 1)
            for key in ("apex_m", "brake_start_actual_m", "brake_start_ideal_m")
            if c.get(key) is not None and math.isfinite(c[key])
        }
        if x0 < 0:  # a brake point or apex before the gate is drawn at its negative distance
            rec["marks"] = {
                key: round(val - v.length_m * k, 1) if val > x1 else val
                for key, val in rec["marks"].items()
            }
        out.append(rec)
    return out


def _script_json(obj) -> str:
    """JSON for a ``<script type="application/json">``: no ``<`` that could end the element."""
    return json.dumps(obj, ensure_ascii=False, allow_nan=False).replace("<", "\\u003c")


def report_html(v: ReportView, units: Units = METRIC, figures: bool = True) -> str:
    """report.html text: self-contained, interactive, printable.

    Parameters
    ----------
    v : ReportView
        What the report shows.
    units : Units
        How speeds and distances are shown (the page's data carry SI and km/h as
        summary.json does, for the corners).
    figures : bool
        Draw the figures (False: the numbers only, no script).

    Returns
    -------
    str
        The page.
    """
    corners = [_worded(c, units) for c in v.corners]
    v = _with_corners(v, corners)
    out: list[str] = []
    _head(v, out)
    _cards(v, units, out)
    _corner_table(v, units, out)
    _warnings(v, out)
    _session_section(v, out)
    if figures:
        cols, specs = page_figures(v, units)
        axis = fg.LapAxis.of(v.distance_m, v.length_m, v.corners)
        _details(v, units, out)
        _lap_switches(v, out)
        _figure_section(specs, out)
        data = {
            "units": {"speed": units.speed, "distance": units.distance},
            "length": round(v.length_m / units.m_per_distance, 1),
            "corners": _page_corners(v, units, axis),
            "figures": [s.as_json() for s in specs],
            "laps": [{"number": lap.number} for lap in v.other_laps],
        }
        out.append(
            '<script type="application/json" id="limitlap-data">'
            + _script_json(data)[:-1]
            + ',"columns":'
            + cols.json()
            + "}</script>"
        )
        out.append(f"<script>{plotly_js()}</script>")
        out.append(f"<script>{_SCRIPT}</script>")
    _method_and_caution(v, out)
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"


def _with_corners(v: ReportView, corners) -> ReportView:
    import dataclasses

    return dataclasses.replace(v, corners=corners)


_CSP = (
    "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; "
    "img-src data:; font-src data:"
)


def _head(v: ReportView, out: list[str]) -> None:
    e = html.escape
    out += [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>limitlap report: lap {v.lap_number}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        '<header id="summary">',
        f"<h1>Lap {v.lap_number}: {e(lap_time(v.lap_time_s))}, ideal "
        f"{e(lap_time(v.ideal_time_s))}</h1>",
    ]


def _cards(v: ReportView, units: Units, out: list[str]) -> None:
    """The title line and the headline numbers."""
    e = html.escape
    name = file_names_only(v.source) or "session"
    length = units.distance_text(v.lap_distance_m)
    out.append(
        f'<p class="sub">{e(name)} &middot; {e(length)} lap &middot; {v.n_laps} complete '
        f"laps in the session &middot; speeds in {e(units.speed)}, distances in "
        f"{e(units.distance)}</p>"
    )
    if v.session_info:
        out.append(_session_line(v.session_info))
    band = v.bands.time_left_band_s if v.bands is not None else None
    cards = [
        ("lap", "lap time", lap_time(v.lap_time_s)),
        ("ideal", f"ideal at grip {v.grip_scale:.2f}", lap_time(v.ideal_time_s)),
        ("left", "time left", with_band(v.time_left_s, band)),
        ("", "grip estimate", grip(v.grip_estimate)),
        ("best", "best of your laps", lap_time(v.best_time_s)),
    ]
    if v.line is not None:
        told = v.line.line_time_s
        cards.append(
            ("line", "better line", NOT_AVAILABLE if told is None else f"{time_left(told)} s")
        )
    out.append('<div class="cards">')
    out += [
        f'<div class="card {cls}"><div class="k">{e(k)}</div><div class="v">{e(val)}</div></div>'
        for cls, k, val in cards
    ]
    out.append("</div>")
    if v.time_left_words:
        out.append(f'<p class="warn">Time left below zero: {e(v.time_left_words)}.</p>')
    if v.warnings:
        n = len(v.warnings)
        out.append(
            f'<p class="warn-count"><a href="#warnings">{n} warning{"s" if n > 1 else ""}'
            "</a>: read them before trusting the numbers.</p>"
        )
    out.append("</header>")


def _session_line(info: dict) -> str:
    """The session the log names (date, venue, driver, car, session), as one line of the header; any path in a value cut to its file name."""
    e = html.escape
    parts = [
        f'<span class="k">{e(key)}</span> {e(file_names_only(value))}'
        for key, value in info.items()
    ]
    return f'<p class="sub session">{" &middot; ".join(parts)}</p>'


_HEADS = (
    ("rank", ""),
    ("corner", "t"),
    ("group", ""),
    ("apex [{distance}]", ""),
    ("time left [s]", ""),
    ("line [s]", ""),
    ("yours [s]", "seg"),
    ("ideal [s]", "seg"),
    ("min speed yours / ideal [{speed}]", ""),
    ("brake yours / ideal [{distance} from gate]", ""),
    ("grip used", ""),
    ("grip found", ""),
    ("where the time is", "t advice"),
)


def _corner_cells(rank: int, c: dict, units: Units) -> list[str]:
    """One row of the corner table (text), in the one rounding of every output (formatting)."""
    s = c.get("_summary") or {}
    band = c.get("time_left_band_s")
    return [
        str(rank),
        f"{c['name']} {c['label']}" if c.get("label") else c["name"],
        str(c["rank_group"]) if "rank_group" in c else "",
        distance(c["apex_m"], units),
        with_band(c["time_left_s"], band, unit="") if band else time_left(c["time_left_s"]),
        _line_cell(c),
        number(c["actual_s"], ".2f"),
        number(c["ideal_s"], ".2f"),
        f"{speed_kmh(c.get('min_speed_actual_m_s'), units)} / "
        f"{speed_kmh(c.get('min_speed_ideal_m_s'), units)}",
        f"{brake_points(s.get('brake_points_actual_m'), units)} / "
        f"{brake_points(s.get('brake_points_ideal_m'), units)}",
        grip_used(c["grip_used"], c.get("grip_used_raw")),
        grip(c.get("grip_estimate")),
        c["plain"],
    ]


def _line_cell(c: dict) -> str:
    """A corner's line time for the table: the time, "narrow" where the corridor is too narrow to tell, the one blank without a line."""
    if "line_told" not in c:
        return NOT_AVAILABLE
    return time_left(c["line_time_s"]) if c["line_told"] else "narrow"


def _corner_table(v: ReportView, units: Units, out: list[str]) -> None:
    """The corners ranked by time left, with the numbers a driver acts on."""
    e = html.escape
    heads = [(h.format(speed=units.speed, distance=units.distance), cls) for h, cls in _HEADS]
    out.append('<section id="corners"><h2>Where the time is, corner by corner</h2>')
    out.append('<div class="table-wrap"><table id="corner-table"><thead><tr>')
    out += [f'<th class="{cls}" scope="col">{e(h)}</th>' for h, cls in heads]
    out.append("</tr></thead><tbody>")
    index = {c["name"]: i for i, c in enumerate(v.corners)}
    ranked = sorted(v.corners, key=lambda c: -c["time_left_s"])
    for rank, c in enumerate(ranked, start=1):
        cells = [e(x) for x in _corner_cells(rank, c, units)]
        cells[1] = (
            f'<button type="button" class="corner" data-corner="{index[c["name"]]}" '
            f'title="show this corner in every view">{cells[1]}</button>'
        )
        tds = [
            f'<td class="{cls}" data-label="{e(h)}">{x}</td>'
            for (h, cls), x in zip(heads, cells, strict=True)
        ]
        top = " top" if rank <= 3 else ""
        out.append(f'<tr class="row{top}" data-corner="{index[c["name"]]}">{"".join(tds)}</tr>')
    out.append("</tbody></table></div>")
    notes = [f"{c['name']}: {c['note']}" for c in v.corners if c.get("note")]
    out += [f'<p class="note">{e(n)}</p>' for n in notes]
    out.append(
        '<p class="note">Time left: your segment time minus the ideal\'s on the same line. '
        "Brake points: where the speed starts falling into the corner (a lift counts), one "
        "per braking zone, from the start/finish gate. Minimum speed: the lowest in the "
        "corner, or the speed at the apex where a lap takes it without slowing. Grip used: "
        "the share of the available combined grip this lap used in the corner (above "
        "100 %, marked over: it used more than the envelope allows at this grip scale). "
        "Grip found: the grip scale the corner showed against the envelope (below 1 = less "
        f"grip there than at its best, e.g. a damp patch; {NOT_AVAILABLE} where the corner "
        "is taken flat out, on the engine's limit, so it does not show the tyres')."
        + e(_line_note(v))
        + e(_band_note(v))
        + " Click a corner to show it in every view below.</p></section>"
    )


def _line_note(v: ReportView) -> str:
    """What the line column means, for the corner table's note."""
    if v.line is None:
        return ""
    where = (
        "the track's edges"
        if v.line.corridor.source == "track edges"
        else "the band your laps drove"
    )
    return (
        f" Line: the time a better line inside {where} would bring through the corner, "
        "apart from the time left (the speed's, on your own line); narrow: your laps all "
        "took one line there, too alike to tell a better one."
    )


def _band_note(v: ReportView) -> str:
    """What the ± and the rank groups mean, for the corner table's note."""
    b = v.bands
    if b is None:
        return ""
    return (
        f" Time left ± : an interval holding the true value {b.coverage:.0%} of the time, "
        f"from a bootstrap over the {b.n_laps} flying laps (the envelope's samples and "
        "the rebuilt lines); where it includes zero no advice is given. Corners sharing a "
        f"group number cannot be told apart: their order holds in fewer than "
        f"{b.coverage:.0%} of the resamples."
    )


def _session_section(v: ReportView, out: list[str]) -> None:
    """Every lap of the session: kind, time, ideal on its own line, time left, grip found, corner times; each corner's consistency."""
    if v.session is None:
        return
    e = html.escape
    names = list(v.session.corner_names)
    out.append('<section id="session"><h2>The session, lap by lap</h2>')
    out.append('<div class="table-wrap"><table id="session-table"><thead><tr>')
    heads = ["lap", "kind", "time", "ideal on its line", "time left [s]", "grip found"]
    out += [f'<th class="{"t" if h == "kind" else ""}">{e(h)}</th>' for h in heads + names]
    out.append("</tr></thead><tbody>")
    for r in v.session.laps:
        cls = ' class="top"' if r.number == v.lap_number else ""
        cells = [
            str(r.number),
            r.kind,
            lap_time(r.time_s),
            lap_time(r.ideal_time_s),
            time_left(r.time_left_s),
            grip(r.grip_estimate),
        ]
        times = [None] * len(names) if r.corner_times_s is None else list(r.corner_times_s)
        cells += [number(x, ".2f") for x in times]
        tds = [f'<td class="{"t" if j == 1 else ""}">{e(x)}</td>' for j, x in enumerate(cells)]
        out.append(f"<tr{cls}>{''.join(tds)}</tr>")
    if v.session.consistency:
        cons = v.session.consistency
        row = ["spread", f"{cons[0].n_laps} flying", "", "", "", ""]
        row += [number(c.spread_s, ".3f") for c in cons]
        tds = [f'<td class="{"t" if j == 1 else ""}">{e(x)}</td>' for j, x in enumerate(row)]
        out.append(f"<tr>{''.join(tds)}</tr>")
    out.append("</tbody></table></div>")
    out.append(
        '<p class="note">Each lap timed gate to gate is measured against the ideal on its '
        "own line at the session's envelope; grip found is the grip scale the lap showed "
        "against that envelope (1 = the envelope's). Corner times in seconds; the last "
        "row is each corner's spread (standard deviation) over the flying laps: how "
        f"consistent the driver was there. Lap {v.lap_number} (bold) is the one analysed; "
        "the figure of grip and time left by lap is the first of the figures.</p></section>"
    )


def _speed(kmh, units: Units):
    return None if kmh is None or not math.isfinite(kmh) else units.speed_value(kmh * KMH_TO_M_S)


def _dist(m, units: Units):
    return None if m is None or not math.isfinite(m) else units.distance_value(m)


def _warnings(v: ReportView, out: list[str]) -> None:
    """Every warning (file names only): a result the data cannot support must not be missed."""
    e = html.escape
    out.append('<section id="warnings"><h2>Warnings</h2>')
    if v.warnings:
        out += [f'<p class="warn">{e(file_names_only(w))}</p>' for w in v.warnings]
    else:
        out.append('<p class="ok">None: the data passed every check this report makes.</p>')
    out.append("</section>")


def _details(v: ReportView, units: Units, out: list[str]) -> None:
    """A detail panel per corner (the rank 1 corner's shown first)."""
    e = html.escape
    first = max(range(len(v.corners)), key=lambda i: v.corners[i]["time_left_s"], default=0)
    out.append('<section id="detail" class="screen-only"><h2>Corner detail</h2>')
    for i, c in enumerate(v.corners):
        hidden = "" if i == first else " hidden"
        name = f"{c['name']} {c['label']}" if c.get("label") else c["name"]
        rows = _detail_rows(c, units)
        out.append(f'<div class="detail" id="detail-{i}"{hidden}>')
        out.append(
            f"<h3>{e(name)} <span class='muted'>rank {c.get('rank', '')}, "
            f"{e(str(c.get('direction', '')))}-hand</span></h3>"
        )
        out.append(f'<p class="advice">{e(c["plain"])}</p><dl>')
        out += [f"<dt>{e(k)}</dt><dd>{e(val)}</dd>" for k, val in rows]
        out.append("</dl></div>")
    out.append(
        '<p class="note">In the views: dashed black line, where the ideal brakes; dashed '
        "orange, where you brake; dotted grey, the apex. Double-click a view to show the "
        "whole lap again.</p></section>"
    )


def _detail_rows(c: dict, units: Units) -> list[tuple[str, str]]:
    """(label, value) lines of a corner's detail panel."""
    s = c.get("_summary") or {}

    def dist(key):
        return units.distance_text(c.get(key))

    def pair(a, b, fmt):
        return f"{fmt(a)} / {fmt(b)}"

    phases = ", ".join(
        f"{word} {signed_time(c.get(key))} s"
        for word, key in (
            ("braking", "time_left_braking_s"),
            ("mid-corner", "time_left_mid_s"),
            ("exit", "time_left_exit_s"),
        )
        if c.get(key) is not None
    )
    rows = [
        (
            "time left",
            with_band(c["time_left_s"], c.get("time_left_band_s"))
            + (f" ({phases})" if phases else ""),
        ),
        (
            "segment yours / ideal",
            f"{number(c['actual_s'], '.2f')} / {number(c['ideal_s'], '.2f')} s",
        ),
    ]
    if c.get("best_s") is not None and math.isfinite(c["best_s"]):
        rows.append(("best of your laps", f"{c['best_s']:.2f} s (lap {c.get('best_lap', '?')})"))
    rows += [
        (
            "minimum speed yours / ideal",
            pair(
                c["min_speed_actual_kmh"] * KMH_TO_M_S,
                c["min_speed_ideal_kmh"] * KMH_TO_M_S,
                units.speed_text,
            ),
        ),
        (
            "brake points yours / ideal",
            f"{brake_points(s.get('brake_points_actual_m'), units)} / "
            f"{brake_points(s.get('brake_points_ideal_m'), units)} {units.distance} from the gate",
        ),
        (
            "full drive yours / ideal",
            f"{dist('full_drive_actual_m')} / {dist('full_drive_ideal_m')} from the gate",
        ),
        ("grip used", grip_used(c["grip_used"], c.get("grip_used_raw"))),
        ("grip found", grip(c.get("grip_estimate"))),
    ]
    pa, pi = c.get("peak_accel_lat_actual_m_s2"), c.get("peak_accel_lat_ideal_m_s2")
    if pa is not None and pi is not None:
        rows.append(("peak lateral yours / ideal", f"{pa / G0_M_S2:.2f} / {pi / G0_M_S2:.2f} g"))
    return rows + _line_rows(c, units)


def _line_rows(c: dict, units: Units) -> list[tuple[str, str]]:
    """The better line's lines of a corner's detail panel: its sentence and its offsets from your line at your turn-in, apex and exit (+ wider)."""
    cl = c.get("_line")
    if cl is None:
        return []
    rows = [("better line", line_advice(cl, units))]
    if cl.told:
        parts = [
            f"{word} {_signed_distance(x, units)}"
            for word, x in (
                ("turn-in", cl.turn_in_offset_m),
                ("apex", cl.apex_offset_m),
                ("exit", cl.exit_offset_m),
            )
        ]
        rows.append(("better line from yours (+ wider)", ", ".join(parts)))
    return rows


def _signed_distance(metres: float, units: Units) -> str:
    """An offset to 0.1 of the shown unit with its sign (+ wider); never "-0.0"."""
    value = round(units.distance_value(metres), 1) + 0.0
    return f"{value:+.1f} {units.distance}" if value else f"0.0 {units.distance}"


def _lap_switches(v: ReportView, out: list[str]) -> None:
    """Check boxes that switch the session's other laps on and off over the ideal."""
    e = html.escape
    if not v.other_laps:
        return
    out.append('<section id="laps" class="screen-only"><h2>The session\'s laps</h2>')
    out.append(
        '<p class="note">Switch the session\'s other complete laps on and off in the speed '
        "and time delta views (grey), over the ideal and the analysed lap.</p>"
    )
    out.append('<div class="switches">')
    for lap in v.other_laps:
        out.append(
            f'<label><input type="checkbox" class="lap" value="{lap.number}"> lap '
            f"{lap.number} <span class='muted'>{e(lap_time(lap.lap_time_s))}</span></label>"
        )
    out.append(
        '<button type="button" id="laps-all">all</button>'
        '<button type="button" id="laps-none">none</button></div></section>'
    )


def _figure_section(specs, out: list[str]) -> None:
    """A place per figure, its title and caption (drawn by the script)."""
    e = html.escape
    out.append('<section id="figures"><h2>Figures</h2>')
    out.append(
        '<p class="note screen-only">Drag across a view along the lap to zoom; the other '
        "views follow. Hover reads every trace at that distance. Drag a box on the map to "
        "show that stretch. Double-click to show the whole lap.</p>"
    )
    for s in specs:
        height = s.layout["height"]
        title = re.sub(r"<[^>]+>", " ", s.title)
        out.append(
            f'<figure class="fig" id="figure-{s.key}" data-file="{s.key}.png">'
            f"<h3>{e(title)}</h3>"
            f'<div class="plot" id="fig-{s.key}" style="height:{height}px"></div>'
            f"<figcaption>{e(s.caption)}</figcaption></figure>"
        )
    out.append("</section>")


def _envelope_source(v: ReportView) -> str:
    """Where the envelope came from, in a sentence for the report."""
    if v.fit is None:
        return (
            f"The envelope is the vehicle file's ('{v.vehicle.name}'), so the time left is "
            "what that envelope allows on your line."
        )
    from limitlap.laps import FLYING_LAP_RATIO

    laps = v.fit_laps
    which = (
        f" of lap{'s' if len(laps) > 1 else ''} {_lap_ranges(laps)}, the flying laps within "
        f"{FLYING_LAP_RATIO * 100:.0f} % of your fastest,"
        if laps
        else ""
    )
    lift = v.fit.quality.get("noise_offset_m_s2", 0.0)
    noise = (
        f" with the width the accelerations' noise adds to it taken out ({lift:.2f} m/s²)"
        if lift > 0.0
        else " with no width taken out for the accelerations' noise"
    )
    return (
        "The envelope is a g-g-V envelope (lateral, braking and driving friction, a "
        "combined-slip exponent, power, drag and downforce) fitted to your own best samples"
        f"{which}{noise}; so the time left is time that grip you have already shown allows."
    )


def _lap_ranges(numbers) -> str:
    """``[1, 2, 3, 5]`` -> ``"1-3, 5"``.

    >>> _lap_ranges([1, 2, 3, 5, 7, 8])
    '1-3, 5, 7-8'
    """
    runs = []
    for n in sorted(numbers):
        if runs and n == runs[-1][1] + 1:
            runs[-1][1] = n
        else:
            runs.append([n, n])
    return ", ".join(f"{a}-{b}" if b > a else str(a) for a, b in runs)


def _ideal_band_sentence(v: ReportView) -> str:
    """The ideal lap's interval and where its width comes from, one sentence."""
    b = v.bands
    if b is None:
        return ""
    lo, hi = b.ideal_time_band_s
    return html.escape(
        f" The ideal lap time lies between {lap_time(lo)} and {lap_time(hi)} "
        f"({b.coverage:.0%}): the envelope's samples move it by {b.envelope_sd_s:.3f} s "
        f"(one standard deviation) and the line rebuild by {b.line_sd_s:.3f} s."
    )


def _method_and_caution(v: ReportView, out: list[str]) -> None:
    """How the numbers were worked out, the assumptions, and the caution."""
    e = html.escape
    out.append('<section id="method"><h2>How this was worked out</h2>')
    out.append(
        "<p>The ideal lap is a quasi-steady-state point-mass lap on the line you drove: at "
        "every metre the car may use as much grip as its envelope allows, braking and "
        "accelerating as hard as the grip left after cornering permits (forward and "
        "backward passes of the classic quasi-steady-state method; Lenzo &amp; Rossi 2020). "
        f"{e(_envelope_source(v))} "
        "Corners are cut from the line's curvature with boundaries in the middle of the "
        "straights, so their time left adds up to the lap's." + _ideal_band_sentence(v) + "</p>"
    )
    out.append(
        "<p>Assumptions: the car is a point mass (no load transfer, yaw or tyre "
        "temperature); quasi-steady state (each point in steady cornering, only speed "
        "changes); your own line (the ideal keeps your line and changes only the speed "
        f"along it); grip scale {v.grip_scale:.2f} on the friction coefficients.</p>"
    )
    out.append(
        f'<p class="note">Figures drawn with plotly.js {PLOTLY_VERSION} (MIT licence), '
        "inlined in this file.</p></section>"
    )
    out.append('<section id="caution"><h2>Caution</h2>')
    out.append(f'<p class="caution">{e(SAFETY_CAUTION)}</p></section>')


_CSS = """
:root { --ink:#222; --muted:#5a5a5a; --lap:#B57A00; --ideal:#000; --loss:#B2182B;
  --gain:#2166AC; --best:#00795A; --line:#d0d0d0; }
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
  color: var(--ink); margin: 0 auto; max-width: 1240px; padding: 20px; line-height: 1.4; }
p, dd, .warn { overflow-wrap: anywhere; }
h1 { font-size: 1.5rem; margin: 0 0 4px; }
h2 { font-size: 1.15rem; margin: 24px 0 8px; border-bottom: 2px solid var(--line);
  padding-bottom: 3px; }
h3 { font-size: 1rem; margin: 8px 0 4px; }
.sub, .note, figcaption, .muted { color: var(--muted); }
.session .k { font-weight: 600; }
.note, figcaption { font-size: .88rem; }
.cards { display: flex; flex-wrap: wrap; gap: 10px; }
.card { border: 1px solid var(--line); border-radius: 6px; padding: 8px 14px;
  min-width: 150px; flex: 1 1 150px; }
.card .k { color: var(--muted); font-size: .82rem; }
.card .v { font-size: 1.4rem; font-weight: 700; }
.card.lap .v { color: var(--lap); } .card.ideal .v { color: var(--ideal); }
.card.left .v { color: var(--loss); } .card.best .v { color: var(--best); }
.warn-count a { color: #8a4b00; font-weight: 600; }
.table-wrap { overflow-x: auto; max-width: 100%; }
table { border-collapse: collapse; width: 100%; font-size: .9rem; }
th, td { border-bottom: 1px solid var(--line); padding: 4px 7px; text-align: right;
  vertical-align: top; }
td { white-space: nowrap; }
td.t { white-space: normal; }
td.advice { white-space: normal; }
th { background: #f4f4f4; font-weight: 600; }
td.t, th.t { text-align: left; }
td.advice { min-width: 16em; }
tr.top td { font-weight: 600; }
tr.selected td { background: #fff7cc; }
button.corner { font: inherit; font-weight: 600; color: #0b4f8a; background: none;
  border: 0; padding: 0; cursor: pointer; text-decoration: underline; text-align: left; }
.detail dl { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px;
  margin: 6px 0; }
.detail dt { color: var(--muted); } .detail dd { margin: 0; }
.advice { font-weight: 600; }
.switches { display: flex; flex-wrap: wrap; gap: 6px 14px; align-items: center; }
.switches button { font: inherit; }
.fig { margin: 18px 0; break-inside: avoid; page-break-inside: avoid; }
.plot { width: 100%; }
.warn { border-left: 5px solid #E69F00; background: #fff7e6; padding: 8px 12px; margin: 6px 0; }
.ok { color: var(--muted); }
.caution { border: 2px solid #B8860B; background: #fff4e0; padding: 12px 16px;
  border-radius: 6px; }
@media (max-width: 700px) {
  body { padding: 10px; }
  .card { min-width: 130px; }
  #corner-table thead { display: none; }
  #corner-table, #corner-table tbody, #corner-table tr, #corner-table td { display: block;
    width: 100%; }
  #corner-table tr { border: 1px solid var(--line); border-radius: 6px; margin: 0 0 8px;
    padding: 4px 8px; }
  #corner-table td { border: 0; text-align: right; padding: 2px 0; min-width: 0; }
  #corner-table td::before { content: attr(data-label); float: left; color: var(--muted);
    font-weight: 400; padding-right: 8px; text-align: left; }
  #corner-table td:first-child { display: none; }
  #corner-table td:nth-child(2) { text-align: left; font-size: 1.05rem; }
  #corner-table td:nth-child(2)::before { content: none; }
  #corner-table td.advice { text-align: left; }
  #corner-table td.advice::before { float: none; display: block; }
  .detail dl { grid-template-columns: 1fr; }
}
@media print {
  @page { margin: 12mm; }
  body { max-width: none; padding: 0; font-size: 9pt; line-height: 1.25; }
  h1 { font-size: 14pt; } h2 { font-size: 11pt; margin: 10px 0 4px; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  .screen-only, .modebar-container { display: none !important; }
  .card { padding: 3px 8px; min-width: 0; } .card .v { font-size: 12pt; }
  .card .k { font-size: 7.5pt; }
  table { font-size: 7pt; line-height: 1.15; } th, td { padding: 1px 3px; }
  td.advice { min-width: 0; }
  #corner-table .seg { display: none; }
  tr { break-inside: avoid; page-break-inside: avoid; }
  button.corner { color: inherit; text-decoration: none; }
  .fig { break-inside: avoid; page-break-inside: avoid; }
  .plot { zoom: var(--print-zoom, 1); }
  .note { font-size: 7.5pt; }
}
"""

# The page's own script: draws the figures from the data and links the views. Plain
# ES5 so any browser that runs plotly.js runs it; no network, no storage.
_SCRIPT = r"""
(function () {
  "use strict";
  var D = JSON.parse(document.getElementById("limitlap-data").textContent);
  var C = D.columns;
  function res(o) {
    if (Array.isArray(o)) return o.map(res);
    if (o && typeof o === "object") {
      var keys = Object.keys(o);
      if (keys.length === 1 && keys[0] === "$col") return C[o.$col];
      var r = {};
      for (var i = 0; i < keys.length; i++) r[keys[i]] = res(o[keys[i]]);
      return r;
    }
    return o;
  }
  var config = { displaylogo: false, responsive: true, doubleClick: "reset",
    modeBarButtonsToRemove: ["toImage", "lasso2d", "autoScale2d"] };
  var views = {}, linked = [], baseShapes = {}, current = [0, D.length], drawnKeys = {};
  var busy = false, hovering = false, mapDiv = null, mapS = C.map_s, extraShapes = [];
  var specs = {}, rest = [], lapPool = {};
  D.figures.forEach(function (f) {
    specs[f.key] = f;
    views[f.key] = document.getElementById("fig-" + f.key);
    if (f.linked) linked.push({ div: views[f.key], f: f });
  });
  // Draw one figure (at the range and marks chosen so far) and link it to the others.
  function draw(f) {
    var div = views[f.key];
    var layout = res(f.layout);
    if (div.clientWidth < 700) narrow(f, layout, div);
    baseShapes[f.key] = (layout.shapes || []).slice();
    if (f.linked) {
      layout.xaxis.range = current.slice();
      layout.shapes = baseShapes[f.key].concat(extraShapes);
    }
    if (f.key === "map") {
      mapDiv = div;
      layout.shapes = [{ type: "circle", xref: "x", yref: "y", xsizemode: "pixel",
        ysizemode: "pixel", xanchor: 0, yanchor: 0, x0: -8, x1: 8, y0: -8, y1: 8,
        line: { color: "#333333", width: 2 }, visible: false }];
    }
    var data = res(f.data).filter(function (t) {
      if (t.meta && t.meta.lap !== undefined) {
        (lapPool[f.key] = lapPool[f.key] || {})[t.meta.lap] = t;
        return false;
      }
      return true;
    });
    return Plotly.newPlot(div, data, layout, config).then(function () {
      drawnKeys[f.key] = true;
      printZoom(div);
      if (f.linked) linkView(f, div);
      if (f.key === "map") { linkMap(); if (!same(current, [0, D.length])) showStretch(current[0], current[1]); }
    });
  }
  // On a narrow screen: the figure's own narrow layout (the g-g panels one a row), the
  // map about as tall as wide, and room for the legend, whose names then stand one a line.
  function narrow(f, layout, div) {
    if (f.narrow) Object.keys(f.narrow).forEach(function (k) { layout[k] = f.narrow[k]; });
    if (f.key === "map") layout.height = Math.round(div.clientWidth * 0.9) + 150;
    if (layout.showlegend !== false && !f.narrow) {
      var groups = {};
      f.data.forEach(function (t) {
        if (t.showlegend !== false && t.name) groups[t.legendgroup || t.name] = true;
      });
      layout.height += 20 * Object.keys(groups).length;
    }
    div.style.height = layout.height + "px";
  }
  // Printed, a figure drawn at the screen's width is scaled to the paper's: A4 or Letter
  // with 12 mm margins leaves about 700 CSS px (CSS zoom, set ahead: printing to PDF
  // gives a script no chance to redraw).
  var PRINT_PX = 700;
  function printZoom(div) {
    var w = div.getBoundingClientRect().width;
    if (w > 0) div.style.setProperty("--print-zoom", String(Math.min(1, PRINT_PX / w)));
  }
  window.addEventListener("resize", function () {
    Object.keys(views).forEach(function (k) { if (drawnKeys[k]) printZoom(views[k]); });
  });
  function isDrawn(div) { return drawnKeys[div.id.slice(4)] === true; }
  function same(a, b) { return Math.abs(a[0] - b[0]) < 1e-6 && Math.abs(a[1] - b[1]) < 1e-6; }
  function setRange(a, b, src) {
    current = [a, b];
    busy = true;
    var whole = same([a, b], [0, D.length]);
    var done = linked.filter(function (l) { return isDrawn(l.div); }).map(function (l) {
      var update = {};
      if (l.div !== src) update["xaxis.range"] = [a, b];
      if (FIT_Y[l.f.key]) {
        var y = whole ? null : fitY(l.div, a, b);
        if (y) update["yaxis.range"] = y; else update["yaxis.autorange"] = true;
      }
      return Plotly.relayout(l.div, update);
    });
    showStretch(a, b);
    return Promise.all(done).then(function () { busy = false; });
  }
  // Views whose vertical scale follows the stretch shown (the pedals keep 0-100 %).
  var FIT_Y = { speed: true, time_delta: true, data_check: true };
  function fitY(div, a, b) {
    var lo = Infinity, hi = -Infinity;
    div.data.forEach(function (t) {
      if (t.visible === "legendonly" || t.visible === false || !t.x || !t.y) return;
      for (var i = 0; i < t.x.length; i++) {
        var x = t.x[i], y = t.y[i];
        if (x >= a && x <= b && y !== null && isFinite(y)) {
          if (y < lo) lo = y;
          if (y > hi) hi = y;
        }
      }
    });
    if (!(hi >= lo)) return null;
    var pad = 0.08 * (hi - lo) + 0.01;
    return [lo - pad, hi + 2 * pad];
  }
  function stretchIndex(a, b) {
    var L = D.length, idx = [];
    if (!mapS) return idx;
    for (var i = 0; i < mapS.length; i++) {
      var s = mapS[i];
      if ((s >= a && s <= b) || (a < 0 && s >= a + L) || (b > L && s <= b - L)) idx.push(i);
    }
    return idx;
  }
  function showStretch(a, b) {
    if (!mapDiv || !drawnKeys.map) return;
    var whole = a <= 0.5 && b >= D.length - 0.5;
    var idx = whole ? [] : stretchIndex(a, b), hx = [], hy = [];
    for (var i = 0; i < idx.length; i++) {
      if (i > 0 && idx[i] !== idx[i - 1] + 1) { hx.push(null); hy.push(null); }
      hx.push(C.map_x[idx[i]]); hy.push(C.map_y[idx[i]]);
    }
    Plotly.restyle(mapDiv, { x: [hx], y: [hy] }, [1]);
    var f = D.figures.filter(function (g) { return g.key === "map"; })[0];
    if (whole || !hx.length) {
      Plotly.relayout(mapDiv, { "xaxis.range": f.layout.xaxis.range.slice(),
        "yaxis.range": f.layout.yaxis.range.slice() });
      return;
    }
    var xs = hx.filter(function (v) { return v !== null; });
    var ys = hy.filter(function (v) { return v !== null; });
    var x0 = Math.min.apply(null, xs), x1 = Math.max.apply(null, xs);
    var y0 = Math.min.apply(null, ys), y1 = Math.max.apply(null, ys);
    var pad = Math.max(0.25 * Math.max(x1 - x0, y1 - y0), 40);
    Plotly.relayout(mapDiv, { "xaxis.range": [x0 - pad, x1 + pad],
      "yaxis.range": [y0 - pad, y1 + pad] });
  }
  function rangeOf(e) {
    if (e["xaxis.range[0]"] !== undefined) return [+e["xaxis.range[0]"], +e["xaxis.range[1]"]];
    if (e["xaxis.range"]) return [+e["xaxis.range"][0], +e["xaxis.range"][1]];
    if (e["xaxis.autorange"]) return [0, D.length];
    return null;
  }
  function nearest(x) {
    var L = D.length, s = ((x % L) + L) % L, best = 0, bd = Infinity;
    for (var i = 0; i < mapS.length; i++) {
      var d = Math.abs(mapS[i] - s);
      if (d < bd) { bd = d; best = i; }
    }
    return best;
  }
  function cursor(x) {
    if (!mapDiv || !mapS || !drawnKeys.map) return;
    if (x === null) { Plotly.relayout(mapDiv, { "shapes[0].visible": false }); return; }
    var i = nearest(x);
    Plotly.relayout(mapDiv, { "shapes[0].visible": true, "shapes[0].xanchor": C.map_x[i],
      "shapes[0].yanchor": C.map_y[i] });
  }
  function hoverAll(x, src) {
    hovering = true;
    linked.forEach(function (l) {
      if (l.div !== src && isDrawn(l.div)) {
        try { Plotly.Fx.hover(l.div, { xval: x }, l.f.subplots, true); } catch (err) { /* */ }
      }
    });
    hovering = false;
  }
  function linkView(f, div) {
    div.on("plotly_relayout", function (e) {
      if (busy) return;
      var r = rangeOf(e);
      if (r && !same(r, current)) setRange(r[0], r[1], div);
    });
    div.on("plotly_hover", function (e) {
      if (hovering || !e.points || !e.points.length) return;
      var x = e.xvals ? e.xvals[0] : e.points[0].x;
      hoverAll(x, div);
      cursor(x);
    });
    div.on("plotly_unhover", function () {
      if (hovering) return;
      linked.forEach(function (m) { if (m.div !== div && isDrawn(m.div)) Plotly.Fx.unhover(m.div); });
      cursor(null);
    });
  }
  function linkMap() {
    mapDiv.on("plotly_selected", function (e) {
      if (!e || !e.points) return;
      var s = e.points.filter(function (p) { return p.curveNumber === 2; })
        .map(function (p) { return mapS[p.pointIndex]; }).sort(function (a, b) { return a - b; });
      if (s.length < 2) return;
      var a = s[0], b = s[s.length - 1], gap = 0, at = -1;
      for (var i = 1; i < s.length; i++) if (s[i] - s[i - 1] > gap) { gap = s[i] - s[i - 1]; at = i; }
      if (gap > 0.5 * D.length) { a = s[at] - D.length; b = s[at - 1]; }
      setRange(a, b, null);
    });
    mapDiv.on("plotly_hover", function (e) {
      var p = e.points && e.points[0];
      if (!p || p.curveNumber !== 2) return;
      hoverAll(mapS[p.pointIndex], mapDiv);
    });
  }
  function marks(c) {
    var add = [], m = c.marks, defs = [["brake_start_ideal_m", "#000000", "dash"],
      ["brake_start_actual_m", "#E69F00", "dash"], ["apex_m", "#777777", "dot"]];
    defs.forEach(function (d) {
      if (m[d[0]] === undefined) return;
      add.push({ type: "line", xref: "x", yref: "paper", x0: m[d[0]], x1: m[d[0]], y0: 0, y1: 1,
        line: { color: d[1], width: 1.5, dash: d[2] } });
    });
    return add;
  }
  function showCorner(i) {
    var c = D.corners[i];
    var rows = document.querySelectorAll("#corner-table tr.row");
    for (var r = 0; r < rows.length; r++)
      rows[r].classList.toggle("selected", +rows[r].getAttribute("data-corner") === i);
    var panels = document.querySelectorAll(".detail");
    for (var p = 0; p < panels.length; p++) panels[p].hidden = panels[p].id !== "detail-" + i;
    extraShapes = marks(c);
    linked.forEach(function (l) {
      if (isDrawn(l.div)) Plotly.relayout(l.div, { shapes: baseShapes[l.f.key].concat(extraShapes) });
    });
    return setRange(c.zoom[0], c.zoom[1], null);
  }
  var buttons = document.querySelectorAll("button.corner");
  for (var b = 0; b < buttons.length; b++) {
    buttons[b].addEventListener("click", function (ev) {
      var i = +ev.currentTarget.getAttribute("data-corner");
      showCorner(i);
      var det = document.getElementById("detail");
      if (det && det.scrollIntoView) det.scrollIntoView({ behavior: "smooth", block: "start" });
    });
  }
  // The session's other laps are drawn only once switched on (a long session has dozens).
  function showLap(n, on) {
    ["speed", "time_delta"].forEach(function (k) {
      var div = views[k];
      if (!div || !isDrawn(div)) return;
      var idx = [];
      div.data.forEach(function (t, j) { if (t.meta && t.meta.lap === n) idx.push(j); });
      if (idx.length) Plotly.restyle(div, { visible: on ? true : false }, idx);
      else if (on && lapPool[k] && lapPool[k][n]) {
        var t = lapPool[k][n];
        t.visible = true;
        Plotly.addTraces(div, t);
      }
    });
  }
  var boxes = document.querySelectorAll("input.lap");
  for (var k = 0; k < boxes.length; k++) {
    boxes[k].addEventListener("change", function (ev) {
      showLap(+ev.target.value, ev.target.checked);
    });
  }
  function all(on) {
    for (var k = 0; k < boxes.length; k++) { boxes[k].checked = on; showLap(+boxes[k].value, on); }
  }
  var bAll = document.getElementById("laps-all"), bNone = document.getElementById("laps-none");
  if (bAll) bAll.addEventListener("click", function () { all(true); });
  if (bNone) bNone.addEventListener("click", function () { all(false); });
  window.addEventListener("beforeprint", function () {
    while (rest.length) draw(rest.shift());
  });
  window.limitlap = { views: views, setRange: setRange, showCorner: showCorner,
    showLap: showLap, corners: D.corners, drawn: drawnKeys };
  // The figures in view first, then the others one at a time, so the page answers
  // clicks and scrolling while the rest are drawn.
  var order = D.figures.slice().sort(function (a, b) {
    function seen(f) {
      var r = views[f.key].getBoundingClientRect();
      return r.top < window.innerHeight && r.bottom > 0 ? 0 : 1;
    }
    return seen(a) - seen(b);
  });
  var first = order.filter(function (f) {
    var r = views[f.key].getBoundingClientRect();
    return r.top < window.innerHeight && r.bottom > 0;
  });
  rest = order.slice(first.length);
  Promise.all(first.map(draw)).then(function () {
    document.body.setAttribute("data-ready", String(Math.round(performance.now())));
    (function next() {
      if (!rest.length) {
        document.body.setAttribute("data-drawn", String(Math.round(performance.now())));
        return;
      }
      draw(rest.shift()).then(function () { setTimeout(next, 0); });
    })();
  });
})();
"""


# --------------------------------------------------------------------------- lap against lap


def versus_figures(result):
    """(file name, caption, PNG bytes) of the lap-against-lap page's figures."""
    from limitlap import pictures

    corners = [
        {"name": c.name, "start_m": c.start_m, "apex_m": c.apex_m, "end_m": c.end_m}
        for c in result.corners
    ]
    a, b = result.a.label, result.b.label
    specs = [
        fg.versus_delta_figure(result.distance_m, result.delta_s, corners, a, b),
        fg.versus_corner_figure(
            [c.name for c in result.corners],
            [c.delta_s for c in result.corners],
            [c.time_left_a_s for c in result.corners],
            [c.time_left_b_s for c in result.corners],
            a,
            b,
        ),
    ]
    cols = fg.Columns()
    return [(f"{s.key}.png", s.caption, pictures.picture(s, cols)) for s in specs]


def _versus_cards(result, out: list[str]) -> None:
    e = html.escape
    a, b = result.a, result.b
    cards = [
        ("lap", f"A: {a.label}", lap_time(a.lap.time_s)),
        ("best", f"B: {b.label}", lap_time(b.lap.time_s)),
        ("left", "B minus A", number(result.lap_delta_s, "+.2f", " s")),
        ("ideal", "A's ideal (its line)", lap_time(a.ideal.lap_time_s)),
        ("ideal", "B's ideal (its line)", lap_time(b.ideal.lap_time_s)),
    ]
    out.append('<div class="cards">')
    out += [
        f'<div class="card {cls}"><div class="k">{e(k)}</div><div class="v">{e(val)}</div></div>'
        for cls, k, val in cards
    ]
    out.append("</div>")


def _versus_table(result, out: list[str]) -> None:
    e = html.escape
    heads = ["corner", "A [s]", "B [s]", "B minus A [s]", "A left [s]", "B left [s]"]
    out.append('<section id="corners"><h2>Corner by corner</h2>')
    out.append('<div class="table-wrap"><table><thead><tr>')
    out += [f'<th class="{"t" if h == "corner" else ""}">{e(h)}</th>' for h in heads]
    out.append('<th class="t advice">in a sentence</th></tr></thead><tbody>')
    for c in result.corners:
        cells = [
            c.name,
            number(c.time_a_s, ".2f"),
            number(c.time_b_s, ".2f"),
            number(c.delta_s, "+.2f"),
            time_left(c.time_left_a_s),
            time_left(c.time_left_b_s),
            c.sentence,
        ]
        tds = [f'<td class="{"t" if j in (0, 6) else ""}">{e(x)}</td>' for j, x in enumerate(cells)]
        out.append(f"<tr>{''.join(tds)}</tr>")
    out.append("</tbody></table></div>")
    env = (
        "fitted to the flying laps of "
        + ", ".join(file_names_only(p) for p in result.envelope_logs)
        if result.fit is not None
        else f"the vehicle file's ('{result.vehicle.name}')"
    )
    out.append(
        "<p class=\"note\">Corner times on each lap's own line, the corners found on A's line "
        "and placed on B's by distance from the gate (as a share of the lap). Time left: "
        "each lap against the ideal on its own line at one common envelope, "
        f"{e(env)}, grip scale {result.grip_scale:.2f}.</p></section>"
    )


def versus_html(result, figure_list) -> str:
    """The lap-against-lap page: self-contained (pictures inline), in the analysis page's style."""
    import base64

    e = html.escape
    a, b = result.a, result.b
    logs = file_names_only(a.log_path)
    if b.log_path != a.log_path:
        logs += f" · {file_names_only(b.log_path)}"
    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>limitlap: {e(b.label)} against {e(a.label)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        f"<h1>B ({e(b.label)}) against A ({e(a.label)})</h1>",
        f'<p class="sub">{e(logs)} &middot; distances along A\'s line '
        f"({a.driven.line.length_m:.0f} m)</p>",
    ]
    _versus_cards(result, out)
    out.append('<section id="warnings"><h2>Warnings</h2>')
    if result.warnings:
        out += [f'<p class="warn">{e(file_names_only(w))}</p>' for w in result.warnings]
    else:
        out.append('<p class="ok">None.</p>')
    out.append("</section>")
    _versus_table(result, out)
    if figure_list:
        out.append('<section id="figures"><h2>Figures</h2>')
        for _name, caption, png in figure_list:
            data = base64.b64encode(png).decode("ascii")
            out.append(
                f'<figure class="fig"><img src="data:image/png;base64,{data}" alt="{e(caption)}" '
                f'style="max-width:100%;height:auto"><figcaption>{e(caption)}</figcaption></figure>'
            )
        out.append("</section>")
    out.append('<section id="caution"><h2>Caution</h2>')
    out.append(f'<p class="caution">{e(SAFETY_CAUTION)}</p></section>')
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"
