"""`balloonpath batch`: forecast a folder of plans over a range of launch times on the Dask engine."""

from __future__ import annotations

from pathlib import Path

import typer
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from balloonpath.errors import PlanError, input_error
from balloonpath.plan import load_plan

CAUTION = (
    "Caution: these forecasts are estimates with uncertainty, not clearances. Airspace rules differ by "
    "country; check with your aviation authority before any launch."
)


def register(app: typer.Typer) -> None:
    """Add `batch`."""

    @app.command("batch")
    def batch(
        plans_dir: Path = typer.Argument(..., help="Folder of flight-plan TOML files (or one plan file)."),
        out: Path = typer.Option(Path("batch"), "--out", help="Folder for batch.csv, batch.json, folders."),
        start: str | None = typer.Option(None, "--start", help="First launch time, ISO 8601 with zone "
                                         "(default: each plan's own launch time only)."),
        end: str | None = typer.Option(None, "--end", help="Last launch time (default: --start)."),
        every: str = typer.Option("3h", "--every", help="Step between launch times, e.g. 30m, 3h."),
        members: int | None = typer.Option(None, "--members", min=1, help="Members per forecast."),
        seed: int | None = typer.Option(None, "--seed", min=0, help="Random seed (plan default)."),
        workers: int = typer.Option(0, "--workers", min=0,
                                    help="Local worker processes (0: all cores; 1: in this process)."),
        scheduler: str | None = typer.Option(None, "--scheduler",
                                             help="Address of a running Dask scheduler (tcp://host:8786)."),
        chunk_members: int | None = typer.Option(None, "--chunk-members", min=1,
                                                 help="Members per work unit (rounded up to 32)."),
        folders: bool = typer.Option(False, "--folders", help="Also write each forecast's folder "
                                     "(<out>/<plan>/<time>/; needs a filesystem shared with the workers)."),
    ) -> None:
        """Forecast every plan in a folder at every launch time from --start to --end; write batch.csv."""
        from balloonpath.scale import Engine, run_batch
        from balloonpath.windows import parse_every, parse_time

        if plans_dir.is_dir():
            paths = sorted(plans_dir.glob("*.toml"))
        else:
            paths = [plans_dir]
        if not paths:
            raise input_error(plans_dir, "folder", "holds no *.toml flight plans", "give a folder of plans",
                              cls=PlanError)
        plans = [load_plan(p) for p in paths]
        if start is None:
            if end is not None:
                raise input_error(None, "--end", "given without --start", "give --start too", cls=PlanError)
            times = [[p.launch_time_s] for p in plans]
        else:
            t0 = parse_time(start, "--start")
            t1 = parse_time(end, "--end") if end is not None else t0
            step = parse_every(every)
            if t1 < t0:
                raise input_error(None, "--end", "is before --start", "give an end after the start",
                                  cls=PlanError)
            n = int((t1 - t0) // step) + 1
            times = [[t0 + k * step for k in range(n)] for _ in plans]
        console = Console(stderr=True)
        total = sum(len(t) for t in times)
        with Engine(workers=workers, scheduler=scheduler, chunk_members=chunk_members) as engine:
            console.print(f"batch: {len(plans)} plans x {total // max(len(plans), 1)} launch times on "
                          f"{engine.describe()}")
            with Progress(TextColumn("flying"), BarColumn(), TextColumn("{task.completed}/{task.total} members"),
                          TimeElapsedColumn(), console=console, transient=True) as bar:
                task = bar.add_task("fly", total=1)
                result = run_batch(plans, times, out, engine, members=members, seed=seed, folders=folders,
                                   progress=lambda d, t: bar.update(task, completed=d, total=t))
        rate = result.member_steps / result.elapsed_s if result.elapsed_s > 0 else 0.0
        Console().print(f"{len(result.rows)} forecasts in {result.elapsed_s:.1f} s "
                        f"({result.member_steps} member-steps, {rate:,.0f} per second on {result.workers} "
                        f"workers). Table: {result.files[0]}")
        Console().print(CAUTION, style="yellow")
