"""The report page: report.html, self-contained, built from what the stages computed.

:func:`report_html` lays out the analysed lap's headline numbers, the corner table and
the figures (PNG, drawn by :mod:`limitlap.figures` and embedded) for a driver and an
engineer. The page is written by :func:`limitlap.outputs.write_outputs`, which writes
every file of a run; this module writes nothing itself.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Callable
from pathlib import Path

import numpy as np

from limitlap.formatting import (
    NOT_AVAILABLE,
    distance,
    grip,
    grip_used,
    lap_time,
    number,
    seconds,
    speed_kmh,
    time_left,
    with_band,
)
from limitlap.outputs import ReportView

#: The safety caution every report and target sheet carries.
SAFETY_CAUTION = (
    "These targets are theoretical estimates from a point-mass model of your own laps, "
    "not instructions. Approach them progressively, a step at a time. Wet grip changes "
    "from corner to corner and from lap to lap. The circuit's regulations, its officials "
    "and qualified instructors come first."
)

#: Progress callback: ``progress(done, total, step)`` after each step of a write.
Progress = Callable[[int, int, str], None]

# --------------------------------------------------------------------------- figures


#: How the detail figure names each pedal trace's source (outputs._pedals).
_PEDAL_WORDS = {
    "ideal": ("ideal: share of braking grip", "ideal: share of drive limit"),
    "pedal": (None, "you: pedal"),
    "pressure": ("you: pressure, share of lap peak", None),
    "acceleration": ("you: from deceleration", "you: from acceleration"),
}


def _pedal_trace(speed_m_s, pedals: dict) -> dict:
    """One lap's traces for the detail figure: speed and the pedals the comparison drew."""
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


def _detail_traces(v: ReportView):
    """The real and the ideal lap's traces for the corner detail figures."""
    return (
        _pedal_trace(v.speed_real_m_s, v.pedals_real),
        _pedal_trace(v.speed_ideal_m_s, v.pedals_ideal),
    )


def _fit_points(fit):
    """Boundary points of an envelope fit per speed band, for the g-g figure."""
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


def _figures(v: ReportView, step):
    """(file name, caption, PNG bytes) of every report figure, drawn in order."""
    from limitlap import figures as fg

    corners = v.corners
    out = []
    timed = v.session.timed() if v.session is not None else []
    if timed:
        step("session figure")
        out.append(
            (
                "session.png",
                "Grip found and time left lap by lap: a drying or rubbering-in track shows as "
                "grip rising; time left is to the ideal on each lap's own line.",
                fg.session_figure(
                    [r.number for r in timed],
                    [np.nan if r.grip_estimate is None else r.grip_estimate for r in timed],
                    [r.time_left_s for r in timed],
                    v.lap_number,
                ),
            )
        )
    step("speed figure")
    out.append(
        (
            "speed.png",
            "Speed along the lap: your lap against the ideal on your own line.",
            fg.speed_figure(v.distance_m, v.speed_real_m_s, v.speed_ideal_m_s, corners),
        )
    )
    step("time delta figure")
    out.append(
        (
            "time_delta.png",
            "Time delta along the lap: where the ideal pulls away.",
            fg.delta_figure(v.distance_m, v.time_delta_s, corners),
        )
    )
    step("time left figure")
    out.append(
        ("time_left.png", "Time left per corner, largest first.", fg.time_left_figure(corners))
    )
    if v.x_m is not None and v.y_m is not None:
        step("map figure")
        rate = fg.time_loss_rate(v.distance_m, v.time_delta_s)
        out.append(
            (
                "map.png",
                "The line coloured by the local rate of time loss.",
                fg.map_figure(v.x_m, v.y_m, rate, corners, v.distance_m),
            )
        )
    step("g-g figure")
    out.append(
        (
            "gg.png",
            "g-g diagram by speed band: the shaded ring is grip this lap did not use.",
            fg.gg_figure(v.gg_bands, fit_points=_fit_points(v.fit)),
        )
    )
    real, ideal = _detail_traces(v)
    ranked = sorted(corners, key=lambda c: -c["time_left_s"])[:3]
    for i, c in enumerate(ranked, start=1):
        step(f"detail figure {c['name']}")
        out.append(
            (
                f"corner_{i}.png",
                c["plain"],
                fg.detail_figure(c, v.distance_m, v.length_m, real, ideal, caption=c["plain"]),
            )
        )
    check = _curvature_check(v)
    if check is not None:
        step("data check figure")
        title, k_ay, k_yaw = check
        out.append(
            (
                "data_check.png",
                "Data check: the rebuilt line's curvature against lateral acceleration / v² "
                "and yaw rate / v. They measure the same thing and should lie on one "
                "another; where they part, the line and every result on it are less certain.",
                fg.curvature_check_figure(
                    v.distance_m, v.curvature_1_m, k_ay, k_yaw, corners, title
                ),
            )
        )
    if math.isfinite(v.best_time_s) and corners:
        step("best-of-laps figure")
        out.append(
            (
                "best_of_laps.png",
                "Your best segments from the session beside the limit.",
                fg.best_figure(
                    corners,
                    v.lap_time_s,
                    v.best_time_s,
                    v.ideal_time_s,
                    lap_label=f"lap {v.lap_number}",
                ),
            )
        )
    return out


