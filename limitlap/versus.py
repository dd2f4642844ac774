r"""Lap against lap: two laps of one log, or laps of two logs, on one common line.

:func:`compare_laps` puts lap B beside lap A (two drivers in one car, two sessions, a
reference lap beside a client's): both lines rebuilt (:func:`limitlap.driven.reconstruct_lap`),
checked to be one circuit driven one way (:func:`same_circuit`), B put on A's line (the
common line) where it had travelled the same share of its lap (:func:`_mapping`), the
corners found on A's line and placed on B's the same way, the time delta
along the lap and corner by corner, and each lap against its own ideal (on its own line)
at one common envelope: the vehicle file's, or one fitted to the flying laps of both logs
together (:func:`common_envelope`). Each corner gets one sentence
(:func:`corner_sentence`).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.ndimage import gaussian_filter1d

from limitlap import advice, compare, derived, envelope, ingest, session, solve
from limitlap import corners as corners_mod
from limitlap import driven as driven_mod
from limitlap import laps as laps_mod
from limitlap.errors import InputError, LimitlapError
from limitlap.formatting import hundredths
from limitlap.samples import select_samples
from limitlap.vehicle import Vehicle

#: Laps whose lengths differ by more than this share are not one circuit. Two rebuilds of
#: one circuit differ by the line driven and the GNSS error: a few metres in a few
#: kilometres; a different layout or circuit by far more. Common practice, no published
#: source. [-]
MAX_LENGTH_DIFFERENCE = 0.05
#: Lowest correlation of the two laps' curvature along the lap (smoothed over
#: :data:`SHAPE_SMOOTHING_M`) for one circuit driven the same way from the same gate.
#: Measured: 0.98-0.99 for two generated sessions of the demo circuit; a lap of a
#: different shape or from another gate falls far below. Common practice, no published
#: source. [-]
MIN_SHAPE_CORRELATION = 0.8
#: Smoothing of the curvature for the shape check (a driver's line and the rebuild's
#: noise are shorter than this). [m]
SHAPE_SMOOTHING_M = 20.0
#: Laps whose start/finish gates lie further apart than this are refused: every corner
#: bound of B would be that far off A's. Two logs timed at one gate put it within the
#: GNSS error of one another (1.1 m measured on the bundled sessions); gates placed
#: automatically in each log, 10 m apart there. Common practice, no published source. [m]
MAX_GATE_SHIFT_M = 5.0
#: A corner where the laps' times differ by less than this is called level (the corner
#: times are good to about a hundredth of a second, see
#: :data:`limitlap.advice.TIME_RESOLUTION_S`). [s]
LEVEL_S = advice.TIME_RESOLUTION_S
#: Time left (either sign) under this is "at the limit" in the sentences: less than the
#: corner times resolve (:data:`limitlap.advice.TIME_RESOLUTION_S`). [s]
AT_LIMIT_S = advice.TIME_RESOLUTION_S


@dataclass(frozen=True, eq=False)
class LapSide:
    """One of the two laps: where it is from, its line and its comparison with its ideal.

    Attributes
    ----------
    label : str
        "lap 3 of dry.csv". [-]
    log_path : str
        The log. [-]
    lap : laps.Lap
        The lap. [-]
    driven : driven.DrivenLap
        Its rebuilt line and traces. [-]
    ideal : solve.Profile
        The ideal on its own line at the common envelope. [-]
    comparison : compare.LapComparison
        The lap against that ideal, on A's corners mapped onto its line. [-]
    scale : float
        Its line's length over A's. [-]
    """

    label: str
    log_path: str
    lap: laps_mod.Lap
    driven: driven_mod.DrivenLap
    ideal: solve.Profile
    comparison: compare.LapComparison
    scale: float


@dataclass(frozen=True)
class CornerVersus:
    """One corner, lap B against lap A (SI; + = B slower).

    Attributes
    ----------
    name : str
        Corner name. [-]
    start_m, apex_m, end_m : float
        On A's line, from the gate. [m]
    time_a_s, time_b_s, delta_s : float
        Each lap's time in the corner and B's minus A's. [s]
    time_left_a_s, time_left_b_s : float
        Each lap's time left to its own ideal at the common envelope. [s]
    sentence : str
        The corner in one sentence. [-]
    """

    name: str
    start_m: float
    apex_m: float
    end_m: float
    time_a_s: float
    time_b_s: float
    delta_s: float
    time_left_a_s: float
    time_left_b_s: float
    sentence: str


@dataclass(frozen=True, eq=False)
class Versus:
    """Lap B against lap A (SI).

    Attributes
    ----------
    a, b : LapSide
        The two laps. [-]
    vehicle : Vehicle
        The common envelope at grip scale 1. [-]
    fit : envelope.EnvelopeFit or None
        Its fit, when fitted (None: a vehicle file gave it). [-]
    envelope_logs : tuple of str
        The logs the common envelope was fitted to. [-]
    grip_scale : float
        The ideals' grip scale. [-]
    distance_m : numpy.ndarray
        A's stations. [m]
    delta_s : numpy.ndarray
        B's elapsed time minus A's at each. [s]
    corners : tuple of CornerVersus
        In driving order. [-]
    corner_list : tuple of corners.Corner
        The corners on A's line. [-]
    warnings : list of str
        One line each. [-]
    """

    a: LapSide
    b: LapSide
    vehicle: Vehicle
    fit: envelope.EnvelopeFit | None
    envelope_logs: tuple[str, ...]
    grip_scale: float
    distance_m: np.ndarray
    delta_s: np.ndarray
    corners: tuple[CornerVersus, ...]
    corner_list: tuple
    warnings: list

    @property
    def lap_delta_s(self) -> float:
        """B's lap time minus A's. [s]."""
        return float(self.b.lap.time_s - self.a.lap.time_s)


# ---------------------------------------------------------------------------- one circuit


def _shape(line, n: int) -> np.ndarray:
    """The line's curvature at ``n`` even fractions of the lap, smoothed. [1/m]."""
    u = np.arange(n) / n
    k = np.interp(u * line.length_m, line.distance_m, line.curvature_1_m, period=line.length_m)
    return gaussian_filter1d(k, SHAPE_SMOOTHING_M / (line.length_m / n), mode="wrap")


