"""`balloonpath forecast` and `balloonpath demo`: fly a plan and write the forecast folder."""

from __future__ import annotations

from pathlib import Path

import typer
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from balloonpath.plan import load_plan

CAUTION = (
    "Caution: balloons can endanger aircraft and people on the ground. Airspace rules differ by country; "
    "check with your aviation authority and file the notices it requires before launch. This forecast is "
    "an estimate with uncertainty, not a clearance."
)

DEMO_PLAN = Path(__file__).resolve().parents[2] / "scenarios" / "prairie" / "plan.toml"


def _print_summary(console: Console, written: WrittenForecast) -> None:  # noqa: F821
    s = written.summary
    land, burst, ens = s["landing"], s["burst"], s["ensemble"]
    console.print(f"[bold]Landing[/bold]  {land['latitude']:.5f}, {land['longitude']:.5f}  at {land['time']}"
                  f"  ({land['distance_m'] / 1000:.1f} km, bearing {land['bearing_deg']:.0f} deg from launch)")
    if burst["time"] is not None:
        console.print(f"[bold]Burst[/bold]    {burst['altitude_m']:.0f} m at {burst['time']}")
    console.print(f"[bold]Flight[/bold]   {s['flight_time_s'] / 60:.0f} min, {ens['members']} members, "
                  f"seed {ens['seed']}")
    for e in ens.get("ellipses", []):
        if abs(e["probability"] - 0.9) < 1e-9:
            console.print(f"[bold]90 % zone[/bold] {e['semi_major_m'] / 1000:.1f} x "
                          f"{e['semi_minor_m'] / 1000:.1f} km (semi-axes), major axis "
                          f"{e['major_axis_azimuth_deg']:.0f} deg")
    probs = s.get("probabilities", {})
    if probs.get("water") is not None:
        console.print(f"[bold]P(water)[/bold] {probs['water']:.1%}")
    for name, p in (probs.get("avoid") or {}).items():
        console.print(f"[bold]P({name})[/bold] {p:.1%}")
    console.print(f"Outputs in {written.out_dir}: " + ", ".join(sorted(f.name for f in written.files)))
    console.print(CAUTION, style="yellow")


def forecast_to_folder(plan_file: Path, out: Path, members: int | None, seed: int | None,
                       report: bool, quiet: bool = False, workers: int | None = None,
                       scheduler: str | None = None) -> WrittenForecast:  # noqa: F821
    """Run the forecast with a progress bar and write the folder.

    With ``workers`` or ``scheduler`` the members fly on the Dask engine (``balloonpath.scale``); the
    result is the same as in this process.
    """
    from balloonpath.forecast import run_forecast, write_outputs

    plan = load_plan(plan_file)
    console = Console(stderr=True)
    n = members if members is not None else plan.ensemble.members
    with Progress(TextColumn("flying"), BarColumn(), TextColumn("{task.completed}/{task.total} landed"),
                  TimeElapsedColumn(), console=console, transient=True, disable=quiet or n < 200) as bar:
        task = bar.add_task("fly", total=max(n - 1, 1))
        update = lambda done, total: bar.update(task, completed=done, total=total)  # noqa: E731
        if workers is None and scheduler is None:
            result = run_forecast(plan, members=members, seed=seed, progress=update)
        else:
            from balloonpath.scale import Engine, run_forecast_engine

            with Engine(workers=workers, scheduler=scheduler) as engine:
                if not quiet:
                    console.print(f"engine: {engine.describe()}")
                result = run_forecast_engine(plan, engine, members=members, seed=seed, progress=update)
    for w in result.warnings:
        console.print(f"warning: {w}", style="yellow")
    return write_outputs(result, plan, out, report=report)


def register(app: typer.Typer) -> None:
    """Add `forecast` and `demo`."""

    @app.command("forecast")
    def forecast(
        plan_file: Path = typer.Argument(..., help="Flight-plan TOML file."),
        out: Path = typer.Option(Path("forecast"), "--out", help="Folder for the outputs."),
        members: int | None = typer.Option(None, "--members", min=1, help="Ensemble size (plan default)."),
        seed: int | None = typer.Option(None, "--seed", min=0, help="Random seed (plan default)."),
        no_report: bool = typer.Option(False, "--no-report", help="Do not write report.html."),
        workers: int | None = typer.Option(
            None, "--workers", min=0,
            help="Fly the members on N local worker processes (0: all cores; default: in this process)."),
        scheduler: str | None = typer.Option(
            None, "--scheduler", help="Fly the members on a running Dask scheduler (e.g. tcp://host:8786)."),
    ) -> None:
        """Forecast the flight and landing zones of a plan and write them to a folder."""
        written = forecast_to_folder(plan_file, out, members, seed, report=not no_report, workers=workers,
                                     scheduler=scheduler)
        _print_summary(Console(), written)

    @app.command("demo")
    def demo(
        out: Path = typer.Option(Path("outputs/demo"), "--out", help="Folder for the outputs."),
        members: int | None = typer.Option(None, "--members", min=1, help="Ensemble size."),
    ) -> None:
        """Run a full forecast on the bundled invented scenario and say where the outputs are."""
        console = Console()
        console.print(f"Demo: invented scenario {DEMO_PLAN.parent.name} ({DEMO_PLAN})")
        written = forecast_to_folder(DEMO_PLAN, out, members, None, report=True)
        _print_summary(console, written)
        report = written.out_dir / "report.html"
        if report.exists():
            console.print(f"[bold]Open {report.resolve()}[/bold] for the whole forecast at a glance.")
