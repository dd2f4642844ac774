"""Command line: parse options, call the pipeline, print. No physics here.

Heavy modules (matplotlib, the pipeline) are imported inside the commands that need
them, so ``limitlap solve`` starts fast.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING

import typer

try:  # typer >= 0.29 carries its own copy of click
    from typer._click.exceptions import ClickException
except ImportError:  # older typer uses click itself
    from click.exceptions import ClickException

from limitlap.errors import (
    ArgumentError,
    ExtraNeeded,
    InputError,
    LimitlapError,
    UnitMismatch,
    WarningLine,
)

if TYPE_CHECKING:
    from limitlap.targets import TargetCondition

Abort = typer.Abort

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    help="limitlap: how much lap time the driver's own demonstrated grip still allows.",
)


@app.callback()
def _root() -> None:
    """limitlap: how much lap time the driver's own demonstrated grip still allows."""


#: The command line's option for each parameter a message may name.
_OPTIONS = {"gate": "--gate", "grip_scale": "--grip", "scheduler": "--scheduler"}

#: How the command line words the advice of each hint kind (``errors.WarningLine``).
_ADVICE = {
    "gate": " (give --gate LAT,LON for lap times from the real line)",
    "grip_scale": "; analyse with --grip {value:.2f} for the ideal at the grip found",
    "check_units": "; fix the unit (header or --channels map), or give --accept-units to go on",
}


def worded(said) -> str:
    """A warning or error of the library as the terminal and the files say it.

    The library names a parameter as the Python call spells it and keeps advice as a hint
    kind (:mod:`limitlap.errors`); here they get the command line's option names.

    Parameters
    ----------
    said : str or LimitlapError
        A warning line or an error. [-]

    Returns
    -------
    str
        The line without its ``limitlap: warning:`` / ``error:`` prefix. [-]
    """
    if isinstance(said, ExtraNeeded):
        option = _OPTIONS.get(said.argument, said.argument)
        return f"a {option} needs {said.library}: pip install 'limitlap[{said.extra}]'"
    if isinstance(said, UnitMismatch):
        return f"{said.path}: {said.fact}{_ADVICE[said.hint]}"
    if isinstance(said, ArgumentError):
        return f"{_OPTIONS.get(said.argument, said.argument)}: {said.problem}"
    if isinstance(said, WarningLine) and said.hint is not None:
        return said.fact + _ADVICE[said.hint].format(value=said.value)
    return str(said)


def _warn(warnings) -> None:
    """The warnings on stderr, one line each."""
    for w in warnings:
        typer.echo(f"limitlap: warning: {worded(w)}", err=True)


def _grip(value: str | None, default: float = 1.0) -> float:
    from limitlap.vehicle import check_grip_scale

    if value is None:
        return default
    try:
        return check_grip_scale(value)
    except LimitlapError as err:  # name the option, as a file's message names the file
        raise InputError("--grip", str(err)) from None


def _kmh(v_m_s: float) -> float:
    from limitlap.units import KMH_TO_M_S

    return v_m_s / KMH_TO_M_S


def _units_option():
    return typer.Option(
        "metric",
        "--units",
        help="How speeds and distances are shown: metric (km/h, m) or imperial (mph, ft). "
        "JSON and the files for programs keep their documented units.",
    )


def _units(value: str):
    from limitlap.formatting import units_named

    try:
        return units_named(value)
    except ValueError as err:
        raise InputError("--units", str(err)) from None


