"""`balloonpath winds fit` and `balloonpath winds show`: fuse observations into a wind field, inspect it."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import typer

from balloonpath.errors import input_error
from balloonpath.timeutil import iso_from_posix, parse_iso


def _lat_lon(text: str) -> tuple[float, float]:
    try:
        lat_text, lon_text = text.split(",")
        lat, lon = float(lat_text), float(lon_text)
    except ValueError:
        raise input_error(None, "--at", f"'{text}' is not 'LAT,LON'", "write e.g. --at=-41.3,173.2") from None
    if not (-90.0 <= lat <= 90.0):
        raise input_error(None, "--at", f"latitude {lat} is outside -90..90", "give LAT,LON in degrees")
    return lat, lon


def register(winds_app: typer.Typer) -> None:
    """Add the `fit` and `show` commands to the `winds` group."""

    @winds_app.command("fit")
    def fit(
        observations: list[Path] = typer.Argument(..., help="Wind-observation CSV files (winds derive output)."),
        background: str = typer.Option(..., "--background",
                                       help="uniform:U,V, a forecast grid (.nc/.grib2) or sounding CSV/folder."),
        out: Path = typer.Option(..., "--out", help="Fitted field to write (.npz)."),
        lead_time_h: float = typer.Option(None, "--lead-time-h", min=0.0,
                                          help="Background lead time, h (its error model); default 12."),
        no_optimize: bool = typer.Option(False, "--no-optimize", help="Keep the default hyperparameters."),
        seed: int = typer.Option(0, "--seed", min=0, help="Seed of the optimiser's extra starts."),
        outside: str = typer.Option("error", "--outside", help="Background outside its coverage: error|hold."),
    ) -> None:
        """Fit a Gaussian-process wind field over a background and save it."""
        from balloonpath.winds.gp import fit_wind_field
        from balloonpath.winds.gp_io import load_background
        from balloonpath.winds.observations import WindObservations, read_observations

        obs = WindObservations.empty()
        for path in observations:
            obs = obs.concat(read_observations(path))
        field_bg, spec = load_background(background, outside)
        field = fit_wind_field(obs, field_bg, optimize=not no_optimize, rng=np.random.default_rng(seed),
                               lead_time_h=lead_time_h, background_spec=spec)
        field.save(out)
        hp = field.hyperparameters
        typer.echo(f"observations: {len(obs)}; mode: {field.info.get('mode')}; points: {field.info.get('points', 0)}")
        typer.echo(f"length scales: horizontal {hp.length_h_km:.1f} km, vertical {hp.length_z_km:.2f} km, "
                   f"time {hp.length_t_h:.2f} h; sigma {hp.sigma_m_s:.2f} m/s")
        typer.echo(f"wrote {out}")

    @winds_app.command("show")
    def show(
        field_path: Path = typer.Argument(..., help="Fitted field (.npz) from `winds fit`."),
        at: str = typer.Option(..., "--at", help="LAT,LON in degrees, e.g. --at=-41.3,173.2."),
        time: str = typer.Option(None, "--time", help="ISO 8601 UTC time; default: the field's reference time."),
        alt_max: float = typer.Option(30_000.0, "--alt-max", min=1000.0, help="Top of the profile, m."),
        step: float = typer.Option(1000.0, "--step", min=10.0, help="Altitude step of the printed table, m."),
        png: Path = typer.Option(None, "--png", help="Write the profile plot here (PNG)."),
    ) -> None:
        """Print (and plot) the wind profile with its uncertainty at a point and time."""
        from balloonpath.winds.gp import load_wind_field
        from balloonpath.winds.gp_plot import plot_profile, wind_profile

        lat, lon = _lat_lon(at)
        field = load_wind_field(field_path)
        t = parse_iso(time) if time else field.corridor.time_ref_s
        prof = wind_profile(field, lat, lon, t, alt_max_m=alt_max)
        typer.echo(f"profile at {lat:.4f},{lon:.4f} {iso_from_posix(t)}")
        typer.echo(f"{'alt_m':>8} {'u_m_s':>7} {'v_m_s':>7} {'speed':>7} {'sd_m_s':>7}")
        every = max(int(round(step / (prof.alt_m[1] - prof.alt_m[0]))), 1)
        for i in range(0, prof.alt_m.size, every):
            typer.echo(f"{prof.alt_m[i]:8.0f} {prof.u[i]:7.2f} {prof.v[i]:7.2f} {prof.speed[i]:7.2f} {prof.sd[i]:7.2f}")
        typer.echo(f"observations within 100 km and 3 h: {prof.obs_alt_m.size}")
        if png is not None:
            plot_profile(prof, png)
            typer.echo(f"wrote {png}")
