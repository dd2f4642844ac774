r"""Every lap of a session: its kind, time, ideal on its own line, time left, grip, corners.

:func:`session_table` puts every lap of a log in one table (docs/outputs.md,
summary.json, ``laps``): the lap's kind (out, flying, in, pit, partial), its time, and for
each lap timed gate to gate the ideal on that lap's own line at the session's envelope,
the time left against it, the grip scale the lap showed against the envelope and each
corner's time; and, per corner, how consistent the flying laps were (the spread of their
corner times).

Each lap's corners
-----------------
The corners are found on the analysed lap's line; each other lap's time in them is read
where it had travelled the same share of its lap as the analysed lap had at each bound
(:func:`travelled_share`), the speed channel's distance, free of the GNSS error of a
rebuilt line's own distances.

Each lap's own line without a second rebuild
---------------------------------------------
Rebuilding a lap's line (:func:`limitlap.driven.reconstruct_lap`: two smoothers over the
lap's rows) costs about 17 ms; on a one-hour session that is more than the whole
analysis. The analysed lap's line is already rebuilt, and the laps of one session are
driven on nearly the same path, so every other lap's line is that line plus the lap's
own differences of curvature (docs/methods.md, Every lap):

.. math:: \kappa_j(s) = \kappa_{ref}(s) + G_\sigma * \big[\hat\kappa_j(s) - \hat\kappa_{ref}(s)\big],

where :math:`\hat\kappa = \dot\psi / v` is the course rate over speed from the lap's own
inertial channels (yaw rate and :math:`a_y/v`, weighted by their noise as the rebuild
weights them), put on the analysed lap's stations by the fraction of the lap's
distance travelled (:func:`limitlap.gnss.travelled_m`), and :math:`G_\sigma` a Gaussian
of :data:`LINE_DIFFERENCE_SMOOTHING_M`. A gyro bias common to both laps cancels in the
difference; the GNSS-corrected shape of the rebuilt line is kept. The lap's length is
the analysed line's times the ratio of the two laps' travelled distances, and the
curvature is shifted by a constant so the lap turns a whole number of turns (as the
rebuild does). For the analysed lap the difference is zero, so its row holds the
headline ideal exactly.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import gaussian_filter1d

from limitlap import gnss, grip, solve
from limitlap.best_laps import segment_times
from limitlap.driven import MIN_SPEED_M_S, SIGMA_ACCEL_M_S2, SIGMA_YAW_RAD_S
from limitlap.envelope import FIT_RATE_HZ
from limitlap.errors import LimitlapError
from limitlap.laps import Lap
from limitlap.line import Line
from limitlap.samples import Selection
from limitlap.vehicle import Vehicle

#: The kinds a lap can be (docs/outputs.md, summary.json, ``laps``). [-]
KINDS = ("out", "flying", "in", "pit", "partial")

#: Gaussian smoothing (standard deviation) of a lap's curvature difference from the
#: analysed lap. On generated sessions whose laps all follow one line, 1 m (the rebuild's
#: own smoothing) left enough gyro noise in the difference to make the other laps' ideals
#: 0.04-0.10 s slower than the analysed lap's; 5 m brought them to the rebuild's own
#: scatter (each lap rebuilt: 0.02-0.04 s standard deviation about the generator's
#: ideal) while keeping 82 % of a line difference 50 m long (Gaussian response
#: :math:`e^{-2\pi^2\sigma^2/\lambda^2}`). Measured here, no published source. [m]
LINE_DIFFERENCE_SMOOTHING_M = 5.0


def lap_kind(lap: Lap, laps: Sequence[Lap]) -> str:
    """The kind of a lap: ``out``, ``flying``, ``in``, ``pit`` or ``partial``.

    The one place the session table reads it: the lap split's own (laps.Lap.kind).

    Parameters
    ----------
    lap : laps.Lap
        The lap. [-]
    laps : sequence of laps.Lap
        Every lap of its log, in order (kept for callers; the split already used them). [-]

    Returns
    -------
    str
        One of :data:`KINDS`. [-]
    """
    return str(lap.kind)


@dataclass(frozen=True, eq=False)
class LapRecord:
    """One lap of the session table (SI; None where the lap is not timed gate to gate).

    Attributes
    ----------
    number : int
        Lap number (docs/formats.md, Log files). [-]
    kind : str
        One of :data:`KINDS`. [-]
    time_s : float
        Lap time (gate to gate, or the stretch's duration). [s]
    ideal_time_s : float or None
        The ideal on this lap's own line at the session's envelope and grip scale. [s]
    time_left_s : float or None
        ``time_s - ideal_time_s``. [s]
    grip_estimate : float or None
        Grip scale the lap used against the envelope (:func:`limitlap.grip.grip_estimate`). [-]
    corner_times_s : numpy.ndarray or None
        Time in each corner's segment, corners mapped onto the lap by distance from the
        gate (:func:`limitlap.best_laps.segment_times`), in corner order. [s]
    ideal_corner_times_s : numpy.ndarray or None
        The ideal's time in each segment on this lap's own line. [s]
    """

    number: int
    kind: str
    time_s: float
    ideal_time_s: float | None = None
    time_left_s: float | None = None
    grip_estimate: float | None = None
    corner_times_s: np.ndarray | None = None
    ideal_corner_times_s: np.ndarray | None = None

    @property
    def timed(self) -> bool:
        """True when the lap has the per-lap figures (timed gate to gate)."""
        return self.ideal_time_s is not None


@dataclass(frozen=True)
class CornerConsistency:
    """How alike one corner's times were over the flying laps (SI).

    Attributes
    ----------
    name : str
        Corner name. [-]
    n_laps : int
        Flying laps counted. [-]
    best_s, mean_s : float
        Best and mean segment time. [s]
    spread_s : float
        Sample standard deviation of the segment times (NaN with one lap). [s]
    range_s : float
        Slowest minus best. [s]
    """

    name: str
    n_laps: int
    best_s: float
    mean_s: float
    spread_s: float
    range_s: float


@dataclass(frozen=True, eq=False)
class SessionTable:
    """Every lap of a session and each corner's consistency.

    Attributes
    ----------
    laps : tuple of LapRecord
        Every lap of the log, in order.
    corner_names : tuple of str
        The corners of ``corner_times_s``, in driving order.
    consistency : tuple of CornerConsistency
        One per corner, over the flying laps.
    """

    laps: tuple[LapRecord, ...]
    corner_names: tuple[str, ...]
    consistency: tuple[CornerConsistency, ...]

    def timed(self) -> list[LapRecord]:
        """The laps with per-lap figures, in order."""
        return [r for r in self.laps if r.timed]

    def flying(self) -> list[LapRecord]:
        """The timed laps whose kind is flying."""
        return [r for r in self.laps if r.timed and r.kind == "flying"]


@dataclass(frozen=True, eq=False)
class _Travel:
    """One lap's rows against the share of its travelled distance (the speed channel's integral from the gate crossing to the next, :func:`limitlap.gnss.travelled_m`).

    ``rows`` the lap's rows; ``share`` per row [-]; ``length_m`` the lap's travelled
    distance [m]; ``time_at``/``share_at`` the same as a non-decreasing map from time
    from the gate [s] to share [-], from 0 to 1 at the two crossings.
    """

    rows: slice
    share: np.ndarray
    length_m: float
    time_at: np.ndarray
    share_at: np.ndarray


def _travel(log, lap: Lap) -> _Travel:
    """:class:`_Travel` of a lap (the crossings interpolated between the rows either side, as :func:`limitlap.pipeline.lap_timelines` does)."""
    rows = slice(lap.start_index, lap.end_index)
    s = gnss.travelled_m(log)
    lo, hi = max(lap.start_index - 1, 0), min(lap.end_index + 1, s.shape[0])
    s0, s1 = np.interp([lap.start_time_s, lap.end_time_s], log.time_s[lo:hi], s[lo:hi])
    length = float(s1 - s0)
    share = (s[rows] - s0) / length
    t = log.time_s[rows] - lap.start_time_s
    keep = (t > 0.0) & (t < lap.time_s) & (share > 0.0) & (share < 1.0)
    t_ext = np.concatenate(([0.0], t[keep], [float(lap.time_s)]))
    f_ext = np.maximum.accumulate(np.concatenate(([0.0], share[keep], [1.0])))
    return _Travel(rows, share, length, t_ext, f_ext)


def course_curvature(log, rows: slice) -> np.ndarray | None:
    r"""Course rate over speed, :math:`\dot\psi/v`, on rows of a log.

    Yaw rate and :math:`a_y/v` weighted by the inverse of their noise variance as the
    line rebuild weights them (:mod:`limitlap.driven`); NaN where both cells are blank.
    None when the log has neither channel.

    Parameters
    ----------
    log : logfile.Log
        The session. [-]
    rows : slice
        The rows (a step takes every so many). [-]

    Returns
    -------
    numpy.ndarray or None
        Curvature per row. [1/m]
    """
    has_yaw, has_ay = log.measured("yaw_rate"), log.measured("accel_lat")
    if not (has_yaw or has_ay):
        return None
    vv = np.maximum(np.asarray(log.channels["speed"][rows], dtype=np.float64), MIN_SPEED_M_S)
    num = np.zeros(vv.shape)
    den = np.zeros(vv.shape)
    if has_yaw:
        r = log.channels["yaw_rate"][rows]
        ok = np.isfinite(r)
        num += np.where(ok, r, 0.0) / SIGMA_YAW_RAD_S**2
        den += ok / SIGMA_YAW_RAD_S**2
    if has_ay:
        ay = log.channels["accel_lat"][rows]
        ok = np.isfinite(ay)
        var = (SIGMA_ACCEL_M_S2 / vv) ** 2
        num += np.where(ok, ay / vv, 0.0) / var
        den += ok / var
    with np.errstate(invalid="ignore", divide="ignore"):
        return num / den / vv


#: Rows a lap's course curvature is read from, at most this rate: enough for the
#: stations 1 m apart (0.5-1.5 m between rows at 50 Hz and 25-75 m/s) before the 5 m
#: smoothing of the difference (:data:`LINE_DIFFERENCE_SMOOTHING_M`). [Hz]
COURSE_RATE_HZ = 50.0


def _course_on_stations(log, travel: _Travel, fraction, step: int):
    """A lap's course curvature (:func:`course_curvature`, every ``step``-th row) at fractions of its distance; None without. [1/m]."""
    rows = travel.rows
    k = course_curvature(log, slice(rows.start, rows.stop, step))
    if k is None:
        return None
    frac = travel.share[::step]
    keep = np.isfinite(k) & np.concatenate(([True], np.diff(frac) > 0))
    if keep.sum() < 2:
        return None
    return np.interp(fraction, frac[keep], k[keep])


