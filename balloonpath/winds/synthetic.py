"""Invented, analytic "truth" wind fields and writers of synthetic sounding and forecast files.

Everything here is invented data for tests, demos and benchmarks: no real weather. A
:class:`SyntheticAtmosphereField` is a smooth, deterministic function of (lat, lon, alt, time) with
the structure a balloon meets: a boundary layer whose wind grows with height and turns (veers)
toward the free-atmosphere wind, a mid-latitude jet stream near 10-12 km with a meandering axis,
vertical shear, horizontal gradients over ~500 km, slow change over hours, weak stratospheric winds
above about 20 km, and seeded "weather" eddies. :meth:`SyntheticAtmosphereField.perturbed` returns a
second smooth field that differs by extra eddies of a chosen amplitude: a background forecast with
plausible error.

Air temperature and pressure are those of US Standard Atmosphere 1976 ([NOAA1976]); pressure-level
heights vary horizontally by about +-1 % (+-100 m at 10 km), lower on the poleward side of the jet
as in a westerly flow, which is qualitative only (not balanced geostrophically).

Writers: :func:`write_sounding_csv` (our sounding table, rounded like real reports),
:func:`write_grid_netcdf` (CF NetCDF on pressure levels) and :func:`write_grid_grib2` (GRIB2 from
ecCodes' ``GRIB2`` sample; needs ``balloonpath[grib]``). Same inputs give byte-identical files.

References
----------
[NOAA1976] U.S. Standard Atmosphere, 1976 (through ``balloonpath.atmosphere``).
[Hellmann] The 1/7 power law for the wind profile in the surface layer, u(z) = u(10 m) (z / 10
    m)^(1/7): common practice (engineering rule of thumb), not a fit to any real day.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from balloonpath.atmosphere import (
    G0,
    altitude_from_pressure,
    geopotential_from_geometric,
    usa1976,
)
from balloonpath.fileio import atomic_path, atomic_write_text
from balloonpath.timeutil import iso_from_posix
from balloonpath.winds.field import Coverage, direction_speed_from_uv

_EARTH_RADIUS_M = 6_371_008.8  # mean Earth radius, for the field's local coordinates only

#: Default sounding levels: every 100 m to 3 km, every 250 m to 30 km.
DEFAULT_SOUNDING_LEVELS_M = np.concatenate(
    [np.arange(0.0, 3_000.0, 100.0), np.arange(3_000.0, 30_001.0, 250.0)]
)
#: Default pressure levels of synthetic forecast files, hPa.
DEFAULT_LEVELS_HPA = (
    1000.0,
    925.0,
    850.0,
    700.0,
    600.0,
    500.0,
    400.0,
    300.0,
    250.0,
    200.0,
    150.0,
    100.0,
    70.0,
    50.0,
    30.0,
    20.0,
    10.0,
)


@dataclass(frozen=True)
class _Modes:
    """Eddies: u, v += sum_j a_j sin(kx_j x + ky_j y + kz_j z - w_j t + phase_j)."""

    kx: np.ndarray
    ky: np.ndarray
    kz: np.ndarray
    omega: np.ndarray
    phase: np.ndarray
    amp_u: np.ndarray
    amp_v: np.ndarray

    @staticmethod
    def draw(rng: np.random.Generator, n: int, rms_m_s: float) -> _Modes:
        """``n`` random modes whose u and v each have root-mean-square ``rms_m_s``.

        Horizontal wavelengths 400-1600 km (log-uniform), vertical 3-12 km, periods 12-72 h.
        """
        lam_h = np.exp(rng.uniform(np.log(400e3), np.log(1600e3), n))
        azimuth = rng.uniform(0.0, 2.0 * np.pi, n)
        lam_z = rng.uniform(3e3, 12e3, n)
        period = rng.uniform(12.0, 72.0, n) * 3600.0
        # E[sin^2] = 1/2, so n modes of amplitude a have rms a sqrt(n/2).
        scale = rms_m_s / math.sqrt(n / 2.0) if n else 0.0
        return _Modes(
            kx=2 * np.pi / lam_h * np.sin(azimuth),
            ky=2 * np.pi / lam_h * np.cos(azimuth),
            kz=2 * np.pi / lam_z * rng.choice([-1.0, 1.0], n),
            omega=2 * np.pi / period,
            phase=rng.uniform(0.0, 2 * np.pi, n),
            amp_u=rng.normal(0.0, 1.0, n) * scale,
            amp_v=rng.normal(0.0, 1.0, n) * scale,
        )

    def evaluate(
        self, x: np.ndarray, y: np.ndarray, z: np.ndarray, t: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Sum of the modes at the points (x, y east/north m, z m, t s since t0)."""
        u = np.zeros(np.shape(x))
        v = np.zeros(np.shape(x))
        for j in range(self.kx.size):
            s = np.sin(
                self.kx[j] * x + self.ky[j] * y + self.kz[j] * z - self.omega[j] * t + self.phase[j]
            )
            u += self.amp_u[j] * s
            v += self.amp_v[j] * s
        return u, v


