"""Command-line interface: parse, call the library, print. No science here.

Each sub-command lives in ``balloonpath/commands/<name>.py`` and exposes ``register(app)``.
"""

from __future__ import annotations

import importlib
import sys
import warnings

import typer

from balloonpath import __version__
from balloonpath.errors import BalloonpathError, BalloonpathWarning

COMMAND_MODULES: tuple[str, ...] = (
    "plan",
    "winds",
    "lift",
    "forecast",
    "checklist",
    "verify",
    "chase",
    "batch",
    "windows",
)

app = typer.Typer(
    name="balloonpath",
    help="Forecast where a sounding balloon will fly and land; plan, launch and recover it.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"balloonpath {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Show the version."),
) -> None:
    """Forecast where a sounding balloon will fly and land; plan, launch and recover it."""


for _name in COMMAND_MODULES:
    importlib.import_module(f"balloonpath.commands.{_name}").register(app)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:  # noqa: ANN001
    if issubclass(category, BalloonpathWarning):
        print(f"warning: {message}", file=sys.stderr)
    else:
        print(f"warning: {category.__name__}: {message}", file=sys.stderr)


def _click_classes(name: str) -> tuple[type, ...]:
    """Click's exception class ``name``, from click and from the copy typer >= 0.29 vendors."""
    found = []
    for module in ("click.exceptions", "typer._click.exceptions"):
        try:
            found.append(getattr(importlib.import_module(module), name))
        except (ImportError, AttributeError):
            continue
    return tuple(found)


def main(argv: list[str] | None = None) -> int:
    """Entry point: run the app; user errors become one line on stderr and exit status 2."""
    warnings.showwarning = _show_warning
    try:
        code = app(args=argv, standalone_mode=False)
        if isinstance(code, int) and code:  # typer.Exit(n) is returned, not raised, here
            return code
    except BalloonpathError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(f"error: {exc.filename}: file not found; fix: check the path", file=sys.stderr)
        return 2
    except typer.Exit as exc:
        return int(exc.exit_code or 0)
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # click usage errors and aborts
        if isinstance(exc, _click_classes("UsageError")):
            exc.show()
            return 2
        if isinstance(exc, (*_click_classes("Abort"), typer.Abort)):
            return 1
        raise
    return 0


if __name__ == "__main__":
    sys.exit(main())
