"""The driver's line per corner: what the ideal does differently, in plain words.

:func:`advice_line` words the differences of one corner's comparison
(:mod:`limitlap.compare`), naming only those larger than the data can resolve and that
carry time of their own (docs/methods.md, Corners and comparison). The resolutions are
fixed here, once.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from limitlap.formatting import METRIC, time_left
from limitlap.units import KMH_TO_M_S

#: A corner's time is good to about a hundredth of a second (stations interpolated
#: along distance); a phase or a corner with less than two hundredths of time left has
#: nothing the data can show. Common practice, no published source. [s]
TIME_RESOLUTION_S = 0.02

#: Speeds are shown to 1 km/h; a smaller difference is not named. Common practice
#: (engineers discuss apex speeds to 1-2 km/h), no published source. [m/s]
SPEED_RESOLUTION_M_S = 1.0 * KMH_TO_M_S

#: A brake point or drive point is placed to about this in time (one sample of a
#: 20 Hz logger, and the speed channel's own lag), and never better than
#: :data:`DISTANCE_FLOOR_M`. Common practice, no published source. [s]
MARKER_TIME_RESOLUTION_S = 0.05

#: Engineers discuss brake points to a few metres. Common practice, no published
#: source. [m]
DISTANCE_FLOOR_M = 2.0


def distance_resolution_m(speed_m_s: float) -> float:
    """The smallest distance between two markers the data resolves at this speed. [m].

    >>> distance_resolution_m(20.0), distance_resolution_m(60.0)
    (2.0, 3.0)
    """
    v = speed_m_s if math.isfinite(speed_m_s) else 0.0
    return max(DISTANCE_FLOOR_M, v * MARKER_TIME_RESOLUTION_S)


@dataclass(frozen=True)
class CornerDifferences:
    """What tells one corner of the real lap from the ideal (SI; NaN where unknown).

    Attributes
    ----------
    name : str
        Corner name.
    time_left_s : float
        Real minus ideal segment time. [s]
    approach_s, braking_s, mid_s, exit_s : float
        The time left split into its phases (docs/outputs.md, summary.json). [s]
    brake_later_m : float
        How much later the ideal's first brake point is (+ later). [m]
    min_speed_gain_m_s : float
        Ideal minus real minimum speed. [m/s]
    full_drive_sooner_m : float
        How much sooner the ideal is at full drive (+ sooner). [m]
    brake_resolution_m, drive_resolution_m : float
        What the data resolves at the brake point and at the drive point. [m]
    previous : str
        The corner before this one.
    arrival_deficit_m_s : float
        Ideal minus real speed at the segment's start. [m/s]
    ideal_without_slowing : bool
        The ideal takes the corner without slowing (no minimum of its own).
    real_brake_m, real_min_speed_m_s : float
        The real lap's first brake point [m] and minimum speed [m/s].
    """

    name: str
    time_left_s: float
    approach_s: float
    braking_s: float
    mid_s: float
    exit_s: float
    brake_later_m: float
    min_speed_gain_m_s: float
    full_drive_sooner_m: float
    brake_resolution_m: float = DISTANCE_FLOOR_M
    drive_resolution_m: float = DISTANCE_FLOOR_M
    previous: str = ""
    arrival_deficit_m_s: float = math.nan
    ideal_without_slowing: bool = False
    real_brake_m: float = math.nan
    real_min_speed_m_s: float = math.nan


def _beyond(x: float, resolution: float) -> bool:
    return math.isfinite(x) and abs(x) >= resolution


def _arrives_slower(d: CornerDifferences) -> bool:
    """The real lap starts the segment slower than the ideal by more than the resolution."""
    return _beyond(d.arrival_deficit_m_s, SPEED_RESOLUTION_M_S) and d.arrival_deficit_m_s > 0


def _parts(d: CornerDifferences, u) -> list[str]:
    """The differences worth naming, in driving order, each as a clause.

    A clause about the driver ("you ...") is followed by clauses that name the ideal
    again.
    """
    parts = []
    if (
        d.approach_s >= TIME_RESOLUTION_S
        and d.approach_s >= 0.5 * d.time_left_s
        and _arrives_slower(d)
    ):
        where = f"{d.previous}'s exit" if d.previous else "the corner before"
        parts.append(
            f"{time_left(d.approach_s)} s of it comes from {where}: you arrive "
            f"{u.speed_text(d.arrival_deficit_m_s)} slower"
        )
    turning = d.braking_s + d.mid_s
    if d.ideal_without_slowing and math.isfinite(d.real_brake_m) and turning >= TIME_RESOLUTION_S:
        parts.append(
            f"the ideal takes it without slowing; you slow from {u.distance_text(d.real_brake_m)} "
            f"to {u.speed_text(d.real_min_speed_m_s)}"
        )
        return _with_subject(parts + _drive_part(d, u))
    # Braking later because the lap arrived slower is no instruction: left out.
    later = d.brake_later_m > 0 or not _arrives_slower(d)
    if (
        _beyond(d.brake_later_m, d.brake_resolution_m)
        and d.braking_s >= TIME_RESOLUTION_S
        and later
    ):
        word = "later" if d.brake_later_m > 0 else "earlier"
        parts.append(f"the ideal brakes {u.distance_text(abs(d.brake_later_m))} {word}")
    if _beyond(d.min_speed_gain_m_s, SPEED_RESOLUTION_M_S) and turning >= TIME_RESOLUTION_S:
        word = "more" if d.min_speed_gain_m_s > 0 else "less"
        parts.append(f"carries {u.speed_text(abs(d.min_speed_gain_m_s))} {word} at the minimum")
    return _with_subject(parts + _drive_part(d, u))


def _drive_part(d: CornerDifferences, u) -> list[str]:
    if _beyond(d.full_drive_sooner_m, d.drive_resolution_m) and d.exit_s >= TIME_RESOLUTION_S:
        word = "sooner" if d.full_drive_sooner_m > 0 else "later"
        return [f"is at full drive {u.distance_text(abs(d.full_drive_sooner_m))} {word}"]
    return []


def _with_subject(parts: list[str]) -> list[str]:
    """Clauses without a subject get "the ideal" when the clause before is not the ideal's."""
    out = []
    for i, p in enumerate(parts):
        before = out[i - 1] if i else ""
        if p.startswith(("carries", "is at")) and not before.startswith(
            ("the ideal brakes", "the ideal carries", "carries")
        ):
            p = "the ideal " + p
        out.append(p)
    return out


