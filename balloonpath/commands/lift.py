"""`balloonpath lift`: how much gas, how fast up, how high, how long, how hard down."""

from __future__ import annotations

import textwrap
from pathlib import Path

import typer

from balloonpath.errors import PlanError
from balloonpath.flight.descent import DescentPlan, plan_descent
from balloonpath.flight.lift import (
    DEFAULT_ASCENT_DRAG_COEFFICIENT,
    DEFAULT_DRAG_MODEL,
    LiftPlan,
    plan_lift,
)
from balloonpath.plan import load_plan


def _pick(option, from_plan, default=None):  # noqa: ANN001, ANN202
    """The command-line value, else the plan's, else the default."""
    if option is not None:
        return option
    return from_plan if from_plan is not None else default


def register(app: typer.Typer) -> None:
    """Add the command to the app."""

    @app.command("lift")
    def lift(
        plan_file: Path | None = typer.Option(
            None, "--plan", help="Flight plan whose balloon, payload and parachute tables and "
            "launch elevation are used; the options below override its values."),
        envelope_mass: float | None = typer.Option(
            None, "--envelope-mass", help="Envelope mass, kg."),
        payload_mass: float | None = typer.Option(
            None, "--payload-mass", help="Payload mass below the neck (incl. parachute), kg."),
        burst_diameter: float | None = typer.Option(
            None, "--burst-diameter", help="Envelope burst diameter, m."),
        neck_lift: float | None = typer.Option(
            None, "--neck-lift", help="Measured neck lift, kg (or give --ascent-rate)."),
        ascent_rate: float | None = typer.Option(
            None, "--ascent-rate", help="Wanted launch ascent rate, m/s; the neck lift is solved."),
        gas: str | None = typer.Option(None, "--gas", help="helium (default) or hydrogen."),
        purity: float | None = typer.Option(
            None, "--purity", help="Mole fraction of lifting gas, rest air (default 1)."),
        drag_coefficient: float | None = typer.Option(
            None, "--drag-coefficient",
            help=f"Ascent drag coefficient (default {DEFAULT_ASCENT_DRAG_COEFFICIENT:g})."),
        launch_elevation: float | None = typer.Option(
            None, "--launch-elevation", help="Launch elevation above sea level, m (default 0)."),
        parachute_diameter: float | None = typer.Option(
            None, "--parachute-diameter",
            help="Parachute nominal diameter, m (adds the descent)."),
        parachute_cd: float | None = typer.Option(
            None, "--parachute-cd",
            help="Parachute drag coefficient on nominal area (default 0.75)."),
        step: float = typer.Option(
            2_000.0, "--step", help="Altitude step of the profile table, m."),
    ) -> None:
        """Plan the fill: gas, launch size, free lift, ascent rate, burst altitude and timing."""
        b = p = chute = None
        elevation = None
        source = None
        if plan_file is not None:
            plan = load_plan(plan_file)
            source = plan.path
            if plan.balloon is None:
                raise PlanError(f"{plan.path.name}: [balloon]: is missing (the plan is in rates "
                                "mode); fix: add [balloon] and [payload] or give the options")
            b, p, chute = plan.balloon, plan.payload, plan.parachute
            elevation = plan.launch.elevation_m
            if neck_lift is None and ascent_rate is None:
                neck_lift, ascent_rate = b.neck_lift_kg, b.target_ascent_m_s
        values = {
            "envelope_mass_kg": _pick(envelope_mass, b.envelope_mass_kg if b else None),
            "payload_mass_kg": _pick(payload_mass, p.mass_kg if p else None),
            "burst_diameter_m": _pick(burst_diameter, b.burst_diameter_m if b else None),
        }
        flags = {"envelope_mass_kg": "--envelope-mass", "payload_mass_kg": "--payload-mass",
                 "burst_diameter_m": "--burst-diameter"}
        for name, value in values.items():
            if value is None:
                raise PlanError(f"lift: {name}: is missing; fix: give {flags[name]} or --plan")
        if (neck_lift is None) == (ascent_rate is None):
            raise PlanError("lift: neck lift / ascent rate: need exactly one of the two; "
                            "fix: give --neck-lift or --ascent-rate")
        lp = plan_lift(
            values["envelope_mass_kg"], values["payload_mass_kg"], values["burst_diameter_m"],
            neck_lift_kg=neck_lift, target_ascent_m_s=ascent_rate,
            gas=_pick(gas, b.gas if b else None, "helium"),
            purity=_pick(purity, b.gas_purity if b else None, 1.0),
            drag_coefficient=_pick(drag_coefficient, b.drag_coefficient if b else None,
                                   DEFAULT_ASCENT_DRAG_COEFFICIENT),
            launch_altitude_m=_pick(launch_elevation, elevation, 0.0),
            profile_step_m=step, source=source,
            drag_model=b.drag_model if b else DEFAULT_DRAG_MODEL,
        )
        chute_d = _pick(parachute_diameter, chute.diameter_m if chute else None)
        descent = None
        if chute_d is not None:
            descent = plan_descent(
                lp.payload_mass_kg, chute_d,
                _pick(parachute_cd, chute.drag_coefficient if chute else None, 0.75),
                start_altitude_m=lp.burst_altitude_m, landing_elevation_m=lp.launch_altitude_m,
            )
        typer.echo(format_lift(lp, descent))


