"""Command line: parse options, call the pipeline, print. No physics here.

Heavy modules (matplotlib, the pipeline) are imported inside the commands that need
them, so ``limitlap solve`` starts fast.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import typer

try:  # typer >= 0.29 carries its own copy of click
    from typer._click.exceptions import ClickException
except ImportError:  # older typer uses click itself
    from click.exceptions import ClickException
Abort = typer.Abort

from limitlap.errors import LimitlapError

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


def _grip(value: str | None, default: float = 1.0) -> float:
    from limitlap.vehicle import check_grip_scale

    if value is None:
        return default
    return check_grip_scale(value)


def _kmh(v_m_s: float) -> float:
    from limitlap.units import KMH_TO_M_S

    return v_m_s / KMH_TO_M_S


@app.command()
def solve(
    line: Path = typer.Argument(..., help="Line file: 'x [m], y [m]' or 'distance [m], curvature [1/m]'."),
    vehicle: Path = typer.Option(..., "--vehicle", help="Vehicle TOML file with a [grip] table."),
    grip: str = typer.Option(None, "--grip", help="Grip scale k, 0.2-2.0 (wet < 1)."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON on stdout."),
    out: Path = typer.Option(None, "--out", help="Write the speed profile as CSV here."),
) -> None:
    """Ideal speed profile and lap time on a given line."""
    from limitlap import ingest
    from limitlap import solve as solver

    k = _grip(grip)
    car = ingest.read_vehicle(vehicle)
    the_line = ingest.read_line(line)
    profile = solver.solve_profile(the_line, car, k)
    if out is not None:
        from limitlap import report

        report.write_atomic(out, solver.profile_csv_text(profile, the_line))
    result = {
        "lap_time_s": round(profile.lap_time_s, 3),
        "min_speed_kmh": round(_kmh(float(profile.speed_m_s.min())), 2),
        "max_speed_kmh": round(_kmh(float(profile.speed_m_s.max())), 2),
    }
    if as_json:
        typer.echo(json.dumps(result))
        return
    minutes, seconds = divmod(profile.lap_time_s, 60.0)
    typer.echo(f"{car.name} on {line.name}, grip scale {k:g}")
    typer.echo(f"  lap time   {int(minutes)}:{seconds:06.3f}  ({profile.lap_time_s:.3f} s)")
    typer.echo(f"  min speed  {result['min_speed_kmh']:.1f} km/h")
    typer.echo(f"  max speed  {result['max_speed_kmh']:.1f} km/h")
    typer.echo(f"  length     {the_line.length_m:.1f} m, {the_line.n} stations")
    if out is not None:
        typer.echo(f"  profile    {out}")


def main() -> None:
    """Console entry point: a user error becomes one line on stderr."""
    try:
        app(standalone_mode=False)
    except LimitlapError as err:
        typer.echo(f"limitlap: error: {err}", err=True)
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
