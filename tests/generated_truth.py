"""The generator's own corner times: where a generated car truly was, and when.

A corner is found on an analysed lap's rebuilt line; its bounds are physical places: where
that lap truly was (the generator's distance along the true line) when its rebuilt
distance reached them. Every lap of every generated session is then timed between those
places from the motion the generator sampled (its time and true distance per row), with
no limitlap code but the segment-time arithmetic of :mod:`limitlap.best_laps`.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from limitlap import best_laps
from limitlap.driven import elapsed_from_gate


def lap_motion(session, lap_number: int):
    """Time from the gate and true distance from the gate of a generated lap's rows. [s], [m]."""
    tr = session.truth
    rows = tr.lap_number == lap_number
    t = session.time_s[rows] - tr.gate_times_s[lap_number - 1]
    d = tr.lap_distance_m[rows]
    inside = (t > 0.0) & (t < tr.lap_times_s[lap_number - 1])
    t, d = t[inside], d[inside]
    keep = np.concatenate(([True], np.diff(d) > 0))
    return t[keep], d[keep]


def physical_corners(corners, driven, session, lap_number: int):
    """The corners' bounds as true distances: where the analysed lap truly was when its rebuilt line's distance reached each bound. [m]."""
    t_st, _ = elapsed_from_gate(driven)
    t, d = lap_motion(session, lap_number)

    def place(s_m):
        return float(np.interp(np.interp(s_m, driven.line.distance_m, t_st), t, d))

    return [dataclasses.replace(c, start_m=place(c.start_m), end_m=place(c.end_m)) for c in corners]


def true_corner_times(session, lap_number: int, true_corners) -> np.ndarray:
    """A generated lap's time between the physical corner bounds (:func:`physical_corners`). [s]."""
    t, d = lap_motion(session, lap_number)
    tr = session.truth
    return best_laps.segment_times(
        d, tr.line.length_m, t, tr.lap_times_s[lap_number - 1], true_corners
    )
