"""The whole job on one log: ingest -> laps -> line -> envelope -> solve -> compare.

``analyse()`` is the one documented call for notebook users; it returns a frozen
:class:`Analysis` holding the laps, the driven line, the envelope, the real and ideal
profiles and the corner table as arrays and plain records. Writing files is
:mod:`limitlap.report`'s job.

Examples
--------
>>> from limitlap.resources import bundled_path
>>> from limitlap import pipeline
>>> a = pipeline.analyse(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"),
...                      track=bundled_path("demo_tracks", "tarrowby_heath.toml"))
>>> a.comparison.time_left_s > 0
True
"""

from __future__ import annotations

import math
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from limitlap import (
    bands,
    best_laps,
    compare,
    derived,
    envelope,
    formatting,
    gg,
    gnss,
    grip,
    ingest,
    logfile,
    solve,
    unit_checks,
)
from limitlap import better_line as better_line_mod
from limitlap import corners as corners_mod
from limitlap import corridor as corridor_mod
from limitlap import driven as driven_mod
from limitlap import laps as laps_mod
from limitlap import session as session_mod
from limitlap.errors import InputError, LimitlapError, UnitMismatch, WarningLine
from limitlap.samples import select_samples
from limitlap.vehicle import Vehicle, check_grip_scale

#: Mass assumed when no vehicle file is given. The point-mass lap depends on power, drag
#: and downforce only through P/m, CdA/m and ClA/m, so the ideal lap does not depend on
#: this value; the fitted power and aero areas are scaled to it.
NOMINAL_MASS_KG = 1000.0

Progress = Callable[[int, int, str], None]


@dataclass(frozen=True, eq=False)
class LapTimeline:
    """Elapsed time against distance along one complete lap, gate to gate (all SI).

    What the best-of-laps composite needs from a lap (``best_laps.best_of_laps`` maps the
    reference corners to it by distance fraction), without rebuilding its line.

    Attributes
    ----------
    number : int
        Lap number. [-]
    distance_m : numpy.ndarray
        Distance from the gate, strictly increasing from 0. [m]
    time_s : numpy.ndarray
        Elapsed time from the gate at each distance. [s]
    length_m : float
        Distance gate to gate. [m]
    lap_time_s : float
        Time gate to gate, as in the lap table. [s]
    """

    number: int
    distance_m: np.ndarray
    time_s: np.ndarray
    length_m: float
    lap_time_s: float


@dataclass(frozen=True, eq=False)
class Analysis:
    """Everything ``analyse`` found, as arrays and plain records (all SI).

    Attributes
    ----------
    log_path : str
        The log analysed.
    laps : list of laps.Lap
        Every lap of the log, complete or not.
    lap : laps.Lap
        The analysed lap.
    driven : driven.DrivenLap
        Its line and measured traces on the line's stations.
    ideal : solve.Profile
        The ideal on the same stations.
    vehicle : Vehicle
        The complete envelope at grip scale 1 (given or fitted).
    fit : envelope.EnvelopeFit or None
        The fit, when the envelope was fitted from this log.
    grip_scale : float
        Scale the ideal was solved at. [-]
    grip_estimate : float or None
        Grip scale the lap actually used, relative to ``vehicle``. [-]
    comparison : compare.LapComparison
        The lap against the ideal, corner by corner.
    corners : list of corners_mod.Corner
        The corners found on the analysed lap's line.
    best_of_laps : best_laps.BestOfLaps or None
        Each segment's best time over the complete laps.
    complete_laps : list of LapTimeline
        Elapsed time against distance for every complete lap (what the composite is
        built from); only the analysed lap's line is rebuilt, in ``driven``.
    fit_laps : list of int
        Numbers of the laps the envelope was fitted to: the flying laps
        (:func:`limitlap.laps.flying_laps`); empty when a vehicle file gave the envelope.
    track_name : str
        The track file's name, empty without one.
    corner_labels : dict of str to str
        Corner name -> the track file's label for it ("T1" -> "Sentry"), where it gives one.
    warnings : list of str
        One line each; those with advice are :class:`limitlap.errors.WarningLine`.
    gg_bands : list of gg.GGBand
        The analysed lap's samples against the envelope in the g-g diagram, by speed band.
    session : session.SessionTable or None
        Every lap of the log: kind, time, ideal on its own line, time left, grip found,
        corner times; and each corner's consistency over the flying laps.
    line : better_line.LineOpportunity or None
        The better line inside the corridor of the session's laps (or the track's
        edges) and the time it would bring, in total and per corner (None when not
        asked for).
    bands : bands.Bands or None
        Intervals of the ideal lap time and each corner's time left (None with fewer
        than :data:`limitlap.bands.MIN_LAPS` flying laps, or when not asked for).
    session_info : dict of str to str
        What the log names of its session (``date``, ``venue``, ``driver``, ``car``,
        ``session``; :attr:`limitlap.logfile.Log.session`).
    layout_note : str or None
        The reader's line on the log's layout when it is not the plain form
        (:attr:`limitlap.logfile.Log.layout_note`), for the command line to show.
    """

    log_path: str
    laps: list[laps_mod.Lap]
    lap: laps_mod.Lap
    driven: driven_mod.DrivenLap
    ideal: solve.Profile
    vehicle: Vehicle
    fit: envelope.EnvelopeFit | None
    grip_scale: float
    grip_estimate: float | None
    comparison: compare.LapComparison
    corners: list[corners_mod.Corner]
    best_of_laps: best_laps.BestOfLaps | None
    complete_laps: list[LapTimeline] = field(default_factory=list)
    fit_laps: list[int] = field(default_factory=list)
    track_name: str = ""
    corner_labels: dict[str, str] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    gg_bands: list[gg.GGBand] = field(default_factory=list)
    session: session_mod.SessionTable | None = None
    bands: bands.Bands | None = None
    session_info: dict[str, str] = field(default_factory=dict)
    layout_note: str | None = None
    line: better_line_mod.LineOpportunity | None = None


