r"""Corners of a line: bends, apexes, names, and the segments that tile the lap.

:func:`find_corners` finds the bends from the line's smoothed curvature with a threshold
with hysteresis, joins same-direction bends that follow closely into one corner with
several apexes, names them in driving order from the gate (or places a track file's
named apexes) and cuts the lap into segments that tile it, one per corner, with the
boundaries in the middle of the straights.

Distances are metres from the gate, in ``[0, length)``; the one segment that runs
through the gate of a closed lap has ``start_m > end_m`` (and a single corner that
covers the whole lap has ``start_m == end_m``).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
from scipy.ndimage import gaussian_filter1d

from limitlap.errors import InputError, LimitlapError
from limitlap.line import Line

# --- Defaults of corner detection (common practice of the trade, no published source) ---
#: Gaussian smoothing of curvature before the thresholds (standard deviation). [m]
SMOOTHING_M = 8.0


#: A bend starts where |curvature| exceeds this (radius under 600 m: a fast kink of
#: 10° at a 500 m radius is a corner, taken at 0.8 g at 230 km/h)... [1/m]
ENTER_CURVATURE_1_M = 1.0 / 600.0


#: ... and lasts while |curvature| stays above this (radius under 1200 m). [1/m]
LEAVE_CURVATURE_1_M = 1.0 / 1200.0


#: A bend must change the heading by at least this much to count (8°). [rad]
MIN_TURN_RAD = math.radians(8.0)


#: A second apex inside one bend needs a dip of |curvature| before it of at least this
#: share of its own peak (peak prominence, as ``scipy.signal.find_peaks``). [-]
APEX_PROMINENCE = 0.3


#: An apex sits in the middle of the stretch where |curvature| stays within this share of
#: its peak: the middle of a constant-radius arc, not wherever the noise of a rebuilt
#: line (a few %) puts its highest point. [-]
APEX_BAND = 0.03


#: Same-direction bends closer than this form one corner with two apexes. [m]
MERGE_GAP_M = 50.0

#: How far past the end of the lap a named apex may lie, as a share of the lap, and
#: still be taken as just past the gate: one driven line's length differs from another's
#: (and from a track file's) by a few metres a lap. Common practice, no published source.
APEX_OVERRUN = 0.01


@dataclass(frozen=True)
class Corner:
    """One corner and its segment of the lap (distances from the gate, SI).

    The one corner record of docs/methods.md, Corner record: found once on a line and
    used by every output (terminal, report, summary.json, target tables and sheets).

    Attributes
    ----------
    name : str
        "T1", "T2", ... in driving order from the gate, or the track file's name.
    start_m, end_m : float
        Segment bounds, in the middle of the straights either side; ``start_m > end_m``
        for the segment through the gate, ``start_m == end_m`` for one segment
        covering the whole lap. [m]
    apex_m : float
        Main apex: the apex of largest |curvature| (lowest cornering speed limit), in the
        middle of the stretch within 3 % of that peak. [m]
    apexes_m : tuple of float
        Every apex in driving order (two or more for a compound corner). [m]
    turn_in_m, exit_m : float
        Where the curvature zone begins and ends (the hysteresis thresholds). [m]
    direction : str
        'left' (+ curvature, ISO 8855) or 'right'.
    peak_curvature_1_m : float
        Smoothed curvature at the main apex, signed. [1/m]
    label : str
        The track file's longer name ("Kettle Hairpin"); empty without one.
    apex_names : tuple of str
        The track file's name of each apex of ``apexes_m`` ("T11", "T11b"), empty where
        it names none (or without a track file).
    note : str
        What the data says about the track file's corners here: a named corner kept as
        a further apex of this one, or one the line shows no bend for. Empty otherwise.
    """

    name: str
    start_m: float
    apex_m: float
    apexes_m: tuple[float, ...]
    end_m: float
    turn_in_m: float
    exit_m: float
    direction: str
    peak_curvature_1_m: float
    label: str = ""
    apex_names: tuple[str, ...] = ()
    note: str = ""


def smoothed_curvature(line: Line, smoothing_m: float = SMOOTHING_M) -> np.ndarray:
    """Curvature smoothed by a Gaussian of standard deviation ``smoothing_m``.

    Parameters
    ----------
    line : Line
        The line; stations are taken as evenly spaced at their median step.
    smoothing_m : float
        Standard deviation of the Gaussian; 0 leaves the curvature as it is. [m]

    Returns
    -------
    numpy.ndarray
        Smoothed curvature, + left. [1/m]

    Notes
    -----
    Closed lines wrap round the gate (``scipy.ndimage.gaussian_filter1d``,
    ``mode='wrap'``); open lines repeat their end values.
    """
    kappa = np.asarray(line.curvature_1_m, dtype=np.float64)
    n = kappa.shape[0]
    ds = line.ds_m[: n if line.closed else n - 1]
    sigma = float(smoothing_m) / float(np.median(ds))
    if sigma <= 0.0:
        return kappa.copy()
    return gaussian_filter1d(kappa, sigma, mode="wrap" if line.closed else "nearest")


def _runs(values: np.ndarray) -> list[tuple[int, int]]:
    """Inclusive index ranges of equal consecutive values."""
    change = np.flatnonzero(np.diff(values) != 0) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change - 1, [values.shape[0] - 1]])
    return list(zip(starts.tolist(), ends.tolist(), strict=True))


def plateau_middle(values: np.ndarray, i: int, tol: float) -> int:
    """Middle of the run of values within ``tol`` of ``values[i]`` that contains i."""
    near = np.abs(values - values[i]) <= tol
    lo = i
    while lo > 0 and near[lo - 1]:
        lo -= 1
    hi = i
    while hi < values.shape[0] - 1 and near[hi + 1]:
        hi += 1
    return (lo + hi) // 2


def peak_prominences(x):
    """Local maxima of ``x`` and the prominence of each.

    A peak is a sample higher than its left neighbour and than the first different sample
    to its right (a flat top counts once, at its middle, rounded down); its prominence is
    its height above the higher of the two lowest points between it and the nearest
    higher sample on each side (or the array's end). The definitions and the search of
    ``scipy.signal.find_peaks`` with ``prominence=0`` (Scipy's documentation, after the
    topographic prominence), re-written here because importing ``scipy.signal`` costs the
    command line half a second; the tests hold the two equal.

    Parameters
    ----------
    x : array-like
        Samples (one corner's |curvature|: a few hundred). [any]

    Returns
    -------
    peaks : numpy.ndarray
        Indices of the peaks, increasing. [-]
    prominences : numpy.ndarray
        Prominence of each, in the units of ``x``.

    Examples
    --------
    >>> p, h = peak_prominences([0.0, 2.0, 1.0, 3.0, 3.0, 0.0])
    >>> p.tolist(), h.tolist()
    ([1, 3], [1.0, 3.0])
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.shape[0]
    if n < 3:
        return np.zeros(0, np.int64), np.zeros(0)
    # Steps that change the value, in order: a rise followed (after any flat run) by a
    # fall brackets a peak, its flat top from the sample after the rise to the one
    # before the fall.
    step = np.sign(np.diff(x))
    moves = np.flatnonzero(step)
    turn = (step[moves[:-1]] > 0) & (step[moves[1:]] < 0)
    left, right = moves[:-1][turn] + 1, moves[1:][turn]
    peaks = ((left + right) // 2).astype(np.int64)
    prom = np.empty(peaks.shape[0])
    for k, p in enumerate(peaks.tolist()):  # a handful of peaks per corner
        higher_left = np.flatnonzero(x[:p] > x[p])
        lo = higher_left[-1] + 1 if higher_left.size else 0
        higher_right = np.flatnonzero(x[p + 1 :] > x[p])
        hi = p + 1 + higher_right[0] if higher_right.size else n
        prom[k] = x[p] - max(x[lo : p + 1].min(), x[p:hi].min())
    return peaks, prom


def find_corners(
    line: Line,
    names: Sequence[str] | None = None,
    *,
    smoothing_m: float = SMOOTHING_M,
    enter_curvature_1_m: float = ENTER_CURVATURE_1_M,
    leave_curvature_1_m: float = LEAVE_CURVATURE_1_M,
    min_turn_rad: float = MIN_TURN_RAD,
    merge_gap_m: float = MERGE_GAP_M,
    apexes_m: Sequence[float] | None = None,
    apexes_from: str | None = None,
    labels: Sequence[str] | None = None,
) -> list[Corner]:
    r"""Corners of a line from its curvature, with segments that tile the lap.

    Parameters
    ----------
    line : Line
        Closed lap (segments wrap round the gate) or open stretch.
    names : sequence of str, optional
        Names in driving order from the gate (e.g. from a track file); default T1, T2, ...
        Without ``apexes_m`` their number must match the corners found.
    apexes_m : sequence of float, optional
        Apex of each named corner, from the gate (a track file's ``apex_m``) [m]. Each
        name goes to the corner whose curvature zone holds its apex; a named apex
        outside every zone found (a fast bend under the thresholds) makes a corner of
        its own, from where |curvature| falls to half its peak nearby; several names in
        one zone give one corner with the first name; a corner found with no name is
        called after the corner before it with a "+" ("T8+"). An apex that is negative
        or beyond the lap (by more than :data:`APEX_OVERRUN` of it) is refused, naming
        the corner.
    apexes_from : str, optional
        The file the names and apexes come from (a track file): a refused apex is an
        :class:`~limitlap.errors.InputError` naming it. [-]
    labels : sequence of str, optional
        The longer name of each of ``names`` ("" for none), carried as the corners'
        ``label``. [-]
    smoothing_m : float
        Gaussian smoothing of curvature (standard deviation). [m]
    enter_curvature_1_m, leave_curvature_1_m : float
        Hysteresis thresholds on |curvature|: a bend starts above the first and lasts
        while above the second. [1/m]
    min_turn_rad : float
        Least heading change of a bend. [rad]
    merge_gap_m : float
        Same-direction bends with less straight than this between them are one corner
        with several apexes. [m]

    Returns
    -------
    list of Corner
        In driving order from the gate.

    Notes
    -----
    The apexes of a bend are the peaks of smoothed |curvature| that stand out by at
    least 30 % of their height, each in the middle of the stretch within
    :data:`APEX_BAND` of its peak (the middle of a constant-radius arc); the main apex
    is the one of largest |curvature|. For
    every vehicle of docs/formats.md, Vehicle files the cornering speed limit
    :math:`v^2 = \mu g / (|\kappa| - \mu k_z/m)` is strictly decreasing in
    :math:`|\kappa|` where grip limits at all, so these are the local minima of the
    speed limit, the QSS critical points (docs/methods.md, Ideal lap (QSS solver)), for any car: no vehicle
    is needed. Boundaries sit halfway between one corner's exit and the next one's
    turn-in. Thresholds are common practice, not published values.
    """
    if not (0.0 < leave_curvature_1_m <= enter_curvature_1_m):
        raise LimitlapError("corner thresholds must satisfy 0 < leave <= enter")
    ks = smoothed_curvature(line, smoothing_m)
    state = np.where(np.abs(ks) > leave_curvature_1_m, np.sign(ks), 0.0).astype(np.int8)
    frame = _run_aligned_frame(line, state)
    if frame is None:
        return []
    zones = _bends(line, ks, state, frame, enter_curvature_1_m, min_turn_rad)
    named = _named_apexes(names, apexes_m, line, apexes_from)
    if not zones and named is None:
        return []
    merged = _merge_bends(zones, merge_gap_m, float(line.length_m), line.closed)
    if named is not None:
        idx, u = frame
        merged = _place_named_apexes(
            merged,
            named,
            u,
            idx,
            np.abs(ks),
            ks,
            float(line.length_m),
            line.closed,
            leave_curvature_1_m,
        )
    out = _corner_records(merged, float(line.length_m), line.closed)
    if named is not None:
        found = _names_from_track(out, merged, float(line.length_m), line.closed)
    else:
        found = _names_in_order(out, names)
    if names is not None and labels is not None:
        by_name = {str(n): str(lb) for n, lb in zip(names, labels, strict=True) if lb}
        found = [replace(c, label=by_name.get(c.name, "")) for c in found]
    return found


def track_corners(line: Line, track=None) -> list[Corner]:
    """The corners of ``line``, named, labelled and placed as a track file says.

    The one way every command finds its corners (docs/methods.md, Corner record).

    Parameters
    ----------
    line : Line
        The lap's line.
    track : ingest.Track, optional
        Its ``corner_names``, ``corner_labels``, ``corner_apexes_m`` and ``path``; None
        (or a track without corners): T1, T2, ... in driving order. [-]

    Returns
    -------
    list of Corner
    """
    if track is None or not track.corner_names:
        return find_corners(line)
    return find_corners(
        line,
        list(track.corner_names),
        apexes_m=list(track.corner_apexes_m),
        apexes_from=track.path,
        labels=list(track.corner_labels),
    )


def _run_aligned_frame(line: Line, state: np.ndarray):
    """Station order and unwrapped distance in which no bend run wraps round the gate.

    Returns ``(idx, u)``: station numbers of the work arrays and their distance from
    the first, increasing [m]; ``None`` for a closed lap without any bend.
    """
    n = line.n
    rot = 0
    if line.closed:
        change = np.flatnonzero(state != np.roll(state, 1))
        if change.size == 0:
            if state[0] == 0:
                return None
            # one bend all the way round (a circle): rot stays 0
        else:
            rot = int(change[0])
    idx = (np.arange(n) + rot) % n
    s = np.asarray(line.distance_m, dtype=np.float64)
    u = s[idx] + np.where(idx < rot, float(line.length_m), 0.0)  # unwrapped, increasing
    return idx, u


def _bends(line: Line, ks, state, frame, enter_curvature_1_m, min_turn_rad) -> list:
    """Bends over the thresholds, each ``[turn_in_u, exit_u, direction, apexes, names]``.

    ``apexes`` holds ``(apex_u, |kappa|, signed kappa)`` of every prominent peak of the
    bend's |curvature| (plateau middles); ``names`` starts empty.
    """
    idx, u = frame
    mag = np.abs(ks)
    st = state[idx]
    ds = line.ds_m
    zones = []
    for i0, i1 in _runs(st):
        if st[i0] == 0:
            continue
        seg = idx[i0 : i1 + 1]
        zm = mag[seg]
        if zm.max() <= enter_curvature_1_m or float(np.sum(zm * ds[seg])) < min_turn_rad:
            continue
        peaks, prominences = peak_prominences(np.concatenate([[0.0], zm, [0.0]]))
        keep = prominences >= APEX_PROMINENCE * zm[peaks - 1]
        tops = [int(p) - 1 for p in peaks[keep]] + [int(np.argmax(zm))]
        apex_at = {}  # station of each apex -> the |curvature| of its peak
        for top in tops:
            j = plateau_middle(zm, top, APEX_BAND * zm[top])
            apex_at[j] = max(apex_at.get(j, 0.0), float(zm[top]))
        apexes = [(u[i0 + j], apex_at[j], ks[seg[j]]) for j in sorted(apex_at)]
        zones.append([u[i0], u[i1], int(st[i0]), apexes, [], []])
    return zones


def _named_apexes(names, apexes_m, line, source):
    """``[(apex_m, name), ...]`` of a track file's corners, or ``None`` when not given.

    Each apex is checked against the lap (``line``): not negative, not beyond its end by
    more than :data:`APEX_OVERRUN` of it; the error names ``source`` when given.
    """
    if names is None or apexes_m is None:
        return None
    ap = np.asarray(apexes_m, dtype=np.float64)
    if ap.shape != (len(names),):
        raise LimitlapError(f"{ap.size} corner apexes given for {len(names)} names")
    if not np.isfinite(ap).all():
        return None
    length = float(line.length_m)
    reach = length * (1.0 + APEX_OVERRUN) if line.closed else length
    for a, name in zip(ap.tolist(), names, strict=True):
        if 0.0 <= a <= reach:
            continue
        where = "negative" if a < 0 else f"beyond the lap ({length:.1f} m driven)"
        problem = f"corner {name}: apex_m {a:g} m is {where}"
        raise InputError(source, problem) if source is not None else LimitlapError(problem)
    return list(zip(ap.tolist(), [str(x) for x in names], strict=True))


def _merge_bends(zones: list, merge_gap_m: float, length: float, closed: bool) -> list:
    """Join same-direction bends close together (also across the gate on a lap)."""
    merged = zones[:1]
    for z in zones[1:]:
        last = merged[-1]
        if z[2] == last[2] and z[0] - last[1] < merge_gap_m:
            last[1] = z[1]
            last[3].extend(z[3])
            last[5].extend(z[5])
        else:
            merged.append(z)
    if closed and len(merged) > 1:
        first, last = merged[0], merged[-1]
        if first[2] == last[2] and first[0] + length - last[1] < merge_gap_m:
            last[1] = first[1] + length
            last[3].extend((a + length, m, k) for a, m, k in first[3])
            last[5].extend(first[5])
            merged.pop(0)
    return merged


def _segment_bounds(merged: list, length: float, closed: bool):
    """Segment starts and ends, halfway along the straights between the bends. [m]."""
    m = len(merged)
    if closed:
        bounds = np.empty(m)
        for j in range(m):
            nxt = merged[(j + 1) % m][0] + (length if j == m - 1 else 0.0)
            bounds[j] = 0.5 * (merged[j][1] + nxt)
        bounds = np.mod(bounds, length)
        return np.roll(bounds, 1), bounds
    inner = np.array([0.5 * (merged[j][1] + merged[j + 1][0]) for j in range(m - 1)])
    return np.concatenate([[0.0], inner]), np.concatenate([inner, [length]])


def _corner_records(merged: list, length: float, closed: bool) -> list[Corner]:
    """Unnamed :class:`Corner` records of the merged bends, in the order of ``merged``."""
    starts, ends = _segment_bounds(merged, length, closed)

    def wrap(d):
        return float(np.mod(d, length)) if closed else float(d)

    out = []
    for j, z in enumerate(merged):
        apexes = sorted(z[3])
        main = max(apexes, key=lambda a: a[1])
        out.append(
            Corner(
                name="",
                start_m=float(starts[j]),
                apex_m=wrap(main[0]),
                apexes_m=tuple(wrap(a[0]) for a in apexes),
                end_m=float(ends[j]),
                turn_in_m=wrap(z[0]),
                exit_m=wrap(z[1]),
                direction="left" if z[2] > 0 else "right",
                peak_curvature_1_m=float(main[2]),
            )
        )
    return out


def _names_from_track(out: list[Corner], merged: list, length: float, closed: bool):
    """Corners named by the track file's apexes placed in them; unnamed ones get a "+".

    The first name placed in a zone names the corner; every name is given to the apex
    nearest its own ``apex_m`` (``apex_names``), and a further name in the same zone is
    said in the corner's ``note``, as is a named apex where the line shows no bend.
    """
    order = sorted(range(len(out)), key=lambda j: out[j].apex_m)
    final, prev = [], None
    for j in order:
        zone = merged[j]
        nm = zone[4][0][1] if zone[4] else None
        if nm is None:  # a bend found that the track file does not name
            nm = f"{prev}+" if prev is not None else "start+"
        else:
            prev = nm
        final.append((j, nm))
    if final and final[0][1] == "start+":  # name it after the last named corner
        last_named = next((nm for _, nm in reversed(final) if not nm.endswith("+")), "T")
        final[0] = (final[0][0], f"{last_named}+")
    result = []
    for j, nm in final:
        zone, c = merged[j], out[j]
        apexes_u = sorted(a[0] for a in zone[3])
        given = [""] * len(apexes_u)
        for ua, name in zone[4]:
            k = int(np.argmin([abs(x - ua) for x in apexes_u]))
            given[k] = given[k] or name
        notes = list(zone[5])
        for ua, name in zone[4][1:]:
            k = int(np.argmin([abs(x - ua) for x in apexes_u]))
            at = float(np.mod(apexes_u[k], length)) if closed else apexes_u[k]
            notes.append(f"{name} is a further apex of {nm} at {at:.0f} m (one bend in the line)")
        result.append(replace(c, name=nm, apex_names=tuple(given), note="; ".join(notes)))
    return result


def _names_in_order(out: list[Corner], names) -> list[Corner]:
    """Corners in driving order from the gate, named T1, T2, ... or by ``names``."""
    out = sorted(out, key=lambda c: c.apex_m)
    if names is None:
        names = [f"T{i + 1}" for i in range(len(out))]
    names = [str(x) for x in names]
    if len(names) != len(out):
        raise LimitlapError(f"{len(names)} corner names given but the line has {len(out)} corners")
    return [_renamed(c, nm) for nm, c in zip(names, out, strict=True)]


def _renamed(c: Corner, name: str) -> Corner:
    return replace(c, name=name)


def _place_named_apexes(
    zones, named, u, idx, mag, ks, length, closed, bend_1_m, slack_m=10.0, snap_m=15.0
):
    """Attach (apex_m, name) pairs to curvature zones; make zones for unmatched apexes.

    ``u`` is the unwrapped station distance of the work arrays (``idx`` maps to
    stations), zones are [turn_in, exit, direction, apexes, names, notes] on that axis.
    A named apex outside every zone whose |curvature| nearby stays under ``bend_1_m``
    [1/m] is kept as a corner with a note that the line shows no bend there.
    """
    u0 = float(u[0])
    n = u.shape[0]
    for a, name in named:
        ua = u0 + float(np.mod(a - u0, length)) if closed else float(a)
        host = None
        for z in zones:
            for cand in (ua, ua + length) if closed else (ua,):
                if z[0] - slack_m <= cand <= z[1] + slack_m:
                    host, ua = z, cand
                    break
            if host is not None:
                break
        i = int(np.argmin(np.abs(u - ua)))
        near = np.flatnonzero(np.abs(u - ua) <= snap_m)
        j = int(near[np.argmax(mag[idx[near]])]) if near.size else i
        if host is not None:
            host[4].append((ua, name))
            # A second name in one zone marks a second apex, unless one was found there.
            if len(host[4]) > 1 and min(abs(a[0] - u[j]) for a in host[3]) > snap_m:
                host[3].append((float(u[j]), float(mag[idx[j]]), float(ks[idx[j]])))
            continue
        # A corner the thresholds missed: its apex where the track file puts it.
        apex = (float(u[i]), float(mag[idx[i]]), float(ks[idx[i]]))
        peak, sign = mag[idx[j]], np.sign(ks[idx[j]])
        lo = hi = j
        while lo > 0 and mag[idx[lo - 1]] >= 0.5 * peak and np.sign(ks[idx[lo - 1]]) == sign:
            lo -= 1
        while hi < n - 1 and mag[idx[hi + 1]] >= 0.5 * peak and np.sign(ks[idx[hi + 1]]) == sign:
            hi += 1
        note = []
        if peak < bend_1_m:
            note.append(
                f"the line shows no bend at {name}'s apex_m ({a:.0f} m): its largest "
                f"curvature nearby is a radius of {1.0 / max(peak, 1e-9):.0f} m; kept, "
                "and read where the track file puts it"
            )
        zones.append(
            [float(u[lo]), float(u[hi]), int(sign) if sign else 1, [apex], [(ua, name)], note]
        )
    zones.sort(key=lambda z: z[0])
    for z in zones:
        z[4].sort()
    for p, q in itertools.pairwise(zones):  # keep zones apart
        if q[0] < p[1]:
            mid = 0.5 * (q[0] + p[1])
            p[1], q[0] = mid, mid
    return zones


def segment_index(distance_m, length_m: float, corners: Sequence[Corner], closed=True):
    """Segment number (position in ``corners``) of each distance; -1 in none.

    Parameters
    ----------
    distance_m : array-like
        Distances from the gate. [m]
    length_m : float
        Lap length. [m]
    corners : sequence of Corner
        Segments that tile the lap.
    closed : bool
        A lap: the segment with ``start_m >= end_m`` runs through the gate.

    Returns
    -------
    numpy.ndarray of int
        Index per distance; every station of a tiled lap gets exactly one. [-]
    """
    d = np.asarray(distance_m, dtype=np.float64)
    out = np.full(d.shape, -1, dtype=np.int64)
    for j, c in enumerate(corners):
        if closed:
            span = c.end_m - c.start_m if c.end_m > c.start_m else c.end_m + length_m - c.start_m
            inside = np.mod(d - c.start_m, length_m) < span
        else:
            inside = (d >= c.start_m) & ((d < c.end_m) | ((j == len(corners) - 1) & (d <= c.end_m)))
        out[inside & (out < 0)] = j
    return out