def _curvature_check(v: ReportView):
    """(title, κ from a_y/v², κ from r/v) for the data-check figure, from the line rebuild's own cross-check; None without inertial channels."""
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
    title = "Data check: curvature three ways" + (" — " + "; ".join(parts) if parts else "")
    return title, check.from_accel_lat_1_m, check.from_yaw_rate_1_m


_CSS = """
:root { --ink:#222; --muted:#5a5a5a; --real:#D55E00; --ideal:#0072B2; --line:#d0d0d0; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
  color: var(--ink); margin: 0 auto; max-width: 1240px; padding: 24px; line-height: 1.45; }
h1 { font-size: 1.6rem; margin: 0 0 4px; }
h2 { font-size: 1.2rem; margin: 28px 0 8px; border-bottom: 2px solid var(--line); padding-bottom: 4px; }
.sub { color: var(--muted); margin: 0 0 16px; }
.cards { display: flex; flex-wrap: wrap; gap: 12px; }
.card { border: 1px solid var(--line); border-radius: 6px; padding: 10px 16px; min-width: 170px; }
.card .k { color: var(--muted); font-size: .85rem; }
.card .v { font-size: 1.5rem; font-weight: 700; }
.card.left .v { color: var(--real); }
.card.ideal .v { color: var(--ideal); }
table { border-collapse: collapse; width: 100%; font-size: .92rem; }
th, td { border-bottom: 1px solid var(--line); padding: 5px 8px; text-align: right; vertical-align: top; }
th { background: #f4f4f4; }
td.t, th.t { text-align: left; }
tr.top td { font-weight: 600; }
figure { margin: 16px 0; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { color: var(--muted); font-size: .9rem; }
.warn { border-left: 5px solid #E69F00; background: #fff7e6; padding: 8px 12px; margin: 6px 0; }
.ok { color: var(--muted); }
.caution { border: 2px solid #E69F00; background: #fff4e0; padding: 12px 16px; border-radius: 6px; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2 { page-break-after: avoid; break-after: avoid; }
  tr { page-break-inside: avoid; }
}
"""


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
    return (
        "The envelope is a g-g-V envelope (lateral, braking and driving friction, a "
        "combined-slip exponent, power, drag and downforce) fitted to your own best samples"
        f"{which} with the width the sensor's noise adds to it measured and taken out; so "
        "the time left is time that grip you have already shown allows."
    )


def report_html(v: ReportView, figure_list) -> str:
    """report.html text: self-contained, figures inline as data URIs, no scripts."""
    out: list[str] = []
    _head_and_cards(v, out)
    session_figures = [f for f in figure_list if f[0] == "session.png"]
    _session_section(v, session_figures, out)
    _warnings(v, out)
    _corner_table(v, out)
    _figure_section([f for f in figure_list if f[0] != "session.png"], out)
    _method_and_caution(v, out)
    return "\n".join(out) + "\n"


