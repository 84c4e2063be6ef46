"""The forecast pipeline: plan → winds → flight physics → ensemble → result → files.

Thin orchestration only: every number is computed by a module below this one. The steps are separate
functions so that the launch-window sweep, the recovery loop, verification and the Dask engine reuse them
(load the winds once, fly many times).
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import shutil
import tempfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from balloonpath import __version__
from balloonpath.atmosphere import Atmosphere, StandardAtmosphere
from balloonpath.ensemble import State, Trajectories, draw_member_factors, integrate
from balloonpath.errors import WarningLog, input_error, recording_warnings
from balloonpath.fileio import atomic_write_text
from balloonpath.flight.vertical import VerticalParams, perturbed, vertical_params_from_plan
from balloonpath.geodesy import inverse
from balloonpath.plan import Plan
from balloonpath.result import ForecastResult, Points, Track
from balloonpath.terrain import terrain_from_plan
from balloonpath.timeutil import iso_from_posix
from balloonpath.winds.field import MeanMemberWinds, MemberWinds, UncertainWindField, WindField

# Members whose full tracks are kept for plots (besides the nominal one).
TRACKS_FOR_PLOTS = 40
# Corridor margin around the nominal flight for the wind realisations (m and s).
CORRIDOR_MARGIN_M = 150_000.0
CORRIDOR_MARGIN_S = 6 * 3600.0


@dataclass(frozen=True)
class LoadedWinds:
    """A plan's winds, loaded once: the mean field, its uncertainty model and a description."""

    field: UncertainWindField
    atmosphere: Atmosphere
    info: dict[str, Any]
    observations: Any = None  # WindObservations used in the fit, if any


def load_winds(plan: Plan, log: WarningLog | None = None) -> LoadedWinds:
    """Load the plan's background, observations and uncertainty model (see docs/forecast.md).

    Order: a fitted field (``[winds] field``) is used as it is; otherwise the background comes from the
    gridded file or the soundings, observations (``observations`` tables and ``aircraft`` inputs) are fused
    by Gaussian-process regression, and without observations the background-error model supplies the
    uncertainty.
    """
    from balloonpath.winds import gp

    w = plan.winds
    info: dict[str, Any] = {"sources": [], "observations": 0, "gp": None}
    atmosphere: Atmosphere = StandardAtmosphere()
    if w.field is not None:
        loader = None
        if w.grid is not None or w.sounding:
            # The plan names the background: it overrides the one stored with the fitted field.
            def loader(_spec: dict) -> WindField:
                return _background_of(plan, info, atmosphere_holder)[0]
        atmosphere_holder: list[Atmosphere] = []
        field = gp.load_wind_field(w.field, background_loader=loader)
        if atmosphere_holder:
            atmosphere = atmosphere_holder[0]
        info["sources"].append(f"fitted field {w.field.name}")
        info["gp"] = getattr(field, "info", None)
        info["observations"] = int(getattr(field, "n_observations", 0))
        return LoadedWinds(_calibrated(field, plan, info), atmosphere, info)

    background: WindField
    if w.grid is not None:
        from balloonpath.winds.grid import GridField

        background = GridField.open(w.grid, outside=w.outside)
        info["sources"].append(f"gridded forecast {w.grid.name}")
    else:
        from balloonpath.winds.sounding import (
            SoundingField,
            atmosphere_from_soundings,
            read_sounding,
        )

        soundings = [read_sounding(path) for path in w.sounding]
        background = SoundingField(soundings, outside=w.outside)
        info["sources"].extend(f"sounding {p.name}" for p in w.sounding)
        day_air = atmosphere_from_soundings(soundings)
        if day_air is not None:
            atmosphere = day_air

    from balloonpath.winds.observations import WindObservations, read_observations

    obs = WindObservations.empty()
    for path in w.observations:
        obs = obs.concat(read_observations(path))
        info["sources"].append(f"observations {path.name}")
    if w.aircraft:
        from balloonpath.winds.aircraft import derive_observations

        derived, report = derive_observations(list(w.aircraft), background=background)
        obs = obs.concat(derived)
        info["sources"].extend(f"aircraft {p.name}" for p in w.aircraft)
        info["aircraft_qc"] = report.as_dict()
    info["observations"] = len(obs)
    lead_h = w.forecast_lead_h
    if lead_h is None:
        lead_h = 12.0
        info["forecast_lead_h_assumed"] = lead_h
    field = gp.fit_wind_field(
        obs, background, center=(plan.launch.latitude, plan.launch.longitude), lead_time_h=lead_h,
    )
    info["gp"] = getattr(field, "info", None)
    return LoadedWinds(_calibrated(field, plan, info), atmosphere, info, obs if len(obs) else None)