def advice_line(d: CornerDifferences, units=None) -> str:
    """One line a driver understands, e.g. "T6: 0.21 s — the ideal brakes 12 m later, ...".

    Parameters
    ----------
    d : CornerDifferences
        The corner's differences.
    units : formatting.Units, optional
        How speeds and distances are written (km/h and m by default).

    Returns
    -------
    str
        Speeds in km/h, distances in m unless ``units`` says otherwise (docs/methods.md, Corners and comparison): a
        difference is named when it is larger than the data resolves (1 km/h; 2 m or
        0.05 s of travel) and its phase holds at least 0.02 s of time left; time left
        that comes from arriving slower from the corner before is said so; a corner
        quicker than the ideal is explained.

    Examples
    --------
    >>> d = CornerDifferences("T6", 0.21, 0.0, 0.08, 0.07, 0.06, 12.0, 6 * KMH_TO_M_S, 15.0)
    >>> advice_line(d)
    'T6: 0.21 s — the ideal brakes 12 m later, carries 6 km/h more at the minimum, and is at full drive 15 m sooner'
    """
    head = f"{d.name}: {time_left(d.time_left_s)} s"
    if d.time_left_s <= -TIME_RESOLUTION_S:
        return (
            f"{head} — quicker than the ideal here by {time_left(-d.time_left_s)} s: this "
            "lap used more grip here than the envelope gives at this grip scale (the "
            "scale or the envelope is set too low)"
        )
    parts = _parts(d, units or METRIC) if d.time_left_s >= TIME_RESOLUTION_S else []
    if not parts:
        if d.time_left_s < TIME_RESOLUTION_S:
            return f"{head} — on the ideal here: same brake point, minimum speed and drive point"
        phases = zip(
            ("approach", "braking", "mid-corner", "exit"),
            (d.approach_s, d.braking_s, d.mid_s, d.exit_s),
            strict=True,
        )
        where = ", ".join(f"{w} {time_left(x)} s" for w, x in phases if abs(x) >= 0.005)
        return (
            f"{head} — spread through the corner ({where}): no brake point, minimum speed "
            "or drive point apart by more than the data resolves"
        )
    text = parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + ", and " + parts[-1]
    return f"{head} — {text}"


