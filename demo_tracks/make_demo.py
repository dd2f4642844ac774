"""Regenerate the bundled demo data of Tarrowby Heath, an invented circuit.

Run from the repository root: ``python demo_tracks/make_demo.py``. Deterministic
(fixed seeds): running it again writes the same bytes.

Writes, next to this script:

- ``tarrowby_heath.toml``      track file: name, ENU origin, gate, corner names and apexes
- ``tarrowby_heath_line.csv``  the reference line (docs/formats.md, Line files; x/y/z in
                               the origin's ENU frame)
- ``tarrowby_heath_edges.csv`` the track's edges as widths either side of that line
                               (docs/formats.md, Track edges)
- ``tarrowby_dry.csv.gz``      dry session: out-lap, 7 flying laps, in-lap; 100 Hz, 10 Hz GNSS
- ``tarrowby_wet.csv.gz``      wet session (grip scale 0.75): out-lap, 4 laps, in-lap
- ``tarrowby_second.csv.gz``   a second invented driver's dry session in the same car, with
                               other mistakes (``synth.SECOND_DRIVER_MISTAKES``): out-lap,
                               6 laps, in-lap (for ``limitlap versus``)
- ``tarrowby_truth.json``      what the generator planted (lap times, mistakes, ideal laps)
"""

from __future__ import annotations

import gzip
import json
from pathlib import Path

from limitlap import circuits, synth
from limitlap.driven import line_csv_text

HERE = Path(__file__).resolve().parent
DRY = {"n_laps": 7, "grip_scale": 1.0, "seed": 20240611}
WET = {"n_laps": 4, "grip_scale": 0.75, "seed": 20240612}
SECOND = {"n_laps": 6, "grip_scale": 1.0, "seed": 20240613}
#: Each session's planted mistakes (the dry and wet ones: the generator's default).
MISTAKES = {"second": synth.SECOND_DRIVER_MISTAKES}


def track_toml(circuit: circuits.Circuit) -> str:
    """The track file text (our own small format)."""
    lat0, lon0, h0 = circuit.origin
    lat, lon = circuit.gate_latlon
    out = [
        "# Tarrowby Heath: an invented circuit for the limitlap demo (not a real place's data).",
        "# Written by demo_tracks/make_demo.py.",
        f'name = "{circuit.name}"',
        f"length_m = {circuit.line.length_m:.3f}",
        'line = "tarrowby_heath_line.csv"   # x/y/z in the ENU frame at [origin]',
        "",
        "[origin]                            # WGS84, ellipsoidal height",
        f"latitude = {lat0:.8f}",
        f"longitude = {lon0:.8f}",
        f"height_m = {h0:.3f}",
        "",
        "[gate]                              # a point on the start/finish straight",
        f"latitude = {lat:.8f}",
        f"longitude = {lon:.8f}",
        "",
        "[edges]                             # docs/formats.md, Track edges",
        'file = "tarrowby_heath_edges.csv"',
        "margin_m = 1.0",
    ]
    for c in circuit.corners:
        out += [
            "",
            "[[corners]]",
            f'name = "{c.name}"',
            f'label = "{c.label}"',
            f"apex_m = {c.apex_m:.1f}             # from the gate",
        ]
    return "\n".join(out) + "\n"


#: The invented track's width, and how far the demo line sits from its middle towards
#: the inside of a bend (at most): a line that keeps to the middle on the straights,
#: leaving the outside at turn-in and exit to a better line. [m]
TRACK_WIDTH_M = 12.0
LINE_INSIDE_M = 3.5


def edges_csv(circuit: circuits.Circuit) -> str:
    """The track's edges as widths along the demo line (docs/formats.md, Track edges), WGS84.

    The line sits ``LINE_INSIDE_M * tanh(κ / 0.008)`` from the track's middle towards the
    inside of each bend (κ its curvature smoothed over 15 m): in the middle on the
    straights, near the inside kerb at the apexes.
    """
    import numpy as np
    import pymap3d
    from scipy.ndimage import gaussian_filter1d

    line = circuit.line
    step = max(1, round(5.0 / (line.length_m / line.n)))
    kappa = gaussian_filter1d(line.curvature_1_m, 15.0 / (line.length_m / line.n), mode="wrap")
    inside = LINE_INSIDE_M * np.tanh(kappa / 0.008)
    lat, lon, _ = pymap3d.enu2geodetic(line.x_m, line.y_m, np.zeros(line.n), *circuit.origin)
    half = TRACK_WIDTH_M / 2.0
    rows = [
        f"{lat[i]:.8f},{lon[i]:.8f},{half - inside[i]:.2f},{half + inside[i]:.2f}"
        for i in range(0, line.n, step)
    ]
    return "latitude [deg],longitude [deg],left [m],right [m]\n" + "\n".join(rows) + "\n"


def truth_record(session: synth.Session, settings: dict) -> dict:
    """Plain-JSON summary of a session's truth."""
    tr = session.truth
    return {
        "settings": settings,
        "ideal_lap_time_s": tr.ideal_lap_time_s,
        "lap_times_s": tr.lap_times_s.tolist(),
        "gate_times_s": tr.gate_times_s.tolist(),
        "gate_latlon": list(tr.gate_latlon),
        "mistakes": [
            {
                "corner": m.corner,
                "apex_m": m.apex_m,
                "window_m": list(m.window_m),
                "speed_cap_kmh": m.speed_cap_m_s * 3.6,
                "ideal_min_speed_kmh": m.ideal_min_speed_m_s * 3.6,
                "time_cost_s": m.time_cost_s,
            }
            for m in tr.mistakes
        ],
    }


def main() -> None:
    """Write the demo files."""
    circuit = circuits.demo_circuit()
    (HERE / "tarrowby_heath.toml").write_text(track_toml(circuit), encoding="utf-8")
    (HERE / "tarrowby_heath_line.csv").write_text(line_csv_text(circuit.line), encoding="utf-8")
    (HERE / "tarrowby_heath_edges.csv").write_text(edges_csv(circuit), encoding="utf-8")
    truth = {}
    for name, settings in (("dry", DRY), ("wet", WET), ("second", SECOND)):
        extra = {"mistakes": MISTAKES[name]} if name in MISTAKES else {}
        session = synth.generate_session(circuit, **settings, **extra)
        text = synth.session_csv_text(session).encode("utf-8")
        (HERE / f"tarrowby_{name}.csv.gz").write_bytes(gzip.compress(text, 9, mtime=0))
        truth[name] = truth_record(session, settings)
    (HERE / "tarrowby_truth.json").write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