def lap_timelines(log: logfile.Log, laps) -> dict[int, LapTimeline]:
    """Elapsed time against travelled distance for each lap, from the logged speed.

    Distance is the trapezoidal integral of ``speed`` (as the lap table's distance,
    :func:`limitlap.gnss.travelled_m`), both measured from the gate crossing
    (interpolated between rows); the log's rows inside the lap are the stations, one per
    distance where the car stood still. Vectorised over each lap's rows.

    Parameters
    ----------
    log : logfile.Log
        The session. [-]
    laps : sequence of laps.Lap
        The laps to time. [-]

    Returns
    -------
    dict
        Lap number -> :class:`LapTimeline`. [-]
    """
    t = log.time_s
    s = gnss.travelled_m(log)
    out = {}
    ends = np.interp([[lp.start_time_s, lp.end_time_s] for lp in laps], t, s).reshape(-1, 2)
    for lp, (s0, s1) in zip(laps, ends.tolist(), strict=True):  # each lap's rows in one go
        rows = slice(lp.start_index, lp.end_index)
        tr, sr = t[rows] - lp.start_time_s, s[rows] - s0
        inside = (tr > 0.0) & (tr < lp.time_s)
        d = np.concatenate(([0.0], sr[inside]))
        e = np.concatenate(([0.0], tr[inside]))
        keep = np.concatenate(([True], d[1:] > np.maximum.accumulate(d)[:-1]))
        out[lp.number] = LapTimeline(lp.number, d[keep], e[keep], s1 - s0, float(lp.time_s))
    return out


def _timeline_of(driven: driven_mod.DrivenLap, lap: laps_mod.Lap) -> LapTimeline:
    """The analysed lap's timeline on its rebuilt line (the stations its corners are on)."""
    t = np.asarray(driven.time_s, dtype=np.float64)
    line = driven.line
    return LapTimeline(lap.number, line.distance_m, t - t[0], line.length_m, float(lap.time_s))


def _step(progress: Progress | None, done: int, total: int, what: str) -> None:
    if progress is not None:
        progress(done, total, what)


def load_session(log_path, *, gate=None, channels=None, track=None):
    """Read a log and split it into laps.

    Parameters
    ----------
    log_path : path
        Session log (docs/formats.md, Log files). [-]
    gate : str or laps.Gate, optional
        ``"LAT,LON"`` or a Gate; default from the track file, else the log's ``lap``
        column, else a gate placed automatically (with a warning). [-]
    channels : path, optional
        Channel-map TOML (docs/formats.md, Channel map). [-]
    track : path or ingest.Track, optional
        Track file (docs/formats.md, Track file). [-]

    Returns
    -------
    (logfile.Log, list of laps.Lap, ingest.Track or None, list of str)
        The log, its laps, the track and the warnings so far. [-]
    """
    log, trk, warnings = _read_session(log_path, channels, track)
    laps = _split_session(log_path, log, trk, gate, warnings)
    return log, laps, trk, warnings


def _read_session(log_path, channels, track, on_channels=None):
    """The log (and its warnings) and the track of :func:`load_session`."""
    channel_map = ingest.read_channel_map(channels) if channels is not None else None
    log = logfile.read_log(
        log_path, channel_map, on_channels=on_channels, defer=logfile.TRACE_CHANNELS
    )
    trk = ingest.read_track(track) if isinstance(track, str | Path) else track
    return log, trk, list(log.warnings)


def _split_session(log_path, log, trk, gate, warnings) -> list[laps_mod.Lap]:
    """The laps of :func:`load_session` (a warning added when the gate was placed)."""
    if isinstance(gate, str):
        gate = laps_mod.parse_gate(gate)
    track_gate = None
    if trk is not None and trk.gate_latlon is not None:
        track_gate = laps_mod.Gate.geodetic(*trk.gate_latlon)
    if gate is not None and gate.is_geodetic and log.origin is None:
        raise InputError(
            log_path, "a latitude/longitude gate needs a log with latitude and longitude"
        )
    if gate is None:
        gate = track_gate
    elif track_gate is not None:
        laps_mod.check_gates_agree(log, gate, track_gate, trk.path)
    if gate is None and not log.has("lap"):
        gate = laps_mod.auto_gate(log)
        where = (
            f"{gate.latitude_deg:.6f},{gate.longitude_deg:.6f}"
            if gate.is_geodetic
            else f"x={gate.x_m:.1f} m, y={gate.y_m:.1f} m"
        )
        warnings.append(
            WarningLine(
                f"{log_path}: no start/finish gate given and no lap column; gate placed at "
                f"{where}, the middle of the longest fast straight",
                hint="gate",
            )
        )
    return laps_mod.split_laps(log, gate)


