"""CLI wiring of `balloonpath winds fit` and `winds show` (numbers are tested in test_gp.py)."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np

from balloonpath.cli import main
from balloonpath.winds.gp import load_wind_field
from balloonpath.winds.observations import WindObservations, write_observations

T0 = 1_800_000_000.0


def test_fit_then_show(tmp_path, capsys):
    rng = np.random.default_rng(0)
    n = 40
    obs = WindObservations(
        T0 + rng.uniform(-3600, 3600, n), -41.3 + rng.uniform(-0.5, 0.5, n), 173.2 + rng.uniform(-0.5, 0.5, n),
        rng.uniform(3000, 11000, n), rng.normal(12, 2, n), rng.normal(-3, 2, n), np.full(n, 1.5),
        np.array(["aircraft"] * n, dtype=object),
    )
    write_observations(obs, tmp_path / "obs.csv")
    out = tmp_path / "field.npz"
    assert main(["winds", "fit", str(tmp_path / "obs.csv"), "--background", "uniform:10,-2", "--out", str(out),
                 "--no-optimize"]) == 0
    field = load_wind_field(out)
    assert field.info["observations"] == n
    png = tmp_path / "profile.png"
    # a negative latitude typed after --at must not be read as an option
    assert main(["winds", "show", str(out), "--at", "-41.3,173.2", "--png", str(png), "--alt-max", "15000"]) == 0
    text = capsys.readouterr().out
    assert "profile at -41.3000,173.2000" in text
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_show_rejects_bad_point(tmp_path, capsys):
    assert main(["winds", "show", str(tmp_path / "x.npz"), "--at=north"]) == 2
    assert "--at: 'north' is not 'LAT,LON'" in capsys.readouterr().err
