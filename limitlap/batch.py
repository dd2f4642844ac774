"""Many logs at once: one analysis and output folder per log, and a combined table.

``run_batch`` runs :func:`limitlap.pipeline.analyse` and
:func:`limitlap.outputs.write_outputs` for every log, in a process pool by default
(:class:`concurrent.futures.ProcessPoolExecutor`, one worker per core), or on a Dask
cluster (``dask.distributed``, the optional ``limitlap[dask]`` extra) when given a
scheduler address; the workers then need the logs and the output folder on a shared
file system. Each log writes into ``OUT/<log name>/``; a log that fails gets its one-line
error in its row of the table and does not stop the others.

Examples
--------
>>> rows = [BatchRow("a.csv", "out/a", lap=3, lap_time_s=92.5, ideal_lap_time_s=90.1,
...                  time_left_s=2.4, grip_estimate=0.93)]
>>> print(batch_csv_text(rows), end="")
log,lap,lap time [s],ideal [s],time left [s],grip estimate,output,error
a.csv,3,92.500,90.100,2.400,0.93,out/a,
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field, replace
from multiprocessing import get_context
from pathlib import Path

from limitlap.errors import ExtraNeeded, InputError, LimitlapError

#: File endings taken as logs when a folder is given.
LOG_SUFFIXES = (".csv", ".csv.gz")


@dataclass(frozen=True)
class BatchRow:
    """One log's line of the combined table (SI).

    Attributes
    ----------
    log : str
        The log file.
    out_dir : str
        Its output folder.
    lap : int or None
        The analysed lap.
    lap_time_s, ideal_lap_time_s, time_left_s : float
        Lap time, ideal lap time, and their difference; NaN when the log failed. [s]
    grip_estimate : float or None
        Grip scale the lap used, relative to the envelope. [-]
    error : str
        One-line error; empty when the log went through.
    warnings : list of str
        The analysis warnings, one line each (as the batch's ``wording`` says them).
    layout_note : str or None
        The reader's line on the log's layout when it is not the plain form.
    """

    log: str
    out_dir: str
    lap: int | None = None
    lap_time_s: float = math.nan
    ideal_lap_time_s: float = math.nan
    time_left_s: float = math.nan
    grip_estimate: float | None = None
    error: str = ""
    warnings: list[str] = field(default_factory=list)
    layout_note: str | None = None

    @property
    def ok(self) -> bool:
        """True when the log went through."""
        return not self.error


@dataclass(frozen=True)
class _Job:
    """Everything one worker needs (plain, picklable)."""

    log: str
    out_dir: str
    vehicle: object
    grip_scale: float
    lap: int | None
    gate: str | None
    channels: str | None
    track: str | None
    figures: bool
    wording: Callable[[object], str] = str
    check_units: bool = True
    units: str = "metric"  # how the report shows speeds and distances


def _log_name(path: Path) -> str:
    name = path.name
    for suffix in sorted(LOG_SUFFIXES, key=len, reverse=True):
        if name.lower().endswith(suffix):
            return name[: -len(suffix)]
    return path.stem


def find_logs(paths: Sequence) -> list[Path]:
    """The logs named by ``paths``: files as given, folders by their ``*.csv(.gz)`` files.

    Parameters
    ----------
    paths : sequence of str or Path
        Log files and/or folders (a folder's own files only, sorted by name).

    Returns
    -------
    list of Path
        In the order given, each file once.

    Raises
    ------
    InputError
        A folder holds no log, or nothing was given.
    """
    found: list[Path] = []
    for p in map(Path, paths):
        if p.is_dir():
            logs = sorted(
                q for q in p.iterdir() if q.is_file() and q.name.lower().endswith(LOG_SUFFIXES)
            )
            if not logs:
                raise InputError(p, "folder holds no log (*.csv or *.csv.gz)")
            found += logs
        else:
            found.append(p)  # a missing file fails in its own row
    if not found:
        raise LimitlapError("no logs given")
    unique: list[Path] = []
    for p in found:
        if p not in unique:
            unique.append(p)
    return unique


def output_folders(logs: Sequence[Path], out_dir) -> list[Path]:
    """``out_dir/<log name>`` for each log; a repeated name gets ``-2``, ``-3``, ... ."""
    out = Path(out_dir)
    taken: dict[str, int] = {}
    folders = []
    for log in logs:
        name = _log_name(Path(log))
        taken[name] = taken.get(name, 0) + 1
        folders.append(out / (name if taken[name] == 1 else f"{name}-{taken[name]}"))
    return folders


def analyse_job(job: _Job) -> BatchRow:
    """Analyse one log and write its folder; a user error becomes the row's error.

    Warnings and the error are put in the job's ``wording`` (see :func:`run_batch`).

    Runs in a worker process (or a Dask worker), so it takes and returns plain data.
    An unexpected exception (a bug) is also kept in the row, marked as such, so the
    other logs still go through.
    """
    import gc

    from limitlap import outputs, pipeline
    from limitlap.formatting import units_named

    gc.freeze()  # the imports' objects out of the collector's way for the job (cli._settle_imports)
    say = job.wording
    try:
        analysis = pipeline.analyse(
            job.log,
            vehicle=job.vehicle,
            grip_scale=job.grip_scale,
            lap=job.lap,
            gate=job.gate,
            channels=job.channels,
            track=job.track,
            check_units=job.check_units,
        )
        analysis = replace(analysis, warnings=[say(w) for w in analysis.warnings])
        Path(job.out_dir).parent.mkdir(parents=True, exist_ok=True)
        outputs.write_outputs(
            analysis, job.out_dir, figures=job.figures, units=units_named(job.units)
        )
    except LimitlapError as err:
        return BatchRow(job.log, job.out_dir, error=say(err))
    except Exception as err:
        return BatchRow(job.log, job.out_dir, error=f"internal error ({type(err).__name__}): {err}")
    finally:
        gc.unfreeze()
    cmp_ = analysis.comparison
    return BatchRow(
        log=job.log,
        out_dir=job.out_dir,
        lap=int(analysis.lap.number),
        lap_time_s=float(cmp_.lap_time_s),
        ideal_lap_time_s=float(cmp_.ideal_lap_time_s),
        time_left_s=float(cmp_.time_left_s),
        grip_estimate=None if analysis.grip_estimate is None else float(analysis.grip_estimate),
        warnings=list(analysis.warnings),
        layout_note=analysis.layout_note,
    )


def run_batch(
    logs: Sequence,
    out_dir,
    *,
    vehicle=None,
    grip_scale: float = 1.0,
    lap: int | None = None,
    gate: str | None = None,
    channels=None,
    track=None,
    figures: bool = True,
    workers: int | None = None,
    scheduler=None,
    on_done: Callable[[BatchRow, int, int], None] | None = None,
    wording: Callable[[object], str] = str,
    check_units: bool = True,
    units: str = "metric",
) -> list[BatchRow]:
    """Analyse every log into ``out_dir/<log name>/``, in parallel.

    Parameters
    ----------
    logs : sequence of str or Path
        Log files (see :func:`find_logs` for folders). [-]
    out_dir : str or Path
        Parent of the per-log output folders (made when missing). [-]
    vehicle, grip_scale, lap, gate, channels, track
        As for :func:`limitlap.pipeline.analyse`, the same for every log; ``grip_scale``
        [-].
    figures : bool
        Draw the figures of each report. [-]
    workers : int, optional
        Worker processes; default one per core (at most one per log). 1 runs the logs
        one after the other in this process. [-]
    scheduler : str or dask.distributed.Client, optional
        Dask scheduler address (e.g. ``"tcp://10.0.0.5:8786"``) or a client: run on that
        cluster instead of the local pool. Needs the ``limitlap[dask]`` extra. [-]
    on_done : callable, optional
        ``on_done(row, done, total)`` as each log finishes. [-]
    wording : callable, optional
        How a warning or an error becomes the line the rows and each log's files hold
        (a front end's own words for :mod:`limitlap.errors`' facts); default ``str``. It
        runs in the workers, so it must be picklable (a module-level function). [-]
    check_units : bool
        Stop a log whose channels disagree with its GPS path (see
        :func:`limitlap.pipeline.analyse`). [-]
    units : str
        ``metric`` or ``imperial``: how each report shows speeds and distances. [-]

    Returns
    -------
    list of BatchRow
        In the order of ``logs``. [-]
    """
    paths = [Path(p) for p in logs]
    folders = output_folders(paths, out_dir)
    Path(out_dir).mkdir(parents=True, exist_ok=True)
    common = (vehicle, grip_scale, lap, gate, channels, track, figures, wording, check_units)
    jobs = [replace(_job(p, f, *common), units=units) for p, f in zip(paths, folders, strict=True)]
    rows: list[BatchRow | None] = [None] * len(jobs)
    for i, row in _finished(jobs, workers, scheduler):
        rows[i] = row
        if on_done is not None:
            on_done(row, sum(r is not None for r in rows), len(jobs))
    return [r for r in rows if r is not None]


def _job(
    log, folder, vehicle, grip_scale, lap, gate, channels, track, figures, wording, check_units
) -> _Job:
    """One log's job in plain, picklable values (paths as text)."""
    return _Job(
        str(log),
        str(folder),
        str(vehicle) if isinstance(vehicle, str | Path) else vehicle,
        float(grip_scale),
        lap,
        gate,
        None if channels is None else str(channels),
        None if track is None else str(track),
        bool(figures),
        wording,
        bool(check_units),
    )


def _finished(jobs, workers, scheduler):
    """(index, row) pairs as the jobs finish: on a Dask cluster when given a scheduler, else in a process pool, or one after the other in this process for one worker."""
    if scheduler is not None:
        yield from _run_dask(jobs, scheduler)
        return
    n = min(workers or os.cpu_count() or 1, len(jobs))
    if n <= 1:
        for i, job in enumerate(jobs):
            yield i, analyse_job(job)
        return
    # spawn, not fork: polars and numba hold threads that a fork would copy mid-state
    with ProcessPoolExecutor(max_workers=n, mp_context=get_context("spawn")) as pool:
        futures = {pool.submit(analyse_job, job): i for i, job in enumerate(jobs)}
        for fut in as_completed(futures):
            yield futures[fut], fut.result()


def _run_dask(jobs, scheduler):
    """(index, row) pairs as the jobs finish on a Dask cluster."""
    try:
        from dask.distributed import Client
        from dask.distributed import as_completed as dask_completed
    except ImportError as err:
        raise ExtraNeeded("scheduler", "Dask", "dask") from err
    own = not isinstance(scheduler, Client)
    try:
        client = Client(scheduler) if own else scheduler
    except (OSError, TimeoutError, ValueError) as err:
        raise LimitlapError(f"cannot reach the Dask scheduler at {scheduler}: {err}") from err
    try:
        futures = client.map(analyse_job, jobs, pure=False)
        index = {f.key: i for i, f in enumerate(futures)}
        for fut in dask_completed(futures):
            yield index[fut.key], fut.result()
    finally:
        if own:
            client.close()


# --------------------------------------------------------------------------- the table

_COLUMNS = (
    "log",
    "lap",
    "lap time [s]",
    "ideal [s]",
    "time left [s]",
    "grip estimate",
    "output",
    "error",
)


def _num(x, nd: int) -> str:
    return "" if x is None or not math.isfinite(x) else f"{x:.{nd}f}"


def _csv_cell(text: str) -> str:
    if any(c in text for c in ',"\n\r'):
        return '"' + text.replace('"', '""') + '"'
    return text


def batch_csv_text(rows: Sequence[BatchRow]) -> str:
    """The combined table as CSV text: one row per log, blank cells where a log failed.

    Parameters
    ----------
    rows : sequence of BatchRow

    Returns
    -------
    str
        Header ``log,lap,lap time [s],ideal [s],time left [s],grip estimate,output,error``
        then one line per log (times to the millisecond).
    """
    out = [",".join(_COLUMNS)]
    for r in rows:
        cells = [
            r.log,
            "" if r.lap is None else str(r.lap),
            _num(r.lap_time_s, 3),
            _num(r.ideal_lap_time_s, 3),
            _num(r.time_left_s, 3),
            _num(r.grip_estimate, 2),
            r.out_dir,
            r.error.replace("\n", " "),
        ]
        out.append(",".join(_csv_cell(c) for c in cells))
    return "\n".join(out) + "\n"


def format_batch_table(rows: Sequence[BatchRow]) -> str:
    """The combined table for the terminal (lap times as m:ss.sss; limitlap.formatting)."""
    from limitlap.formatting import grip, lap_time, time_left

    names = [Path(r.log).name for r in rows]
    w = max([len("log"), *map(len, names)])
    lines = [
        f"{'log':<{w}}  {'lap':>4}{'lap time':>11}{'ideal':>11}{'time left':>11}{'grip est.':>10}",
    ]
    for name, r in zip(names, rows, strict=True):
        if r.error:
            lines.append(f"{name:<{w}}  error: {r.error}")
            continue
        lines.append(
            f"{name:<{w}}  {r.lap:>4}{lap_time(r.lap_time_s):>11}{lap_time(r.ideal_lap_time_s):>11}"
            f"{time_left(r.time_left_s):>9} s{grip(r.grip_estimate):>10}"
        )
    n_bad = sum(1 for r in rows if r.error)
    lines.append("")
    lines.append(
        f"{len(rows) - n_bad} of {len(rows)} logs analysed" + (f", {n_bad} failed" if n_bad else "")
    )
    return "\n".join(lines)
