"""Regenerate the invented demo scenarios (deterministic; run from the repository root).

    .venv/bin/python scenarios/generate.py

Every number written here is invented: a synthetic "truth" atmosphere (balloonpath.winds.synthetic), a
background forecast that is the truth with its jet a little misplaced plus smooth seeded eddies
(``misforecast``), and simulated aircraft flying through
the truth (balloonpath.winds.traffic). Place names are invented too. The files are committed so that the
demo and the tests need no generation step; this script documents how they were made.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from balloonpath.fileio import atomic_write_text
from balloonpath.timeutil import parse_iso
from balloonpath.winds.synthetic import (
    SyntheticAtmosphereField,
    misforecast,
    write_grid_netcdf,
    write_sounding_csv,
)
from balloonpath.winds.traffic import simulate_traffic, write_raw_messages, write_report_table

HERE = Path(__file__).resolve().parent


def prairie() -> None:
    """Inland plains launch: gridded background forecast + aircraft reports and raw messages."""
    out = HERE / "prairie"
    out.mkdir(exist_ok=True)
    lat0, lon0 = 38.60, -98.90
    launch = parse_iso("2027-05-14T12:30:00Z")
    truth = SyntheticAtmosphereField(lat0, lon0, launch, seed=11, jet_speed_m_s=42.0,
                                     jet_direction_deg=255.0, surface_wind_m_s=4.0, ground_m=560.0)
    background = misforecast(truth, jet_seed=[7, 2027], eddy_seed=5, eddy_rms_m_s=2.5)
    lats = np.arange(36.5, 41.01, 0.25)
    lons = np.arange(-101.5, -94.99, 0.25)
    times = launch + np.arange(-3, 10, 3) * 3600.0
    levels = (1000.0, 925.0, 850.0, 700.0, 600.0, 500.0, 400.0, 300.0, 250.0, 200.0, 150.0, 100.0, 70.0,
              50.0, 30.0, 20.0, 10.0, 7.0, 5.0, 3.0, 2.0)
    write_grid_netcdf(background, out / "forecast.nc", lats, lons, levels_hpa=levels, times_s=times)
    rng = np.random.default_rng(2027)
    traffic = simulate_traffic(truth, lat0, lon0, launch - 2.5 * 3600.0, 2.0 * 3600.0, rng, n_aircraft=36,
                               step_s=2.0)
    write_report_table(traffic, out / "aircraft_reports.csv", rng, interval_s=20.0)
    # A short raw-message recording (the same traffic) for `winds derive` on raw messages.
    short = simulate_traffic(truth, lat0, lon0, launch - 1.0 * 3600.0, 600.0, np.random.default_rng(7),
                             n_aircraft=10, step_s=1.0)
    write_raw_messages(short, out / "raw_messages.csv", np.random.default_rng(8), corrupt_fraction=0.01,
                       malformed_fraction=0.002)
    # The truth, for checks: the sounding a sonde would have measured at launch time.
    write_sounding_csv(truth, lat0, lon0, launch, out / "truth_sounding.csv")


def coastal() -> None:
    """Coastal launch where the zone can reach the sea: one morning sounding + avoid areas."""
    out = HERE / "coastal"
    out.mkdir(exist_ok=True)
    lat0, lon0 = 40.15, -75.15
    launch = parse_iso("2027-09-03T14:00:00Z")
    truth = SyntheticAtmosphereField(lat0, lon0, launch, seed=23, jet_speed_m_s=32.0,
                                     jet_direction_deg=280.0, surface_wind_m_s=5.0, ground_m=40.0,
                                     stratosphere_speed_m_s=6.0)
    background = truth.perturbed(seed=9, amplitude_m_s=3.0)
    levels = np.concatenate([np.arange(0.0, 3_000.0, 100.0), np.arange(3_000.0, 36_001.0, 250.0)])
    write_sounding_csv(background, lat0, lon0, launch - 2 * 3600.0, out / "sounding.csv", levels_m=levels)
    avoid = {
        "type": "FeatureCollection",
        "features": [
            {"type": "Feature", "properties": {"name": "Kestrel Reservoir"},
             "geometry": {"type": "Polygon", "coordinates": [[
                 [-74.62, 40.02], [-74.48, 40.02], [-74.48, 40.12], [-74.62, 40.12], [-74.62, 40.02]]]}},
            {"type": "Feature", "properties": {"name": "Marrow Quarry restricted area"},
             "geometry": {"type": "Polygon", "coordinates": [[
                 [-74.40, 39.88], [-74.22, 39.88], [-74.22, 39.98], [-74.40, 39.98], [-74.40, 39.88]]]}},
        ],
    }
    atomic_write_text(out / "avoid.geojson", json.dumps(avoid, indent=1) + "\n")


if __name__ == "__main__":
    prairie()
    coastal()
    print("scenarios written under", HERE)
