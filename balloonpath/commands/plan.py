"""`balloonpath check-plan`: validate a flight plan and print what it says."""

from __future__ import annotations

from pathlib import Path

import typer

from balloonpath.plan import load_plan


def register(app: typer.Typer) -> None:
    """Add the command to the app."""

    @app.command("check-plan")
    def check_plan(plan_file: Path = typer.Argument(..., help="Flight-plan TOML file.")) -> None:
        """Validate a flight plan and print its main values in SI units."""
        plan = load_plan(plan_file)
        lt = plan.launch
        typer.echo(f"plan {plan.path.name}: valid ({plan.mode} mode)")
        typer.echo(f"  launch  {lt.latitude:.5f}, {lt.longitude:.5f}, {lt.elevation_m:.0f} m, "
                   f"{lt.time.isoformat()}")
        if plan.rates is not None:
            r = plan.rates
            typer.echo(f"  rates   ascent {r.ascent_m_s:g} m/s, burst {r.burst_altitude_m:.0f} m, "
                       f"descent {r.descent_sea_level_m_s:g} m/s at sea level")
        sources = [p.name for p in plan.winds.sounding] + [p.name for p in plan.winds.aircraft]
        if plan.winds.grid:
            sources.append(plan.winds.grid.name)
        if plan.winds.field:
            sources.append(plan.winds.field.name)
        typer.echo(f"  winds   {', '.join(sources)}")
        typer.echo(f"  members {plan.ensemble.members}, seed {plan.ensemble.seed}")