def _sample_rate(log):
    """The log's sample rate from its median time step, None for a single row. [Hz]."""

    def rate(lg):
        dt = np.diff(lg.time_s)
        return float(1.0 / np.median(dt)) if dt.size else None

    return log.remembered("sample_rate_hz", rate)


def _imu_samples(log, laps, rows_of, pad_s=None):
    """IMU speed/a_x/a_y of the given laps' rows, or None when the log has no IMU.

    With ``pad_s``, only the rows from ``pad_s`` before the first lap to ``pad_s`` after
    the last are returned (the mask still marks the laps' own rows): enough for the
    sample filters (:func:`limitlap.samples.select_samples` reaches well under a second)
    to give the same values inside the laps as on the whole log, at a lap's cost. [s]
    """
    if not (log.has("accel_lon") and log.has("accel_lat")):
        return None
    n = log.time_s.shape[0]
    rate = _sample_rate(log)
    rows = slice(0, n)
    if pad_s is not None and rows_of and rate:
        pad = math.ceil(pad_s * rate)
        first = min(lp.start_index for lp in rows_of)
        last = max(lp.end_index for lp in rows_of)
        rows = slice(max(first - pad, 0), min(last + pad, n))
    mask = np.zeros(n, dtype=bool)
    for lp in rows_of:
        mask[lp.start_index : lp.end_index] = True
    mask = mask[rows]
    v = log.channels["speed"][rows]
    ax = log.channels["accel_lon"][rows]
    ay = log.channels["accel_lat"][rows]
    # no finite-cell test here: channels at their own rates leave blank cells, which
    # select_samples fills (speed) or filters at the channel's own rate (accelerations)
    throttle = log.channels.get("throttle")
    return v, ax, ay, mask, rate, None if throttle is None else throttle[rows]


def _fit(log_path, samples, base, early, derived_clause="", noise=(True, None)):
    """The envelope fitted to ``samples`` (see :func:`_imu_samples`); ``early`` is the pending sample selection of the whole log, or None.

    Errors name the log, and say when its accelerations were derived (``derived_clause``,
    :func:`_derived_clause`); ``noise`` is what to take out for the accelerations' noise
    (:func:`limitlap.derived.noise_to_take_out`).
    """
    v_s, ax_s, ay_s, mask_s, rate, thr_s = samples
    try:
        return envelope.fit_envelope(
            v_s,
            ax_s,
            ay_s,
            base,
            mask=mask_s,
            sample_rate_hz=rate,
            throttle=thr_s,
            selection=None if early is None else early.result(),
            # accelerations derived from speed and the GNSS line: their noise does not
            # show in their differences; a_y's is read from the laps (docs/methods.md,
            # Derived accelerations), and nothing is given back for the low-pass
            remove_noise=noise[0],
            noise_m_s2=noise[1],
        )
    except InputError:
        raise
    except LimitlapError as err:  # the log's data cannot support a fit: name the log
        raise InputError(
            log_path, f"{err}{derived_clause} (give a vehicle file with [grip])"
        ) from err


#: The steps ``analyse`` reports to its ``progress`` callable.
_STEPS = 6