@app.command()
def solve(
    line: Path = typer.Argument(
        ..., help="Line file: 'x [m], y [m]' or 'distance [m], curvature [1/m]'."
    ),
    vehicle: Path = typer.Option(..., "--vehicle", help="Vehicle TOML file with a [grip] table."),
    grip: str = typer.Option(None, "--grip", help="Grip scale k, 0.2-2.0 (wet < 1)."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON on stdout."),
    out: Path = typer.Option(None, "--out", help="Write the speed profile as CSV here."),
    units: str = _units_option(),
) -> None:
    """Ideal speed profile and lap time on a given line."""
    from limitlap import ingest
    from limitlap import solve as solver

    _settle_imports()
    k = _grip(grip)
    shown = _units(units)
    car = ingest.read_vehicle(vehicle)
    the_line = ingest.read_line(line)
    profile = solver.solve_profile(the_line, car, k)
    if out is not None:
        from limitlap import atomic, outputs

        atomic.write_atomic(out, outputs.solve_profile_csv_text(profile, the_line))
    result = {
        "lap_time_s": round(profile.lap_time_s, 3),
        "min_speed_kmh": round(_kmh(float(profile.speed_m_s.min())), 2),
        "max_speed_kmh": round(_kmh(float(profile.speed_m_s.max())), 2),
    }
    if as_json:
        typer.echo(json.dumps(result))
        return
    from limitlap.formatting import lap_time

    typer.echo(f"{car.name} on {line.name}, grip scale {k:g}")
    typer.echo(f"  lap time   {lap_time(profile.lap_time_s)}  ({profile.lap_time_s:.3f} s)")
    typer.echo(f"  min speed  {shown.speed_text(float(profile.speed_m_s.min()), '.1f')}")
    typer.echo(f"  max speed  {shown.speed_text(float(profile.speed_m_s.max()), '.1f')}")
    typer.echo(
        f"  length     {shown.distance_text(the_line.length_m, '.1f')}, {the_line.n} stations"
    )
    if out is not None:
        typer.echo(f"  profile    {out}")


class _Progress:
    """Terminal progress for long steps (tqdm on stderr); silent with --quiet."""

    def __init__(self, quiet: bool, desc: str):
        self.quiet = quiet
        self.desc = desc
        self.bar = None

    def __call__(self, done: int, total: int, step: str) -> None:
        if self.quiet:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(total=total, desc=self.desc, unit="step", leave=False, file=sys.stderr)
        elif total != self.bar.total:  # the next stage (the analysis, then the files)
            self.bar.reset(total=total)
        self.bar.set_postfix_str(step, refresh=False)
        self.bar.n = done
        self.bar.refresh()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def _corner_table(analysis, shown=None) -> str:
    """The ranked corner table and headline, for the terminal (speeds and distances in ``shown``)."""
    from limitlap.formatting import METRIC, hundredths, lap_time, number

    shown = shown or METRIC

    cmp_ = analysis.comparison
    lines = [
        f"lap {analysis.lap.number}: {lap_time(cmp_.lap_time_s)}   ideal "
        f"{lap_time(cmp_.ideal_lap_time_s)} at grip scale {analysis.grip_scale:g}   "
        f"time left {cmp_.time_left_s:.2f} s   grip estimate "
        + ("-" if analysis.grip_estimate is None else f"{analysis.grip_estimate:.2f}"),
        "",
        f"{'rank':>4}  {'corner':<7}{'time left':>10}{'min real':>10}{'min ideal':>10}"
        f"{'brake real':>11}{'brake ideal':>12}{'grip used':>10}",
        f"{'':>4}  {'':<7}{'[s]':>10}{f'[{shown.speed}]':>10}{f'[{shown.speed}]':>10}"
        f"{f'[{shown.distance}]':>11}{f'[{shown.distance}]':>12}{'[%]':>10}",
    ]

    def num(x, spec, scale=1.0):
        blank = "-".rjust(int(spec.split(".")[0]))
        return number(None if x is None else x * scale, spec, blank=blank)

    for c in cmp_.ranked():
        lines.append(
            f"{c.rank:>4}  {c.name:<7}{num(hundredths(c.time_left_s), '10.2f')}"
            f"{num(c.min_speed_actual_m_s, '10.1f', 1 / shown.m_s_per_speed)}"
            f"{num(c.min_speed_ideal_m_s, '10.1f', 1 / shown.m_s_per_speed)}"
            f"{num(c.brake_start_actual_m, '11.0f', 1 / shown.m_per_distance)}"
            f"{num(c.brake_start_ideal_m, '12.0f', 1 / shown.m_per_distance)}"
            f"{num(c.grip_used, '10.0f', 100.0)}"
        )
    lines.append("")
    lines += [_advice(c, shown) for c in cmp_.ranked()[:3] if c.advice]
    return "\n".join(lines)


def _advice(c, shown) -> str:
    """A corner's advice line in the units shown (the comparison words it in km/h and m)."""
    from limitlap.compare import advice_line
    from limitlap.formatting import METRIC

    if shown is METRIC:
        return c.advice
    return advice_line(
        c.name,
        c.time_left_s,
        c.brake_later_m,
        c.min_speed_ideal_m_s - c.min_speed_actual_m_s,
        c.full_drive_sooner_m,
        units=shown,
    )


def _gate_option():
    return typer.Option(None, "--gate", help="Start/finish gate point 'LAT,LON' (one argument).")


@app.command()
def laps(
    log: Path = typer.Argument(..., help="Session log (CSV, optionally .csv.gz)."),
    gate: str = _gate_option(),
    channels: Path = typer.Option(
        None, "--channels", help="Channel-map TOML for other column names."
    ),
    track: Path = typer.Option(None, "--track", help="Track TOML (gate, corner names)."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON on stdout."),
    units: str = _units_option(),
) -> None:
    """The laps of a log: number, time, distance, complete or why not."""
    from limitlap import laps as laps_mod
    from limitlap import pipeline

    _, found, _, warnings = pipeline.load_session(log, gate=gate, channels=channels, track=track)
    _warn(warnings)
    if as_json:
        typer.echo(json.dumps(laps_mod.laps_json(found)))
    else:
        typer.echo(format_laps_table(found, _units(units)))


def _settle_imports() -> None:
    """Keep the garbage collector from scanning the modules' objects again and again.

    The imports leave a few hundred thousand long-lived objects (numpy, scipy, numba,
    polars) that every full collection would walk; :func:`gc.freeze` (Python's
    documentation) moves them out of its generations for the rest of this short-lived
    process. Measured: ``limitlap analyse`` on a one-hour log 3.0 -> 2.4 s. :func:`main`
    hands them back (:func:`gc.unfreeze`) when the command ends, so a caller that runs
    commands in its own process (the tests) keeps a normal collector.
    """
    import gc

    gc.freeze()


def _analyse_one(
    log,
    vehicle,
    k,
    lap,
    gate,
    channels,
    track,
    out,
    quiet,
    figures=True,
    check_units=True,
    shown=None,
):
    """One log analysed and its files written; the warnings as :func:`worded` says them."""
    import dataclasses

    from limitlap import outputs, pipeline

    _settle_imports()

    bar = _Progress(quiet, log.name if hasattr(log, "name") else str(log))
    try:
        analysis = pipeline.analyse(
            log,
            vehicle=vehicle,
            grip_scale=k,
            lap=lap,
            gate=gate,
            channels=channels,
            track=track,
            progress=bar,
            check_units=check_units,
        )
        analysis = dataclasses.replace(analysis, warnings=[worded(w) for w in analysis.warnings])
        from limitlap.formatting import METRIC

        written = outputs.write_outputs(
            analysis, out, figures=figures, units=shown or METRIC, progress=bar
        )
    finally:
        bar.close()
    return analysis, written


def _analyse_batch(logs, out, quiet, scheduler, **options) -> None:
    """Several logs (or folders): one output folder each, a combined table, batch.csv."""
    from limitlap import atomic, batch, report

    found = batch.find_logs(logs)
    bar = _Progress(quiet, "logs")
    try:
        rows = batch.run_batch(
            found,
            out,
            scheduler=scheduler,
            on_done=lambda row, done, total: bar(done, total, Path(row.log).name),
            wording=worded,
            **options,
        )
    finally:
        bar.close()
    for row in rows:
        for w in row.warnings:  # each line names its log
            typer.echo(
                f"limitlap: warning: {w if w.startswith(row.log) else f'{row.log}: {w}'}", err=True
            )
    typer.echo(batch.format_batch_table(rows))
    table = atomic.write_atomic(Path(out) / "batch.csv", batch.batch_csv_text(rows))
    typer.echo(f"\nwritten to {out}/: one folder per log, {table.name}")
    typer.echo(report.SAFETY_CAUTION)
    if not all(row.ok for row in rows):
        raise SystemExit(1)


@app.command()
def analyse(
    log: list[Path] = typer.Argument(
        ..., help="Session log(s) (CSV, optionally .csv.gz), or folders of logs."
    ),
    vehicle: Path = typer.Option(
        None, "--vehicle", help="Vehicle TOML; without [grip] the envelope is fitted."
    ),
    grip: str = typer.Option(None, "--grip", help="Grip scale k for the ideal, 0.2-2.0."),
    lap: int = typer.Option(None, "--lap", help="Lap number; default the fastest complete lap."),
    gate: str = _gate_option(),
    channels: Path = typer.Option(
        None, "--channels", help="Channel-map TOML for other column names."
    ),
    track: Path = typer.Option(None, "--track", help="Track TOML (gate, corner names)."),
    out: Path = typer.Option(Path("limitlap-out"), "--out", help="Output folder."),
    no_figures: bool = typer.Option(
        False,
        "--no-figures",
        help="Skip the PNG pictures of the figures (report.html keeps its interactive figures).",
    ),
    quiet: bool = typer.Option(False, "--quiet", help="No progress display."),
    workers: int = typer.Option(
        None, "--workers", min=1, help="Several logs: worker processes (default one per core)."
    ),
    scheduler: str = typer.Option(
        None, "--scheduler", help="Several logs: Dask scheduler address (limitlap[dask])."
    ),
    accept_units: bool = typer.Option(
        False,
        "--accept-units",
        help="Go on when a channel disagrees with the GPS path (unit or sign); warn instead.",
    ),
    units: str = _units_option(),
) -> None:
    """The whole job on one log: laps, line, envelope, ideal lap, corner comparison, report.

    Several logs (or a folder) run in parallel, each into OUT/<log name>/, with a combined
    table in OUT/batch.csv; the exit status is 1 when any log failed.
    """
    from limitlap import report

    k = _grip(grip)
    shown = _units(units)
    if len(log) > 1 or log[0].is_dir() or scheduler is not None:
        _analyse_batch(
            log,
            out,
            quiet,
            scheduler,
            vehicle=vehicle,
            grip_scale=k,
            lap=lap,
            gate=gate,
            channels=channels,
            track=track,
            figures=not no_figures,
            workers=workers,
            check_units=not accept_units,
            units=shown.name,
        )
        return
    log = log[0]
    analysis, written = _analyse_one(
        log,
        vehicle,
        k,
        lap,
        gate,
        channels,
        track,
        out,
        quiet,
        not no_figures,
        not accept_units,
        shown,
    )
    _warn(analysis.warnings)
    typer.echo(_corner_table(analysis, shown))
    typer.echo(f"\nwritten to {out}/: " + ", ".join(sorted(Path(p).name for p in written.values())))
    typer.echo(report.SAFETY_CAUTION)


@app.command()
def targets(
    source: Path = typer.Argument(
        ..., help="Line file, or a log (its fastest complete lap's line)."
    ),
    vehicle: Path = typer.Option(
        ..., "--vehicle", help="Vehicle TOML with [grip], or a fitted envelope.toml."
    ),
    grip: list[str] = typer.Option(
        ..., "--grip", help="Grip scale 0.2-2.0 or dry/damp/wet; repeat for more."
    ),
    lap: int = typer.Option(None, "--lap", help="Lap of a log to take the line from."),
    gate: str = _gate_option(),
    channels: Path = typer.Option(None, "--channels", help="Channel-map TOML for a log."),
    track: Path = typer.Option(None, "--track", help="Track TOML (gate, corner names)."),
    out: Path = typer.Option(
        None, "--out", help="Also write CSV and printable sheets (PDF, PNG) here."
    ),
    as_json: bool = typer.Option(False, "--json", help="Print JSON on stdout."),
    units: str = _units_option(),
) -> None:
    """Target sheet per corner for one or more grip scales (dry, damp, wet)."""
    from limitlap import corners as corners_mod
    from limitlap import ingest, pipeline
    from limitlap import targets as targets_mod

    _settle_imports()
    shown = _units(units)
    car = pipeline.require_vehicle_with_grip(vehicle)
    for g in grip:  # check every scale before any work
        try:
            targets_mod.resolve_condition(g)
        except LimitlapError as err:
            raise InputError("--grip", str(err)) from None
    line, where = pipeline.line_from_source(
        source, lap=lap, gate=gate, channels=channels, track=track
    )
    trk = ingest.read_track(track) if track is not None else None
    names = list(trk.corner_names) if trk is not None and trk.corner_names else None
    apexes = list(trk.corner_apexes_m) if names else None
    corners = corners_mod.find_corners(
        line, names, apexes_m=apexes, apexes_from=trk.path if trk is not None else None
    )
    conditions = targets_mod.target_tables(line, car, grip, corners)
    if out is not None:
        from limitlap import sheets

        sheets.write_target_sheets(conditions, out, trk.name if trk else where, units=shown)
    if as_json:
        typer.echo(json.dumps(targets_mod.targets_json(conditions)))
        return
    typer.echo(f"{car.name} on {where}")
    for cond in conditions:
        typer.echo("")
        typer.echo(format_targets_table(cond, shown))
    if out is not None:
        typer.echo(f"\nsheets written to {out}/")


@app.command()
def demo(
    out: Path = typer.Option(Path("limitlap-demo"), "--out", help="Output folder."),
    quiet: bool = typer.Option(False, "--quiet", help="No progress display."),
    units: str = _units_option(),
) -> None:
    """The whole job on the bundled demo session: report, figures and target sheets."""
    from limitlap import atomic, sheets
    from limitlap import targets as targets_mod
    from limitlap.resources import bundled_path

    shown = _units(units)
    log = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    track = bundled_path("demo_tracks", "tarrowby_heath.toml")
    with atomic.output_set(out) as folder:  # the report and the sheets: one set
        analysis, _ = _analyse_one(
            log, None, 1.0, None, None, None, track, folder, quiet, shown=shown
        )
        conditions = targets_mod.target_tables(
            analysis.driven.line, analysis.vehicle, ["dry", "damp", "wet"], analysis.corners
        )
        sheets.write_target_sheets(
            conditions, folder, analysis.track_name or "demo circuit", units=shown
        )
    _warn(analysis.warnings)
    typer.echo(_corner_table(analysis, shown))
    for cond in conditions:
        typer.echo("")
        typer.echo(format_targets_table(cond, shown))
    typer.echo(f"\nreport: {Path(out) / 'report.html'}  (open it in a browser)")


def _warning_line(message, category, filename, lineno, file=None, line=None) -> None:
    """A warning that a library raised, as one line on stderr (no source line)."""
    text = " ".join(str(message).split())
    typer.echo(f"limitlap: warning: {category.__name__}: {text}", err=True)


def main() -> None:
    """Console entry point: a user error becomes one line on stderr.

    A warning raised by a library (numpy's RuntimeWarning and the like) is one line too,
    ``limitlap: warning: RuntimeWarning: ...``, without the source line Python would show.
    """
    import gc
    import warnings

    try:
        with warnings.catch_warnings():
            warnings.showwarning = _warning_line
            app(standalone_mode=False)
    except LimitlapError as err:
        typer.echo(f"limitlap: error: {worded(err)}", err=True)
        raise SystemExit(2) from None
    except Abort:
        typer.echo("limitlap: interrupted", err=True)
        raise SystemExit(130) from None
    except ClickException as err:
        # Usage errors (unknown option, missing argument): one line, not a usage box.
        typer.echo(f"limitlap: error: {err.format_message()}", err=True)
        raise SystemExit(2) from None
    except BrokenPipeError:
        sys.stderr.close()
        raise SystemExit(1) from None
    finally:
        gc.unfreeze()  # what a command froze (_settle_imports) is collectable again


def run() -> None:
    """The ``limitlap`` console script and ``python -m limitlap``: :func:`main`, then exit.

    Everything alive is frozen (:func:`gc.freeze`) on the way out, so the interpreter's
    final collection does not walk the whole heap once more: measured 0.25-0.43 s of a
    1.2-1.7 s ``limitlap solve``, 0.03-0.05 s with it. Files are written and closed by
    then, and the standard streams are flushed by the interpreter as usual.
    """
    import gc

    try:
        main()
    finally:
        gc.freeze()


def format_laps_table(laps, shown=None) -> str:
    """The lap table as text: number, time m:ss.sss, distance, complete or why not; the fastest marked."""
    lines = [f"{'lap':>4}  {'time':>9}  {'distance':>10}  status"]
    from limitlap.formatting import METRIC, lap_time
    from limitlap.laps import laps_table

    for rec in laps_table(laps):
        status = "complete" if rec["complete"] else f"not complete: {rec['reason']}"
        mark = "  <- fastest" if rec["fastest"] else ""
        lines.append(
            f"{rec['number']:>4}  {lap_time(rec['time_s']):>9}  "
            f"{(shown or METRIC).distance_text(rec['distance_m'], '.1f'):>10}  {status}{mark}"
        )
    return "\n".join(lines)


def _times(x, factor):
    """``x * factor``; None stays None (a corner without that point)."""
    return None if x is None else x * factor


def format_targets_table(condition: TargetCondition, shown=None) -> str:
    """The target table of one condition as fixed-width text for the terminal.

    Parameters
    ----------
    condition : TargetCondition
    shown : formatting.Units, optional
        How speeds and distances are shown; km/h and m by default.

    Returns
    -------
    str
        Heading, one row per corner (speeds, distances, s), and the caution.
    """
    from limitlap.formatting import METRIC, NO_POINT, lap_time, number
    from limitlap.targets import CAUTION

    shown = shown or METRIC
    k = 1.0 / shown.m_s_per_speed
    m = 1.0 / shown.m_per_distance
    name = f"{condition.label} " if condition.label else ""
    head = (
        f"Targets {name}(grip scale {condition.grip_scale:.2f}) — "
        f"ideal lap {lap_time(condition.lap_time_s)}"
    )
    d, v = shown.distance, shown.speed
    cols = (
        "corner",
        f"apex {d}",
        f"brake at {d}",
        f"before apex {d}",
        f"entry {v}",
        f"min {v}",
        f"exit {v}",
        "segment s",
    )
    rows = []
    for t in condition.corners:

        def f(x, nd=0):
            return number(x, f".{nd}f", blank=NO_POINT)

        rows.append(
            (
                t.name,
                f(_times(t.apex_m, m)),
                f(_times(t.brake_start_m, m)),
                f(_times(t.brake_before_apex_m, m)),
                f(t.entry_speed_m_s * k),
                f(t.min_speed_m_s * k),
                f(t.exit_speed_m_s * k),
                f(t.segment_time_s, 2),
            )
        )
    widths = [
        max(len(cols[i]), *(len(r[i]) for r in rows)) if rows else len(cols[i])
        for i in range(len(cols))
    ]
    lines = [head, ""]
    lines.append(
        "  ".join(
            c.ljust(w) if i == 0 else c.rjust(w)
            for i, (c, w) in enumerate(zip(cols, widths, strict=True))
        )
    )
    for r in rows:
        lines.append(
            "  ".join(
                c.ljust(w) if i == 0 else c.rjust(w)
                for i, (c, w) in enumerate(zip(r, widths, strict=True))
            )
        )
    lines += ["", CAUTION]
    return "\n".join(lines)