def _head_and_cards(v: ReportView, out: list[str]) -> None:
    """The page head, title line and the headline numbers."""
    e = html.escape
    out += [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>limitlap report: lap {v.lap_number}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        f"<h1>Lap {v.lap_number}: {e(lap_time(v.lap_time_s))}, ideal {e(lap_time(v.ideal_time_s))}</h1>",
        f'<p class="sub">{e(Path(v.source).name or "session")} &middot; '
        f"{v.lap_distance_m:.0f} m lap &middot; {v.n_laps} complete laps in the session</p>",
        '<div class="cards">',
    ]
    band = v.bands.time_left_band_s if v.bands is not None else None
    cards = [
        ("", "lap time", lap_time(v.lap_time_s)),
        ("ideal", f"ideal at grip {v.grip_scale:.2f}", lap_time(v.ideal_time_s)),
        ("left", "time left", with_band(v.time_left_s, band)),
        ("", "grip estimate", grip(v.grip_estimate)),
        ("", "best of your laps", lap_time(v.best_time_s)),
    ]
    for cls, k, val in cards:
        out.append(
            f'<div class="card {cls}"><div class="k">{e(k)}</div><div class="v">{e(val)}</div></div>'
        )
    out.append("</div>")
    if v.time_left_words:
        out.append(f'<p class="warn">Time left below zero: {e(v.time_left_words)}.</p>')


def _session_section(v: ReportView, figures, out: list[str]) -> None:
    """Every lap of the session: kind, time, ideal on its own line, time left, grip found, corner times; the grip-by-lap figure; each corner's consistency."""
    if v.session is None:
        return
    e = html.escape
    names = list(v.session.corner_names)
    out.append("<h2>The session, lap by lap</h2>")
    out.append("<table><thead><tr>")
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
            number(r.grip_estimate, ".2f"),
        ]
        times = [None] * len(names) if r.corner_times_s is None else list(r.corner_times_s)
        cells += [number(t, ".2f") for t in times]
        tds = [f'<td class="{"t" if j == 1 else ""}">{e(x)}</td>' for j, x in enumerate(cells)]
        out.append(f"<tr{cls}>{''.join(tds)}</tr>")
    if v.session.consistency:
        cons = v.session.consistency
        n = cons[0].n_laps
        row = ["spread", f"{n} flying", "", "", "", ""] + [number(c.spread_s, ".3f") for c in cons]
        tds = [f'<td class="{"t" if j == 1 else ""}">{e(x)}</td>' for j, x in enumerate(row)]
        out.append(f"<tr>{''.join(tds)}</tr>")
    out.append("</tbody></table>")
    out.append(
        '<p class="sub">Each lap timed gate to gate is measured against the ideal on its '
        "own line at the session's envelope; grip found is the grip scale the lap showed "
        "against that envelope (1 = the envelope's). Corner times in seconds; the last "
        "row is each corner's spread (standard deviation) over the flying laps: how "
        f"consistent the driver was there. Lap {v.lap_number} (bold) is analysed below.</p>"
    )
    _figure_section(figures, out, heading=False)


def _warnings(v: ReportView, out: list[str]) -> None:
    """Warnings near the top: a result the data cannot support must not be missed."""
    e = html.escape
    out.append("<h2>Warnings</h2>")
    if v.warnings:
        out += [f'<p class="warn">{e(w)}</p>' for w in v.warnings]
    else:
        out.append('<p class="ok">None: the data passed every check this report makes.</p>')


def _points(points) -> str:
    """Brake points for people: each to the metre, "—" without one."""
    pts = [distance(x) for x in (points or [])]
    return " + ".join(pts) if pts else distance(None)