def analyse(
    log_path,
    *,
    vehicle=None,
    grip_scale: float = 1.0,
    lap: int | None = None,
    gate=None,
    channels=None,
    track=None,
    progress: Progress | None = None,
    check_units: bool = True,
    every_lap: bool = True,
    intervals: bool = True,
    better_line: bool = True,
) -> Analysis:
    """The whole job on one log: laps, line, envelope, ideal lap, comparison.

    Parameters
    ----------
    log_path : path
        Session log (docs/formats.md, Log files). [-]
    vehicle : path or Vehicle, optional
        Vehicle file; a complete one with ``[grip]`` is used as the envelope, otherwise
        (mass only, or no file) the envelope is fitted to this log's flying laps
        (complete laps within 107 % of the fastest, :func:`limitlap.laps.flying_laps`). [-]
    grip_scale : float
        Grip scale k for the ideal lap (damp or wet running), 0.2-2.0. [-]
    lap : int, optional
        Lap number to analyse; default the fastest complete lap. [-]
    gate, channels, track
        See :func:`load_session`. [-]
    progress : callable, optional
        ``progress(done, total, step)``. [-]
    check_units : bool
        Stop with :class:`limitlap.errors.UnitMismatch` when a channel disagrees with the
        GPS path by a unit factor or a sign (:func:`limitlap.unit_checks.check_units`);
        False turns that into a warning. [-]
    every_lap : bool
        Build the table of every lap (:mod:`limitlap.session`). [-]
    intervals : bool
        Work out the bands (:mod:`limitlap.bands`; needs ``every_lap``). [-]
    better_line : bool
        Look for a better line in the corridor of the flying laps (and the track file's
        edges) and the time it would bring (:mod:`limitlap.better_line`). [-]

    Returns
    -------
    Analysis
        Everything found, SI. [-]
    """
    k = check_grip_scale(grip_scale)
    base = _base_vehicle(vehicle)
    _step(progress, 0, _STEPS, "reading the log")
    with _EnvelopeBeside(log_path, base) as beside:  # the envelope's work overlaps the line's
        log, trk, warnings = _read_session(log_path, channels, track, on_channels=beside.select)
        _check_channel_units(log_path, log, check_units, warnings)
        laps = _split_session(log_path, log, trk, gate, warnings)
        chosen = _chosen_lap(log_path, laps, lap)
        _step(progress, 1, _STEPS, "rebuilding the driven line")
        rebuilt = _derived_accelerations(log_path, log, laps, chosen, warnings)
        flying = laps_mod.flying_laps(laps)  # the envelope's laps (out-laps left out)
        beside.start_fit(log, laps, flying)
        the_lap = _rebuild_line(log, chosen, warnings, rebuilt)
        corners = _find_corners(the_lap, trk)
        timelines = lap_timelines(log, [lp for lp in laps if lp.complete and lp is not chosen])
        # the bands' lines and the corridor need no envelope: built while the fit finishes
        if every_lap and intervals:
            _lines_before_the_fit(log, laps, chosen, the_lap, not base.is_complete, rebuilt)
        kept_to = _lap_corridor(log, laps, chosen, the_lap, trk, rebuilt) if better_line else None
        _step(progress, 2, _STEPS, "fitting the grip envelope")
        car, fit = _grip_envelope(log_path, log, laps, flying, beside, vehicle, warnings)
    _step(progress, 3, _STEPS, "solving the ideal lap")
    with _LapsBeside(
        log, laps, chosen, car, fit, beside.selection(), (every_lap, intervals), rebuilt
    ) as more:
        ideal = solve.solve_profile(the_lap.line, car, k)
        _step(progress, 4, _STEPS, "comparing corner by corner")
        grip_est = _grip_estimate(
            (log_path, vehicle), log, laps, chosen, car, k, fit is not None, warnings
        )
        comparison = compare.compare_lap(
            the_lap, ideal, car, corners, grip_scale=k, grip_estimate=grip_est
        )
        warnings += [w for w in comparison.warnings if w not in warnings]
        _step(progress, 5, _STEPS, "best of the session's own laps")
        complete_laps, best = _best_of_laps(laps, chosen, the_lap, timelines, corners, ideal)
        table, band = more.finish(the_lap, ideal, k, corners, comparison, grip_est)
        line = (
            better_line_mod.line_opportunity(*kept_to, corners, car, k)
            if kept_to is not None
            else None
        )
    _step(progress, 6, _STEPS, "done")
    return Analysis(
        log_path=str(log_path),
        laps=laps,
        lap=chosen,
        driven=the_lap,
        ideal=ideal,
        vehicle=car,
        fit=fit,
        grip_scale=k,
        grip_estimate=grip_est,
        comparison=comparison,
        corners=corners,
        best_of_laps=best,
        complete_laps=complete_laps,
        fit_laps=[lp.number for lp in flying] if fit is not None else [],
        track_name=trk.name if trk is not None else "",
        corner_labels=_corner_labels(trk),
        warnings=warnings,
        gg_bands=gg.gg_bands(
            the_lap.speed_m_s,
            the_lap.accel_lon_m_s2,
            the_lap.accel_lat_m_s2,
            car,
            k,
            asked=(ideal.speed_m_s, ideal.accel_lon_m_s2, ideal.accel_lat_m_s2),
        ),
        session=table,
        bands=band,
        session_info=dict(log.session),
        layout_note=log.layout_note,
        line=line,
    )