# --------------------------------------------------------------------------- the line

#: A line's offset from the driven line is named from this much: about the rebuilt
#: lines' own uncertainty between laps (docs/methods.md, Line opportunity). Common
#: practice, no published source. [m]
OFFSET_RESOLUTION_M = 0.2


def _offset_words(metres: float, where: str, u) -> str | None:
    """An offset in words, e.g. '1.2 m wider at turn-in' (+ = towards the corner's outside); None below the resolution."""
    if not _beyond(metres, OFFSET_RESOLUTION_M):
        return None
    word = "wider" if metres > 0 else "tighter"
    return f"{u.distance_text(abs(metres), '.1f')} {word} {where}"


def _shift_words(metres: float, what: str, u) -> str | None:
    """A shift along the line in words, e.g. 'apex 6 m later'; None below :data:`DISTANCE_FLOOR_M`."""
    if not _beyond(metres, DISTANCE_FLOOR_M):
        return None
    return f"{what} {u.distance_text(abs(metres))} {'later' if metres > 0 else 'earlier'}"


def line_advice(c, units=None) -> str:
    """One line on a corner's better line, e.g. "T4: a later turn-in (1.2 m wider at turn-in, apex 6 m later) brings 0.19 s".

    ``c`` is the corner's :class:`limitlap.better_line.CornerLine`. Offsets are named from
    :data:`OFFSET_RESOLUTION_M`, shifts of the turn-in and apex from
    :data:`DISTANCE_FLOOR_M`; a line time under :data:`TIME_RESOLUTION_S` is no advice.
    Where the corridor is too narrow to tell, the line says so instead of a number.

    Examples
    --------
    >>> from types import SimpleNamespace as C
    >>> line_advice(C(name="T4", told=True, line_time_s=0.19, turn_in_offset_m=1.2,
    ...               apex_offset_m=0.1, exit_offset_m=0.0, turn_in_later_m=4.0,
    ...               apex_later_m=6.0))
    'T4: a later turn-in (1.2 m wider at turn-in, apex 6 m later) brings 0.19 s'
    >>> line_advice(C(name="T2", told=True, line_time_s=0.12, turn_in_offset_m=0.9,
    ...               apex_offset_m=0.0, exit_offset_m=0.0, turn_in_later_m=-5.0,
    ...               apex_later_m=22.0))
    'T2: a rounder line (turn-in 5 m earlier, apex 22 m later, 0.9 m wider at turn-in) brings 0.12 s'
    """
    u = units or METRIC
    if not c.told:
        return f"{c.name}: the laps all took one line here, too alike to tell a better one"
    if c.line_time_s < TIME_RESOLUTION_S:
        return f"{c.name}: no faster line inside the corridor the laps drove"
    shifts = [
        ("turn-in", _shift_words(c.turn_in_later_m, "turn-in", u), c.turn_in_later_m),
        ("apex", _shift_words(c.apex_later_m, "apex", u), c.apex_later_m),
    ]
    details = [
        _offset_words(c.turn_in_offset_m, "at turn-in", u),
        _offset_words(c.apex_offset_m, "at the apex", u),
        _offset_words(c.exit_offset_m, "at the exit", u),
    ]
    lead = next(((what, value) for what, text, value in shifts if text), None)
    if all(text for _, text, _ in shifts) and c.turn_in_later_m * c.apex_later_m < 0:
        # the two move apart: turning in earlier for a later apex is a longer, rounder
        # arc; turning in later for an earlier apex, a sharper turn
        head = "a rounder line" if c.apex_later_m > 0 else "a sharper turn"
        details = [text for _, text, _ in shifts] + details
    elif lead is not None:
        head = f"{'a later' if lead[1] > 0 else 'an earlier'} {lead[0]}"
        details += [text for what, text, _ in shifts if text and what != lead[0]]
    else:
        wide = c.turn_in_offset_m + c.apex_offset_m + c.exit_offset_m
        head = "a wider line" if wide > 0 else "a tighter line"
    details = [d for d in details if d]
    said = f" ({', '.join(details)})" if details else ""
    return f"{c.name}: {head}{said} brings {time_left(c.line_time_s)} s"
