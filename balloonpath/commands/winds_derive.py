"""`balloonpath winds derive`: aircraft report tables or raw Mode-S messages -> wind observations."""

from __future__ import annotations

from pathlib import Path

import typer

from balloonpath.winds.aircraft import QCConfig, derive_observations
from balloonpath.winds.observations import write_observations


def register(winds_app: typer.Typer) -> None:
    """Add the `derive` command to the `winds` group."""

    @winds_app.command("derive")
    def derive(
        inputs: list[Path] = typer.Argument(..., help="Report tables (CSV) and/or raw messages (time,message)."),
        out: Path = typer.Option(..., "--out", help="Wind-observation CSV to write."),
        pair_window: float = typer.Option(2.0, "--pair-window", min=0.0,
                                          help="Largest time gap (s) between air- and ground-velocity pieces."),
        no_heading_bias: bool = typer.Option(False, "--no-heading-bias",
                                             help="Do not estimate and remove per-aircraft heading bias."),
        receiver: str = typer.Option("", "--receiver", help="Receiver 'lat,lon' for single-frame CPR decoding."),
    ) -> None:
        """Derive quality-controlled wind observations (super-observations) and print the QC counts."""
        reference = None
        if receiver:
            from balloonpath.errors import input_error

            try:
                lat_text, lon_text = receiver.split(",")
                reference = (float(lat_text), float(lon_text))
            except ValueError:
                raise input_error(None, "--receiver", f"'{receiver}' is not 'lat,lon'",
                                  "write e.g. --receiver 46.52,9.01") from None
        config = QCConfig(heading_bias=not no_heading_bias)
        obs, report = derive_observations(inputs, config=config, pair_window_s=pair_window,
                                          reference=reference)
        write_observations(obs, out)
        for line in report.lines():
            typer.echo(line)
        typer.echo(f"wrote {len(obs)} observations to {out}")