def _corner_cells(i: int, c: dict) -> list[str]:
    """One row of the corner table, in the one rounding of every output (formatting)."""
    s = c["_summary"]
    return [
        str(i),
        str(c["rank_group"]) if "rank_group" in c else "",
        f"{c['name']} {c['label']}" if c.get("label") else c["name"],
        distance(c["apex_m"]),
        with_band(c["time_left_s"], c.get("time_left_band_s"), unit="")
        if c.get("time_left_band_s")
        else time_left(c["time_left_s"]),
        seconds(c["actual_s"]),
        seconds(c["ideal_s"]),
        f"{speed_kmh(c['min_speed_actual_m_s'])} / {speed_kmh(c['min_speed_ideal_m_s'])}",
        f"{_points(s['brake_points_actual_m'])} / {_points(s['brake_points_ideal_m'])}",
        grip_used(c["grip_used"], c.get("grip_used_raw")),
        grip(c.get("grip_estimate")),
        c["plain"],
    ]


def _corner_table(v: ReportView, out: list[str]) -> None:
    """The corners ranked by time left, with the numbers a driver acts on."""
    e = html.escape
    out.append("<h2>Where the time is, corner by corner</h2>")
    out.append("<table><thead><tr>")
    heads = [
        "rank",
        "group",
        "corner",
        "apex [m]",
        "time left [s]",
        "yours [s]",
        "ideal [s]",
        "min speed yours / ideal [km/h]",
        "brake yours / ideal [m]",
        "grip used",
        "grip found",
        "where the time is",
    ]
    out += [
        f'<th class="{"t" if h in ("corner", "where the time is") else ""}">{e(h)}</th>'
        for h in heads
    ]
    out.append("</tr></thead><tbody>")
    ranked = sorted(v.corners, key=lambda c: -c["time_left_s"])
    last = len(heads) - 1
    for i, c in enumerate(ranked, start=1):
        cls = ' class="top"' if i <= 3 else ""
        tds = [
            f'<td class="{"t" if j in (2, last) else ""}">{e(x)}</td>'
            for j, x in enumerate(_corner_cells(i, c))
        ]
        out.append(f"<tr{cls}>{''.join(tds)}</tr>")
    out.append("</tbody></table>")
    notes = [f"{c['name']}: {c['note']}" for c in v.corners if c.get("note")]
    out += [f'<p class="sub">{e(n)}</p>' for n in notes]
    out.append(
        '<p class="sub">Time left: your segment time minus the ideal\'s on the same line. '
        "Brake points: where the speed starts falling into the corner (a lift counts), one "
        "per braking zone, in metres from the start/finish gate. Minimum speed: the "
        "lowest in the corner, or the speed at the apex where a lap takes it without "
        "slowing. Grip used: the share of the available combined grip this lap used in "
        "the corner (above 100 %, marked over: it used more than the envelope allows at "
        "this grip scale). Grip found: the grip scale the corner showed against the envelope "
        "(below 1 = less grip there than at its best, e.g. a damp patch; "
        f"{NOT_AVAILABLE} where the corner is taken flat out, on the engine's limit, so it "
        "does not show the tyres'). Definitions: docs/methods.md, Corner record."
        + _band_note(v)
        + "</p>"
    )


def _band_note(v: ReportView) -> str:
    """What the ± and the rank groups mean, for the corner table's note."""
    b = v.bands
    if b is None:
        return ""
    return (
        f" Time left ± : an interval holding the true value {b.coverage:.0%} of the time, "
        f"from a bootstrap over the {b.n_laps} flying laps (the envelope's samples and "
        "the rebuilt lines; docs/methods.md, How sure); where it includes zero no advice "
        "is given. Corners sharing a group number cannot be told apart: their order "
        f"holds in fewer than {b.coverage:.0%} of the resamples."
    )


def _figure_section(figure_list, out: list[str], heading: bool = True) -> None:
    """The figures, inline as PNG data URIs."""
    e = html.escape
    if heading:
        out.append("<h2>Figures</h2>")
    for name, caption, png in figure_list:
        data = base64.b64encode(png).decode("ascii")
        out.append(
            f'<figure><img src="data:image/png;base64,{data}" alt="{e(caption)}" data-file="{e(name)}">'
            f"<figcaption>{e(caption)}</figcaption></figure>"
        )


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
    out.append("<h2>How this was worked out</h2>")
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
    out.append("<h2>Caution</h2>")
    out.append(f'<p class="caution">{e(SAFETY_CAUTION)}</p>')
    out += ["</body>", "</html>"]


