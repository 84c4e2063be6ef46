"""Speed of wind evaluation: microseconds per point for 1000-point calls (GridField and
SoundingField).

Writes an invented forecast file (0.25 deg, 17 pressure levels, 9 times 3 h apart, 12 x 16 deg) to a
temporary folder, opens a corridor subset and times ``wind()`` on 1000 random points, as the
integrator
calls it (about 2000 calls per forecast). Run: ``.venv/bin/python benchmarks/grid_speed.py``.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from balloonpath.winds.grid import GridField
from balloonpath.winds.sounding import SoundingField, read_sounding
from balloonpath.winds.synthetic import (
    SyntheticAtmosphereField,
    write_grid_netcdf,
    write_sounding_csv,
)

T0 = 1_800_000_000.0
N_POINTS = 1000
N_CALLS = 300


def _time_calls(field, q) -> float:
    field.wind(*q)
    start = time.perf_counter()
    for _ in range(N_CALLS):
        field.wind(*q)
    return (time.perf_counter() - start) / N_CALLS / N_POINTS * 1e6


def main() -> None:
    truth = SyntheticAtmosphereField(45.0, 10.0, T0, seed=1)
    rng = np.random.default_rng(0)
    q = (
        rng.uniform(42.0, 48.0, N_POINTS),
        rng.uniform(5.0, 15.0, N_POINTS),
        rng.uniform(500.0, 30_000.0, N_POINTS),
        T0 + rng.uniform(0.0, 12 * 3600.0, N_POINTS),
    )
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "forecast.nc"
        start = time.perf_counter()
        write_grid_netcdf(
            truth,
            path,
            np.arange(39.0, 51.01, 0.25),
            np.arange(2.0, 18.01, 0.25),
            times_s=T0 + 3 * 3600.0 * np.arange(9),
        )
        print(f"write synthetic NetCDF           {time.perf_counter() - start:8.2f} s")
        start = time.perf_counter()
        grid = GridField.open(path, bbox=(42.0, 48.0, 5.0, 15.0), time_range=(T0, T0 + 12 * 3600.0))
        print(
            f"open corridor subset             {time.perf_counter() - start:8.2f} s  "
            f"cube {grid._cube.shape} (t, z, lat, lon), dz {grid.dz_m:.0f} m"
        )
        print(f"GridField.wind, 1000 points      {_time_calls(grid, q):8.3f} us/point")
        write_sounding_csv(truth, 45.0, 10.0, T0, Path(tmp) / "s.csv")
        one = SoundingField([read_sounding(Path(tmp) / "s.csv")])
        print(f"SoundingField (1 sounding)       {_time_calls(one, q):8.3f} us/point")
        paths = []
        for k, (la, lo) in enumerate([(44.0, 8.0), (46.0, 12.0), (47.0, 7.0)]):
            for h in (0, 12):
                p = Path(tmp) / f"s{k}_{h}.csv"
                write_sounding_csv(truth, la, lo, T0 + h * 3600.0, p)
                paths.append(p)
        several = SoundingField([read_sounding(p) for p in paths])
        print(f"SoundingField (3 sites x 2 times){_time_calls(several, q):8.3f} us/point")
        start = time.perf_counter()
        truth.wind(*q)
        print(
            f"SyntheticAtmosphereField         "
            f"{(time.perf_counter() - start) / N_POINTS * 1e6:8.3f} us/point"
        )


if __name__ == "__main__":
    main()
