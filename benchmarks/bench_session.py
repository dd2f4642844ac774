"""What the table of every lap and the bands add to ``analyse`` on a one-hour log.

Generates (seeded, :func:`limitlap.synth.generate_session`) the one-hour 100 Hz session of
bench_pipeline.py and times, in one process after a warm-up, three runs in turn (so each
sees the same machine), each ``pipeline.analyse`` + ``outputs.write_outputs(figures=False)``:

- ``without``: no table of every lap, no bands (``every_lap=False``);
- ``table``: with the table of every lap (``intervals=False``);
- ``bands``: with the table and the bands (the default).

and prints the medians and the shares each adds, against the targets: the table at most
20 % more than ``without``, the bands at most 50 % more than ``table``. The shares are
also given against ``without`` for the bands.

This 2-core machine is shared, and whole runs drift by a third from one to the next; so
the default runs are also timed inside: the time the table and the bands take at the end
of ``analyse`` (``pipeline._LapsBeside.finish``, which waits for the work done beside
the comparison in a second thread) against the rest of the same run, a share that the
machine's drift moves far less.

Run: ``python benchmarks/bench_session.py [--repeats N] [--rate HZ] [--keep FILE]``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

CONFIGS = {
    "without": {"every_lap": False},
    "table": {"intervals": False},
    "bands": {},
}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=9, help="runs of each configuration")
    parser.add_argument("--rate", type=float, default=100.0, help="rows per second [Hz]")
    parser.add_argument("--keep", type=Path, help="write the generated log here and keep it")
    args = parser.parse_args()

    from limitlap import bands, outputs, pipeline, synth
    from limitlap.resources import bundled_path

    with tempfile.TemporaryDirectory(prefix="bench-session-") as tmp:
        session = synth.generate_session(duration_s=3600.0, seed=6, sample_rate_hz=args.rate)
        path = args.keep or Path(tmp) / "hour.csv"
        path.write_text(synth.session_csv_text(session), encoding="utf-8")
        out = Path(tmp) / "out"
        warm = pipeline.analyse(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"))
        outputs.write_outputs(warm, out, figures=False)
        times = {name: [] for name in CONFIGS}
        inner = {"finish": [], "bands": []}
        finish, bands_part = pipeline._LapsBeside.finish, pipeline._LapsBeside._bands

        def timed(store, method):
            def run(self, *a, **k):
                t0 = time.perf_counter()
                try:
                    return method(self, *a, **k)
                finally:
                    store.append(time.perf_counter() - t0)

            return run

        for _ in range(args.repeats):
            for name, options in CONFIGS.items():
                if name == "bands":
                    pipeline._LapsBeside.finish = timed(inner["finish"], finish)
                    pipeline._LapsBeside._bands = timed(inner["bands"], bands_part)
                t0 = time.perf_counter()
                analysis = pipeline.analyse(path, **options)
                outputs.write_outputs(analysis, out, figures=False)
                times[name].append(time.perf_counter() - t0)
                pipeline._LapsBeside.finish, pipeline._LapsBeside._bands = finish, bands_part
        med = {name: statistics.median(t) for name, t in times.items()}
        low = {name: min(t) for name, t in times.items()}
        b = analysis.bands
        print(
            f"one-hour session at {args.rate:g} Hz: {session.time_s.shape[0]:,} rows, "
            f"{sum(r.timed for r in analysis.session.laps)} laps timed gate to gate; bands "
            f"from {b.n_resamples} resamples over {b.n_laps} flying laps and "
            f"{1 + min(bands.LINE_LAPS, b.n_laps - 1)} rebuilt lines\n"
        )
        print(f"{'run':<10}{'median [s]':>11}{'fastest [s]':>12}{'runs':>6}")
        for name in CONFIGS:
            print(f"{name:<10}{med[name]:>11.3f}{low[name]:>12.3f}{len(times[name]):>6}")

        def share(a, b, of):
            return of[a] / of[b] - 1.0

        print("\ntargets (medians; fastest runs in brackets):")
        rows = [
            ("table of every lap <= +20 % of analyse", "table", "without", 0.20),
            ("bands <= +50 % of analyse with the table", "bands", "table", 0.50),
            ("  bands against analyse without the table", "bands", "without", None),
        ]
        for label, a, b_, limit in rows:
            got = share(a, b_, med)
            verdict = "" if limit is None else ("  met" if got <= limit else "  NOT met")
            print(f"  {label:<44}{got:>+7.0%} ({share(a, b_, low):+.0%}){verdict}")
        # inside the default runs: the table and the bands against the rest of each run
        t_table, t_bands = [], []
        for run, fin, bnd in zip(times["bands"], inner["finish"], inner["bands"], strict=True):
            t_table.append((fin - bnd) / (run - fin))
            t_bands.append(bnd / (run - fin + (fin - bnd)))
        print("\ninside each default run (median of the runs' shares; see the module text):")
        for label, values, limit in (
            ("table of every lap against the rest of the run", t_table, 0.20),
            ("bands against the rest of the run with the table", t_bands, 0.50),
        ):
            got = statistics.median(values)
            print(f"  {label:<50}{got:>+7.0%}  {'met' if got <= limit else 'NOT met'}")


if __name__ == "__main__":
    main()
