"""`balloonpath winds ...`: derive wind observations, fit and show a wind field."""

from __future__ import annotations

import importlib

import typer

winds_app = typer.Typer(
    help="Wind sources: derive observations from aircraft data, fit and inspect a wind field.",
    no_args_is_help=True,
)

# Modules that add sub-commands to `winds_app` through their own register(winds_app).
WINDS_COMMAND_MODULES: tuple[str, ...] = ("winds_derive", "winds_fit")


def register(app: typer.Typer) -> None:
    """Add the `winds` group to the app."""
    for name in WINDS_COMMAND_MODULES:
        importlib.import_module(f"balloonpath.commands.{name}").register(winds_app)
    app.add_typer(winds_app, name="winds")