def _calibrated(field: WindField, plan: Plan, info: dict[str, Any]) -> WindField:
    """The field with the plan's spread calibration applied (``[ensemble] wind_spread_factor`` and
    ``wind_spread_tail_dof``; recorded in ``info``)."""
    factor = float(plan.ensemble.wind_spread_factor)
    nu = plan.ensemble.wind_spread_tail_dof
    info["spread_factor"] = factor
    info["spread_tail_dof"] = nu
    if factor == 1.0 and nu is None:
        return field
    if not hasattr(field, "with_spread_factor"):
        raise input_error(plan.path, "[ensemble] wind_spread_factor",
                          "this wind field has no uncertainty model to scale", "remove the key")
    return field.with_spread_factor(factor, nu)


def _background_of(plan: Plan, info: dict[str, Any], atmosphere_holder: list) -> tuple[WindField, None]:
    """The plan's background field (grid, else soundings); the day's air goes into ``atmosphere_holder``."""
    w = plan.winds
    if w.grid is not None:
        from balloonpath.winds.grid import GridField

        info["sources"].append(f"gridded forecast {w.grid.name}")
        return GridField.open(w.grid, outside=w.outside), None
    from balloonpath.winds.sounding import SoundingField, atmosphere_from_soundings, read_sounding

    soundings = [read_sounding(path) for path in w.sounding]
    info["sources"].extend(f"sounding {p.name}" for p in w.sounding)
    day_air = atmosphere_from_soundings(soundings)
    if day_air is not None:
        atmosphere_holder.append(day_air)
    return SoundingField(soundings, outside=w.outside), None


class NominalFirst:
    """Member 0 flies the mean wind; the others fly their own realisation."""

    def __init__(self, mean: WindField, sampled: MemberWinds) -> None:
        self.mean = mean
        self.sampled = sampled
        self.n_members = sampled.n_members

    def wind(self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray,
             time_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        u, v = self.sampled.wind(members, lat, lon, alt_m, time_s)
        nominal = members == 0
        if np.any(nominal):
            u, v = np.array(u, dtype=float), np.array(v, dtype=float)
            um, vm = self.mean.wind(lat[nominal], lon[nominal], alt_m[nominal], time_s[nominal])
            u[nominal], v[nominal] = um, vm
        return u, v


def fly_nominal(plan: Plan, winds: LoadedWinds, launch_time_s: float | None = None,
                dt_s: float | None = None) -> tuple[Trajectories, VerticalParams]:
    """Fly member 0 alone: mean wind, nominal parameters (independent of N and the seed)."""
    params = vertical_params_from_plan(plan, winds.atmosphere)
    t0 = plan.launch_time_s if launch_time_s is None else launch_time_s
    state = State.at_launch(plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m, t0, 1)
    traj = integrate(
        state, params, MeanMemberWinds(winds.field), terrain_from_plan(plan), winds.atmosphere,
        dt_s=dt_s or plan.ensemble.time_step_s,
    )
    return traj, params


def set_corridor(field: UncertainWindField, plan: Plan, nominal: Trajectories,
                 extra_time_s: float = 0.0) -> UncertainWindField:
    """The field whose sample corridor covers the nominal flight (+ margins); ``field`` is not changed.

    ``extra_time_s`` widens the time range (a launch-window sweep covers all its launch times at once).
    Fields without ``with_corridor`` are returned as they are. Use the returned field for
    :func:`draw_member_winds` (``dataclasses.replace(winds, field=...)``).
    """
    if not hasattr(field, "with_corridor"):
        return field
    lats = np.concatenate([[plan.launch.latitude], nominal.tracks["lat"][0]])
    lons = np.concatenate([[plan.launch.longitude], nominal.tracks["lon"][0]])
    lats, lons = lats[np.isfinite(lats)], lons[np.isfinite(lons)]
    dlat = math.degrees(CORRIDOR_MARGIN_M / 6.371e6)
    dlon = dlat / max(math.cos(math.radians(float(np.mean(lats)))), 0.05)
    top = float(np.nanmax(nominal.max_alt_m))
    out = field.with_corridor(
        float(lats.min() - dlat), float(lats.max() + dlat), float(lons.min() - dlon), float(lons.max() + dlon),
        alt_max_m=top * 1.25 + 1000.0,
        time_min_s=float(np.nanmin(nominal.tracks["time_s"][0]) - 3600.0),
        time_max_s=float(nominal.landing_time_s[0] + CORRIDOR_MARGIN_S + extra_time_s),
    )
    return out if out is not None else field


def draw_member_winds(winds: LoadedWinds, n_members: int, seed: int,
                      member_ids: np.ndarray | None = None) -> MemberWinds:
    """Wind realisations for members 0..n-1 (member 0 flies the mean), one random stream per member.

    Fields with ``sample_members`` (the GP fields) draw member i from its own stream
    (``gp_sample.member_wind_generator(seed, i)``), so a chunk ``member_ids`` of the ensemble of
    ``n_members`` (the Dask engine, :mod:`balloonpath.scale`) gets exactly the realisations the whole
    ensemble would. Other fields draw all members from the seed's wind stream. Use the field returned by
    :func:`set_corridor`.
    """
    field = winds.field
    if hasattr(field, "sample_members"):
        ids = np.arange(n_members) if member_ids is None else np.asarray(member_ids, dtype=int)
        return NominalFirst(field, field.sample_members(ids, seed, n_total=n_members))
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(2**32 - 1,)))
    return NominalFirst(field, field.sample(n_members, rng))