def _turns(line) -> int:
    """Whole turns the closed line makes (+ anticlockwise). [-]."""
    return round(float(np.sum(line.curvature_1_m * line.ds_m)) / (2.0 * math.pi))


def same_circuit(line_a, line_b, path_a, path_b, gates=None) -> None:
    """Refuse two laps that are not one circuit driven one way from one gate.

    Parameters
    ----------
    line_a, line_b : line.Line
        The two rebuilt lines (closed). [-]
    path_a, path_b : path
        Their logs, named in the refusal. [-]
    gates : tuple of (lat, lon) or None, optional
        Each line's first point (its gate) in WGS84, when both logs are geodetic. [deg]

    Raises
    ------
    InputError
        One line naming both files and what differs: direction, length, place, shape, or
        start/finish gates more than :data:`MAX_GATE_SHIFT_M` apart (by their positions,
        or by how far B's bends lie behind A's along the lap: the peak of the circular
        cross-correlation of their curvature).
    """
    who = f"{path_a} and {path_b}"
    la, lb = float(line_a.length_m), float(line_b.length_m)
    ta, tb = _turns(line_a), _turns(line_b)
    if ta != tb:
        way = {1: "anticlockwise", -1: "clockwise"}
        raise InputError(
            who,
            "not the same circuit and direction: one lap turns "
            f"{way.get(ta, f'{ta} turns')}, the other {way.get(tb, f'{tb} turns')}",
        )
    if abs(la - lb) > MAX_LENGTH_DIFFERENCE * max(la, lb):
        raise InputError(
            who, f"not the same circuit: laps of {la:.0f} m and {lb:.0f} m (more than 5 % apart)"
        )
    n = int(min(max(round(max(la, lb)), 256), 65536))  # about a metre apart
    shape_a, shape_b = _shape(line_a, n), _shape(line_b, n)
    corr = float(np.corrcoef(shape_a, shape_b)[0, 1])
    lag = int(np.argmax(np.fft.irfft(np.fft.rfft(shape_a) * np.conj(np.fft.rfft(shape_b)), n)))
    shift = abs(lag if lag <= n // 2 else lag - n) * la / n  # B's bends this far from A's
    apart = shift
    if gates is not None:
        import pymap3d

        e, no, _ = pymap3d.geodetic2enu(gates[1][0], gates[1][1], 0.0, *gates[0], 0.0)
        apart = max(apart, math.hypot(float(e), float(no)))
        if apart > 0.05 * la:
            raise InputError(
                who, f"not the same circuit: their start/finish gates are {apart:.0f} m apart"
            )
    if not corr >= MIN_SHAPE_CORRELATION and shift <= MAX_GATE_SHIFT_M:
        raise InputError(
            who,
            "not the same circuit: the laps' bends do not match (correlation "
            f"{corr:.2f} of their curvature along the lap)",
        )
    if apart > MAX_GATE_SHIFT_M:
        raise InputError(
            who,
            f"the laps start {apart:.0f} m apart (not the same start/finish gate): give "
            "both the same --gate or --track",
        )


def _gate_latlon(log, line):
    """The line's first point in WGS84 (its gate), None for a planar log."""
    if log.origin is None or line.x_m is None:
        return None
    import pymap3d

    lat, lon, _ = pymap3d.enu2geodetic(float(line.x_m[0]), float(line.y_m[0]), 0.0, *log.origin)
    return float(lat), float(lon)


# ---------------------------------------------------------------------------- envelope


def _rate(log) -> float | None:
    dt = np.diff(log.time_s)
    return float(1.0 / np.median(dt)) if dt.size else None


def _flying_samples(log, laps):
    """Speed, a_x, a_y, throttle of a log's rows and the mask of its flying laps' rows."""
    flying = laps_mod.flying_laps(list(laps))
    n = log.time_s.shape[0]
    mask = np.zeros(n, dtype=bool)
    for lp in flying:
        mask[lp.start_index : lp.end_index] = True
    ch = log.channels
    thr = ch.get("throttle")
    return ch["speed"], ch["accel_lon"], ch["accel_lat"], thr, mask


def _on_rate(log, rate, arrays):
    """The arrays resampled in time to ``rate`` (linear, blanks bridged), when the log's own differs."""
    t = log.time_s
    grid = np.arange(t[0], t[-1], 1.0 / rate)
    out = []
    for a in arrays:
        if a is None:
            out.append(None)
            continue
        if np.asarray(a).dtype == bool:
            out.append(np.interp(grid, t, np.asarray(a, dtype=np.float64)) > 0.5)
            continue
        a = np.asarray(a, dtype=np.float64)
        ok = np.isfinite(a)
        out.append(np.interp(grid, t[ok], a[ok]) if ok.sum() >= 2 else np.full(grid.shape, np.nan))
    return out


def with_accelerations(path, log, laps) -> list[str]:
    """A log's missing acceleration channels derived (:func:`limitlap.derived.add_accelerations`, on every complete lap's rebuilt line); the sentence saying so, naming the log, or nothing when it had both (or they were derived already)."""
    if not derived.missing_accelerations(log):
        return []
    rebuilt = [(lp, driven_mod.reconstruct_lap(log, lp)) for lp in laps if lp.complete]
    return [f"{path}: {derived.note(derived.add_accelerations(log, rebuilt))}"]


def common_envelope(sessions: Sequence, base: Vehicle) -> envelope.EnvelopeFit:
    """One envelope fitted to the flying laps of several logs together (the best samples of all).

    Parameters
    ----------
    sessions : sequence of (path, logfile.Log, list of laps.Lap)
        The logs and their laps. [-]
    base : Vehicle
        What is known of the car (mass at least), as for :func:`limitlap.envelope.fit_envelope`. [-]

    Returns
    -------
    envelope.EnvelopeFit

    Notes
    -----
    Each log's rows are put end to end with a second of blank rows between them, so the
    spike filter and the low-pass (:func:`limitlap.samples.select_samples`) never reach
    from one log into the next; a log at another sample rate is first resampled in time
    to the first log's rate (linear; the 3 Hz low-pass is far below either rate's
    Nyquist frequency). The fit then sees one long session: every direction bin's
    boundary is the high quantile of all the logs' flying samples.
    """
    names = ", ".join(str(p) for p, _, _ in sessions)
    notes = []
    for path, log, laps in sessions:
        if not laps_mod.flying_laps(list(laps)):
            raise InputError(path, "no complete lap to fit an envelope to")
        notes += with_accelerations(path, log, laps)  # GPS-only logs
    rate = _rate(sessions[0][1])
    parts = []
    for _, log, laps in sessions:
        arrays = list(_flying_samples(log, laps))
        own = _rate(log)
        if rate and own and abs(own - rate) > 0.01 * rate:
            arrays = _on_rate(log, rate, arrays)
        parts.append(arrays)
    gap = max(int(rate or 1), 1)
    blank, off = np.full(gap, np.nan), np.zeros(gap, dtype=bool)
    joined = []
    for j in range(5):
        pieces = []
        for arrays in parts:
            a = arrays[j]
            if a is None:
                a = np.full(arrays[0].shape, np.nan)
            pieces += [a, off if j == 4 else blank]
        joined.append(np.concatenate(pieces[:-1]))
    v, ax, ay, thr, mask = joined
    remove_noise, noise = derived.noise_to_take_out([log for _, log, _ in sessions])
    try:
        sel = select_samples(v, ax, ay, sample_rate_hz=rate)
        fit = envelope.fit_envelope(
            v,
            ax,
            ay,
            base,
            mask=mask,
            sample_rate_hz=rate,
            throttle=thr if np.isfinite(thr).any() else None,
            selection=sel,
            remove_noise=remove_noise,
            noise_m_s2=noise,
        )
    except InputError:
        raise
    except LimitlapError as err:
        derived_from = "; ".join(notes)
        extra = f" ({derived_from})" if derived_from else ""
        raise InputError(names, f"{err}{extra} (give a vehicle file with [grip])") from err
    fit.warnings[:0] = notes
    return fit


# ---------------------------------------------------------------------------- corners


def mapped_corners(corners, to_b):
    """A's corners placed on another lap's line: each distance through ``to_b`` (A's distance -> B's) [m]."""
    out = []
    for c in corners:
        out.append(
            dataclasses.replace(
                c,
                start_m=to_b(c.start_m),
                apex_m=to_b(c.apex_m),
                apexes_m=tuple(to_b(a) for a in c.apexes_m),
                end_m=to_b(c.end_m),
                turn_in_m=to_b(c.turn_in_m),
                exit_m=to_b(c.exit_m),
            )
        )
    return out


_PHASES = (
    ("time_left_braking_s", "braking"),
    ("time_left_mid_s", "mid-corner"),
    ("time_left_exit_s", "the exit"),
)


def _where(c: compare.CornerComparison) -> str:
    """Where a corner's time left is: the phase holding most of it (two when none holds half)."""
    parts = sorted(((getattr(c, k), word) for k, word in _PHASES), reverse=True)
    total = sum(max(x, 0.0) for x, _ in parts)
    if total <= 0.0 or parts[0][0] >= 0.5 * total:
        return parts[0][1]
    return f"{parts[0][1]} and {parts[1][1]}"


def corner_sentence(name, delta_s, ca: compare.CornerComparison, cb: compare.CornerComparison):
    """One sentence for a corner, e.g. "B is 0.21 s quicker in T4 and still 0.08 s inside the limit; A's 0.35 s left there is mostly braking".

    Parameters
    ----------
    name : str
        Corner name. [-]
    delta_s : float
        B's time in the corner minus A's. [s]
    ca, cb : compare.CornerComparison
        Each lap's corner against its own ideal. [-]

    Returns
    -------
    str
        The sentence. [-]
    """
    if abs(delta_s) < LEVEL_S:
        head = f"A and B are level in {name} ({abs(hundredths(delta_s)):.2f} s apart)"
        left = [(x, c) for x, c in (("A", ca), ("B", cb)) if c.time_left_s >= AT_LIMIT_S]
        if not left:
            return f"{head}, both at the limit"
        x, c = max(left, key=lambda p: p[1].time_left_s)
        return f"{head}; {x} has {c.time_left_s:.2f} s left there, mostly {_where(c)}"
    quick, slow = ("B", "A") if delta_s < 0 else ("A", "B")
    cq, cs = (cb, ca) if delta_s < 0 else (ca, cb)
    text = f"{quick} is {abs(delta_s):.2f} s quicker in {name}"
    if cq.time_left_s >= AT_LIMIT_S:
        text += f" and still {cq.time_left_s:.2f} s inside the limit"
    elif cq.time_left_s <= -AT_LIMIT_S:
        text += f" and {abs(cq.time_left_s):.2f} s quicker than the ideal there"
    else:
        text += " and at the limit"
    if cs.time_left_s >= AT_LIMIT_S:
        text += f"; {slow}'s {cs.time_left_s:.2f} s left there is mostly {_where(cs)}"
    return text


# ---------------------------------------------------------------------------- the comparison


def _side(label, path, lap, driven, car, k, corners, to_own, scale) -> LapSide:
    ideal = solve.solve_profile(driven.line, car, k)
    cmp_ = compare.compare_lap(driven, ideal, car, mapped_corners(corners, to_own), grip_scale=k)
    return LapSide(label, str(path), lap, driven, ideal, cmp_, scale)


def _share(log, lap, drv) -> np.ndarray:
    """The share of the lap's travelled distance at each station of its rebuilt line (:func:`limitlap.session.travelled_share`). [-]."""
    t_st, _ = driven_mod.elapsed_from_gate(drv)
    return session.travelled_share(log, lap, t_st)


def _mapping(side_a, side_b):
    """(B's stations' distance along A's line, A's distance -> B's), by the share of the lap's travelled distance.

    ``side_a``, ``side_b`` are (log, lap, driven lap). A place on A's line is where A had
    travelled a share of its lap (its speed channel's integral from the gate); B is put
    there when it had travelled the same share of its own. The speed channel's distance
    is free of the GNSS error that moves a rebuilt line's own distances by half a metre
    here and there (0.025 s at 20 m/s); its scale error is one factor over the lap and
    cancels in the share. Tried and not kept: the share of the rebuilt lines' lengths
    (corner deltas off by up to 0.025 s on generated sessions) and projecting B's
    positions on A's line (up to 0.08 s: the GNSS error along the track).
    """
    share_a = _share(*side_a)
    share_b = _share(*side_b)
    s_a = np.asarray(side_a[2].line.distance_m, dtype=np.float64)
    s_b = np.asarray(side_b[2].line.distance_m, dtype=np.float64)
    len_a, len_b = float(side_a[2].line.length_m), float(side_b[2].line.length_m)
    ring_sa = np.concatenate((s_a - len_a, s_a, s_a + len_a))
    ring_fa = np.concatenate((share_a - 1.0, share_a, share_a + 1.0))
    ring_sb = np.concatenate((s_b - len_b, s_b, s_b + len_b))
    ring_fb = np.concatenate((share_b - 1.0, share_b, share_b + 1.0))

    def to_b(x: float) -> float:
        return float(np.interp(np.interp(x, ring_sa, ring_fa), ring_fb, ring_sb)) % len_b

    return np.interp(share_b, ring_fa, ring_sa), to_b


def _pick(path, laps, number, avoid=None) -> laps_mod.Lap:
    """Lap ``number`` (complete), or the fastest complete lap other than ``avoid``."""
    complete = [lp for lp in laps if lp.complete]
    if number is not None:
        for lp in laps:
            if lp.number == number:
                if not lp.complete:
                    raise InputError(path, f"lap {number} is not complete ({lp.reason})")
                return lp
        have = ", ".join(str(lp.number) for lp in laps)
        raise InputError(path, f"no lap {number}; the log has laps {have}")
    choice = [lp for lp in complete if lp is not avoid]
    if not choice:
        raise InputError(path, "no other complete lap to compare with")
    return min(choice, key=lambda lp: (lp.time_s, lp.number))


def _label(path, lap, same_log: bool) -> str:
    return f"lap {lap.number}" if same_log else f"lap {lap.number} of {Path(path).name}"


def compare_laps(
    session_a,
    session_b=None,
    *,
    lap_a: int | None = None,
    lap_b: int | None = None,
    vehicle: Vehicle | None = None,
    grip_scale: float = 1.0,
    track=None,
) -> Versus:
    """Lap B against lap A on A's line (see the module text).

    Parameters
    ----------
    session_a, session_b : (path, logfile.Log, list of laps.Lap)
        The logs and their laps; ``session_b`` None: both laps from ``session_a``. [-]
    lap_a, lap_b : int, optional
        Lap numbers; default the fastest complete lap of each log (of one log: its
        fastest, and the fastest of the others). [-]
    vehicle : Vehicle, optional
        A complete vehicle as the common envelope; default fitted to both logs. [-]
    grip_scale : float
        The ideals' grip scale. [-]
    track : ingest.Track, optional
        Corner names and apexes. [-]

    Returns
    -------
    Versus
    """
    same_log = session_b is None
    path_a, log_a, laps_a = session_a
    path_b, log_b, laps_b = session_a if same_log else session_b
    la = _pick(path_a, laps_a, lap_a)
    lb = _pick(path_b, laps_b, lap_b, avoid=la if same_log else None)
    if same_log and la is lb:
        raise InputError(path_a, f"lap {la.number} given as both A and B")
    # GPS-only logs: their accelerations derived before the laps' traces are taken
    notes = with_accelerations(path_a, log_a, laps_a)
    notes += [] if same_log else with_accelerations(path_b, log_b, laps_b)
    da = driven_mod.reconstruct_lap(log_a, la)
    db = driven_mod.reconstruct_lap(log_b, lb)
    if not same_log:
        ga, gb = _gate_latlon(log_a, da.line), _gate_latlon(log_b, db.line)
        same_circuit(
            da.line, db.line, path_a, path_b, None if ga is None or gb is None else (ga, gb)
        )
    fit, env_logs = None, ()
    if vehicle is not None and vehicle.is_complete:
        car = vehicle
    else:
        sessions = [session_a] if same_log else [session_a, session_b]
        base = vehicle if vehicle is not None else Vehicle("fitted from the logs", 1000.0)
        fit = common_envelope(sessions, base)
        car, env_logs = fit.vehicle, tuple(str(p) for p, _, _ in sessions)
    names = list(track.corner_names) if track is not None and track.corner_names else None
    corners = corners_mod.find_corners(
        da.line,
        names,
        apexes_m=list(track.corner_apexes_m) if names else None,
        apexes_from=track.path if track is not None else None,
    )
    scale = db.line.length_m / da.line.length_m
    on_a, to_b = _mapping((log_a, la, da), (log_b, lb, db))
    side_a = _side(
        _label(path_a, la, same_log), path_a, la, da, car, grip_scale, corners, float, 1.0
    )
    side_b = _side(
        _label(path_b, lb, same_log), path_b, lb, db, car, grip_scale, corners, to_b, scale
    )
    s = np.asarray(da.line.distance_m, dtype=np.float64)
    t_a, _ = driven_mod.elapsed_from_gate(da)
    t_b, _ = driven_mod.elapsed_from_gate(db)
    delta = np.interp(s, on_a, t_b) - t_a
    rows = []
    for c, ca, cb in zip(
        corners, side_a.comparison.corners, side_b.comparison.corners, strict=True
    ):
        d = cb.actual_s - ca.actual_s
        rows.append(
            CornerVersus(
                name=c.name,
                start_m=c.start_m,
                apex_m=c.apex_m,
                end_m=c.end_m,
                time_a_s=ca.actual_s,
                time_b_s=cb.actual_s,
                delta_s=d,
                time_left_a_s=ca.time_left_s,
                time_left_b_s=cb.time_left_s,
                sentence=corner_sentence(c.name, d, ca, cb),
            )
        )
    warnings = [*notes, *da.warnings, *db.warnings]
    if fit is not None:
        warnings += [f"common envelope: {w}" for w in fit.warnings if w not in notes]
    return Versus(
        side_a, side_b, car, fit, env_logs, float(grip_scale), s, delta, tuple(rows),
        tuple(corners), warnings,
    )  # fmt: skip


def read_track(track):
    """The track file (or None), for the command line."""
    return ingest.read_track(track) if isinstance(track, str | Path) else track