def format_lift(lp: LiftPlan, descent: DescentPlan | None = None) -> str:
    """The text report of a lift plan (and descent)."""
    rows: list[tuple[str, str]] = [
        ("gas", f"{lp.gas}, purity {lp.purity:g}"),
        ("envelope mass", f"{lp.envelope_mass_kg:.3f} kg"),
        ("payload mass", f"{lp.payload_mass_kg:.3f} kg"),
        ("neck lift", f"{lp.neck_lift_kg:.3f} kg" + ("  (solved for the ascent rate)"
                                                     if lp.neck_lift_solved else "")),
        ("gross lift", f"{lp.gross_lift_kg:.3f} kg"),
        ("free lift", f"{lp.free_lift_kg:.3f} kg"),
        ("gas amount", f"{lp.gas_amount_mol:.1f} mol ({lp.gas_mass_kg:.3f} kg of gas)"),
        ("gas volume at launch", f"{lp.gas_volume_m3:.3f} m3 "
                                 f"(at {lp.launch_altitude_m:.0f} m, {lp.atmosphere_name})"),
        ("launch diameter", f"{lp.launch_diameter_m:.3f} m"),
        ("launch ascent rate", f"{lp.launch_ascent_rate_m_s:.2f} m/s "
                               f"(Re {lp.launch_reynolds_number:.2g})"),
        ("burst diameter", f"{lp.burst_diameter_m:.2f} m"),
        ("burst altitude", f"{lp.burst_altitude_m:.0f} m"),
        ("ascent rate at burst", f"{lp.burst_ascent_rate_m_s:.2f} m/s "
                                 f"(Re {lp.burst_reynolds_number:.2g})"),
        ("time to burst", f"{lp.time_to_burst_s / 60:.1f} min "
                          f"(mean ascent {lp.mean_ascent_rate_m_s:.2f} m/s)"),
    ]
    if descent is not None:
        rows += [
            ("parachute", f"{descent.parachute_diameter_m:g} m, Cd {descent.drag_coefficient:g}"),
            ("descent rate at sea level", f"{descent.sea_level_rate_m_s:.2f} m/s"),
            ("descent rate after burst", f"{descent.start_rate_m_s:.1f} m/s"),
            ("landing speed", f"{descent.landing_rate_m_s:.2f} m/s "
                              f"at {descent.landing_elevation_m:.0f} m"),
            ("landing kinetic energy", f"{descent.landing_kinetic_energy_j:.1f} J"),
            ("descent time", f"{descent.descent_time_s / 60:.1f} min"),
            ("flight time", f"{(lp.time_to_burst_s + descent.descent_time_s) / 60:.1f} min"),
        ]
    width = max(len(k) for k, _ in rows)
    lines = ["Lift plan", *(f"  {k:<{width}}  {v}" for k, v in rows), "", "Ascent profile"]
    lines.append(f"  {'altitude m':>10}  {'time min':>8}  {'rate m/s':>8}  {'diam m':>6}  "
                 f"{'Re':>8}  {'Cd':>5}")
    pr = lp.profile
    cds = pr.drag_coefficient if pr.drag_coefficient is not None else [lp.drag_coefficient] * len(
        pr.altitude_m)
    for z, t, v, d, re_, cd in zip(pr.altitude_m, pr.time_s, pr.ascent_rate_m_s, pr.diameter_m,
                                   pr.reynolds_number, cds, strict=True):
        lines.append(f"  {z:>10.0f}  {t / 60:>8.1f}  {v:>8.2f}  {d:>6.2f}  {re_:>8.2g}  {cd:>5.2f}")
    lines += ["", "Assumptions"]
    lines += [textwrap.fill(a, 98, initial_indent="  - ", subsequent_indent="    ")
              for a in lp.assumptions]
    if descent is not None:
        lines.append("  - descent at terminal velocity under the parachute; payload mass only "
                     "(envelope remnants not counted)")
    lines.append("  - a plan, not a clearance: check the rules of your aviation authority")
    return "\n".join(lines)
