"""Line opportunity speed: the corridor and the better line of a 4 km lap.

The bundled dry session of Tarrowby Heath (3.76 km, 7 flying laps, the track file's
edges) is analysed once without the line stage; its laps' rebuilt paths, the analysed
lap's line and the edges are then scaled by 4000 m / its length (a 4 km lap of the same
shape) and the corridor (:func:`limitlap.corridor.corridor`) and the better line
(:func:`limitlap.better_line.line_opportunity`) are timed on it, with the edges and with
the laps alone. Yardstick in the same run: the whole ``analyse`` without the line stage.

Run: ``python benchmarks/bench_line.py``. Target: corridor and better line of a 4 km lap
under 2 s on this machine (fastest of 3 runs).
"""

from __future__ import annotations

import dataclasses
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from limitlap import better_line, corners, corridor, driven, gnss, laps, pipeline  # noqa: E402
from limitlap.resources import bundled_path  # noqa: E402

LOG = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
TRACK = bundled_path("demo_tracks", "tarrowby_heath.toml")


def fastest(fn, repeats=3):
    """(fastest time, last result): other work on a shared machine only ever adds time."""
    best, out = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def scaled(line, f):
    """The line f times larger (positions and distances times f, curvature over f)."""
    return dataclasses.replace(
        line,
        distance_m=line.distance_m * f,
        curvature_1_m=line.curvature_1_m / f,
        length_m=line.length_m * f,
        x_m=line.x_m * f,
        y_m=line.y_m * f,
    )


def main() -> None:
    t_analyse, a = fastest(lambda: pipeline.analyse(LOG, track=TRACK, better_line=False))
    log, all_laps, trk, _ = pipeline.load_session(LOG, track=TRACK)
    flying = laps.flying_laps(all_laps)
    fusion = a.driven.agreement["fusion"]
    t_full, _ = fastest(lambda: [driven.reconstruct_lap(log, lp) for lp in flying])
    t_rebuild, rebuilt = fastest(lambda: [driven.rebuild_path(log, lp, fusion) for lp in flying])
    f = 4000.0 / a.driven.line.length_m
    line = scaled(a.driven.line, f)
    paths = [
        corridor.LapPath(lp.number, d.line.x_m * f, d.line.y_m * f)
        for lp, d in zip(flying, rebuilt, strict=True)
    ]
    lat, lon, left, right = trk.edges.columns
    x, y = gnss.enu_of(lat, lon, log.origin)
    edges = corridor.edges_from_widths(x * f, y * f, left, right, trk.edges.margin_m)
    found = corners.track_corners(line)
    print(
        f"4 km lap ({line.length_m:.0f} m, {line.n} stations), {len(paths)} laps, "
        f"{len(found)} corners; analyse without the line stage {t_analyse:.2f} s (yardstick)"
    )
    print(
        f"rebuilding the {len(flying)} flying laps' paths alone {t_rebuild:.3f} s "
        f"(driven.rebuild_path; whole rebuilds {t_full:.3f} s; the analysed lap's is rebuilt "
        "anyway, the bands' neighbours are reused)"
    )
    frame = corridor.reference_frame(line)
    for name, given in (("track edges", edges), ("laps alone", None)):
        t_band, band = fastest(lambda given=given: corridor.corridor(frame, paths, given))
        t_line, result = fastest(
            lambda band=band: better_line.line_opportunity(frame, band, found, a.vehicle)
        )
        total = t_band + t_line
        told = sum(c.told for c in result.corners)
        gain = "none told" if result.line_time_s is None else f"{result.line_time_s:.2f} s"
        print(
            f"  {name:12s} corridor {t_band:.3f} s + better line {t_line:.3f} s = {total:.2f} s "
            f"({total / t_analyse:.1f}x analyse; target under 2 s: "
            f"{'met' if total < 2.0 else 'NOT met'}); corners told {told}, line time {gain}, "
            f"widest corridor {np.max(band.width_m):.1f} m"
        )


if __name__ == "__main__":
    main()
