"""`balloonpath windows`: sweep launch times with one loaded wind field and rank them."""

from __future__ import annotations

import math
from pathlib import Path

import typer
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from balloonpath.commands.forecast import CAUTION
from balloonpath.plan import load_plan


def _local(seconds: float | None, tz: str) -> str:
    """``14 18:00 CEST``: day of month, local time and zone abbreviation."""
    from datetime import UTC, datetime

    from balloonpath.checklist_rules import resolve_zone

    if seconds is None or not math.isfinite(seconds):
        return "-"
    moment = datetime.fromtimestamp(round(float(seconds)), tz=UTC).astimezone(resolve_zone(tz))
    return moment.strftime("%d %H:%M %Z")


def _utc(seconds: float) -> str:
    from balloonpath.timeutil import iso_from_posix

    return iso_from_posix(seconds)[8:16].replace("T", " ") + "Z"


def _pct(p: float | None) -> str:
    return "-" if p is None else f"{100.0 * p:.0f}%"


def _table(sweep, top: int) -> tuple[Table, list[str]]:  # noqa: ANN001 - WindowSweep (lazy import)
    """The ranked table (best first) and the reasons of the rejected rows shown."""
    rows = sweep.rows
    has_base = sweep.base is not None
    has_water = any(r.p_water is not None for r in rows)
    has_avoid = any(r.p_avoid for r in rows)
    t = Table(title=f"Launch windows, best first ({sweep.n_fit} of {len(rows)} fit)", header_style="bold")
    t.add_column("#", justify="right")
    t.add_column("Launch (local)")
    t.add_column("UTC")
    t.add_column("Lands")
    t.add_column("km/deg", justify="right")
    if has_base:
        t.add_column("Base km", justify="right")
    t.add_column("Zone km", justify="right")
    if has_water:
        t.add_column("Water", justify="right")
    if has_avoid:
        t.add_column("Avoid", justify="right")
    t.add_column("Sunset", justify="right")
    t.add_column("Score", justify="right")
    t.add_column("Fit")
    notes: list[str] = []
    for i in sweep.ranked()[:top]:
        r = rows[i]
        sunset = "-" if r.minutes_before_sunset is None else f"{r.minutes_before_sunset:+.0f}m"
        land = _local(r.landing_time_s, r.landing_time_zone)
        cells = [
            str(r.rank) if r.rank is not None else "-",
            _local(r.launch_time_s, r.launch_time_zone),
            _utc(r.launch_time_s),
            land[3:] if land[:2] == _local(r.launch_time_s, r.landing_time_zone)[:2] else land,
            f"{r.distance_km:.0f}/{r.bearing_deg:03.0f}",
        ]
        if has_base:
            cells.append(f"{r.base_distance_km:.0f}")
        cells.append(f"{r.zone_semi_major_km:.1f}" if math.isfinite(r.zone_semi_major_km) else "-")
        if has_water:
            cells.append(_pct(r.p_water))
        if has_avoid:
            cells.append(_pct(r.p_avoid_max))
        cells += [sunset, f"{r.score:.2f}", "[green]yes[/green]" if r.fit else "[red]no[/red]"]
        t.add_row(*cells)
        if not r.fit:
            notes.append(f"{_utc(r.launch_time_s)}: " + "; ".join(r.reasons))
    return t, notes


def register(app: typer.Typer) -> None:
    """Add `windows`."""

    @app.command("windows")
    def windows(
        plan_file: Path = typer.Argument(..., help="Flight-plan TOML file."),
        start: str = typer.Option(..., "--start", help="First launch time, ISO 8601 with Z or an offset."),
        end: str = typer.Option(..., "--end", help="Last launch time, ISO 8601 with Z or an offset."),
        every: str = typer.Option("30m", "--every", help="Step between launch times, e.g. 30m, 1h, 90m."),
        out: Path = typer.Option(Path("windows"), "--out", help="Folder for windows.csv/.geojson/.png."),
        members: int | None = typer.Option(None, "--members", min=1, help="Members per launch time."),
        seed: int | None = typer.Option(None, "--seed", min=0, help="Random seed (plan default)."),
        top: int = typer.Option(20, "--top", min=1, help="Rows shown in the table (files hold all)."),
        quiet: bool = typer.Option(False, "--quiet", help="No progress bar."),
        workers: int | None = typer.Option(
            None, "--workers", min=0,
            help="Fly on N local worker processes (0: all cores; default: in this process)."),
        scheduler: str | None = typer.Option(
            None, "--scheduler", help="Fly on a running Dask scheduler (e.g. tcp://host:8786)."),
    ) -> None:
        """Forecast many launch times with one wind field; rank them by the limits of the plan's windows table."""
        from balloonpath.windows import (
            launch_times,
            parse_every,
            parse_time,
            sweep_windows,
            write_windows_outputs,
        )

        start_s, end_s = parse_time(start, "--start"), parse_time(end, "--end")
        every_s = parse_every(every)
        n_times = launch_times(start_s, end_s, every_s).size
        plan = load_plan(plan_file)
        err = Console(stderr=True)
        with Progress(TextColumn("flying"), BarColumn(), TextColumn("{task.completed}/{task.total} landed"),
                      TimeElapsedColumn(), console=err, transient=True, disable=quiet) as bar:
            task = bar.add_task("fly", total=None)
            update = lambda done, total: bar.update(task, completed=done, total=total)  # noqa: E731
            if workers is None and scheduler is None:
                sweep = sweep_windows(plan, start_s, end_s, every_s, members=members, seed=seed, progress=update)
            else:
                from balloonpath.scale import Engine

                with Engine(workers=workers, scheduler=scheduler) as engine:
                    if not quiet:
                        err.print(f"engine: {engine.describe()}")
                    sweep = sweep_windows(plan, start_s, end_s, every_s, members=members, seed=seed,
                                          progress=update, engine=engine)
        for w in sweep.warnings:
            err.print(f"warning: {w}", style="yellow")
        files = write_windows_outputs(sweep, out)
        console = Console()
        table, notes = _table(sweep, top)
        console.print(table)
        console.print("Columns: km/deg = nominal landing distance and bearing from the launch; Zone = 90 % "
                      "ellipse semi-major axis; Sunset = minutes from landing to sunset at the landing point "
                      "(negative: after sunset); Score: lower is better (docs/windows.md).")
        for note in notes:
            console.print(f"[red]rejected[/red] {note}")
        tm = sweep.timings
        if tm is not None and (workers is not None or scheduler is not None):
            console.print(f"{n_times} launch times x {sweep.members} members on the engine: winds loaded once "
                          f"in {tm.load_s:.1f} s; sweep {tm.total_s - tm.load_s:.1f} s wall (work units busy "
                          f"{sum(tm.zones_s):.1f} s in zones)")
        elif tm is not None:
            console.print(
                f"{n_times} launch times x {sweep.members} members: winds loaded once in {tm.load_s:.1f} s; "
                f"sweep {tm.total_s - tm.load_s:.1f} s = {tm.per_launch_time_s:.2f} s per launch time "
                f"(draw {tm.draw_s:.1f} s, flights {tm.nominal_s + tm.members_s:.1f} s, "
                f"zones {sum(tm.zones_s):.1f} s)"
            )
        console.print("Every launch time uses the same wind realisations and member parameters: the "
                      "differences between launch times are not sampling noise.")
        console.print(f"Outputs in {Path(out)}: " + ", ".join(f.name for f in files))
        console.print(CAUTION, style="yellow")