class _LapsBeside:
    """The table of every lap and the bands; the grip of every lap in a second thread.

    Why a thread: the grip found on every lap (:func:`limitlap.session.lap_grip_estimates`)
    needs neither the ideal nor the comparison, so it runs beside the ideal's solve, the
    comparison and the best of laps in the calling thread; :meth:`finish` then waits for
    it (benchmarks/bench_session.py counts on this overlap). Measured and not kept:
    rebuilding the bands' neighbouring lines in that thread too (the table, built meanwhile
    in the calling thread, slowed by as much as the overlap saved on two shared cores).

    Parameters
    ----------
    log, laps, chosen
        The session, its laps, the analysed lap. [-]
    car : Vehicle
        The envelope at grip scale 1. [-]
    fit : envelope.EnvelopeFit or None
        Its fit (None: given by a vehicle file). [-]
    selection : samples.Selection or None
        The whole log's filtered samples, when the fit made them. [-]
    what : (bool, bool)
        ``every_lap`` and ``intervals``: what to build (see :func:`analyse`). [-]
    rebuilt : dict
        Laps whose lines were rebuilt already, by number (:func:`_derived_accelerations`). [-]
    """

    def __init__(self, log, laps, chosen, car, fit, selection, what, rebuilt):
        self.log, self.laps, self.chosen, self.car, self.fit = log, laps, chosen, car, fit
        self.selection, self.rebuilt = selection, rebuilt
        every_lap, intervals = what
        self.every_lap, self.intervals = every_lap, intervals and every_lap
        self._pool = ThreadPoolExecutor(max_workers=1)
        self.band_laps = _band_laps(laps, fit is not None)
        timed = [lp for lp in laps if lp.complete and lp is not chosen]
        self._grips = (
            self._pool.submit(
                session_mod.lap_grip_estimates,
                log,
                timed,
                car,
                selection=selection,
                rate_hz=_sample_rate(log),
            )
            if self.every_lap
            else None
        )
        self._near = _band_neighbours(laps, chosen, self.band_laps)

    def __enter__(self) -> _LapsBeside:
        return self

    def __exit__(self, *exc) -> None:
        self._pool.shutdown(wait=True)

    def finish(self, the_lap, ideal, k, corners, comparison, grip_est):
        """(session.SessionTable or None, bands.Bands or None)."""
        if not self.every_lap:
            return None, None
        grips = {**self._grips.result(), self.chosen.number: grip_est}
        table = session_mod.session_table(
            self.log,
            self.laps,
            self.chosen,
            the_lap,
            ideal,
            self.car,
            corners,
            [c.actual_s for c in comparison.corners],
            grip_scale=k,
            grips=grips,
        )
        if not self.intervals:
            return table, None
        return table, self._bands(table, the_lap, ideal, k, corners, comparison)

    def _line_draws(self, the_lap, ideal, k, corners):
        """The ideal lap and corner times on the analysed lap's line and on the neighbours' rebuilt lines, the corners placed on each where that lap had travelled the same share of its lap (:func:`limitlap.session.corners_on`)."""
        lap_times = [ideal.lap_time_s]
        corner_times = [bands.corner_ideal(the_lap.line, ideal, corners)]
        shares = session_mod.corner_shares(self.log, self.chosen, the_lap, corners)
        fusion = the_lap.agreement["fusion"]
        for lp in self._near:
            drv = self.rebuilt.get(lp.number) or driven_mod.rebuild_path(
                self.log, lp, fusion, max_rate_hz=None
            )
            prof = solve.solve_profile(drv.line, self.car, k)
            lap_times.append(prof.lap_time_s)
            placed = session_mod.corners_on(self.log, lp, drv, corners, shares)
            corner_times.append(bands.corner_ideal(drv.line, prof, placed))
        return np.array(lap_times), np.vstack(corner_times)

    def _level_data(self, records):
        """:func:`limitlap.bands.level_samples` of the fit's samples on ``records``' laps, and their number; None without a fit."""
        sel, fit = self.selection, self.fit
        if fit is None or sel is None:
            return None
        by_number = {lp.number: lp for lp in self.laps}
        lap_index = np.full(sel.used.shape[0], -1, dtype=np.int64)
        for i, r in enumerate(records):
            lp = by_number[r.number]
            lap_index[lp.start_index : lp.end_index] = i
        rows = np.flatnonzero(fit.used & (lap_index >= 0))
        found = bands.level_samples(
            sel.speed_m_s[rows],
            sel.accel_lon_m_s2[rows],
            sel.accel_lat_m_s2[rows],
            lap_index[rows],
            self.car,
        )
        return (*found, len(records))

    def _bands(self, table, the_lap, ideal, k, corners, comparison):
        """The analysed lap's bands (:func:`limitlap.bands.session_bands`) over :meth:`_band_laps`."""
        wanted = set(self.band_laps)
        records = [r for r in table.flying() if r.number in wanted]
        if not records:
            return None
        return bands.session_bands(
            the_lap.line,
            ideal,
            self.car,
            corners,
            [c.actual_s for c in comparison.corners],
            comparison.lap_time_s,
            self._line_draws(the_lap, ideal, k, corners),
            self._level_data(records),
            grip_scale=k,
            quantile=self.fit.quality["quantile"] if self.fit is not None else 0.99,
            ranks=[c.rank for c in comparison.corners],
        )


def _band_laps(laps, fitted: bool) -> list[int]:
    """The laps the bands resample: the envelope's (flying within 107 %) when it was fitted, else every flying lap timed gate to gate."""
    if fitted:
        return [lp.number for lp in laps_mod.flying_laps(laps)]
    return [lp.number for lp in laps if lp.complete and session_mod.lap_kind(lp, laps) == "flying"]


def _band_neighbours(laps, chosen, band_laps) -> list[laps_mod.Lap]:
    """The laps nearest the analysed one in number among ``band_laps`` whose lines the bands solve (:data:`limitlap.bands.LINE_LAPS` of them)."""
    by_number = {lp.number: lp for lp in laps}
    nearest = sorted(
        (n for n in band_laps if n != chosen.number),
        key=lambda n: (abs(n - chosen.number), n),
    )
    return [by_number[n] for n in nearest[: bands.LINE_LAPS]]


def _lines_before_the_fit(log, laps, chosen, the_lap, fitted, rebuilt) -> None:
    """Rebuild the bands' neighbours' lines into ``rebuilt`` (every row, path alone: :func:`limitlap.driven.rebuild_path`) while the envelope's fit finishes in its thread; one that cannot be rebuilt is left for :meth:`_LapsBeside._line_draws` to report."""
    fusion = the_lap.agreement["fusion"]
    for lp in _band_neighbours(laps, chosen, _band_laps(laps, fitted)):
        if lp.number in rebuilt:
            continue
        try:
            rebuilt[lp.number] = driven_mod.rebuild_path(log, lp, fusion, max_rate_hz=None)
        except LimitlapError:
            continue