def run_forecast(
    plan: Plan,
    members: int | None = None,
    seed: int | None = None,
    winds: LoadedWinds | None = None,
    launch_time_s: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    member_winds: MemberWinds | None = None,
) -> ForecastResult:
    """Fly the nominal balloon and an ensemble through the plan's winds.

    Parameters
    ----------
    plan : Plan
        The validated flight plan.
    members, seed : int, optional
        Override ``[ensemble] members`` and ``seed``.
    winds : LoadedWinds, optional
        Winds already loaded (a window sweep loads them once); default: load from the plan.
    launch_time_s : float, optional
        Override the launch time (POSIX seconds).
    progress : callable, optional
        ``progress(n_landed, n_total)`` after each integration step.
    member_winds : MemberWinds, optional
        Realisations drawn beforehand (:func:`draw_member_winds`), e.g. once for a whole launch-window
        sweep; they must cover at least ``members`` members and the flight's corridor.

    Returns
    -------
    ForecastResult
        Member 0 is the nominal run.
    """
    log = WarningLog()
    with recording_warnings(log):
        n = int(members if members is not None else plan.ensemble.members)
        s = int(seed if seed is not None else plan.ensemble.seed)
        if winds is None:
            winds = load_winds(plan, log)
        t0 = plan.launch_time_s if launch_time_s is None else float(launch_time_s)
        ens = plan.ensemble
        nominal, params = fly_nominal(plan, winds, t0)
        ground = terrain_from_plan(plan)
        if n > 1:
            rest = np.arange(1, n)
            f = draw_member_factors(
                rest, s, ens.ascent_sigma_fraction, ens.burst_sigma_fraction, ens.descent_sigma_fraction,
                ens.launch_delay_sigma_min * 60.0,
            )
            member_params = perturbed(
                params.repeat(n),
                np.concatenate([[1.0], f.ascent]), np.concatenate([[1.0], f.burst]),
                np.concatenate([[1.0], f.descent]), atmosphere=winds.atmosphere,
            )
            delays = np.concatenate([[0.0], f.launch_delay_s])
            if member_winds is None:
                if ens.wind_uncertainty:
                    field_c = set_corridor(winds.field, plan, nominal)
                    member_winds = draw_member_winds(dataclasses.replace(winds, field=field_c), n, s)
                else:
                    member_winds = MeanMemberWinds(winds.field, n)
            state = State.at_launch(
                plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m, t0 + delays[1:], n - 1
            )
            state = dataclasses.replace(state, members=rest)
            record = np.arange(min(TRACKS_FOR_PLOTS, n - 1))
            others = integrate(state, member_params, member_winds, ground, winds.atmosphere,
                               dt_s=ens.time_step_s, record=record, progress=progress)
        else:
            member_params, delays, others = params, np.zeros(1), None
        result = _assemble(plan, nominal, others, member_params, delays, winds, s, t0)
    return dataclasses.replace(result, warnings=tuple(log.messages))


