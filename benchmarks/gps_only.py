"""GPS-only logs against the full-IMU log of the same session, and both against the truth.

A generated session (``synth.generate_session``: three flying laps, no lap-to-lap
variation, the demo mistakes, 0.1 m/s of speed noise) is logged at 100 Hz with every
channel and GNSS at 10 or 25 Hz. The same log is then cut down to what a GPS lap timer or
a phone records: every 10th (4th) row, so the rows are the fixes, with time, latitude,
longitude and speed only, and once more without speed (speed derived from the fixes).
Each is analysed by ``pipeline.analyse`` with the envelope fitted from the log.

Printed per log: the ideal lap against the generator's (the solver on the true line with
the true car), the largest lap-time error against the generator's gate-to-gate times,
whether the corners with the planted mistakes (true time left over 0.1 s) rank first,
the fitted friction coefficients, the accelerations' smoothing, and each corner's time left (the analysed lap against its
ideal), beside the truth's: the generated lap's time between the corner's physical
bounds (:mod:`tests.generated_truth`) minus the generator's ideal lap's time between the
same bounds.

Run: ``python benchmarks/gps_only.py [seed ...]`` (a few seconds a seed).
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from limitlap import best_laps, laps, pipeline, synth  # noqa: E402
from tests.generated_truth import physical_corners, true_corner_times  # noqa: E402

GPS_ONLY = ("latitude", "longitude", "speed")
#: A corner whose true time left is over this holds a planted mistake. [s]
PLANTED_S = 0.1
NO_SPEED = ("latitude", "longitude")


def thinned(text: str, every: int) -> str:
    """The CSV text with the header and every ``every``-th row (the first row kept)."""
    lines = text.splitlines()
    return "\n".join([lines[0], *lines[1::every]]) + "\n"


def truth_time_left(a, session) -> dict[str, float]:
    """Each corner's true time left: the generated lap minus the generator's ideal, between the corner's physical bounds. [s]."""
    tr = session.truth
    placed = physical_corners(a.corners, a.driven, session, a.lap.number)
    real = true_corner_times(session, a.lap.number, placed)
    ideal = tr.ideal_profile
    ideal_t = best_laps.segment_times(
        tr.line.distance_m, tr.line.length_m, ideal.time_s, ideal.lap_time_s, placed
    )
    return {c.name: float(r - i) for c, r, i in zip(a.corners, real, ideal_t, strict=True)}


def analysed(path: Path, session):
    """``pipeline.analyse`` of one log with the generator's gate."""
    return pipeline.analyse(path, gate=laps.Gate.geodetic(*session.truth.gate_latlon))


def one_rate(folder: Path, seed: int, gnss_hz: int) -> None:
    """Full IMU, GPS-only and GPS-only without speed at one GNSS rate: one table."""
    kw = {"n_laps": 3, "lap_variation": 0.0, "seed": seed, "speed_noise_m_s": 0.1}
    s = synth.generate_session(sample_rate_hz=100.0, gps_rate_hz=float(gnss_hz), **kw)
    tr = s.truth
    logs = {
        "full IMU 100 Hz": (synth.session_csv_text(s), 1),
        f"GPS-only {gnss_hz} Hz": (synth.session_csv_text(s, columns=GPS_ONLY), 100 // gnss_hz),
        f"no speed {gnss_hz} Hz": (synth.session_csv_text(s, columns=NO_SPEED), 100 // gnss_hz),
    }
    results = {}
    for name, (text, every) in logs.items():
        path = folder / f"s{seed}_{name.replace(' ', '_')}.csv"
        path.write_text(thinned(text, every), encoding="utf-8")
        results[name] = analysed(path, s)
    ref = results["full IMU 100 Hz"]
    truth = truth_time_left(ref, s)
    planted = {name for name, left in truth.items() if left > PLANTED_S}
    print(f"\nseed {seed}, GNSS {gnss_hz} Hz: the generator's ideal {tr.ideal_lap_time_s:.3f} s")
    for name, a in results.items():
        got = {lp.number: lp.time_s for lp in a.laps if lp.complete}
        lap_err = max(abs(got[n] - t) for n, t in enumerate(tr.lap_times_s, start=1))
        acc = a.vehicle
        smooth = f", a_x {_smoothing(a)}"
        first = {c.name for c in a.comparison.ranked()[: len(planted)]} == planted
        print(
            f"  {name:18s} ideal {a.ideal.lap_time_s:8.3f} s "
            f"({(a.ideal.lap_time_s / tr.ideal_lap_time_s - 1) * 100:+.2f} %), "
            f"lap times within {lap_err:.3f} s, planted first: {'yes' if first else 'no'}, "
            f"mu lat/brk/trac {acc.mu_lat:.3f}/"
            f"{acc.mu_brk:.3f}/{acc.mu_trac:.3f}{smooth}"
        )
    order = [c.name for c in ref.comparison.ranked()]
    print(f"  {'corner':8s} {'truth':>7s} " + " ".join(f"{n:>18s}" for n in results))
    for name in order:
        row = []
        for a in results.values():
            left = {c.name: c.time_left_s for c in a.comparison.corners}
            row.append(f"{left[name]:18.3f}" if name in left else f"{'-':>18s}")
        print(f"  {name:8s} {truth[name]:7.3f} " + " ".join(row))


def _smoothing(a) -> str:
    """How the a_x of the fit was smoothed: the derived a_x's window, or logged."""
    for w in a.warnings:
        text = str(w)
        if "smoothed by about" in text:
            return "smoothed over " + text.split("smoothed by about ")[1].split(",")[0]
    return "logged"


def main(seeds) -> None:
    """Print the tables for each seed at 10 and 25 Hz GNSS."""
    with tempfile.TemporaryDirectory() as tmp:
        for seed in seeds:
            for hz in (10, 25):
                one_rate(Path(tmp), seed, hz)


if __name__ == "__main__":
    main([int(a) for a in sys.argv[1:]] or [3])