def _derived_accelerations(log_path, log, laps, chosen, warnings) -> dict:
    """The accelerations the log lacks, derived (:mod:`limitlap.derived`), and a warning that says so.

    Every complete lap's line is rebuilt (a_y = v² κ needs each lap's own curvature; the
    envelope is fitted to the flying laps, the lap table's grip to every complete lap);
    a lap whose line cannot be rebuilt keeps no a_y, unless it is the analysed lap (its
    error stops the run, as it would without). Returns the rebuilt laps by number, their
    stations carrying the derived accelerations (the analysed lap's and the bands'
    neighbours' lines are not rebuilt again); empty when nothing was missing.
    """
    if not derived.missing_accelerations(log):
        return {}
    rebuilt = []
    for lp in laps:
        if not lp.complete:
            continue
        try:
            rebuilt.append((lp, driven_mod.reconstruct_lap(log, lp)))
        except LimitlapError:
            if lp is chosen:
                raise
    acc = derived.add_accelerations(log, rebuilt)
    warnings.append(f"{log_path}: {derived.note(acc)}")
    ax = log.channels["accel_lon"]
    return {lp.number: derived.on_stations(d, lp, log.time_s, ax) for lp, d in rebuilt}


def _derived_clause(log) -> str:
    """`` (... derived ...)`` for an error about the accelerations when they were derived, else empty."""
    names = [n for n in ("accel_lon", "accel_lat") if n in log.derived]
    if not names:
        return ""
    return (
        f" (the log has no {' or '.join(repr(n) for n in names)} channel: the accelerations "
        "were derived from speed and the GPS line)"
    )


def _check_channel_units(log_path, log, strict: bool, warnings: list[str]) -> None:
    """Each channel against the GPS path: a unit or sign mix-up stops the run or warns.

    It stops (:class:`UnitMismatch`) when ``strict``, else becomes a warning.
    """
    findings = unit_checks.check_units(log)
    if findings and strict:
        raise UnitMismatch(log_path, findings)
    warnings += [f"{log_path}: {f} (going on as asked)" for f in findings]


def _base_vehicle(vehicle) -> Vehicle:
    """The vehicle given (a Vehicle or a file's), else a nominal-mass car to fit."""
    if isinstance(vehicle, Vehicle):
        return vehicle
    if vehicle is not None:
        return ingest.read_vehicle(vehicle, require_complete=False)
    return Vehicle("fitted from the log", NOMINAL_MASS_KG)


class _EnvelopeBeside:
    """The envelope's sample selection and fit in a second thread, beside the line rebuild.

    Why a thread: it saves wall time on long logs (DEVELOPERS.md, "Speed"). Only the
    reader and the envelope's sample selection (despike and low-pass every row) grow with
    the log; the selection needs neither positions nor laps, so :meth:`select` (the
    reader's ``on_channels`` hook) starts it as soon as the channels are parsed, before
    the positions are converted. The fit follows it in the same thread once the laps are
    split (:meth:`start_fit`), while the calling thread rebuilds the analysed lap's line,
    finds its corners and times the other laps; :meth:`fitted` then waits for it. The
    benchmark (benchmarks/bench_pipeline.py) counts on this overlap.

    With a complete vehicle nothing is started. Leaving the ``with`` block waits for the
    thread, also when the analysis stops on an error.

    Parameters
    ----------
    log_path : path
        The log, named by the fit's errors. [-]
    base : Vehicle
        The vehicle to fit the envelope to (mass and what it gives). [-]
    """

    def __init__(self, log_path, base: Vehicle):
        self._log_path = log_path
        self.base = base
        self._pool = ThreadPoolExecutor(max_workers=1)
        self._selection: Future | None = None
        self._fitting: Future | None = None
        self._rows = -1

    def __enter__(self) -> _EnvelopeBeside:
        return self

    def __exit__(self, *exc) -> None:
        self._pool.shutdown(wait=True)

    def select(self, time_s: np.ndarray, ch: dict) -> None:
        """The reader's ``on_channels`` hook: start the sample selection of every row when an envelope is to be fitted and the log has both accelerations."""
        if self.base.is_complete or time_s.shape[0] < 2:
            return
        if not all(c in ch and np.isfinite(ch[c]).any() for c in ("accel_lon", "accel_lat")):
            return
        rate = float(1.0 / np.median(np.diff(time_s)))  # as _sample_rate
        self._rows = time_s.shape[0]
        self._selection = self._pool.submit(
            select_samples,
            ch["speed"],
            ch["accel_lon"],
            ch["accel_lat"],
            sample_rate_hz=rate,
        )

    def start_fit(self, log, laps, flying) -> None:
        """Start the fit to the flying laps' acceleration samples (logged, or derived before: :func:`_derived_accelerations`)."""
        if self.base.is_complete:
            return
        samples = _imu_samples(log, laps, flying)
        if samples is not None:
            self._fitting = self._pool.submit(
                _fit,
                self._log_path,
                samples,
                self.base,
                self._selection,
                _derived_clause(log),
                derived.noise_to_take_out([log]),
            )

    def selection(self):
        """The whole log's filtered samples (:func:`limitlap.samples.select_samples`) the fit used, None when none were made."""
        if self._selection is None:
            return None
        sel = self._selection.result()
        return sel if sel.used.shape[0] == self._rows else None

    def fitted(self) -> envelope.EnvelopeFit | None:
        """The fit :meth:`start_fit` started (waiting for it), None when it started none."""
        return None if self._fitting is None else self._fitting.result()


