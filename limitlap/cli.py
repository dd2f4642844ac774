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


def _layout(note: str | None) -> None:
    """The reader's one line on a log's layout, when it is not the plain form, on stderr."""
    if note:
        typer.echo(f"limitlap: {note}", err=True)


def _condition(value: str) -> float:
    """One ``--grip`` value, ``dry``/``damp``/``wet`` or a number, as its grip scale. [-]."""
    from limitlap.conditions import resolve_condition

    try:
        return resolve_condition(value)[1]
    except LimitlapError as err:  # name the option, as a file's message names the file
        raise InputError("--grip", str(err)) from None


def _grip_scale(value: str | None) -> float | None:
    """``--grip`` of a command that takes one: checked while the options are parsed. [-]."""
    return None if value is None else _condition(value)


def _grip_list(values: list[str] | None) -> list[str] | None:
    """``--grip`` repeated: every value checked while the options are parsed, kept as given."""
    for value in values or []:
        _condition(value)
    return values


#: Help of every ``--grip``.
_GRIP_HELP = "Grip scale: dry (1.0), damp (0.85), wet (0.70) or a number 0.2-2.0."


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
    grip: str = typer.Option(None, "--grip", help=_GRIP_HELP, callback=_grip_scale),
    as_json: bool = typer.Option(False, "--json", help="Print JSON on stdout."),
    out: Path = typer.Option(None, "--out", help="Write the speed profile as CSV here."),
    units: str = _units_option(),
) -> None:
    """Ideal speed profile and lap time on a given line."""
    import numpy as np

    from limitlap import ingest
    from limitlap import solve as solver

    _settle_imports()
    k = 1.0 if grip is None else float(grip)
    shown = _units(units)
    car = ingest.read_vehicle(vehicle)
    the_line = ingest.read_line(line)
    _warn(the_line.meta.get("warnings", ()))
    profile = solver.solve_profile(the_line, car, k)
    if out is not None:
        from limitlap import atomic, outputs

        atomic.write_atomic(out, outputs.solve_profile_csv_text(profile, the_line))
    i_min = int(np.argmin(profile.speed_m_s))
    result = {
        "lap_time_s": round(profile.lap_time_s, 3),
        "min_speed_kmh": round(_kmh(float(profile.speed_m_s[i_min])), 2),
        "max_speed_kmh": round(_kmh(float(profile.speed_m_s.max())), 2),
        "min_speed_at_m": round(float(profile.distance_m[i_min]), 1),
        "grip_scale": k,
    }
    if out is not None:
        result["profile_csv"] = str(out)
    if as_json:
        typer.echo(json.dumps(result))
        return
    from limitlap.formatting import distance, lap_time, speed_kmh

    typer.echo(f"{car.name} on {line.name}, grip scale {k:.2f}")
    typer.echo(f"  lap time   {lap_time(profile.lap_time_s)}  ({profile.lap_time_s:.3f} s)")
    typer.echo(
        f"  min speed  {speed_kmh(profile.speed_m_s[i_min], shown)} {shown.speed} at "
        f"{distance(result['min_speed_at_m'], shown)} {shown.distance}"
    )
    typer.echo(f"  max speed  {speed_kmh(profile.speed_m_s.max(), shown)} {shown.speed}")
    typer.echo(
        f"  length     {distance(the_line.length_m, shown)} {shown.distance}, {the_line.n} stations"
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


def _text_table(heads, rows, left=1) -> list[str]:
    """Fixed-width text table: the first ``left`` columns to the left, the rest right."""
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(heads)
    ]

    def line(cells):
        return "  ".join(
            c.ljust(w) if i < left else c.rjust(w)
            for i, (c, w) in enumerate(zip(cells, widths, strict=True))
        ).rstrip()

    return [line(heads)] + [line(r) for r in rows]


def _points(points, units=None) -> str:
    """Brake points as every output writes them (:func:`limitlap.formatting.brake_points`)."""
    from limitlap.formatting import brake_points

    return brake_points(points, units)