def _cat(a: np.ndarray, b: Trajectories | None, name: str) -> np.ndarray:
    return a if b is None else np.concatenate([a, getattr(b, name)])


def _assemble(plan: Plan, nominal: Trajectories, others: Trajectories | None, params: VerticalParams,
              delays: np.ndarray, winds: LoadedWinds, seed: int, t0: float) -> ForecastResult:
    tr = nominal.tracks
    keep = np.isfinite(tr["time_s"][0])
    track = Track(tr["time_s"][0][keep], tr["lat"][0][keep], tr["lon"][0][keep], tr["alt_m"][0][keep],
                  tr["phase"][0][keep].astype(np.int8))
    burst = Points(*(_cat(getattr(nominal, f"burst_{k}"), others, f"burst_{k}")
                     for k in ("lat", "lon", "alt_m", "time_s")))
    landing = Points(*(_cat(getattr(nominal, f"landing_{k}"), others, f"landing_{k}")
                       for k in ("lat", "lon", "alt_m", "time_s")))
    member_params = {
        "ascent_rate_m_s": np.asarray(params.ascent_rate_m_s, float),
        "burst_altitude_m": np.asarray(params.burst_altitude_m, float),
        "descent_sea_level_m_s": np.asarray(params.descent_sea_level_m_s, float),
        "launch_delay_s": np.asarray(delays, float),
        "max_altitude_m": _cat(nominal.max_alt_m, others, "max_alt_m"),
    }
    if others is not None:
        member_tracks = {k: others.tracks[k] for k in ("time_s", "lat", "lon", "alt_m")}
    else:
        member_tracks = {k: tr[k][:0] for k in ("time_s", "lat", "lon", "alt_m")}
    payload = plan.payload.mass_kg if plan.payload is not None else None
    profile = wind_profile(winds, plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m,
                           float(np.nanmax(member_params["max_altitude_m"])), t0)
    return ForecastResult(
        launch_lat=plan.launch.latitude, launch_lon=plan.launch.longitude,
        launch_alt_m=plan.launch.elevation_m, launch_time_s=t0, nominal=track, burst=burst, landing=landing,
        member_params=member_params, member_tracks=member_tracks,
        landing_speed_m_s=float(nominal.landing_speed_m_s[0]), payload_mass_kg=payload,
        wind_info=winds.info, seed=seed, plan_path=str(plan.path), mode=plan.mode, wind_profile=profile,
    )


def wind_profile(winds: LoadedWinds, lat: float, lon: float, ground_m: float, top_m: float,
                 time_s: float, levels: int = 121) -> dict[str, np.ndarray]:
    """Mean wind and its standard deviation above a point, for plots and reports."""
    top = float(top_m)
    cov = winds.field.coverage()
    if cov.alt_max_m is not None:
        top = min(top, cov.alt_max_m)
    alt = np.linspace(max(ground_m, cov.alt_min_m or ground_m), top, levels)
    la, lo, tt = np.full_like(alt, lat), np.full_like(alt, lon), np.full_like(alt, time_s)
    u, v = winds.field.wind(la, lo, alt, tt)
    if hasattr(winds.field, "std"):
        su, sv = winds.field.std(la, lo, alt, tt)
    else:
        su, sv = np.zeros_like(alt), np.zeros_like(alt)
    out = {"alt_m": alt, "u": np.asarray(u, float), "v": np.asarray(v, float),
           "u_std": np.asarray(su, float), "v_std": np.asarray(sv, float)}
    if winds.observations is not None:
        o = winds.observations
        out.update({"obs_alt_m": np.asarray(o.alt_m, float), "obs_lat": np.asarray(o.lat, float),
                    "obs_lon": np.asarray(o.lon, float)})
    return out


def _r(x: float, nd: int) -> float | None:
    return None if x is None or not np.isfinite(x) else round(float(x), nd)