def _chosen_lap(log_path, laps, lap: int | None) -> laps_mod.Lap:
    """Lap ``lap``, or the fastest complete lap; it must be complete."""
    if not any(lp.complete for lp in laps):
        if len(laps) < 3:
            raise InputError(
                log_path, "no complete lap in the log (a lap needs two gate crossings)"
            )
        kinds = ", ".join(f"lap {lp.number} {lp.kind}" for lp in laps)
        raise InputError(log_path, f"no complete flying lap in the log ({kinds})")
    if lap is None:
        return laps_mod.fastest_lap(laps)
    matches = [lp for lp in laps if lp.number == lap]
    if not matches:
        numbers = ", ".join(str(lp.number) for lp in laps)
        raise InputError(log_path, f"no lap {lap}; the log has laps {numbers}")
    chosen = matches[0]
    if not chosen.complete:
        raise InputError(log_path, f"lap {lap} is not complete ({chosen.reason})")
    return chosen


def _rebuild_line(log, chosen, warnings, rebuilt) -> driven_mod.DrivenLap:
    """The analysed lap's driven line (GNSS/inertial fusion), its warnings added once.

    Only this lap's line is rebuilt (unless ``rebuilt``, the laps rebuilt to derive the
    accelerations, holds it); the other laps give the composite their time against
    distance straight from the logged speed (:func:`lap_timelines`).
    """
    the_lap = rebuilt.get(chosen.number) or driven_mod.reconstruct_lap(log, chosen)
    warnings += [w for w in the_lap.warnings if w not in warnings]
    return the_lap


def _find_corners(the_lap, trk) -> list[corners_mod.Corner]:
    """The corners of the rebuilt line, named (and placed) as the track file says."""
    return corners_mod.track_corners(the_lap.line, trk)


def _grip_envelope(log_path, log, laps, flying, beside, vehicle, warnings):
    """The envelope: the complete vehicle's, else the fit to the flying laps, with its warnings added.

    Returns (Vehicle, envelope.EnvelopeFit or None).
    """
    if beside.base.is_complete:
        return beside.base, None
    fit = beside.fitted()
    if fit is None:  # the derivation left both channels blank on every row
        missing = " and ".join(f"'{n}'" for n in ("accel_lon", "accel_lat") if not log.has(n))
        raise InputError(
            log_path,
            f"no {missing} values to fit a grip envelope to: none logged, and none could be "
            "derived from speed and the GPS line (give a vehicle file with [grip])",
        )
    slow = [lp for lp in laps if lp.complete and lp not in flying]
    if slow:
        which = ", ".join(f"{lp.number} ({formatting.lap_time(lp.time_s)})" for lp in slow)
        warnings.append(
            f"{log_path}: lap{'s' if len(slow) > 1 else ''} {which} left out of the "
            f"grip envelope: slower than {laps_mod.FLYING_LAP_RATIO * 100:.0f} % of the "
            "fastest lap (out-lap, cool-down or traffic), not driven at the limit"
        )
    # The fit's own lines do not know the file; say which log they are about.
    warnings += [f"{log_path}: {w}" for w in fit.warnings if f"{log_path}: {w}" not in warnings]
    if vehicle is None:
        warnings.append(
            f"no vehicle file: mass taken as {NOMINAL_MASS_KG:.0f} kg; the fitted power "
            "and aero areas are per that mass (the ideal lap does not depend on it)"
        )
    return fit.vehicle, fit


def _grip_estimate(files, log, laps, chosen, car, k, fitted, warnings):
    """Grip scale the analysed lap used, relative to ``car`` (None without accelerations); a warning when a given envelope was far from the grip found.

    ``files`` is (the log's path, the vehicle given: a path, a Vehicle or None); an
    error names the vehicle file (its envelope is what the lap is measured against) or
    the log, and says when the accelerations were derived. [-].
    """
    lap_samples = _imu_samples(log, laps, [chosen], pad_s=2.0)
    if lap_samples is None:
        return None
    v_l, ax_l, ay_l, mask_l, rate_l, _ = lap_samples
    try:
        grip_est = grip.grip_estimate(v_l, ax_l, ay_l, car, mask=mask_l, sample_rate_hz=rate_l)
    except LimitlapError as err:
        log_path, vehicle = files
        named = vehicle if isinstance(vehicle, str | Path) else log_path
        raise InputError(
            named, f"lap {chosen.number} of {log_path}: {err}{_derived_clause(log)}"
        ) from err
    if grip_est is not None and not fitted and grip_est < 0.9 * k:
        warnings.append(
            WarningLine(
                f"this lap showed about {grip_est:.2f} of the envelope's grip (damp or wet "
                f"track?), so most of the time left against the ideal at grip scale {k:g} is "
                "grip that was not there",
                hint="grip_scale",
                value=grip_est,
            )
        )
    return grip_est


