"""Tests of track.csv and members.csv (columns, formats, missing values, atomic writes)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from support.synthetic_result import make_result

from balloonpath.export.tables import write_members_csv, write_track_csv
from balloonpath.result import Points
from balloonpath.timeutil import parse_iso_array


def test_track_csv_round_trip(tmp_path) -> None:  # noqa: ANN001
    result = make_result(n=20, seed=1)
    path = write_track_csv(result.nominal, tmp_path / "track.csv")
    df = pd.read_csv(path)
    assert list(df.columns) == ["time", "latitude", "longitude", "altitude_m", "phase"]
    tr = result.nominal
    assert len(df) == len(tr)
    np.testing.assert_allclose(df["latitude"], tr.lat, atol=5e-7)
    np.testing.assert_allclose(df["longitude"], tr.lon, atol=5e-7)
    np.testing.assert_allclose(df["altitude_m"], tr.alt_m, atol=0.05)
    np.testing.assert_allclose(parse_iso_array(df["time"]), tr.time_s, atol=0.5)
    assert set(df["phase"]) == {"ascent", "descent", "landed"}
    assert df["phase"].iloc[-1] == "landed"
    text = path.read_text()
    assert text.splitlines()[1].split(",")[1] == "47.200000"  # fixed 6 decimals
    assert "\r" not in text
    assert [p for p in tmp_path.iterdir() if p.suffix == ".part"] == []


def test_members_csv_columns_values_and_missing(tmp_path) -> None:  # noqa: ANN001
    base = make_result(n=6, seed=2)
    lat = base.landing.lat.copy()
    lat[3] = np.nan  # a member that never landed
    from dataclasses import replace

    result = replace(
        base,
        landing=Points(
            lat=lat, lon=base.landing.lon, alt_m=base.landing.alt_m, time_s=base.landing.time_s
        ),
    )
    path = write_members_csv(result, tmp_path / "members.csv")
    lines = path.read_text().splitlines()
    header = lines[0].split(",")
    # A parameter named like an event column is prefixed.
    assert header == [
        "member",
        "ascent_rate_m_s",
        "param_burst_altitude_m",
        "burst_latitude",
        "burst_longitude",
        "burst_altitude_m",
        "burst_time",
        "landing_latitude",
        "landing_longitude",
        "landing_elevation_m",
        "landing_time",
    ]
    assert len(lines) == 7
    df = pd.read_csv(path)
    np.testing.assert_array_equal(df["member"], np.arange(6))
    np.testing.assert_allclose(
        df["ascent_rate_m_s"], result.member_params["ascent_rate_m_s"], atol=5e-5
    )
    np.testing.assert_allclose(df["burst_latitude"], result.burst.lat, atol=5e-7)
    assert np.isnan(df["landing_latitude"][3]) and lines[4].split(",")[7] == ""
    assert lines[1].split(",")[2] == "30000.0000"
    again = write_members_csv(result, tmp_path / "again.csv")
    assert again.read_bytes() == path.read_bytes()