class SyntheticAtmosphereField:
    """An invented, smooth wind field with realistic structure (a :class:`WindField`).

    Parameters
    ----------
    center_lat, center_lon : float
        Centre of the scenario, degrees; the field is defined everywhere but designed for ~1000 km
        around.
    t0_s : float
        Reference time, POSIX seconds (meanders and eddies move relative to it).
    seed : int
        Seed of the eddies and the meander phase (numpy ``default_rng``).
    jet_speed_m_s : float
        Peak speed of the jet core on its axis (30-60 m/s is typical of mid-latitude jets).
    jet_altitude_m, jet_depth_m : float
        Altitude of the jet core and its vertical half-thickness (Gaussian sd above the core; below
        it the speed ramps up over the whole troposphere).
    jet_direction_deg : float
        Direction the jet blows FROM, degrees true (270: a westerly jet).
    jet_width_m : float
        Cross-jet half-width (Gaussian sd), m; off-axis the jet keeps 35 % of its speed.
    meander_amplitude_m, meander_wavelength_m, meander_period_s : float
        The jet axis snakes with this amplitude and wavelength and drifts with this period.
    surface_wind_m_s : float
        Speed at 10 m above ``ground_m`` ([Hellmann] 1/7 power law up to the boundary-layer top).
    boundary_layer_m : float
        Boundary-layer depth above the ground, m.
    surface_turn_deg : float
        At the ground the wind is backed by this angle from the free-atmosphere wind (Ekman
        turning), decreasing linearly to zero at the boundary-layer top; mirrored in the southern
        hemisphere.
    stratosphere_speed_m_s, stratosphere_direction_deg : float
        Wind reached above about 24 km (blended in between 18 and 24 km); 90 deg: summer easterlies.
    eddy_rms_m_s : float
        Root-mean-square of each component of the seeded eddies.
    n_eddies : int
        Number of eddy modes.
    ground_m : float
        Ground altitude used for the boundary layer, m.
    """

    def __init__(
        self,
        center_lat: float,
        center_lon: float,
        t0_s: float,
        seed: int = 0,
        *,
        jet_speed_m_s: float = 45.0,
        jet_altitude_m: float = 11_000.0,
        jet_depth_m: float = 3_000.0,
        jet_direction_deg: float = 270.0,
        jet_width_m: float = 500e3,
        meander_amplitude_m: float = 250e3,
        meander_wavelength_m: float = 3_000e3,
        meander_period_s: float = 4 * 86_400.0,
        surface_wind_m_s: float = 5.0,
        boundary_layer_m: float = 1_000.0,
        surface_turn_deg: float = 25.0,
        stratosphere_speed_m_s: float = 8.0,
        stratosphere_direction_deg: float = 90.0,
        eddy_rms_m_s: float = 3.0,
        n_eddies: int = 12,
        ground_m: float = 0.0,
    ) -> None:
        self.center_lat = float(center_lat)
        self.center_lon = float(center_lon)
        self.t0_s = float(t0_s)
        self.seed = int(seed)
        self.params = {
            "jet_speed_m_s": float(jet_speed_m_s),
            "jet_altitude_m": float(jet_altitude_m),
            "jet_depth_m": float(jet_depth_m),
            "jet_direction_deg": float(jet_direction_deg),
            "jet_width_m": float(jet_width_m),
            "meander_amplitude_m": float(meander_amplitude_m),
            "meander_wavelength_m": float(meander_wavelength_m),
            "meander_period_s": float(meander_period_s),
            "surface_wind_m_s": float(surface_wind_m_s),
            "boundary_layer_m": float(boundary_layer_m),
            "surface_turn_deg": float(surface_turn_deg),
            "stratosphere_speed_m_s": float(stratosphere_speed_m_s),
            "stratosphere_direction_deg": float(stratosphere_direction_deg),
            "eddy_rms_m_s": float(eddy_rms_m_s),
            "n_eddies": int(n_eddies),
            "ground_m": float(ground_m),
        }
        rng = np.random.default_rng(self.seed)
        self._meander_phase = float(rng.uniform(0.0, 2 * np.pi))
        self._strength_phase = float(rng.uniform(0.0, 2 * np.pi))
        self._modes = [_Modes.draw(rng, int(n_eddies), float(eddy_rms_m_s))]
        self.perturbation: tuple[int, float] | None = None

    # --------------------------------------------------------------------------------- variants
    def perturbed(
        self, seed: int, amplitude_m_s: float, n_modes: int = 12
    ) -> SyntheticAtmosphereField:
        """This field plus extra seeded eddies: a smooth "forecast" with error of rms ``amplitude``.

        The returned field equals this one plus ``n_modes`` modes (same spectrum as the eddies)
        whose u and v each have root-mean-square ``amplitude_m_s`` over space and time; the
        difference is smooth and correlated over hundreds of km, a few km in altitude and hours.
        """
        other = object.__new__(SyntheticAtmosphereField)
        other.__dict__.update(self.__dict__)
        rng = np.random.default_rng([int(seed), 7_919])
        other._modes = [*self._modes, _Modes.draw(rng, int(n_modes), float(amplitude_m_s))]
        other.perturbation = (int(seed), float(amplitude_m_s))
        return other

    # ------------------------------------------------------------------------------- geometry
    def _local(self, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Equirectangular east/north metres from the centre (the field's own coordinates)."""
        dlon = (np.asarray(lon, dtype=float) - self.center_lon + 180.0) % 360.0 - 180.0
        x = _EARTH_RADIUS_M * np.radians(dlon) * math.cos(math.radians(self.center_lat))
        y = _EARTH_RADIUS_M * np.radians(np.asarray(lat, dtype=float) - self.center_lat)
        return x, y

    def _jet_frame(
        self, x: np.ndarray, y: np.ndarray, t: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Along-jet unit vector components (ex, ey) and the distance from the jet axis, m."""
        p = self.params
        toward = math.radians(p["jet_direction_deg"] + 180.0)
        ax, ay = math.sin(toward), math.cos(toward)  # along-jet (east, north)
        nx, ny = -ay, ax  # 90 deg to the left of the flow
        s = x * ax + y * ay
        n = x * nx + y * ny
        k = 2 * np.pi / p["meander_wavelength_m"]
        w = 2 * np.pi / p["meander_period_s"]
        arg = k * s - w * t + self._meander_phase
        axis = p["meander_amplitude_m"] * np.sin(arg)
        slope = p["meander_amplitude_m"] * k * np.cos(arg)
        norm = np.sqrt(1.0 + slope**2)
        ex = (ax + slope * nx) / norm
        ey = (ay + slope * ny) / norm
        return ex, ey, n - axis

    def _cross_jet_distance(
        self, lat: np.ndarray, lon: np.ndarray, time_s: np.ndarray
    ) -> np.ndarray:
        x, y = self._local(lat, lon)
        _, _, d = self._jet_frame(x, y, np.asarray(time_s, dtype=float) - self.t0_s)
        return d

    # ------------------------------------------------------------------------------- interface
    def wind(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """u, v (m/s) at the points (arrays broadcast together)."""
        lat, lon, z, ts = np.broadcast_arrays(
            *(np.asarray(a, dtype=float) for a in (lat, lon, alt_m, time_s))
        )
        p = self.params
        t = ts - self.t0_s
        x, y = self._local(lat, lon)
        ex, ey, d = self._jet_frame(x, y, t)

        # Free-atmosphere along-jet speed: tropospheric ramp to the core, Gaussian decay above it.
        zj, depth = p["jet_altitude_m"], p["jet_depth_m"]
        strength = 1.0 + 0.1 * np.sin(2 * np.pi * t / (1.7 * 86_400.0) + self._strength_phase)
        cross = 0.35 + 0.65 * np.exp(-0.5 * (d / p["jet_width_m"]) ** 2)
        sigma = np.where(z < zj, zj / 2.2, depth)
        profile = np.exp(-0.5 * ((z - zj) / sigma) ** 2)
        h_top = p["boundary_layer_m"]
        bl_top_speed = p["surface_wind_m_s"] * (h_top / 10.0) ** (1.0 / 7.0)
        z_rel = z - p["ground_m"]
        speed_free = bl_top_speed + (p["jet_speed_m_s"] * strength * cross - bl_top_speed) * profile
        above = z > zj
        speed_free = np.where(above, p["jet_speed_m_s"] * strength * cross * profile, speed_free)

        # Boundary layer: power-law speed and Ekman turning (backed near the ground in the NH).
        inside = z_rel < h_top
        h = np.clip(z_rel, 1.0, h_top)
        bl_factor = np.where(inside, (h / h_top) ** (1.0 / 7.0), 1.0)
        sign = 1.0 if self.center_lat >= 0 else -1.0
        turn = np.radians(sign * p["surface_turn_deg"]) * np.clip(1.0 - z_rel / h_top, 0.0, 1.0)
        # Backing = rotating the vector counter-clockwise (toward the left of the flow in the NH).
        c, s_ = np.cos(turn), np.sin(turn)
        speed = speed_free * bl_factor
        u = speed * (ex * c - ey * s_)
        v = speed * (ex * s_ + ey * c)

        # Stratosphere: blend toward a weak wind of its own direction between 18 and 24 km.
        blend = np.clip((z - 18_000.0) / 6_000.0, 0.0, 1.0)
        blend = blend * blend * (3.0 - 2.0 * blend)  # smoothstep
        toward = math.radians(p["stratosphere_direction_deg"] + 180.0)
        su = p["stratosphere_speed_m_s"] * math.sin(toward)
        sv = p["stratosphere_speed_m_s"] * math.cos(toward)
        u = (1.0 - blend) * u + blend * su
        v = (1.0 - blend) * v + blend * sv

        # Eddies, weaker in the boundary layer and the stratosphere.
        taper = np.clip(z_rel / h_top, 0.3, 1.0) * (1.0 - 0.6 * blend)
        for modes in self._modes:
            du, dv = modes.evaluate(x, y, z, t)
            u = u + taper * du
            v = v + taper * dv
        return u, v

    def coverage(self) -> Coverage:
        """Defined everywhere from 500 m below sea level to 60 km."""
        return Coverage(alt_min_m=-500.0, alt_max_m=60_000.0)

    # ------------------------------------------------------------------------------- thermo
    def thermo(self, alt_m: np.ndarray | float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Temperature (K), pressure (Pa) and dew point (K) at geometric altitudes.

        USSA 1976 temperature and pressure; the dew point is 3 K below the temperature at the
        ground, the depression growing by 1.5 K per km (invented, plausible for a dry-ish day).
        """
        z = np.asarray(alt_m, dtype=float)
        state = usa1976(z)
        depression = 3.0 + 1.5e-3 * np.clip(z - self.params["ground_m"], 0.0, None)
        return state.temperature_k, state.pressure_pa, state.temperature_k - depression

    def level_altitude_m(
        self, pressure_pa: np.ndarray | float, lat: np.ndarray, lon: np.ndarray, time_s: np.ndarray
    ) -> np.ndarray:
        """Geometric altitude of a pressure level at the points (broadcast together).

        USSA 1976 pressure altitude times (1 - 0.01 erf(d / jet_width)), d the signed distance to
        the left of the jet axis (poleward for a westerly jet in the northern hemisphere): heights
        fall toward the cold side of the jet, by about 100 m at 10 km.
        """
        from scipy.special import erf

        z_std = altitude_from_pressure(pressure_pa)
        d = self._cross_jet_distance(lat, lon, time_s)
        return z_std * (1.0 - 0.01 * erf(d / self.params["jet_width_m"]))


# ----------------------------------------------------------------------------------------- writers
def _fmt(value: float, decimals: int) -> str:
    text = f"{value:.{decimals}f}"
    return "0" + text[2:] if text.startswith("-0") and float(text) == 0 else text


def sounding_csv_text(
    field: SyntheticAtmosphereField | object,
    lat: float,
    lon: float,
    time_s: float,
    levels_m: np.ndarray | None = None,
    with_thermo: bool = True,
) -> str:
    """The text :func:`write_sounding_csv` writes (see there)."""
    z = np.asarray(DEFAULT_SOUNDING_LEVELS_M if levels_m is None else levels_m, dtype=float)
    u, v = field.wind(np.full(z.shape, lat), np.full(z.shape, lon), z, np.full(z.shape, time_s))  # type: ignore[attr-defined]
    direction, speed = direction_speed_from_uv(u, v)
    direction = np.round(direction) % 360.0
    lines = [
        "# balloonpath sounding table (synthetic: invented data)",
        f"# site_latitude = {lat:.5f}",
        f"# site_longitude = {lon:.5f}",
        f"# time = {iso_from_posix(time_s)}",
    ]
    if with_thermo:
        thermo = getattr(field, "thermo", None)
        if thermo is None:
            state = usa1976(z)
            t_k, p_pa, td_k = state.temperature_k, state.pressure_pa, state.temperature_k - 5.0
        else:
            t_k, p_pa, td_k = thermo(z)
        lines.append(
            "altitude_m,pressure_hpa,temperature_c,dewpoint_c,wind_direction_deg,wind_speed_m_s"
        )
        for k in range(z.size):
            p_hpa = p_pa[k] / 100.0
            lines.append(
                ",".join(
                    [
                        _fmt(z[k], 0),
                        _fmt(p_hpa, 1 if p_hpa >= 10 else 2),
                        _fmt(t_k[k] - 273.15, 1),
                        _fmt(td_k[k] - 273.15, 1),
                        _fmt(direction[k], 0),
                        _fmt(speed[k], 1),
                    ]
                )
            )
    else:
        lines.append("altitude_m,wind_direction_deg,wind_speed_m_s")
        for k in range(z.size):
            lines.append(f"{_fmt(z[k], 0)},{_fmt(direction[k], 0)},{_fmt(speed[k], 1)}")
    return "\n".join(lines) + "\n"


def write_sounding_csv(
    field: SyntheticAtmosphereField | object,
    lat: float,
    lon: float,
    time_s: float,
    path: str | Path,
    levels_m: np.ndarray | None = None,
    with_thermo: bool = True,
) -> Path:
    """Write the field's vertical profile at one site and time as a sounding table.

    A real sonde drifts with the wind; this writes the vertical column above the site (the drift is
    part of what the forecast should get right, not of the table). Columns ``altitude_m`` (whole
    metres), ``pressure_hpa`` (0.1 hPa, 0.01 below 10 hPa), ``temperature_c``, ``dewpoint_c`` (0.1
    deg C), ``wind_direction_deg`` (FROM, whole degrees), ``wind_speed_m_s`` (0.1 m/s); header lines
    give the site and time. ``with_thermo=False`` writes altitude and wind only.

    Parameters
    ----------
    field : WindField
        Usually a :class:`SyntheticAtmosphereField` (its ``thermo`` gives T, p, dew point; other
        fields get USSA 1976 with a 5 K dew-point depression).
    lat, lon, time_s : float
        Site and time.
    path : str or Path
        Output file (written atomically).
    levels_m : array_like, optional
        Geometric altitudes, default :data:`DEFAULT_SOUNDING_LEVELS_M`.
    """
    return atomic_write_text(
        path, sounding_csv_text(field, lat, lon, time_s, levels_m, with_thermo)
    )


def _grid_values(
    field: SyntheticAtmosphereField,
    lats: np.ndarray,
    lons: np.ndarray,
    levels_hpa: np.ndarray,
    times_s: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """u, v and geometric altitude, shape (nt, nl, ny, nx)."""
    t, p, la, lo = np.meshgrid(times_s, levels_hpa * 100.0, lats, lons, indexing="ij")
    if hasattr(field, "level_altitude_m"):
        z = field.level_altitude_m(p, la, lo, t)
    else:
        z = altitude_from_pressure(p)
    u, v = field.wind(la, lo, z, t)
    return u, v, z


def write_grid_netcdf(
    field: SyntheticAtmosphereField,
    path: str | Path,
    lats: np.ndarray,
    lons: np.ndarray,
    levels_hpa: np.ndarray | tuple[float, ...] = DEFAULT_LEVELS_HPA,
    times_s: np.ndarray | tuple[float, ...] = (0.0,),
    height: str = "z",
    dtype: str = "float32",
) -> Path:
    """Write the field as a CF NetCDF forecast file on pressure levels.

    Variables ``u`` (eastward_wind, m s-1), ``v`` (northward_wind, m s-1) and either ``z``
    (geopotential, m2 s-2, ``height="z"``) or ``gh`` (geopotential_height, m, ``height="gh"``), on
    dimensions (time, level, latitude, longitude); ``level`` in hPa (air_pressure, positive down),
    time as seconds since 1970-01-01. Longitudes are written as given (pass 0..360 or -180..180
    values to test both conventions), latitudes too (descending is fine).
    """
    import xarray as xr

    lats = np.asarray(lats, dtype=float)
    lons = np.asarray(lons, dtype=float)
    levels = np.asarray(levels_hpa, dtype=float)
    times = np.asarray(times_s, dtype=float)
    u, v, z = _grid_values(field, lats, lons, levels, times)
    h = geopotential_from_geometric(z)
    dims = ("time", "level", "latitude", "longitude")
    data_vars = {
        "u": (
            dims,
            u.astype(dtype),
            {"standard_name": "eastward_wind", "units": "m s-1", "long_name": "eastward wind"},
        ),
        "v": (
            dims,
            v.astype(dtype),
            {"standard_name": "northward_wind", "units": "m s-1", "long_name": "northward wind"},
        ),
    }
    if height == "z":
        data_vars["z"] = (
            dims,
            (h * G0).astype(dtype),
            {"standard_name": "geopotential", "units": "m2 s-2"},
        )
    elif height == "gh":
        data_vars["gh"] = (
            dims,
            h.astype(dtype),
            {"standard_name": "geopotential_height", "units": "m"},
        )
    else:
        raise ValueError(f"height must be 'z' or 'gh', not {height!r}")
    ds = xr.Dataset(
        data_vars,
        coords={
            "time": ("time", (times * 1e9).astype("datetime64[ns]"), {"standard_name": "time"}),
            "level": (
                "level",
                levels,
                {"standard_name": "air_pressure", "units": "hPa", "positive": "down"},
            ),
            "latitude": ("latitude", lats, {"standard_name": "latitude", "units": "degrees_north"}),
            "longitude": (
                "longitude",
                lons,
                {"standard_name": "longitude", "units": "degrees_east"},
            ),
        },
        attrs={"Conventions": "CF-1.8", "title": "balloonpath synthetic forecast (invented data)"},
    )
    encoding = {
        "time": {
            "units": "seconds since 1970-01-01 00:00:00",
            "calendar": "standard",
            "dtype": "float64",
        }
    }
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
    return Path(path)


def write_grid_grib2(
    field: SyntheticAtmosphereField,
    path: str | Path,
    lats: np.ndarray,
    lons: np.ndarray,
    levels_hpa: np.ndarray | tuple[float, ...] = DEFAULT_LEVELS_HPA,
    times_s: np.ndarray | tuple[float, ...] = (0.0,),
    bits_per_value: int = 24,
) -> Path:
    """Write the field as GRIB2 messages (u, v, gh on isobaric levels) from ecCodes' sample.

    The grid must be regular in latitude and longitude (``regular_ll``); the reference time is the
    first time (a whole hour) and later times are forecast steps in whole hours. Needs
    ``balloonpath[grib]``.

    Raises
    ------
    ImportError
        When ecCodes is not installed.
    ValueError
        For irregular grids or times that are not whole hours after the first.
    """
    import eccodes

    lats = np.asarray(lats, dtype=float)
    lons = np.asarray(lons, dtype=float)
    levels = np.asarray(levels_hpa, dtype=float)
    times = np.asarray(times_s, dtype=float)
    for name, axis in (("latitudes", lats), ("longitudes", lons)):
        steps = np.diff(axis)
        if axis.size < 2 or not np.allclose(steps, steps[0], atol=1e-6):
            raise ValueError(f"write_grid_grib2: {name} must be regularly spaced")
    hours = (times - times[0]) / 3600.0
    if not np.allclose(hours, np.round(hours)) or times[0] % 3600.0:
        raise ValueError("write_grid_grib2: times must be whole hours")
    u, v, z = _grid_values(field, lats, lons, levels, times)
    gh = geopotential_from_geometric(z)
    ref = iso_from_posix(times[0])
    date = int(ref[0:4] + ref[5:7] + ref[8:10])
    hhmm = int(ref[11:13]) * 100
    with atomic_path(path) as tmp, tmp.open("wb") as out:
        for it in range(times.size):
            for il, level in enumerate(levels):
                for short, values in (("gh", gh), ("u", u), ("v", v)):
                    gid = eccodes.codes_grib_new_from_samples("GRIB2")
                    try:
                        eccodes.codes_set(gid, "centre", 0)
                        eccodes.codes_set(gid, "dataDate", date)
                        eccodes.codes_set(gid, "dataTime", hhmm)
                        eccodes.codes_set(gid, "typeOfLevel", "isobaricInhPa")
                        eccodes.codes_set(gid, "level", int(level))
                        eccodes.codes_set(gid, "shortName", short)
                        eccodes.codes_set(gid, "stepUnits", 1)
                        eccodes.codes_set(gid, "forecastTime", int(round(hours[it])))
                        eccodes.codes_set(gid, "Ni", lons.size)
                        eccodes.codes_set(gid, "Nj", lats.size)
                        eccodes.codes_set(gid, "latitudeOfFirstGridPointInDegrees", float(lats[0]))
                        eccodes.codes_set(gid, "latitudeOfLastGridPointInDegrees", float(lats[-1]))
                        eccodes.codes_set(
                            gid, "longitudeOfFirstGridPointInDegrees", float(lons[0] % 360.0)
                        )
                        eccodes.codes_set(
                            gid, "longitudeOfLastGridPointInDegrees", float(lons[-1] % 360.0)
                        )
                        eccodes.codes_set(
                            gid, "iDirectionIncrementInDegrees", float(abs(lons[1] - lons[0]))
                        )
                        eccodes.codes_set(
                            gid, "jDirectionIncrementInDegrees", float(abs(lats[1] - lats[0]))
                        )
                        eccodes.codes_set(gid, "jScansPositively", 1 if lats[1] > lats[0] else 0)
                        eccodes.codes_set(gid, "bitsPerValue", int(bits_per_value))
                        eccodes.codes_set_values(gid, values[it, il].ravel())
                        eccodes.codes_write(gid, out)
                    finally:
                        eccodes.codes_release(gid)
    return Path(path)


__all__ = [
    "DEFAULT_LEVELS_HPA",
    "DEFAULT_SOUNDING_LEVELS_M",
    "SyntheticAtmosphereField",
    "sounding_csv_text",
    "write_grid_grib2",
    "write_grid_netcdf",
    "write_sounding_csv",
]


def misforecast(
    truth: SyntheticAtmosphereField,
    jet_seed: int | list[int],
    eddy_seed: int,
    eddy_rms_m_s: float,
    jet_speed_fraction: float = 0.06,
    jet_altitude_m: float = 300.0,
    jet_direction_deg: float = 3.0,
) -> SyntheticAtmosphereField:
    """A plausible background forecast of ``truth``: its jet a little misplaced, plus smooth eddies.

    Real forecasts' largest wind errors are a jet a little too strong or weak, too high or low, or turned;
    such errors are coherent through the troposphere (vertical scales > 10 km), which eddies alone lack
    (their 3-12 km vertical wavelengths average out over an ascent). The returned field is the same field
    (same seed: same eddies and meander) with the jet speed scaled by 1 + N(0, jet_speed_fraction^2), its
    altitude shifted by N(0, jet_altitude_m^2) and its direction turned by N(0, jet_direction_deg^2) (draws
    from ``numpy.random.default_rng(jet_seed)``), plus eddies of rms ``eddy_rms_m_s`` per component
    (:meth:`SyntheticAtmosphereField.perturbed` with ``eddy_seed``). The default sizes are our own
    choice for a 12 h forecast (invented data, not a verification statistic).
    """
    rng = np.random.default_rng(jet_seed)
    p = dict(truth.params)
    p["jet_speed_m_s"] *= 1.0 + jet_speed_fraction * float(rng.normal())
    p["jet_altitude_m"] += jet_altitude_m * float(rng.normal())
    p["jet_direction_deg"] += jet_direction_deg * float(rng.normal())
    shifted = SyntheticAtmosphereField(truth.center_lat, truth.center_lon, truth.t0_s, seed=truth.seed, **p)
    return shifted.perturbed(seed=eddy_seed, amplitude_m_s=eddy_rms_m_s)
