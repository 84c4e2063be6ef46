"""`balloonpath chase`: re-predict the landing during the flight from telemetry (recovery dispatch)."""

from __future__ import annotations

import math
import sys
from pathlib import Path
from typing import Any

import typer
from rich.console import Console
from rich.table import Table

from balloonpath.errors import BalloonpathError, input_error
from balloonpath.plan import load_plan

CAUTION = (
    "Caution: a predicted landing zone is an estimate with uncertainty. Never enter private land, roads "
    "closed to traffic, water or power-line corridors to reach a payload; follow local law."
)


def _hm(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "n/a"
    sign = "-" if seconds < 0 else ""
    s = int(round(abs(seconds)))
    return f"{sign}{s // 3600:d}:{(s % 3600) // 60:02d}:{s % 60:02d}"


def _panel(update: Any) -> Table:
    from balloonpath.timeutil import iso_from_posix

    s = update.state
    table = Table(title=f"balloonpath chase: fix {iso_from_posix(s.time_s)}", show_header=False)
    table.add_column(style="bold")
    table.add_column()
    table.add_row("Phase", s.phase_name)
    table.add_row("Altitude", f"{s.alt_m:,.0f} m")
    table.add_row("Vertical speed", f"{s.vertical_speed_m_s:+.1f} m/s")
    if not s.burst and s.launched:
        table.add_row("Expected burst", f"{s.burst_alt_expected_m:,.0f} m (+- {s.burst_alt_sigma_m:,.0f})")
    table.add_row("Landing", f"{update.landing_lat:.5f}, {update.landing_lon:.5f}")
    table.add_row("Countdown", _hm(update.time_left_s))
    table.add_row("95 % zone", f"{update.zone_95_km:.1f} km (semi-major axis)")
    if update.crew_distance_m is not None:
        table.add_row("From crew", f"{update.crew_distance_m / 1000:.1f} km, bearing {update.crew_bearing_deg:.0f} deg")
    if update.read_report is not None:
        table.add_row("Telemetry", f"{update.state.n_fixes} fixes used, {update.read_report.total_skipped} lines "
                      "skipped in the file")
    return table


def _line(update: Any) -> str:
    from balloonpath.timeutil import iso_from_posix

    s = update.state
    crew = ""
    if update.crew_distance_m is not None:
        crew = f" crew {update.crew_distance_m / 1000:.1f} km @ {update.crew_bearing_deg:.0f} deg"
    skipped = f" skipped {update.read_report.total_skipped}" if update.read_report is not None else ""
    return (f"{iso_from_posix(s.time_s)} {s.phase_name} {s.alt_m:.0f} m {s.vertical_speed_m_s:+.1f} m/s "
            f"landing {update.landing_lat:.5f},{update.landing_lon:.5f} in {_hm(update.time_left_s)} "
            f"zone95 {update.zone_95_km:.1f} km{crew}{skipped}")


def _crew_source(crew: str | None, callsign: str | None) -> tuple[tuple[float, float] | None, Path | None]:
    from balloonpath.chase import parse_position

    if crew is None:
        return None, None
    path = Path(crew)
    if path.exists():
        return None, path
    if "," not in crew:
        raise input_error(None, "--crew", f"'{crew}' is neither LAT,LON nor an existing file",
                          "give --crew=LAT,LON or the crew tracker's telemetry file")
    return parse_position(crew), None


def register(app: typer.Typer) -> None:
    """Add `chase`."""

    @app.command("chase", context_settings={"ignore_unknown_options": False})
    def chase(
        plan_file: Path = typer.Argument(..., help="Flight-plan TOML file."),
        telemetry: Path | None = typer.Argument(
            None, help="Telemetry: CSV (time,latitude,longitude,altitude_m), APRS log, or DWD radiosonde CSV."),
        replay: Path | None = typer.Option(None, "--replay", help="Replay a recorded flight file for practice."),
        speed: float = typer.Option(60.0, "--speed", min=0.0, help="Replay speed-up (0: as fast as possible)."),
        follow: bool = typer.Option(False, "--follow", help="Watch the growing telemetry file and re-predict."),
        every: float = typer.Option(60.0, "--every", min=0.0, help="At most one update per this many s of flight."),
        poll: float = typer.Option(2.0, "--poll", min=0.05, help="--follow: seconds between file checks."),
        idle_timeout: float | None = typer.Option(
            None, "--idle-timeout", min=0.0, help="--follow: stop after this many s without new fixes."),
        max_updates: int | None = typer.Option(None, "--max-updates", min=1, help="Stop after this many updates."),
        crew: str | None = typer.Option(
            None, "--crew", help="Crew position LAT,LON (e.g. --crew=-33.85,151.2 or 33.85S,151.2E) or the "
            "crew tracker's telemetry file."),
        crew_callsign: str | None = typer.Option(None, "--crew-callsign", help="APRS callsign of the crew car."),
        callsign: str | None = typer.Option(None, "--callsign", help="APRS callsign of the balloon."),
        members: int | None = typer.Option(None, "--members", min=1, help="Ensemble size (plan default)."),
        seed: int | None = typer.Option(None, "--seed", min=0, help="Random seed (plan default)."),
        out: Path = typer.Option(Path("chase"), "--out", help="Folder for chase.geojson, chase.kml, chase.json."),
    ) -> None:
        """Re-predict the landing from telemetry; rewrite the map files at each update."""
        from balloonpath.chase import ChaseSession, FollowFeed, ReplayFeed, crew_position_at, rewrite_outputs
        from balloonpath.telemetry import read_track

        source = replay if replay is not None else telemetry
        if source is None:
            raise input_error(None, "telemetry", "no telemetry file given",
                              "give the receiver's log file, or --replay FILE")
        if replay is not None and telemetry is not None:
            raise input_error(None, "--replay", "given together with a telemetry file", "give one of the two")
        crew_fixed, crew_path = _crew_source(crew, crew_callsign)
        plan = load_plan(plan_file)
        err = Console(stderr=True)
        err.print(f"loading the winds of {plan_file.name} ...")
        session = ChaseSession(plan, members=members, seed=seed, crew=crew_fixed)
        if replay is not None:
            feed: Any = ReplayFeed(replay, callsign=callsign, speed=speed, every_s=every)
        elif follow:
            feed = FollowFeed(source, callsign=callsign, every_s=every, poll_s=poll, idle_timeout_s=idle_timeout)
        else:
            feed = [read_track(source, callsign=callsign)]
        tty = sys.stdout.isatty()
        console = Console()
        live = None
        if tty:
            from rich.live import Live

            live = Live(console=console, auto_refresh=False)
            live.start()
        n = 0
        last = None
        try:
            for track, report in feed:
                crew_now = None
                if crew_path is not None:
                    crew_track, _ = read_track(crew_path, callsign=crew_callsign, require_altitude=False)
                    crew_now = crew_position_at(crew_track, float(track.time_s[-1]))
                try:
                    update = session.update(track, report, crew=crew_now)
                except BalloonpathError as exc:
                    if not (follow or replay is not None):
                        raise
                    # a live loop survives one failed update (e.g. the balloon above the wind data)
                    err.print(f"error: {exc} (update skipped; waiting for the next fix)", style="red",
                              highlight=False)
                    continue
                rewrite_outputs(update, out)
                n += 1
                last = update
                if live is not None:
                    live.update(_panel(update), refresh=True)
                else:
                    console.print(_line(update), soft_wrap=True, highlight=False)
                for w in update.warnings:
                    err.print(f"warning: {w}", style="yellow", highlight=False)
                if max_updates is not None and n >= max_updates:
                    break
        finally:
            if live is not None:
                live.stop()
        if last is not None and last.read_report is not None:
            err.print(last.read_report.describe(), highlight=False)
        console.print(f"{n} update(s); map files in {out}: chase.geojson, chase.kml, chase.json", highlight=False)
        console.print(CAUTION, style="yellow", highlight=False)