def _corner_table(analysis, u=None) -> str:
    """The ranked corner table and headline, for the terminal (with the bands when there are some; speeds and distances in ``u``, km/h and m by default)."""
    from limitlap.advice import TIME_RESOLUTION_S, line_advice
    from limitlap.bands import advice_shown
    from limitlap.formatting import METRIC

    u = u or METRIC
    cmp_ = analysis.comparison
    b = analysis.bands
    band_of = {c.name: b.corner_bands_s[i] for i, c in enumerate(cmp_.corners)} if b else {}
    line = analysis.line
    line_of = {}
    if line is not None:
        line_of = {c.name: cl for c, cl in zip(analysis.corners, line.corners, strict=True)}
    lines = [*_headline(analysis), "", *_ranked_rows(analysis, band_of, line_of, u), ""]
    lines += [f"{c.name}: {c.note}" for c in cmp_.corners if c.note]
    shown = [
        advice_shown(c.name, c.time_left_s, band_of.get(c.name), c.advice_in(u))
        for c in cmp_.ranked()[:3]
    ]
    lines += [a for a in shown if a]
    told = sorted(
        (cl for cl in line_of.values() if cl.told and cl.line_time_s >= TIME_RESOLUTION_S),
        key=lambda cl: -cl.line_time_s,
    )
    lines += [line_advice(cl, u) for cl in told[:3]]
    return "\n".join(lines)


def _headline(analysis) -> list[str]:
    """The lines above the corner table: lap, ideal, time left and grip; time left below zero; the better line's time; the ideal's band."""
    from limitlap.formatting import grip, lap_time, time_left, with_band

    cmp_, b, line = analysis.comparison, analysis.bands, analysis.line
    lines = [
        f"lap {analysis.lap.number}: {lap_time(cmp_.lap_time_s)}   ideal "
        f"{lap_time(cmp_.ideal_lap_time_s)} at grip scale {grip(analysis.grip_scale)}   "
        f"time left {with_band(cmp_.time_left_s, b.time_left_band_s if b else None)}   "
        f"grip estimate {grip(analysis.grip_estimate)}",
    ]
    if cmp_.time_left_words():
        lines.append(f"time left below zero: {cmp_.time_left_words()}")
    if line is not None:
        lines.append(
            f"a better line inside the corridor ({line.corridor.source}) would bring "
            + (
                f"{time_left(line.line_time_s)} s"
                if line.line_time_s is not None
                else "— (the laps all took one line: too alike to tell)"
            )
        )
    if b is not None:
        lo, hi = b.ideal_time_band_s
        lines.append(
            f"ideal lap {lap_time(lo)} to {lap_time(hi)} ({b.coverage:.0%} band, bootstrap "
            f"over {b.n_laps} flying laps); corners in one group cannot be told apart"
        )
    return lines


def _ranked_rows(analysis, band_of, line_of, u) -> list[str]:
    """The corner table's lines, ranked by time left (its group and band when the bands were made)."""
    from limitlap.formatting import distance, grip_used, speed_kmh, time_left, with_band

    b = analysis.bands
    group_of = (
        {c.name: b.rank_group[i] for i, c in enumerate(analysis.comparison.corners)} if b else {}
    )
    heads = (
        "rank",
        "group",
        "corner",
        "",
        f"apex [{u.distance}]",
        "time left [s]",
        "line [s]",
        f"min you/ideal [{u.speed}]",
        f"brake you [{u.distance}]",
        f"brake ideal [{u.distance}]",
        "grip used",
    )
    rows = [
        (
            f"{c.rank:>4}",
            str(group_of[c.name]) if c.name in group_of else "-",
            c.name,
            c.label,
            distance(c.apex_m, u),
            with_band(c.time_left_s, band_of.get(c.name), unit="")
            if c.name in band_of
            else time_left(c.time_left_s),
            _line_cell(line_of.get(c.name)),
            f"{speed_kmh(c.min_speed_actual_m_s, u)} / {speed_kmh(c.min_speed_ideal_m_s, u)}",
            _points(c.brake_points_actual_m, u),
            _points(c.brake_points_ideal_m, u),
            grip_used(c.grip_used, c.grip_used_raw),
        )
        for c in analysis.comparison.ranked()
    ]
    return _text_table(heads, rows, left=4)


