"""Gate crossing times against the generator's: how far off, and how much of it is the GNSS's own error.

Generates short seeded sessions (:func:`limitlap.synth.generate_session`, three flying
laps on the demo circuit) at several row and GNSS rates, with the GNSS error of the
generator's default (a first-order Gauss-Markov part of 0.7 m, 60 s, plus 0.1 m white
noise per axis) or white noise alone, writes each as a log, reads it back and times the
crossings of a gate whose point lies 0, 3 or 10 m to the side of the line: on the main
straight (where the generator's own gate is) and at the apex of a slow corner.

The truth is the generator's time base: the time each session station at the gate's
distance along the lap is passed (its gate times for the straight; for the corner the
rows' true lap distance, 100 Hz, interpolated). Printed per case: the largest crossing
error, and the largest error left after taking out the part the GNSS error itself
explains, minus the along-track component of the generator's GNSS error at the fixes
within 0.5 s of the crossing divided by the speed (a car whose fixes are 1 m ahead
crosses 1 m / v early, whatever the processing). That second figure is meant for the
slowly wandering error; with white noise alone, or fixes 1 s apart, read the first: the
mean noise of the fixes within 0.5 s is not what the fit averages.

Run: ``python benchmarks/bench_gate_timing.py [--seeds N]``.
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pymap3d

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from limitlap import synth  # noqa: E402
from limitlap.laps import Gate, gate_crossings  # noqa: E402
from limitlap.logfile import read_log  # noqa: E402


def _gate(truth, station_s, offset_m):
    """A gate point ``offset_m`` to the left of the line at ``station_s``, and the truth's tangent there."""
    line = truth.line
    i = int(np.argmin(np.abs(line.distance_m - station_s)))
    n = line.n
    tx = line.x_m[(i + 1) % n] - line.x_m[i - 1]
    ty = line.y_m[(i + 1) % n] - line.y_m[i - 1]
    norm = math.hypot(tx, ty)
    tx, ty = tx / norm, ty / norm
    gx, gy = line.x_m[i] - ty * offset_m, line.y_m[i] + tx * offset_m
    lat, lon, _ = pymap3d.enu2geodetic(gx, gy, 0.0, *truth.circuit.origin)
    return Gate.geodetic(float(lat), float(lon)), float(line.distance_m[i]), (tx, ty)


def _truth_times(session, station_m):
    """Times the true motion passes ``station_m`` along the lap (rows interpolated). [s]."""
    truth = session.truth
    if station_m == 0.0:
        return truth.gate_times_s
    d = truth.distance_m  # since the pit exit: increasing
    length = truth.line.length_m
    first = (station_m - session.truth.circuit.pit_exit_m) % length
    marks = np.arange(first, d[-1], length)
    return np.interp(marks, d + 1e-9 * session.time_s, session.time_s)


def _gnss_part(session, times, tangent):
    """Crossing time error the GNSS error alone explains: -(along-track error)/speed. [s]."""
    err = session.truth.gps_error_m
    fixes = np.flatnonzero(np.isfinite(err[:, 0]))
    out = []
    for t in times:
        near = fixes[np.abs(session.time_s[fixes] - t) <= 0.5]
        along = np.mean(err[near, 0] * tangent[0] + err[near, 1] * tangent[1])
        out.append(-along / np.interp(t, session.time_s, session.channels["speed"]))
    return np.asarray(out)


def _case(folder, rate, gps, white_only, seed):
    kw = {"gps_sigma_m": 0.0, "gps_white_m": 0.3} if white_only else {}
    session = synth.generate_session(
        n_laps=3, sample_rate_hz=rate, gps_rate_hz=gps, seed=seed, **kw
    )
    path = Path(folder) / f"s{rate}_{gps}_{int(white_only)}_{seed}.csv"
    path.write_text(synth.session_csv_text(session))
    log = read_log(path)
    corner = min(session.truth.circuit.corners, key=lambda c: abs(c.radius_m))
    rows = []
    for place, station in (("straight", 0.0), (f"{corner.name} apex", corner.apex_m)):
        for offset in (0.0, 3.0, 10.0):
            gate, at, tangent = _gate(session.truth, station, offset)
            truth = _truth_times(session, at)
            found = gate_crossings(log, gate)
            if found.shape != truth.shape:
                rows.append((place, offset, math.nan, math.nan))
                continue
            err = found - truth
            left = err - _gnss_part(session, truth, tangent)
            rows.append((place, offset, np.max(np.abs(err)), np.max(np.abs(left))))
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=2)
    args = parser.parse_args()
    cases = [(100, 10), (10, 10), (100, 5), (10, 5), (100, 1)]
    print("rows Hz  GNSS Hz  GNSS error      gate            max |error| s  after GNSS part s")
    start = time.perf_counter()
    with tempfile.TemporaryDirectory() as folder:
        for rate, gps in cases:
            for white_only in (False, True):
                table = {}
                for seed in range(1, args.seeds + 1):
                    for place, offset, e, left in _case(folder, rate, gps, white_only, seed):
                        worst = table.setdefault((place, offset), [0.0, 0.0])
                        worst[0] = max(worst[0], e)
                        worst[1] = max(worst[1], left)
                model = "white 0.3 m" if white_only else "GM 0.7 m+0.1"
                for (place, offset), (e, left) in table.items():
                    where = f"{place}, {offset:g} m off"
                    print(f"{rate:>7}  {gps:>7}  {model:<14}  {where:<22} {e:>8.4f}  {left:>12.4f}")
    print(f"({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
