"""How the ideal lap and each corner's time left move as a log's rate drops.

Two sessions, each analysed as logged (100 Hz rows, 10 Hz GNSS) and thinned to 50, 20,
10 and 5 Hz (every n-th row, every channel kept: at 5 Hz the GNSS fixes fall to 5 Hz as
well), through ``pipeline.analyse`` with the envelope fitted from the log:

- the bundled demo session (``demo_tracks/tarrowby_dry.csv.gz``, its track file);
- a generated session (``synth.generate_session``, two flying laps, seed 5, no lap-to-lap
  variation, its gate), whose truth (the generator's ideal lap) is printed beside it.

For each rate: the ideal lap, its difference from the 100 Hz ideal, the analysed lap's
time, and the time left in the corners that rank highest at 100 Hz. The target is the
ideal within 0.5 % of the 100 Hz result down to 10 Hz.

A third table: a 200 Hz IMU with 5 Hz GNSS, with and without a 3 s GNSS dropout through
the fastest corner (T3, 226 km/h), analysed with the true car (so the line alone is
measured): the ideal against the generator's, and the ideal's minimum speed in T3.

Run: ``python benchmarks/rates.py`` (about half a minute).
"""

from __future__ import annotations

import gzip
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from limitlap import formatting, laps, pipeline, synth  # noqa: E402
from limitlap.resources import bundled_path  # noqa: E402
from limitlap.units import KMH_TO_M_S  # noqa: E402

RATES_HZ = (100, 50, 20, 10, 5)
TOP = 4


def thinned(text: str, every: int) -> str:
    """The CSV text with the header and every ``every``-th row (the first row kept)."""
    lines = text.splitlines()
    return "\n".join([lines[0], *lines[1::every]]) + "\n"


def rate_table(title: str, text: str, folder: Path, truth_s: float | None, **kwargs) -> None:
    """Analyse ``text`` at each rate of RATES_HZ and print one row per rate."""
    print(f"\n{title}")
    rows, ref, top = [], None, None
    for hz in RATES_HZ:
        path = folder / f"{title.split()[0].lower()}_{hz}.csv"
        path.write_text(thinned(text, 100 // hz), encoding="utf-8")
        a = pipeline.analyse(path, **kwargs)
        c = a.comparison
        if ref is None:
            ref = c.ideal_lap_time_s
            top = [k.name for k in c.ranked()[:TOP]]
        left = {k.name: k.time_left_s for k in c.corners}
        rows.append((hz, c.ideal_lap_time_s, c.lap_time_s, [left.get(n, np.nan) for n in top]))
    head = f"{'rate':>6} {'ideal':>9} {'vs 100 Hz':>9} {'lap':>9} " + " ".join(
        f"{n:>6}" for n in top
    )
    print(head + (f"   (truth: ideal {formatting.lap_time(truth_s)})" if truth_s else ""))
    for hz, ideal, lap, left in rows:
        print(
            f"{hz:>4} Hz {formatting.lap_time(ideal):>9} {100 * (ideal / ref - 1):>+8.2f}% "
            f"{formatting.lap_time(lap):>9} " + " ".join(f"{x:>6.2f}" for x in left)
        )


def dropout_table(folder: Path) -> None:
    """200 Hz IMU, 5 Hz GNSS, with and without a 3 s dropout through T3 (true car)."""
    print("\n200 Hz IMU, 5 Hz GNSS, the true car given (the line alone)")
    kw = {"n_laps": 2, "lap_variation": 0.0, "sample_rate_hz": 200.0, "gps_rate_hz": 5.0}
    base = synth.generate_session(**kw, seed=5)
    apex_t = float(base.truth.gate_times_s[0]) + 21.06  # T3's apex on lap 1 (generator)
    print(f"{'dropout':>8} {'ideal':>9} {'truth':>9} {'diff':>7} {'T3 min ideal':>13} {'truth':>6}")
    for gap in (0.0, 3.0):
        s = synth.generate_session(
            **kw, seed=5, gps_dropouts=((apex_t - gap / 2, gap),) if gap else ()
        )
        path = folder / f"imu200_{gap:g}.csv"
        path.write_text(synth.session_csv_text(s), encoding="utf-8")
        tr = s.truth
        a = pipeline.analyse(
            path, vehicle=tr.vehicle, gate=laps.Gate.geodetic(*tr.gate_latlon), lap=1
        )
        line = a.driven.line
        s_true = line.distance_m * tr.line.length_m / line.length_m
        t3 = (s_true > 900.0) & (s_true < 1250.0)
        v_true = np.interp(s_true, tr.line.distance_m, tr.ideal_profile.speed_m_s)
        print(
            f"{gap:>6.1f} s {formatting.lap_time(a.ideal.lap_time_s):>9} "
            f"{formatting.lap_time(tr.ideal_lap_time_s):>9} "
            f"{100 * (a.ideal.lap_time_s / tr.ideal_lap_time_s - 1):>+6.2f}% "
            f"{a.ideal.speed_m_s[t3].min() / KMH_TO_M_S:>9.1f} km/h "
            f"{v_true[t3].min() / KMH_TO_M_S:>6.1f}"
        )


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        demo = gzip.decompress(bundled_path("demo_tracks", "tarrowby_dry.csv.gz").read_bytes())
        track = bundled_path("demo_tracks", "tarrowby_heath.toml")
        rate_table(
            "Demo session (bundled, 7 flying laps), its track file",
            demo.decode("utf-8"),
            folder,
            None,
            track=track,
        )
        s = synth.generate_session(n_laps=2, lap_variation=0.0, seed=5)
        rate_table(
            "Generated session (2 flying laps, seed 5), its gate",
            synth.session_csv_text(s),
            folder,
            s.truth.ideal_lap_time_s,
            gate=laps.Gate.geodetic(*s.truth.gate_latlon),
        )
        dropout_table(folder)


if __name__ == "__main__":
    main()
