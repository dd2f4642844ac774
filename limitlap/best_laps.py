r"""Best of the session's own laps: each segment's best time, and their composite.

Segment times are differences of elapsed time interpolated at the segment boundaries of
:mod:`limitlap.corners`, so they telescope to each lap's time.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from limitlap.corners import Corner
from limitlap.driven import elapsed_from_gate
from limitlap.errors import LimitlapError
from limitlap.solve import Profile


@dataclass(frozen=True, eq=False)
class BestOfLaps:
    """Each segment's best time over a session's complete laps (SI).

    Attributes
    ----------
    names : tuple of str
        Segment (corner) names in driving order.
    lap_numbers : tuple of int
        The laps compared, in the order of the rows of ``segment_times_s``.
    segment_times_s : numpy.ndarray
        Segment time per lap and segment, shape (laps, segments). [s]
    best_s : numpy.ndarray
        Best time per segment. [s]
    best_lap : tuple of int
        Lap number that set each best.
    composite_lap_time_s : float
        Sum of the best segment times. [s]
    lap_times_s : numpy.ndarray
        Each lap's time (the sum of its segments). [s]
    ideal_s : numpy.ndarray or None
        The ideal's segment times, when an ideal profile was given. [s]
    ideal_lap_time_s : float or None
        The ideal lap time. [s]
    """

    names: tuple[str, ...]
    lap_numbers: tuple[int, ...]
    segment_times_s: np.ndarray
    best_s: np.ndarray
    best_lap: tuple[int, ...]
    composite_lap_time_s: float
    lap_times_s: np.ndarray
    ideal_s: np.ndarray | None = None
    ideal_lap_time_s: float | None = None

    def summary_dict(self) -> dict:
        """Plain record for summary.json (SI, unrounded)."""
        segs = []
        for j, name in enumerate(self.names):
            row = {"name": name, "best_s": float(self.best_s[j]), "lap": self.best_lap[j]}
            if self.ideal_s is not None:
                row["ideal_s"] = float(self.ideal_s[j])
            segs.append(row)
        return {
            "composite_time_s": self.composite_lap_time_s,
            "ideal_time_s": self.ideal_lap_time_s,
            "laps": list(self.lap_numbers),
            "segments": segs,
        }


def segment_times(distance_m, length_m, elapsed_s, lap_time_s, corners, scale=1.0):
    """Time spent in each corner's segment, bounds scaled by ``scale`` (closed lap).

    Parameters
    ----------
    distance_m : array-like
        Stations from the gate. [m]
    length_m : float
        Lap length. [m]
    elapsed_s : array-like
        Elapsed time at each station from the gate. [s]
    lap_time_s : float
        Time back to the gate. [s]
    corners : sequence of Corner
        Segments on the reference line.
    scale : float
        Factor from the reference line's distances to this lap's (length ratio). [-]

    Returns
    -------
    numpy.ndarray
        Segment times, adding up to ``lap_time_s``. [s]
    """
    s = np.append(np.asarray(distance_m, dtype=np.float64), length_m)
    t = np.append(np.asarray(elapsed_s, dtype=np.float64) - elapsed_s[0], lap_time_s)
    starts = np.array([c.start_m for c in corners]) * scale
    ends = np.array([c.end_m for c in corners]) * scale
    wraps = np.array([c.end_m <= c.start_m for c in corners])
    out = np.interp(ends, s, t) - np.interp(starts, s, t)
    return out + np.where(wraps, lap_time_s, 0.0)


def best_of_laps(
    laps: Sequence,
    corners: Sequence[Corner],
    *,
    reference_length_m: float,
    lap_numbers: Sequence[int] | None = None,
    ideal: Profile | None = None,
    ideal_length_m: float | None = None,
) -> BestOfLaps:
    """Composite of each segment's best time over the complete laps of a session.

    Parameters
    ----------
    laps : sequence of DrivenLap or pipeline.LapTimeline
        Complete laps (``line``, ``time_s``, ``speed_m_s``; optional ``lap_time_s``), or
        records with ``distance_m``, ``length_m``, ``time_s`` and ``lap_time_s`` in place
        of a line.
    corners : sequence of Corner
        Segments found on the reference lap's line.
    reference_length_m : float
        Length of the line the corners were found on. [m]
    lap_numbers : sequence of int, optional
        Lap numbers; default 1, 2, ...
    ideal : Profile, optional
        The ideal on the reference line, for its segment times beside the composite.
    ideal_length_m : float, optional
        Length of the ideal's line; default ``reference_length_m``. [m]

    Returns
    -------
    BestOfLaps

    Notes
    -----
    Laps' measured lengths differ by a few metres, so the reference bounds are mapped
    to each lap by distance fraction (bound × lap length / reference length).
    """
    if not laps:
        raise LimitlapError("no complete laps to build the best-of-laps composite from")
    if not corners:
        raise LimitlapError("no corners to split the laps into segments")
    numbers = (
        tuple(range(1, len(laps) + 1))
        if lap_numbers is None
        else tuple(int(x) for x in lap_numbers)
    )
    if len(numbers) != len(laps):
        raise LimitlapError(f"{len(numbers)} lap numbers given for {len(laps)} laps")
    table, totals = _lap_segment_table(laps, corners, reference_length_m)
    j_best = np.argmin(table, axis=0)
    best = table[j_best, np.arange(table.shape[1])]
    ideal_s = ideal_total = None
    if ideal is not None:
        lref = reference_length_m if ideal_length_m is None else ideal_length_m
        ideal_s = segment_times(
            ideal.distance_m,
            lref,
            ideal.time_s,
            ideal.lap_time_s,
            corners,
            lref / reference_length_m,
        )
        ideal_total = float(ideal.lap_time_s)
    return BestOfLaps(
        names=tuple(c.name for c in corners),
        lap_numbers=numbers,
        segment_times_s=table,
        best_s=best,
        best_lap=tuple(numbers[j] for j in j_best),
        composite_lap_time_s=float(best.sum()),
        lap_times_s=totals,
        ideal_s=ideal_s,
        ideal_lap_time_s=ideal_total,
    )


def _lap_segment_table(laps: Sequence, corners: Sequence[Corner], reference_length_m: float):
    """Segment times of every lap (rows: laps, columns: corners) [s] and the lap times [s]."""
    rows = []
    totals = []
    for lap in laps:
        t, total = elapsed_from_gate(lap)
        line = getattr(lap, "line", lap)  # a timeline carries distance_m and length_m itself
        rows.append(
            segment_times(
                line.distance_m,
                line.length_m,
                t,
                total,
                corners,
                line.length_m / reference_length_m,
            )
        )
        totals.append(total)
    return np.vstack(rows), np.asarray(totals)
