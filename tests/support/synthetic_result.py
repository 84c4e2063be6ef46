"""Synthetic ForecastResult objects for the zones, export and plot tests (invented flights).

The flight is invented: a launch from the fictional field "Larkmoor Common", a straight drift to the
north-east, burst at 30 km, member landings drawn from a seeded bivariate normal (or given
directly).
"""

from __future__ import annotations

import numpy as np

from balloonpath.flight.phases import ASCENT, DESCENT, LANDED
from balloonpath.geodesy import LocalProjection
from balloonpath.result import ForecastResult, Points, Track

T0 = 1_750_000_000.0  # 2025-06-15T15:06:40Z


def make_track(
    lat0: float,
    lon0: float,
    lat1: float,
    lon1: float,
    n: int = 200,
    t0: float = T0,
    burst_alt_m: float = 30_000.0,
    ground_m: float = 100.0,
) -> Track:
    """Straight line from (lat0, lon0) to (lat1, lon1): ascent, descent, landed last point."""
    f = np.linspace(0.0, 1.0, n)
    dlon = (lon1 - lon0 + 180.0) % 360.0 - 180.0
    lon = (lon0 + f * dlon + 180.0) % 360.0 - 180.0
    lat = lat0 + f * (lat1 - lat0)
    k = int(0.7 * n)
    alt = np.where(
        np.arange(n) < k,
        ground_m + (burst_alt_m - ground_m) * f / f[k],
        burst_alt_m - (burst_alt_m - ground_m) * (f - f[k]) / (1.0 - f[k]),
    )
    phase = np.where(np.arange(n) < k, ASCENT, DESCENT).astype(np.int8)
    phase[-1] = LANDED
    time_s = t0 + f * 9_000.0
    return Track(time_s=time_s, lat=lat, lon=lon, alt_m=alt, phase=phase)


def make_result(
    landing_xy: np.ndarray | None = None,
    n: int = 400,
    seed: int = 7,
    lat0: float = 47.2,
    lon0: float = 8.4,
    land_lat: float = 47.55,
    land_lon: float = 9.1,
    sigma_m: tuple[float, float] = (4_000.0, 1_500.0),
    rho: float = 0.4,
    n_tracks: int = 5,
) -> ForecastResult:
    """A ForecastResult with Gaussian landings around (land_lat, land_lon) in a local plane.

    ``landing_xy`` (N, 2), metres east/north of the landing point, replaces the random draw. Bursts
    are put half-way, with half the spread.
    """
    rng = np.random.default_rng(seed)
    if landing_xy is None:
        sx, sy = sigma_m
        cov = np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])
        landing_xy = rng.multivariate_normal([0.0, 0.0], cov, size=n)
        landing_xy[0] = 0.0
    landing_xy = np.asarray(landing_xy, dtype=float)
    n = landing_xy.shape[0]
    proj = LocalProjection(land_lat, land_lon)
    la, lo = proj.to_geographic(landing_xy[:, 0], landing_xy[:, 1])
    mid_lat = 0.5 * (lat0 + land_lat)
    mid_lon = lon0 + 0.5 * (((land_lon - lon0) + 180.0) % 360.0 - 180.0)
    bproj = LocalProjection(mid_lat, mid_lon)
    bla, blo = bproj.to_geographic(0.5 * landing_xy[:, 0], 0.5 * landing_xy[:, 1])
    nominal = make_track(lat0, lon0, float(la[0]), float(lo[0]))
    k = int(np.argmax(nominal.alt_m))
    t_land = nominal.time_s[-1] + rng.normal(0.0, 300.0, n)
    t_land[0] = nominal.time_s[-1]
    burst = Points(
        lat=np.asarray(bla),
        lon=np.asarray(blo),
        alt_m=np.full(n, 30_000.0),
        time_s=np.full(n, nominal.time_s[k]),
    )
    landing = Points(lat=np.asarray(la), lon=np.asarray(lo), alt_m=np.full(n, 100.0), time_s=t_land)
    tracks = [
        make_track(lat0, lon0, float(la[i]), float(lo[i]), n=50) for i in range(min(n_tracks, n))
    ]
    member_tracks = {
        key: np.array([getattr(t, key) for t in tracks])
        for key in ("time_s", "lat", "lon", "alt_m")
    }
    return ForecastResult(
        launch_lat=lat0,
        launch_lon=lon0,
        launch_alt_m=100.0,
        launch_time_s=T0,
        nominal=nominal,
        burst=burst,
        landing=landing,
        member_params={
            "ascent_rate_m_s": 5.0 + 0.25 * rng.standard_normal(n),
            "burst_altitude_m": np.full(n, 30_000.0),
        },
        member_tracks=member_tracks,
        landing_speed_m_s=5.2,
        payload_mass_kg=1.0,
        wind_info={"sources": ["synthetic"]},
        seed=seed,
        plan_path="larkmoor.toml",
        mode="ensemble",
    )