def _best_of_laps(laps, chosen, the_lap, timelines, corners, ideal):
    """Every complete lap's timeline (the analysed lap's on its rebuilt line) and the composite of each segment's best: (list of LapTimeline, best_laps.BestOfLaps)."""
    complete = [lp for lp in laps if lp.complete]
    timelines = {**timelines, chosen.number: _timeline_of(the_lap, chosen)}
    complete_laps = [timelines[lp.number] for lp in complete]
    best = best_laps.best_of_laps(
        complete_laps,
        corners,
        reference_length_m=the_lap.line.length_m,
        lap_numbers=[lp.number for lp in complete],
        ideal=ideal,
    )
    return complete_laps, best


#: Laps whose rebuilt paths make the corridor: the fastest flying laps, at most this many
#: (each path rebuilt alone, :func:`limitlap.driven.rebuild_path`, costs about 10 ms on a
#: 200 Hz lap; more laps widen the band little). [-]
CORRIDOR_LAPS = 12


def _lap_paths(log, laps, chosen, the_lap, rebuilt) -> list:
    """The rebuilt paths of the fastest flying laps (the analysed lap's own among them), stations inside a GNSS dropout marked unsound; a lap whose line cannot be rebuilt is left out."""
    flying = sorted(laps_mod.flying_laps(laps), key=lambda lp: lp.time_s)[:CORRIDOR_LAPS]
    if chosen not in flying:
        flying.append(chosen)
    drops = [(d.start_time_s, d.end_time_s) for d in gnss.gps_dropouts(log)]
    fusion = the_lap.agreement["fusion"]
    paths = []
    for lp in flying:
        drv = the_lap if lp is chosen else rebuilt.get(lp.number)
        try:
            drv = drv or driven_mod.rebuild_path(log, lp, fusion)
        except LimitlapError:
            continue
        t = np.asarray(drv.time_s, float) + lp.start_time_s
        unsound = np.zeros(t.shape, bool)
        for t0, t1 in drops:
            unsound |= (t >= t0) & (t <= t1)
        paths.append(corridor_mod.LapPath(lp.number, drv.line.x_m, drv.line.y_m, unsound))
    return paths


def _edge_lines(trk, log):
    """The track file's edges in the log's plane (:class:`limitlap.corridor.EdgeLines`), None without; edges and log must both be WGS84 or both x/y."""
    edges = trk.edges if trk is not None else None
    if edges is None:
        return None
    a, b, c, d = edges.columns
    if edges.geodetic != (log.origin is not None):
        kind = "latitude/longitude" if edges.geodetic else "x/y"
        raise InputError(edges.path, f"edges in {kind} need a log in {kind} too")

    def plane(p, q):
        return gnss.enu_of(p, q, log.origin) if edges.geodetic else (p, q)

    if edges.form == "widths":
        return corridor_mod.edges_from_widths(*plane(a, b), c, d, edges.margin_m)
    return corridor_mod.EdgeLines(*plane(a, b), *plane(c, d), edges.margin_m)


def _lap_corridor(log, laps, chosen, the_lap, trk, rebuilt):
    """(frame, corridor) the better line keeps to (:func:`limitlap.better_line.line_opportunity`): the flying laps' paths about the analysed lap's line, or the track's edges."""
    frame = corridor_mod.reference_frame(the_lap.line)
    paths = _lap_paths(log, laps, chosen, the_lap, rebuilt)
    return frame, corridor_mod.corridor(frame, paths, _edge_lines(trk, log))


def _corner_labels(trk) -> dict[str, str]:
    """Corner name -> the track file's label for it, where it gives one."""
    if trk is None:
        return {}
    return {n: lb for n, lb in zip(trk.corner_names, trk.corner_labels, strict=True) if lb}


def line_from_source(source, *, lap: int | None = None, gate=None, channels=None, track=None):
    """The line of a line file, or of a log's fastest complete lap (or lap ``lap``).

    Returns
    -------
    (line.Line, str)
        The line and a description of where it came from.
    """
    path = Path(source)
    if path.name.lower().endswith(".csv"):
        # A plain CSV may be a line file or a log: decide from its header.
        try:
            with path.open("r", encoding="utf-8-sig") as fh:
                header = fh.readline().lower()
        except OSError as err:
            raise InputError(path, f"cannot be read: {err.strerror or err}") from err
        cols = [c.split("[")[0].strip() for c in header.replace(";", ",").split(",")]
        if ("curvature" in cols and "distance" in cols) or ("time" not in cols and "x" in cols):
            return ingest.read_line(path), f"line file {path.name}"
    log, laps, _, _ = load_session(path, gate=gate, channels=channels, track=track)
    if lap is None:
        try:
            chosen = laps_mod.fastest_lap(laps)
        except LimitlapError as err:
            raise InputError(path, str(err)) from err
    else:
        matches = [lp for lp in laps if lp.number == lap and lp.complete]
        if not matches:
            raise InputError(path, f"no complete lap {lap} in the log")
        chosen = matches[0]
    d = driven_mod.reconstruct_lap(log, chosen)
    if log.layout_note:  # for the command line to show, as the line's warnings
        d.line.meta["layout_note"] = log.layout_note
    return d.line, f"lap {chosen.number} of {path.name}"


def require_vehicle_with_grip(path) -> Vehicle:
    """A complete vehicle (or envelope.toml) for the targets command; the reader names any missing key or [grip] table."""
    return ingest.read_vehicle(path, require_complete=True)
