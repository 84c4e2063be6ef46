"""`balloonpath checklist`: the pre-flight checklist from a plan, a rules profile and a forecast
folder.
"""

from __future__ import annotations

import json
from pathlib import Path

import typer
from rich.console import Console

from balloonpath.checklist import build_checklist, checklist_json, render_markdown, render_terminal
from balloonpath.fileio import atomic_write_text
from balloonpath.plan import load_plan


def register(app: typer.Typer) -> None:
    """Add the command to the app."""

    @app.command("checklist")
    def checklist(
        plan_file: Path = typer.Argument(..., help="Flight-plan TOML file."),
        forecast: Path | None = typer.Option(
            None,
            "--forecast",
            help="Forecast folder (summary.json, track.csv) written by `balloonpath forecast`.",
        ),
        rules: str | None = typer.Option(
            None,
            "--rules",
            help="Rules profile: us-part101, icao-annex2, "
            "generic or a profile TOML file (default: the plan's [checklist] rules).",
        ),
        out: Path = typer.Option(
            Path("checklist.md"),
            "--out",
            help="Markdown output; the JSON goes beside it with the suffix .json.",
        ),
        width: int | None = typer.Option(
            None, "--width", help="Terminal width for the printed tables."
        ),
    ) -> None:
        """Print the pre-flight checklist and write it as Markdown and JSON; exit 1 if a blocking
        item fails.
        """
        plan = load_plan(plan_file)
        result = build_checklist(plan, forecast_dir=forecast, profile=rules)
        console = Console(width=width)
        for part in render_terminal(result):
            console.print(part)
        atomic_write_text(out, render_markdown(result))
        json_path = out.with_suffix(".json")
        atomic_write_text(
            json_path, json.dumps(checklist_json(result), indent=2, ensure_ascii=False) + "\n"
        )
        console.print(f"written: {out}, {json_path}")
        if result.blocking_failures:
            raise typer.Exit(1)