def own_line(ref: Line, ref_course, course, length_ratio: float) -> Line:
    """A lap's own line: the analysed lap's line plus the lap's curvature differences.

    See the module text. ``ref_course`` and ``course`` are :func:`course_curvature` of
    the analysed lap and of this lap on ``ref``'s stations (None: no inertial channels,
    the shape is kept); ``length_ratio`` the ratio of their travelled distances. [1/m], [-]
    """
    ds = float(ref.length_m) / ref.n
    kappa = np.asarray(ref.curvature_1_m, dtype=np.float64)
    if ref_course is not None and course is not None:
        diff = gaussian_filter1d(course - ref_course, LINE_DIFFERENCE_SMOOTHING_M / ds, mode="wrap")
        kappa = kappa + diff
    length = float(ref.length_m) * length_ratio
    turns = round(float(np.sum(ref.curvature_1_m)) * ds / (2.0 * math.pi))
    kappa = kappa - (kappa.sum() * ds * length_ratio - 2.0 * math.pi * turns) / length
    return Line(ref.distance_m * length_ratio, kappa, ref.gradient, length, True)


def lap_grip_estimates(
    log, laps: Sequence[Lap], vehicle: Vehicle, *, selection: Selection | None, rate_hz
) -> dict[int, float | None]:
    """Grip scale each lap used against ``vehicle`` (:func:`limitlap.grip.grip_estimate`).

    With ``selection`` (the whole log's filtered samples, :func:`limitlap.samples.select_samples`
    as the envelope fit made them) every lap is estimated in one pass over its rows,
    thinned to about the envelope fit's rate (:data:`limitlap.envelope.FIT_RATE_HZ`: after
    the 3 Hz low-pass nothing above it is left; :func:`limitlap.grip.grip_estimates_of_stretches`);
    without, each lap's rows with 2 s either side are filtered on their own, as the
    analysed lap's estimate is (the filters reach well under a second, so both give the
    same values inside the lap). None for a lap without usable samples or without
    acceleration channels.
    """
    if not (log.has("accel_lon") and log.has("accel_lat")) or not laps:
        return {lp.number: None for lp in laps}
    if selection is not None:
        step = max(int(rate_hz // FIT_RATE_HZ), 1) if rate_hz else 1
        k = grip.grip_estimates_of_stretches(
            selection.speed_m_s,
            selection.accel_lon_m_s2,
            selection.accel_lat_m_s2,
            vehicle,
            [(lp.start_index, lp.end_index) for lp in laps],
            mask=selection.used,
            step=step,
        )
        return {
            lp.number: float(x) if math.isfinite(x) else None for lp, x in zip(laps, k, strict=True)
        }
    out = {}
    for lp in laps:
        v, ax, ay, mask = _padded_rows(log, lp, rate_hz)
        try:
            out[lp.number] = grip.grip_estimate(
                v, ax, ay, vehicle, mask=mask, sample_rate_hz=rate_hz
            )
        except LimitlapError:
            out[lp.number] = None
    return out


def _padded_rows(log, lap: Lap, rate_hz, pad_s: float = 2.0):
    """Speed, a_x, a_y of the lap's rows with ``pad_s`` either side, and the mask of its own rows."""
    n = log.time_s.shape[0]
    pad = math.ceil(pad_s * rate_hz) if rate_hz else 0
    lo, hi = max(lap.start_index - pad, 0), min(lap.end_index + pad, n)
    mask = np.zeros(hi - lo, dtype=bool)
    mask[lap.start_index - lo : lap.end_index - lo] = True
    v, ax, ay = (log.channels[c][lo:hi] for c in ("speed", "accel_lon", "accel_lat"))
    return v, ax, ay, mask & np.isfinite(v) & np.isfinite(ax) & np.isfinite(ay)


def travelled_share(log, lap: Lap, time_from_gate_s, travel: _Travel | None = None):
    """The share of a lap's travelled distance (the speed channel's integral from the gate, :func:`limitlap.gnss.travelled_m`) at times from its gate crossing. [-].

    Laps are put on one another by this share (:func:`corner_times`,
    :mod:`limitlap.versus`): it is free of the GNSS error that moves a rebuilt line's
    own distances by half a metre here and there, and the speed's scale error is one
    factor over the lap that cancels in the share.
    """
    travel = _travel(log, lap) if travel is None else travel
    return np.interp(time_from_gate_s, travel.time_at, travel.share_at)


def corner_shares(log, analysed: Lap, driven, corners, travel=None):
    """Each corner's start and end as shares of the analysed lap's travelled distance (its rebuilt line's bounds, at the times the lap passed them): (starts, ends). [-]."""
    t_st = np.asarray(driven.time_s, dtype=np.float64) - float(driven.time_s[0])
    s_st = np.asarray(driven.line.distance_m, dtype=np.float64)
    length = float(driven.line.length_m)
    s_ext, t_ext = np.append(s_st, length), np.append(t_st, float(analysed.time_s))
    starts = np.interp([c.start_m for c in corners], s_ext, t_ext)
    ends = np.interp([c.end_m for c in corners], s_ext, t_ext)
    return (
        travelled_share(log, analysed, starts, travel),
        travelled_share(log, analysed, ends, travel),
    )


def corner_times(log, lap: Lap, shares, travel: _Travel | None = None) -> np.ndarray:
    """A lap's time in each corner, the corners placed by share of travelled distance (:func:`corner_shares`); they add up to the lap time. [s]."""
    travel = _travel(log, lap) if travel is None else travel
    starts, ends = shares
    t0 = np.interp(starts, travel.share_at, travel.time_at)
    t1 = np.interp(ends, travel.share_at, travel.time_at)
    return t1 - t0 + np.where(ends <= starts, float(lap.time_s), 0.0)


def corners_on(log, lap: Lap, driven, corners, shares):
    """The corners placed on another lap's rebuilt line where it had travelled each bound's share (:func:`corner_shares`); only the bounds move. [m]."""
    import dataclasses

    t_st = np.asarray(driven.time_s, dtype=np.float64) - float(driven.time_s[0])
    s_st = np.asarray(driven.line.distance_m, dtype=np.float64)
    travel = _travel(log, lap)
    starts, ends = (np.interp(x, travel.share_at, travel.time_at) for x in shares)
    s0 = np.interp(starts, t_st, s_st)
    s1 = np.interp(ends, t_st, s_st)
    return [
        dataclasses.replace(c, start_m=float(a), end_m=float(b))
        for c, a, b in zip(corners, s0, s1, strict=True)
    ]


def session_table(
    log,
    laps: Sequence[Lap],
    analysed: Lap,
    driven,
    ideal: solve.Profile,
    vehicle: Vehicle,
    corners,
    analysed_corner_s=None,
    *,
    grip_scale: float = 1.0,
    grips: Mapping[int, float | None] | None = None,
) -> SessionTable:
    """Every lap of the session with its figures (see the module text).

    Parameters
    ----------
    log : logfile.Log
        The session. [-]
    laps : sequence of laps.Lap
        Every lap of the log. [-]
    analysed : laps.Lap
        The analysed lap, whose line ``ref`` is. [-]
    driven : driven.DrivenLap
        The analysed lap's rebuilt line and traces. [-]
    ideal : solve.Profile
        The ideal on its line (the analysed lap's row uses it as it is). [-]
    vehicle : Vehicle
        The session's envelope at grip scale 1. [-]
    corners : sequence of corners.Corner
        The corners found on the analysed lap's line. [-]
    analysed_corner_s : array-like, optional
        The analysed lap's time in each corner as its comparison measured it; default by
        share of travelled distance as for the other laps. [s]
    grip_scale : float
        Grip scale the ideals are solved at. [-]
    grips : mapping lap number -> float or None, optional
        Each lap's grip estimate (:func:`lap_grip_estimates`). [-]

    Returns
    -------
    SessionTable
    """
    grips = grips or {}
    ref = driven.line
    travels = {lp.number: _travel(log, lp) for lp in laps if lp.complete}
    ref_travel = travels[analysed.number]
    shares = corner_shares(log, analysed, driven, corners, ref_travel) if corners else None
    u = np.asarray(ref.distance_m, dtype=np.float64) / float(ref.length_m)
    dt = np.diff(log.time_s[: min(1001, log.time_s.shape[0])])
    rate = 1.0 / float(np.median(dt)) if dt.size else COURSE_RATE_HZ
    step = max(int(rate // COURSE_RATE_HZ), 1)
    ref_course = _course_on_stations(log, ref_travel, u, step)
    records = []
    for lp in laps:
        kind = lap_kind(lp, laps)
        if not lp.complete:
            records.append(LapRecord(lp.number, kind, float(lp.time_s)))
            continue
        travel = travels[lp.number]
        if lp is analysed:
            prof, ratio = ideal, 1.0
        else:
            ratio = travel.length_m / ref_travel.length_m
            course = _course_on_stations(log, travel, u, step)
            line = own_line(ref, ref_course, course, ratio)
            prof = solve.solve_profile(line, vehicle, grip_scale)
        times = None if shares is None else corner_times(log, lp, shares, travel)
        if lp is analysed and analysed_corner_s is not None:
            times = np.asarray(analysed_corner_s, dtype=np.float64)
        ideal_corners = segment_times(
            prof.distance_m, ref.length_m * ratio, prof.time_s, prof.lap_time_s, corners, ratio
        )
        records.append(
            LapRecord(
                number=lp.number,
                kind=kind,
                time_s=float(lp.time_s),
                ideal_time_s=float(prof.lap_time_s),
                time_left_s=float(lp.time_s) - float(prof.lap_time_s),
                grip_estimate=grips.get(lp.number),
                corner_times_s=times,
                ideal_corner_times_s=ideal_corners,
            )
        )
    names = tuple(c.name for c in corners)
    return SessionTable(tuple(records), names, _consistency(records, names))


def _consistency(records: Sequence[LapRecord], names) -> tuple[CornerConsistency, ...]:
    """Each corner's best, mean, standard deviation and range over the flying laps."""
    rows = [
        r.corner_times_s for r in records if r.kind == "flying" and r.corner_times_s is not None
    ]
    if not rows:
        return ()
    table = np.vstack(rows)
    n = table.shape[0]
    spread = table.std(axis=0, ddof=1) if n > 1 else np.full(table.shape[1], np.nan)
    return tuple(
        CornerConsistency(
            name=name,
            n_laps=n,
            best_s=float(table[:, j].min()),
            mean_s=float(table[:, j].mean()),
            spread_s=float(spread[j]),
            range_s=float(table[:, j].max() - table[:, j].min()),
        )
        for j, name in enumerate(names)
    )
