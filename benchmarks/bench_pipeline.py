"""Session-scale speed: a one-hour 100 Hz log through the whole analyse path.

Generates (seeded, with :func:`limitlap.synth.generate_session`) a one-hour session at
100 Hz on the demo circuit (about 40 laps, about 350,000 rows) into a temporary folder and
times, each in a fresh subprocess, as the median of several repeats after a warm-up on
the small bundled demo log (numba cache loaded, lazy imports done):

- ``parse``: polars ``read_csv`` of the same file alone -- the yardstick, which is also
  timed in every measurement's own process just before each run (the ratios use that);
- ``read_log``: limitlap's reader (parse, units, ENU), for information;
- ``analyse``: ``pipeline.analyse`` + ``outputs.write_outputs(figures=False)``;
- ``analyse+report``: the same with the PNG pictures (``figures=True``);
- ``page``: writing report.html alone (the report's view of the analysis, the figures'
  specifications and data, the page with the inlined plotly.js, written to disk): what
  the interactive page adds to ``analyse --no-figures`` (target: at most 0.3 s). The page
  of the one-hour log is then opened in headless Chromium (selenium and chromedriver,
  when installed): its size (target: under 5 MB) and the time from opening it to the
  first screen drawn and answering clicks, and to every figure drawn (target: within 1 s);
- ``targets``: corners and target tables for dry, damp and wet on the analysed line;
- ``sweep``: 1,000 grip scales on that line (``solve.lap_times_for_scales``).

Memory, per measurement: the peak resident set (``VmHWM``, reset through Linux's
``/proc/self/clear_refs`` just before the run) above the resident set the process had
after imports and the warm-up, for one run; and
the ``tracemalloc`` peak of a separate run (numpy and Python allocations; polars' own
buffers are not traced). Both as a ratio to the file's size.

Then the time ``read_log`` takes to refuse a log whose header line is 10 MB of commas
(target: well under a second; 7-10 s when the header was split field by field), the cold
start of the command line (fresh processes, numba cache warm) and an
``-X importtime`` check that matplotlib is imported only by commands that draw figures.

Run: ``python benchmarks/bench_pipeline.py [--repeats N] [--rate HZ] [--only NAME ...]``.
Targets: analyse without figures <= 3x the parse time, with the report <= 6x,
sweep < 1 s, peak memory < 10x the file size, cold start < 1.5 s. The one-hour 200 Hz log adds the
one-hour log at ``--rate 200`` (about 700,000 rows; run it with
``--only parse read_log analyse``): analyse <= 3x the parse time and its peak memory
<= 4x the file's size, and ``read_log`` on the plain 100 Hz file no more than 10 %
slower than before the new file layouts were recognised.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

MEASURES = ("parse", "read_log", "analyse", "analyse+report", "page", "targets", "sweep")
CONDITIONS = ("dry", "damp", "wet")


def _status_bytes(key: str) -> int:
    """A line of /proc/self/status (``VmRSS``, ``VmHWM``) in bytes (Linux)."""
    with open("/proc/self/status", encoding="ascii") as fh:
        for row in fh:
            if row.startswith(key + ":"):
                return int(row.split()[1]) * 1024  # the file gives kB
    raise RuntimeError(f"no {key} in /proc/self/status")


def _reset_peak_rss() -> int:
    """Reset the peak resident set to the current one (Linux clear_refs 5); return it."""
    with open("/proc/self/clear_refs", "w", encoding="ascii") as fh:
        fh.write("5")
    return _status_bytes("VmRSS")


def _child(name: str, path: str, repeats: int) -> None:
    """One measurement in this (fresh) process; prints a JSON line."""
    import tracemalloc

    import numpy as np
    import polars as pl

    from limitlap import corners as corners_mod
    from limitlap import logfile, outputs, pipeline, solve
    from limitlap import targets as targets_mod
    from limitlap.resources import bundled_path

    scratch = tempfile.TemporaryDirectory(prefix="bench-out-")  # removed on exit
    out_dir = scratch.name
    figures = name == "analyse+report"
    demo = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    warm = pipeline.analyse(demo)  # numba cache, lazy imports
    outputs.write_outputs(warm, out_dir, figures=figures)
    scales = np.linspace(0.2, 2.0, 1000)

    setup = None
    page = Path(path + ".report.html")
    if name == "page":
        from limitlap import atomic, report

        analysed = pipeline.analyse(path)
        atomic.write_atomic(page, report.report_html(outputs.report_view(analysed)))
    if name in ("targets", "sweep"):
        a = pipeline.analyse(path)
        setup = (a.driven.line, a.vehicle)
        targets_mod.target_tables(setup[0], setup[1], list(CONDITIONS))
        solve.lap_times_for_scales(setup[0], setup[1], scales[:3])

    def run():
        if name == "parse":
            pl.read_csv(path)
        elif name == "read_log":
            logfile.read_log(path)
        elif name in ("analyse", "analyse+report"):
            a = pipeline.analyse(path)
            outputs.write_outputs(a, out_dir, figures=figures)
        elif name == "page":
            atomic.write_atomic(page, report.report_html(outputs.report_view(analysed)))
        elif name == "targets":
            corners = corners_mod.find_corners(setup[0])
            targets_mod.target_tables(setup[0], setup[1], list(CONDITIONS), corners)
        elif name == "sweep":
            solve.lap_times_for_scales(setup[0], setup[1], scales)

    base_rss = _reset_peak_rss()  # the warm-up's own peak (numba, imports) not counted
    run()  # one run alone for the peak resident set (the yardstick's buffers not in it)
    rss = max(0, _status_bytes("VmHWM") - base_rss)
    times, yard = [], []
    for _ in range(repeats):  # the yardstick beside each run, so both see the same machine
        t0 = time.perf_counter()
        pl.read_csv(path)
        t1 = time.perf_counter()
        run()
        yard.append(t1 - t0)
        times.append(time.perf_counter() - t1)
    tracemalloc.start()
    run()
    traced = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(json.dumps({"name": name, "times": times, "yard": yard, "rss": rss, "traced": traced}))
    scratch.cleanup()


def _measure(name: str, path: Path, repeats: int) -> dict:
    cmd = [sys.executable, __file__, "--child", name, str(path), "--repeats", str(repeats)]
    done = subprocess.run(cmd, check=True, capture_output=True, text=True, cwd=ROOT)
    return json.loads(done.stdout.strip().splitlines()[-1])


def _in_browser(page: Path, n: int = 5):
    """(median ms to the first screen answering, median ms to every figure drawn) in
    headless Chromium, from navigation start (``performance.now()``); None without a
    browser and its driver."""
    import shutil

    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.options import Options
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        return None
    browser, driver = shutil.which("chromium"), shutil.which("chromedriver")
    if browser is None or driver is None:
        return None
    opts = Options()
    opts.binary_location = browser
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1280,1000"):
        opts.add_argument(arg)
    d = webdriver.Chrome(service=Service(driver), options=opts)
    ready, drawn = [], []
    try:
        for _ in range(n):
            d.get(page.as_uri())
            t_end = time.monotonic() + 60
            got = None
            while time.monotonic() < t_end:
                got = d.execute_script(
                    "return [document.body.getAttribute('data-ready'),"
                    " document.body.getAttribute('data-drawn')]"
                )
                if got[1]:
                    break
                time.sleep(0.02)
            ready.append(float(got[0]))
            drawn.append(float(got[1]))
    finally:
        d.quit()
    return statistics.median(ready), statistics.median(drawn)


def _page_targets(results: dict, path: Path) -> None:
    """The page's figures: the time it adds, its size, and how soon it answers in a browser."""
    if "page" not in results:
        return
    t_page = statistics.median(results["page"]["times"])
    print("\nthe report page (one-hour log):")
    print(f"  {'writing report.html adds <= 0.3 s':<44}{t_page:>8.3f} s  {_met(t_page <= 0.3)}")
    if "analyse" in results:
        t_an = statistics.median(results["analyse"]["times"])
        print(f"  {'  of analyse --no-figures (page included)':<44}{t_an:>8.3f} s")
    page = Path(str(path) + ".report.html")
    size = page.stat().st_size / 1e6
    print(f"  {'page size < 5 MB':<44}{size:>8.2f} MB {_met(size < 5.0)}")
    timing = _in_browser(page)
    if timing is None:
        print("  in a browser: not measured (needs selenium, chromium and chromedriver)")
        return
    ready, drawn = timing
    print(
        f"  {'first screen drawn, answering (headless)':<44}{ready / 1000:>8.2f} s  {_met(ready <= 1000)}"
    )
    print(f"  {'every figure drawn (headless)':<44}{drawn / 1000:>8.2f} s  {_met(drawn <= 1000)}")