def _line_cell(cl) -> str:
    """A corner's line time for the table: the time, or "narrow" where the corridor is too narrow to tell; the one blank without a line."""
    from limitlap.formatting import NOT_AVAILABLE, time_left

    if cl is None:
        return NOT_AVAILABLE
    return time_left(cl.line_time_s) if cl.told else "narrow"


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
    vehicle: Path = typer.Option(
        None,
        "--vehicle",
        help="Vehicle TOML or envelope.toml: adds each lap's ideal, time left, grip and corners.",
    ),
    grip: str = typer.Option(None, "--grip", help=_GRIP_HELP, callback=_grip_scale),
    as_json: bool = typer.Option(False, "--json", help="Print JSON on stdout."),
    units: str = _units_option(),
) -> None:
    """The laps of a log: number, kind (out, flying, in, pit, partial), time, distance, complete or why not.

    With --vehicle, every lap of the session against the ideal on its own line: ideal,
    time left, grip found and each corner's time, and each corner's spread over the
    flying laps.
    """
    from limitlap import laps as laps_mod
    from limitlap import pipeline

    if vehicle is None:
        read, found, _, warnings = pipeline.load_session(
            log, gate=gate, channels=channels, track=track
        )
        _layout(read.layout_note)
        _warn(warnings)
        if as_json:
            typer.echo(json.dumps(laps_mod.laps_json(found)))
        else:
            typer.echo(format_laps_table(found, _units(units)))
        return
    _settle_imports()
    analysis = pipeline.analyse(
        log,
        vehicle=vehicle,
        grip_scale=1.0 if grip is None else grip,
        gate=gate,
        channels=channels,
        track=track,
        intervals=False,
        better_line=False,  # the lap table does not show it
    )
    _layout(analysis.layout_note)
    _warn(analysis.warnings)
    if as_json:
        from limitlap.outputs import session_laps, summary_json_text

        typer.echo(summary_json_text({"laps": session_laps(analysis.session)}), nl=False)
    else:
        typer.echo(format_session_table(analysis.session, analysis.lap.number))


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
        _layout(row.layout_note)
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
    grip: str = typer.Option(None, "--grip", help=_GRIP_HELP, callback=_grip_scale),
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

    k = 1.0 if grip is None else float(grip)
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
    _layout(analysis.layout_note)
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
        ..., "--grip", help=_GRIP_HELP + " Repeat for more.", callback=_grip_list
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
    line, where = pipeline.line_from_source(
        source, lap=lap, gate=gate, channels=channels, track=track
    )
    _layout(line.meta.get("layout_note"))
    _warn(line.meta.get("warnings", ()))
    trk = ingest.read_track(track) if track is not None else None
    corners = corners_mod.track_corners(line, trk)
    conditions = targets_mod.target_tables(line, car, grip, corners)
    if out is not None:
        from limitlap import sheets

        sheets.write_target_sheets(
            conditions,
            out,
            trk.name if trk else where,
            car=car.name,
            date=_sheet_date(),
            units=shown,
        )
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
def versus(
    log_a: Path = typer.Argument(..., help="Log of lap A (CSV, optionally .csv.gz)."),
    log_b: Path = typer.Argument(None, help="Log of lap B; default the same log as A."),
    lap_a: int = typer.Option(None, "--lap-a", help="Lap A; default the fastest of its log."),
    lap_b: int = typer.Option(
        None, "--lap-b", help="Lap B; default the fastest of its log (of one log: the next)."
    ),
    vehicle: Path = typer.Option(
        None,
        "--vehicle",
        help="Common envelope (vehicle TOML with [grip] or envelope.toml); default fitted to both logs.",
    ),
    grip: str = typer.Option(None, "--grip", help=_GRIP_HELP, callback=_grip_scale),
    gate: str = _gate_option(),
    channels: Path = typer.Option(
        None, "--channels", help="Channel-map TOML for other column names."
    ),
    track: Path = typer.Option(None, "--track", help="Track TOML (gate, corner names)."),
    out: Path = typer.Option(Path("limitlap-versus"), "--out", help="Output folder."),
    no_figures: bool = typer.Option(False, "--no-figures", help="Skip the PNG figures."),
) -> None:
    """Lap against lap: two laps of one log, or of two logs of one circuit, corner by corner."""
    from limitlap import ingest, pipeline, report
    from limitlap import versus as versus_mod
    from limitlap.outputs import write_versus

    _settle_imports()
    k = 1.0 if grip is None else grip
    car = ingest.read_vehicle(vehicle, require_complete=False) if vehicle is not None else None
    trk = ingest.read_track(track) if track is not None else None
    sessions = []
    for path in [log_a] + ([log_b] if log_b is not None else []):
        log, found, _, warnings = pipeline.load_session(
            path, gate=gate, channels=channels, track=trk
        )
        _layout(log.layout_note)
        _warn(warnings)
        sessions.append((path, log, found))
    result = versus_mod.compare_laps(
        sessions[0],
        sessions[1] if len(sessions) > 1 else None,
        lap_a=lap_a,
        lap_b=lap_b,
        vehicle=car,
        grip_scale=k,
        track=trk,
    )
    written = write_versus(result, out, figures=not no_figures)
    _warn(result.warnings)
    typer.echo(format_versus_table(result))
    typer.echo(f"\nwritten to {out}/: " + ", ".join(sorted(Path(p).name for p in written.values())))
    typer.echo(report.SAFETY_CAUTION)


