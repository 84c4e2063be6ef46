"""CSV tables of a forecast: the nominal track and one row per ensemble member.

Fixed number formats (latitude/longitude 6 decimals, about 0.1 m; altitudes 0.1 m; member parameters
4 decimals), ISO 8601 UTC times with a trailing Z, LF line ends, an empty field for a missing value.
Files are written atomically.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from balloonpath.fileio import atomic_write_text
from balloonpath.result import ForecastResult, Track
from balloonpath.timeutil import iso_from_posix

TRACK_COLUMNS = ("time", "latitude", "longitude", "altitude_m", "phase")
MEMBER_EVENT_COLUMNS = (
    "burst_latitude",
    "burst_longitude",
    "burst_altitude_m",
    "burst_time",
    "landing_latitude",
    "landing_longitude",
    "landing_elevation_m",
    "landing_time",
)


def _f(x: float, nd: int) -> str:
    x = float(x)
    if not math.isfinite(x):
        return ""
    text = f"{x:.{nd}f}"
    return "0." + "0" * nd if text == "-0." + "0" * nd else text


def _t(x: float) -> str:
    return iso_from_posix(x) if math.isfinite(float(x)) else ""


def track_csv_text(track: Track) -> str:
    """Text of ``track.csv``: ``time,latitude,longitude,altitude_m,phase`` (phase names)."""
    out = io.StringIO()
    out.write(",".join(TRACK_COLUMNS) + "\n")
    names = track.phase_names()
    for i in range(len(track)):
        out.write(
            f"{_t(track.time_s[i])},{_f(track.lat[i], 6)},{_f(track.lon[i], 6)},"
            f"{_f(track.alt_m[i], 1)},{names[i]}\n"
        )
    return out.getvalue()


def write_track_csv(track: Track, path: str | Path) -> Path:
    """Write a track as CSV atomically (see :func:`track_csv_text`)."""
    return atomic_write_text(path, track_csv_text(track))


def members_csv_text(result: ForecastResult) -> str:
    """Text of ``members.csv``: ``member``, the member parameters (sorted by name), then burst and
    landing.

    Columns after the parameters: ``burst_latitude, burst_longitude, burst_altitude_m, burst_time,
    landing_latitude, landing_longitude, landing_elevation_m, landing_time``. Row 0 is the nominal
    run.
    """
    n = result.n_members
    names = sorted(result.member_params)
    params = {
        k: np.broadcast_to(np.asarray(result.member_params[k], dtype=float), (n,)) for k in names
    }
    b, land = result.burst, result.landing
    out = io.StringIO()
    header = [f"param_{k}" if k in MEMBER_EVENT_COLUMNS or k == "member" else k for k in names]
    out.write(",".join(("member", *header, *MEMBER_EVENT_COLUMNS)) + "\n")
    for i in range(n):
        cells = [str(i)]
        cells += [_f(params[k][i], 4) for k in names]
        cells += [_f(b.lat[i], 6), _f(b.lon[i], 6), _f(b.alt_m[i], 1), _t(b.time_s[i])]
        cells += [_f(land.lat[i], 6), _f(land.lon[i], 6), _f(land.alt_m[i], 1), _t(land.time_s[i])]
        out.write(",".join(cells) + "\n")
    return out.getvalue()


def write_members_csv(result: ForecastResult, path: str | Path) -> Path:
    """Write one row per member atomically (see :func:`members_csv_text`)."""
    return atomic_write_text(path, members_csv_text(result))