def summary_dict(result: ForecastResult, zones: Any) -> dict[str, Any]:
    """The machine-readable summary (shape in docs/design.md)."""
    b, land = result.burst, result.landing
    dist, bearing = inverse(result.launch_lat, result.launch_lon, land.lat[0], land.lon[0])
    speed = result.landing_speed_m_s
    energy = 0.5 * result.payload_mass_kg * speed**2 if result.payload_mass_kg is not None else None
    z = zones.to_summary()
    has_burst = np.isfinite(b.time_s[0])
    out: dict[str, Any] = {
        "balloonpath_version": __version__,
        "plan": Path(result.plan_path).name,
        "mode": result.mode,
        "seed": result.seed,
        "launch": {"latitude": _r(result.launch_lat, 6), "longitude": _r(result.launch_lon, 6),
                   "elevation_m": _r(result.launch_alt_m, 1), "time": iso_from_posix(result.launch_time_s)},
        "burst": {"latitude": _r(b.lat[0], 6), "longitude": _r(b.lon[0], 6), "altitude_m": _r(b.alt_m[0], 1),
                  "time": iso_from_posix(b.time_s[0]) if has_burst else None},
        "landing": {"latitude": _r(land.lat[0], 6), "longitude": _r(land.lon[0], 6),
                    "elevation_m": _r(land.alt_m[0], 1), "time": iso_from_posix(land.time_s[0]),
                    "distance_m": _r(float(dist), 1), "bearing_deg": _r(float(bearing), 2),
                    "vertical_speed_m_s": _r(speed, 3),
                    "kinetic_energy_j": _r(energy, 2) if energy is not None else None},
        "flight_time_s": _r(result.flight_time_s, 1),
        "max_altitude_m": _r(float(result.member_params["max_altitude_m"][0]), 1),
        "time_to_burst_s": _r(float(b.time_s[0] - result.launch_time_s), 1) if has_burst else None,
        "ensemble": {"members": result.n_members, "seed": result.seed, **z["ensemble"]},
        "probabilities": z["probabilities"],
        "winds": _jsonable(result.wind_info),
        "warnings": list(result.warnings),
    }
    return out


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return _jsonable(obj.item())
    if isinstance(obj, np.ndarray):
        return [_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, float):
        return round(obj, 6) if math.isfinite(obj) else None
    if isinstance(obj, Path):
        return obj.name
    return obj


@dataclass(frozen=True)
class WrittenForecast:
    """Where the outputs went."""

    out_dir: Path
    files: tuple[Path, ...]
    summary: dict[str, Any]


def write_outputs(result: ForecastResult, plan: Plan, out_dir: str | Path, report: bool = True) -> WrittenForecast:
    """Compute the zones and write every output file of a forecast, all or nothing.

    The files are written into a hidden staging folder inside ``out_dir`` and moved into place (each move
    atomic) only when all of them have been written, so a failure leaves no partial set behind.
    """
    from balloonpath import plots
    from balloonpath import report as report_mod
    from balloonpath import zones as zones_mod
    from balloonpath.export import geojson, kml, tables

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=".forecast-", suffix=".part", dir=out))
    try:
        log = WarningLog(list(result.warnings))
        with recording_warnings(log):
            zones = zones_mod.compute_zones(result, avoid_path=plan.zones.avoid, water=plan.zones.water)
            files = [
                tables.write_track_csv(result.nominal, stage / "track.csv"),
                tables.write_members_csv(result, stage / "members.csv"),
                geojson.write_geojson(geojson.forecast_geojson(result, zones), stage / "zones.geojson"),
                kml.write_forecast_kml(result, zones, stage / "flight.kml"),
                plots.plot_map(result, zones, stage / "map.png"),
                plots.plot_profile(result, stage / "profile.png"),
            ]
        result = dataclasses.replace(result, warnings=tuple(log.messages))
        summary = summary_dict(result, zones)
        files.append(atomic_write_text(stage / "summary.json", json.dumps(summary, indent=2) + "\n"))
        if report:
            if (out / "checklist.json").exists():  # the report shows a checklist run into this folder
                shutil.copy2(out / "checklist.json", stage / "checklist.json")
            files.append(report_mod.write_report(result, zones, summary, plan, stage / "report.html"))
        names = [Path(f).name for f in files if f is not None]
        for name in names:
            os.replace(stage / name, out / name)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
    return WrittenForecast(out, tuple(out / name for name in names), summary)