@app.command()
def envelope(
    logs: list[Path] = typer.Argument(
        ..., help="Session logs of one car (CSV, optionally .csv.gz)."
    ),
    out: Path = typer.Option(..., "--out", help="Envelope file to write (TOML)."),
    vehicle: Path = typer.Option(
        None, "--vehicle", help="Vehicle TOML with what is known (mass at least)."
    ),
    gate: str = _gate_option(),
    channels: Path = typer.Option(
        None, "--channels", help="Channel-map TOML for other column names."
    ),
    track: Path = typer.Option(None, "--track", help="Track TOML (gate)."),
) -> None:
    """One grip envelope fitted to the flying laps of several logs at once, as an envelope file."""
    from limitlap import atomic, ingest, pipeline
    from limitlap import versus as versus_mod
    from limitlap.outputs import envelope_toml_text
    from limitlap.vehicle import Vehicle

    _settle_imports()
    base = (
        ingest.read_vehicle(vehicle, require_complete=False)
        if vehicle is not None
        else Vehicle("fitted from the logs", pipeline.NOMINAL_MASS_KG)
    )
    trk = ingest.read_track(track) if track is not None else None
    sessions = []
    for path in logs:
        log, found, _, warnings = pipeline.load_session(
            path, gate=gate, channels=channels, track=trk
        )
        _layout(log.layout_note)
        _warn(warnings)
        sessions.append((path, log, found))
    fit = versus_mod.common_envelope(sessions, base)
    _warn(fit.warnings)
    info = {"quality": fit.quality, "uncertainty": fit.uncertainty}
    atomic.write_atomic(out, envelope_toml_text(fit.vehicle, info))
    car = fit.vehicle
    typer.echo(
        f"envelope of {len(logs)} log{'s' if len(logs) > 1 else ''}: lateral {car.mu_lat:.3f}, "
        f"braking {car.mu_brk:.3f}, traction {car.mu_trac:.3f}, exponent {car.exponent:.2f}, "
        f"power {car.power_w / 1000:.0f} kW"
    )
    typer.echo(f"written to {out} (use it with --vehicle)")


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
        car = analysis.vehicle.name
        if analysis.fit is not None:
            car = f"envelope fitted to {Path(log).name}"
        sheets.write_target_sheets(
            conditions,
            folder,
            analysis.track_name or "demo circuit",
            car=car,
            date=_sheet_date(),
            units=shown,
        )
    _warn(analysis.warnings)
    typer.echo(_corner_table(analysis, shown))
    for cond in conditions:
        typer.echo("")
        typer.echo(format_targets_table(cond, shown))
    typer.echo(f"\nreport: {Path(out) / 'report.html'}  (open it in a browser)")


