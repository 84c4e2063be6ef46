"""`balloonpath verify`: compare a forecast with a flown track, or score a season of flights."""

from __future__ import annotations

from pathlib import Path

import typer
from rich.console import Console
from rich.table import Table

CAUTION = (
    "Verification scores describe past flights; they do not make a future flight safe. Check airspace rules "
    "and notices with your aviation authority before every launch."
)


def _deg(value: float) -> str:
    return f"{value:.0f}" if value == value else "-"


def _print_many(console: Console, summary: object, out: Path) -> None:
    agg = summary.aggregate  # type: ignore[attr-defined]
    table = Table(title="Verification over flights (flown minus forecast)")
    for name in ("flight", "landing error km", "bearing deg", "burst alt err m", "in 50 %", "in 90 %",
                 "in 95 %", "rank", "energy score km", "CRPS dist km"):
        table.add_column(name, justify="right" if name != "flight" else "left")
    for r in summary.rows:  # type: ignore[attr-defined]
        ins = r["inside"]
        table.add_row(r["flight"], f"{r['landing_error_m'] / 1e3:.2f}", _deg(r["landing_error_bearing_deg"]),
                      f"{r['burst_altitude_error_m']:+.0f}",
                      *("yes" if ins.get(k) else "no" for k in ("0.50", "0.90", "0.95")),
                      f"{r['rank']:.2f}", f"{r['energy_score_m'] / 1e3:.2f}", f"{r['crps_distance_m'] / 1e3:.2f}")
    console.print(table)
    cov = agg["coverage"]
    console.print(f"[bold]{agg['flights']} flights[/bold]: median landing error "
                  f"{agg['median_landing_error_m'] / 1e3:.2f} km; flown landing inside the 50/90/95 % zones in "
                  + "/".join(f"{100 * cov[k]:.0f}" for k in ("0.50", "0.90", "0.95"))
                  + " % of flights (nominal 50/90/95); mean energy score "
                  f"{agg['mean_energy_score_m'] / 1e3:.2f} km, mean CRPS of the distance "
                  f"{agg['mean_crps_distance_m'] / 1e3:.2f} km [Gneiting & Raftery 2007]; mean rank "
                  f"{agg['mean_rank']:.2f} (0.50 if calibrated), rank histogram {agg['rank_histogram']}")
    if agg["flights"] < 20:
        console.print(f"With {agg['flights']} flights a zone's coverage is uncertain by about +-"
                      f"{100 * (0.25 / agg['flights']) ** 0.5:.0f} points (binomial sd at 50 %).", style="yellow")
    spread = agg.get("spread") or {}
    if spread.get("fitted"):
        lo, hi = spread["scale_interval_5_95"]
        cov, fit = spread["coverage"], spread["coverage_fitted"]
        nu = spread["tail_dof"]
        tails = "normal tails" if nu is None else f"Student-t tails, {nu:.1f} degrees of freedom"
        console.print(f"Spread: the flown landings fit the ensemble spread times {spread['scale']:.2f} (5-95 %: "
                      f"{lo:.2f}-{hi:.2f}) with {tails}, over {spread['flights']} flights; zones holding "
                      + "/".join(f"{100 * fit[k]:.0f}" for k in fit) + " % of them instead of "
                      + "/".join(f"{100 * cov[k]:.0f}" for k in cov) + " % (in sample).", markup=False)
        console.print("To use it, put in the plan's [ensemble] table:  " + "; ".join(spread["plan_lines"]),
                      markup=False)
        if spread.get("already_calibrated"):
            console.print("(These flights were forecast with a calibrated spread; the values above replace it.)",
                          markup=False)
        if lo <= 1.0 <= hi and nu is None:
            console.print("The interval contains 1: these flights do not show the spread to be wrong.", style="yellow")
    elif spread:
        console.print(f"Spread not fitted: {spread['reason']}.", style="yellow")
    console.print(f"Table in {out / 'many.csv'} and {out / 'many.json'}; each flight in its own folder.")


def register(app: typer.Typer) -> None:
    """Add `verify`."""

    @app.command("verify")
    def verify(
        plan_file: Path | None = typer.Argument(None, help="Flight-plan TOML file of the flight."),
        flown: Path | None = typer.Option(None, "--flown", help="Flown track: CSV, APRS log or DWD file."),
        many: Path | None = typer.Option(None, "--many", help="Folder of flights, one sub-folder each "
                                         "(a *.toml plan and a flown.* track)."),
        out: Path = typer.Option(Path("verify"), "--out", help="Folder for the outputs."),
        members: int | None = typer.Option(None, "--members", min=3, help="Ensemble size (plan default)."),
        seed: int | None = typer.Option(None, "--seed", min=0, help="Random seed (plan default)."),
        plan_time: bool = typer.Option(False, "--plan-time", help="Launch at the plan's time, not the track's."),
        plots: bool = typer.Option(False, "--plots", help="With --many: write verify.png for every flight."),
    ) -> None:
        """Verify a forecast against a flown track (or a folder of flights) and calibrate the drag."""
        from balloonpath.errors import PlanError
        from balloonpath.verify import read_flown_track, summary_lines, verify_flight, verify_many, write_verification

        console = Console()
        if many is not None:
            if plan_file is not None or flown is not None:
                raise PlanError("verify: --many takes no plan or --flown; fix: give either PLAN --flown TRACK "
                                "or --many FOLDER")
            summary = verify_many(many, out, members=members, seed=seed, plot=plots,
                                  progress=lambda k, n: console.print(f"verified {k}/{n}", style="dim"))
            _print_many(console, summary, out)
            console.print(CAUTION, style="yellow")
            return
        if plan_file is None or flown is None:
            raise PlanError("verify: needs a plan and --flown TRACK; fix: run `balloonpath verify PLAN.toml "
                            "--flown TRACK --out DIR` or `balloonpath verify --many FOLDER`")
        from balloonpath.plan import load_plan

        plan = load_plan(plan_file)
        track = read_flown_track(flown)
        ver, result, zones = verify_flight(plan, track, members=members, seed=seed,
                                           launch_time_s=plan.launch_time_s if plan_time else None)
        files = write_verification(ver, result, zones, track, out)
        for w in ver.warnings:
            console.print(f"warning: {w}", style="yellow")
        lines = summary_lines(ver)
        console.print(lines[0], style="bold")
        for line in lines[1:]:
            if line.startswith(("Plan lines", "Calibration", "Vertical speed")):
                console.print(line, style="bold")
            elif line.startswith("  [") or " = " in line:
                console.print(line, style="green", markup=False, highlight=False)
            else:
                console.print(line, markup=False, highlight=False)
        console.print(f"Outputs in {out}: " + ", ".join(sorted(f.name for f in files)))
        console.print(CAUTION, style="yellow")