# --------------------------------------------------------------------------- lap against lap


def versus_figures(result):
    """(file name, caption, PNG bytes) of the lap-against-lap page's figures."""
    from limitlap import figures as fg

    corners = [
        {"name": c.name, "start_m": c.start_m, "apex_m": c.apex_m, "end_m": c.end_m}
        for c in result.corners
    ]
    a, b = result.a.label, result.b.label
    return [
        (
            "versus_delta.png",
            f"Time delta along the lap: B ({b}) minus A ({a}) on A's line; rising = B losing time.",
            fg.versus_delta_figure(result.distance_m, result.delta_s, corners, a, b),
        ),
        (
            "versus_corners.png",
            "Per corner: B minus A, and each lap's time left to its own ideal at the "
            "common envelope.",
            fg.versus_corner_figure(
                [c.name for c in result.corners],
                [c.delta_s for c in result.corners],
                [c.time_left_a_s for c in result.corners],
                [c.time_left_b_s for c in result.corners],
                a,
                b,
            ),
        ),
    ]


def versus_html(result, figure_list) -> str:
    """The lap-against-lap page: self-contained, in the style of the analysis report."""
    e = html.escape
    a, b = result.a, result.b
    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>limitlap: {e(b.label)} against {e(a.label)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        f"<h1>B ({e(b.label)}) against A ({e(a.label)})</h1>",
        f'<p class="sub">{e(Path(a.log_path).name)}'
        + ("" if a.log_path == b.log_path else f" &middot; {e(Path(b.log_path).name)}")
        + f" &middot; distances along A's line ({a.driven.line.length_m:.0f} m)</p>",
        '<div class="cards">',
    ]
    cards = [
        ("", f"A: {a.label}", lap_time(a.lap.time_s)),
        ("", f"B: {b.label}", lap_time(b.lap.time_s)),
        ("left", "B minus A", number(result.lap_delta_s, "+.2f", " s")),
        ("ideal", "A's ideal (its line)", lap_time(a.ideal.lap_time_s)),
        ("ideal", "B's ideal (its line)", lap_time(b.ideal.lap_time_s)),
    ]
    for cls, k, val in cards:
        out.append(
            f'<div class="card {cls}"><div class="k">{e(k)}</div><div class="v">{e(val)}</div></div>'
        )
    out.append("</div>")
    out.append("<h2>Warnings</h2>")
    if result.warnings:
        out += [f'<p class="warn">{e(w)}</p>' for w in result.warnings]
    else:
        out.append('<p class="ok">None.</p>')
    out.append("<h2>Corner by corner</h2>")
    heads = [
        "corner",
        "A [s]",
        "B [s]",
        "B minus A [s]",
        "A left [s]",
        "B left [s]",
        "in a sentence",
    ]
    out.append("<table><thead><tr>")
    out += [
        f'<th class="{"t" if h in ("corner", "in a sentence") else ""}">{e(h)}</th>' for h in heads
    ]
    out.append("</tr></thead><tbody>")
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
    out.append("</tbody></table>")
    env = (
        "fitted to the flying laps of " + ", ".join(Path(p).name for p in result.envelope_logs)
        if result.fit is not None
        else f"the vehicle file's ('{result.vehicle.name}')"
    )
    out.append(
        "<p class=\"sub\">Corner times on each lap's own line, the corners found on A's line "
        "and placed on B's by distance from the gate (as a share of the lap). Time left: "
        "each lap against the ideal on its own line at one common envelope, "
        f"{e(env)}, grip scale {result.grip_scale:.2f}.</p>"
    )
    _figure_section(figure_list, out)
    out.append("<h2>Caution</h2>")
    out.append(f'<p class="caution">{e(SAFETY_CAUTION)}</p>')
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"