def _sheet_date() -> str:
    """The date printed on target sheets: the day they are made (ISO 8601)."""
    import datetime

    return datetime.date.today().isoformat()


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
    """The lap table as text: number, kind, time m:ss.sss, distance, complete or why not; the fastest marked."""
    lines = [f"{'lap':>4}  {'kind':<7}  {'time':>9}  {'distance':>10}  status"]
    from limitlap.formatting import METRIC, lap_time
    from limitlap.laps import laps_table

    for rec in laps_table(laps):
        status = "complete" if rec["complete"] else f"not complete: {rec['reason']}"
        mark = "  <- fastest" if rec["fastest"] else ""
        lines.append(
            f"{rec['number']:>4}  {rec['kind']:<7}  {lap_time(rec['time_s']):>9}  "
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
    from limitlap.formatting import METRIC, distance, grip, lap_time, seconds, speed_kmh
    from limitlap.targets import CAUTION

    u = shown or METRIC
    name = f"{condition.label} " if condition.label else ""
    head = (
        f"Targets {name}(grip scale {grip(condition.grip_scale)}) — "
        f"ideal lap {lap_time(condition.lap_time_s)}"
    )
    heads = (
        "corner",
        "",
        f"apex [{u.distance}]",
        f"brake at [{u.distance}]",
        f"before apex [{u.distance}]",
        f"entry [{u.speed}]",
        f"min [{u.speed}]",
        f"exit [{u.speed}]",
        "segment [s]",
    )
    rows = [
        (
            t.name,
            t.label,
            distance(t.apex_m, u),
            _points(t.brake_points_m, u),
            distance(t.brake_before_apex_m, u),
            speed_kmh(t.entry_speed_m_s, u),
            speed_kmh(t.min_speed_m_s, u),
            speed_kmh(t.exit_speed_m_s, u),
            seconds(t.segment_time_s),
        )
        for t in condition.corners
    ]
    return "\n".join([head, "", *_text_table(heads, rows, left=2), "", CAUTION])


def format_session_table(table, analysed: int | None = None) -> str:
    """Every lap of a session as fixed-width text: kind, time, ideal on its own line, time left, grip found, each corner's time; the corners' spread over the flying laps below."""
    from limitlap.formatting import lap_time, number, time_left

    names = list(table.corner_names)
    head = f"{'lap':>4}  {'kind':<8}{'time':>10}{'ideal':>10}{'left':>7}{'grip':>6}"
    lines = [head + "".join(f"{n:>7}" for n in names)]
    lines.append(
        f"{'':>4}  {'':<8}{'':>10}{'':>10}{'[s]':>7}{'[-]':>6}"
        + "".join(f"{'[s]':>7}" for _ in names)
    )
    for r in table.laps:
        times = [None] * len(names) if r.corner_times_s is None else list(r.corner_times_s)
        mark = "  <- analysed" if r.number == analysed else ""
        lines.append(
            f"{r.number:>4}  {r.kind:<8}{lap_time(r.time_s):>10}"
            f"{lap_time(r.ideal_time_s) if r.timed else '-':>10}"
            f"{time_left(r.time_left_s) if r.timed else '-':>7}"
            f"{number(r.grip_estimate, '.2f', blank='-'):>6}"
            + "".join(f"{number(t, '.2f', blank='-'):>7}" for t in times)
            + mark
        )
    if table.consistency:
        n = table.consistency[0].n_laps
        lines.append(
            f"{'':>4}  {'spread':<8}{f'{n} flying':>10}{'':>10}{'':>7}{'':>6}"
            + "".join(f"{number(c.spread_s, '.3f', blank='-'):>7}" for c in table.consistency)
        )
    return "\n".join(lines)


def format_versus_table(result) -> str:
    """Lap against lap as text: the two laps, then each corner's times, delta, time left and sentence."""
    from limitlap.formatting import lap_time, number, time_left

    a, b = result.a, result.b
    lines = [
        f"A: {a.label}  {lap_time(a.lap.time_s)}   ideal on its line {lap_time(a.ideal.lap_time_s)}",
        f"B: {b.label}  {lap_time(b.lap.time_s)}   ideal on its line {lap_time(b.ideal.lap_time_s)}",
        f"B minus A: {number(result.lap_delta_s, '+.2f', ' s')}",
        "",
        f"{'corner':<7}{'A':>8}{'B':>8}{'B-A':>8}{'A left':>8}{'B left':>8}",
        f"{'':<7}{'[s]':>8}{'[s]':>8}{'[s]':>8}{'[s]':>8}{'[s]':>8}",
    ]
    for c in result.corners:
        lines.append(
            f"{c.name:<7}{c.time_a_s:>8.2f}{c.time_b_s:>8.2f}{number(c.delta_s, '+.2f'):>8}"
            f"{time_left(c.time_left_a_s):>8}{time_left(c.time_left_b_s):>8}"
        )
    lines.append("")
    lines += [c.sentence for c in result.corners]
    return "\n".join(lines)
