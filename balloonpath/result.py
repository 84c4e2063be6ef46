"""The forecast's result: a frozen record that zones, exports, plots and reports are functions of."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from balloonpath.flight.phases import PHASE_NAMES


@dataclass(frozen=True)
class Track:
    """One flown or forecast track: arrays of one length.

    Attributes
    ----------
    time_s : POSIX seconds UTC. lat, lon : degrees. alt_m : geometric altitude above sea level, m.
    phase : int8 phase codes (``balloonpath.flight.phases``: 0 ascent, 1 float, 2 descent, 3 landed).
    """

    time_s: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    alt_m: np.ndarray
    phase: np.ndarray

    def __len__(self) -> int:
        return int(np.asarray(self.time_s).size)

    def phase_names(self) -> list[str]:
        """Phase of each point as text."""
        return [PHASE_NAMES[int(p)] for p in self.phase]


@dataclass(frozen=True)
class Points:
    """Per-member event points (burst or landing), arrays of shape (N,)."""

    lat: np.ndarray
    lon: np.ndarray
    alt_m: np.ndarray
    time_s: np.ndarray


@dataclass(frozen=True)
class ForecastResult:
    """Everything a forecast produced.

    Attributes
    ----------
    launch_lat, launch_lon, launch_alt_m, launch_time_s : the nominal start (member 0).
    nominal : Track of member 0 (mean wind, nominal parameters).
    burst, landing : per-member Points; index 0 is the nominal run. ``landing.alt_m`` is the ground elevation.
    member_params : per-member parameters (name -> array (N,)): ascent_rate_m_s, burst_altitude_m,
        descent_sea_level_m_s, launch_delay_s, ...
    member_tracks : a subset of member tracks for plots: arrays (K, T) in a dict with keys
        time_s, lat, lon, alt_m (NaN after landing).
    landing_speed_m_s : nominal vertical speed at touchdown. payload_mass_kg : for the landing energy.
    wind_info : description of the wind sources (names, observation counts, GP hyperparameters).
    warnings : recorded warning messages. seed : the seed used. plan_path : the plan file, as text.
    wind_profile : the wind above the launch site at launch time for plots and reports: arrays
        ``alt_m, u, v, u_std, v_std`` (m/s) and, when observations were used, ``obs_alt_m, obs_lat,
        obs_lon`` (where they were).
    """

    launch_lat: float
    launch_lon: float
    launch_alt_m: float
    launch_time_s: float
    nominal: Track
    burst: Points
    landing: Points
    member_params: dict[str, np.ndarray]
    member_tracks: dict[str, np.ndarray]
    landing_speed_m_s: float
    payload_mass_kg: float | None
    wind_info: dict[str, Any]
    seed: int
    plan_path: str
    mode: str
    warnings: tuple[str, ...] = field(default_factory=tuple)
    wind_profile: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def n_members(self) -> int:
        """Number of members, the nominal one included."""
        return int(self.landing.lat.size)

    @property
    def flight_time_s(self) -> float:
        """Nominal flight time from launch to landing, s."""
        return float(self.landing.time_s[0] - self.launch_time_s)