def _cold(cmd: list[str], n: int = 5) -> float:
    subprocess.run(cmd, check=True, capture_output=True, cwd=ROOT)  # prime the numba cache
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        subprocess.run(cmd, check=True, capture_output=True, cwd=ROOT)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _imports(cmd: list[str]) -> set[str]:
    """Top-level packages a command imports (from ``-X importtime``)."""
    full = [sys.executable, "-X", "importtime", *cmd[1:]]
    done = subprocess.run(full, capture_output=True, text=True, cwd=ROOT)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed: {done.stderr[-500:]}")
    names = set()
    for row in done.stderr.splitlines():
        if row.startswith("import time:") and "|" in row:
            names.add(row.rsplit("|", 1)[1].strip().split(".")[0])
    return names


def _hostile_header_s(folder: Path) -> float:
    """Seconds :func:`limitlap.logfile.read_log` takes to refuse a 10 MB header line."""
    from limitlap import logfile
    from limitlap.errors import InputError
    from limitlap.resources import bundled_path

    path = folder / "wide.csv"
    path.write_text("," * 10_000_000 + "\n0\n", encoding="utf-8")
    logfile.read_log(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"))  # imports first
    t0 = time.perf_counter()
    try:
        logfile.read_log(path)
    except InputError:
        pass
    else:
        raise RuntimeError("a 10 MB header line was read")
    return time.perf_counter() - t0


def _subset_targets(results: dict, size: int) -> None:
    """The targets of a run limited by ``--only`` (the one-hour 200 Hz log)."""
    if "analyse" not in results:
        return
    r = results["analyse"]
    ratio = statistics.median(r["times"]) / statistics.median(r["yard"])
    peak = max(r["rss"], r["traced"]) / size
    print("\ntargets (one-hour log at this rate):")
    print(f"  {'analyse without figures <= 3x parse':<40}{ratio:>8.2f}x  {_met(ratio <= 3.0)}")
    print(f"  {'peak memory of analyse <= 4x the file':<40}{peak:>8.2f}x  {_met(peak <= 4.0)}")


def _met(ok: bool) -> str:
    return "met" if ok else "NOT met"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--child", nargs=2, metavar=("NAME", "FILE"), help=argparse.SUPPRESS)
    parser.add_argument("--repeats", type=int, default=5, help="repeats per measurement")
    parser.add_argument("--keep", type=Path, help="write the generated log here and keep it")
    parser.add_argument("--rate", type=float, default=100.0, help="rows per second [Hz]")
    parser.add_argument(
        "--only", nargs="+", choices=MEASURES, help="these measurements only (parse always)"
    )
    args = parser.parse_args()
    if args.child:
        _child(args.child[0], args.child[1], args.repeats)
        return

    from limitlap import synth
    from limitlap.resources import bundled_path

    with tempfile.TemporaryDirectory(prefix="bench-pipeline-") as tmp:
        t0 = time.perf_counter()
        session = synth.generate_session(duration_s=3600.0, seed=6, sample_rate_hz=args.rate)
        path = args.keep or Path(tmp) / "hour.csv"
        path.write_text(synth.session_csv_text(session), encoding="utf-8")
        size = os.path.getsize(path)
        print(
            f"one-hour session at {args.rate:g} Hz: {session.time_s.shape[0]:,} rows, "
            f"{len(session.truth.lap_times_s)} complete laps, {size / 1e6:.1f} MB "
            f"(generated in {time.perf_counter() - t0:.1f} s)\n"
        )
        results = {}
        measures = MEASURES if not args.only else ("parse", *(m for m in args.only if m != "parse"))
        for name in measures:
            # the report with figures is the slowest: fewer repeats
            n = max(3, args.repeats // 2) if name == "analyse+report" else args.repeats
            results[name] = _measure(name, path, n)

        alone = statistics.median(results["parse"]["times"])
        print(
            f"{'measurement':<16}{'median [s]':>11}{'parse [s]':>10}{'runs':>6}{'x parse':>9}"
            f"{'x alone':>9}{'peak RSS [MB]':>15}{'x file':>8}{'traced [MB]':>13}{'x file':>8}"
        )
        for name in measures:
            r = results[name]
            t = statistics.median(r["times"])
            yard = statistics.median(r["yard"])
            print(
                f"{name:<16}{t:>11.3f}{yard:>10.3f}{len(r['times']):>6}{t / yard:>9.2f}"
                f"{t / alone:>9.2f}"
                f"{r['rss'] / 1e6:>15.1f}{r['rss'] / size:>8.2f}"
                f"{r['traced'] / 1e6:>13.1f}{r['traced'] / size:>8.2f}"
            )
        print(
            "parse: the yardstick, polars' read_csv of the file, timed in the same process "
            "just before each run; x parse = median / that median; x alone = median / the\n"
            "parse row's median (the parser in a process doing nothing else, at another moment;\n"
            "this 2-core machine's speed drifts by up to a third, so both are given).\n"
            "peak RSS: peak resident set of one run above the process after imports and warm-up; "
            "traced: tracemalloc peak (numpy/Python, not polars' buffers)"
        )

        _page_targets(results, path)
        if args.only:
            _subset_targets(results, size)
            return
        wide = _hostile_header_s(Path(tmp))
        print(f"\na 10 MB header line refused by read_log in {wide * 1000:.0f} ms")

        line = str(bundled_path("demo_tracks", "example_loop_line.csv"))
        car = str(bundled_path("vehicles", "gt_coupe.toml"))
        solve_cmd = [sys.executable, "-m", "limitlap", "solve", line, "--vehicle", car, "--json"]
        help_cmd = [sys.executable, "-m", "limitlap", "--help"]
        print("\ncold start (median of 5 fresh processes, numba cache warm):")
        print(f"  limitlap --help         {_cold(help_cmd):.2f} s")
        cold_solve = _cold(solve_cmd)
        print(f"  limitlap solve --json   {cold_solve:.2f} s")

        demo = str(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"))
        out = str(Path(tmp) / "imports-out")
        checks = [
            ("--help", help_cmd, False),
            ("solve --json", solve_cmd, False),
            (
                "analyse --no-figures",
                [
                    sys.executable,
                    "-m",
                    "limitlap",
                    "analyse",
                    demo,
                    "--out",
                    out,
                    "--no-figures",
                    "--quiet",
                ],
                False,
            ),
            (
                "analyse (figures)",
                [sys.executable, "-m", "limitlap", "analyse", demo, "--out", out, "--quiet"],
                True,
            ),
        ]
        print("\nmatplotlib imported (-X importtime):")
        for label, cmd, expected in checks:
            got = "matplotlib" in _imports(cmd)
            verdict = "ok" if got == expected else "UNEXPECTED"
            print(f"  {label:<22}{'yes' if got else 'no':>4}  ({verdict})")

        def ratio(name):
            r = results[name]
            return statistics.median(r["times"]) / statistics.median(r["yard"])

        def strict(name):
            return statistics.median(results[name]["times"]) / alone

        peak = max(max(r["rss"], r["traced"]) for r in results.values()) / size
        checks = [
            (
                "analyse without figures <= 3x parse",
                f"{ratio('analyse'):.2f}x",
                ratio("analyse") <= 3.0,
            ),
            (
                "  the same against the parse alone",
                f"{strict('analyse'):.2f}x",
                strict("analyse") <= 3.0,
            ),
            (
                "analyse with the report <= 6x parse",
                f"{ratio('analyse+report'):.2f}x",
                ratio("analyse+report") <= 6.0,
            ),
            (
                "  the same against the parse alone",
                f"{strict('analyse+report'):.2f}x",
                strict("analyse+report") <= 6.0,
            ),
            (
                "sweep of 1,000 scales < 1 s",
                f"{statistics.median(results['sweep']['times']):.2f} s",
                statistics.median(results["sweep"]["times"]) < 1.0,
            ),
            ("peak memory < 10x the file", f"{peak:.2f}x", peak < 10.0),
            ("cold start of solve --json < 1.5 s", f"{cold_solve:.2f} s", cold_solve < 1.5),
            ("10 MB header refused in < 0.1 s", f"{wide:.3f} s", wide < 0.1),
        ]
        print("\ntargets:")
        for what, got, ok in checks:
            print(f"  {what:<40}{got:>9}  {'met' if ok else 'NOT met'}")


if __name__ == "__main__":
    main()
