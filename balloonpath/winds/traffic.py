"""Invented air traffic over a demo scenario: report tables and raw Mode-S messages with known true winds.

Airways join invented waypoints on a ring about 160 km around the scenario centre, each with a dog-leg (so
aircraft turn); cruise traffic flies them at 30,000-41,000 ft; an invented airport 25 km from the centre has
departures climbing and arrivals descending on straight legs to and from the ring. Winds come from any object
with ``.wind(lat, lon, alt_m, time_s)`` (the truth). Measured quantities get noise; a fraction of aircraft
carry a constant heading bias (an out-of-date magnetic variation table); a fraction also report BDS 4,4
winds. Everything is drawn from the caller's seeded generator.

The kinematics are deliberately simple: the aircraft steers its ground track toward the next waypoint and
turns at most at the rate of a 25 degree bank (omega = g tan(phi) / TAS, common practice for airliners);
heading and ground speed follow from the wind triangle (:func:`~balloonpath.winds.aircraft.
heading_and_ground_speed`). Cruise speed is a Mach number 0.76-0.84; climbs and descents fly 250 kt
calibrated below 10,000 ft and 290 kt above (common practice), converted with the standard atmosphere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from balloonpath.atmosphere import density_kg_m3, speed_of_sound_m_s, temperature_k
from balloonpath.fileio import atomic_path
from balloonpath.geodesy import forward, inverse, step_east_north
from balloonpath.units import KNOT_M_S, m_from_ft
from balloonpath.winds import modes_encode as enc
from balloonpath.winds.aircraft import altitude_from_pressure_altitude, heading_and_ground_speed
from balloonpath.winds.field import direction_speed_from_uv
from balloonpath.winds.magnetic import declination_deg
from balloonpath.winds.modes import calibrated_airspeed_kt_from_mach

G0 = 9.80665
MAX_BANK_DEG = 25.0


@dataclass(frozen=True)
class TrafficNoise:
    """Standard deviations of the measurement noise added to reported values (our invented choices).

    Ground velocity from GNSS is the best measured piece; heading carries the largest wind error
    (1 degree = 4 m/s at cruise, REFERENCES.md section 6).
    """

    ground_speed_m_s: float = 0.3
    track_deg: float = 0.1
    true_airspeed_m_s: float = 0.5
    heading_deg: float = 0.2
    reported_wind_m_s: float = 1.0
    heading_bias_min_deg: float = 2.0
    heading_bias_max_deg: float = 4.0


@dataclass(frozen=True)
class Traffic:
    """Simulated aircraft states on a regular time grid: arrays of shape (n_steps, n_aircraft).

    ``active`` marks the states to report. Angles in degrees (true), speeds in m/s, ``pressure_altitude_ft``
    is what the altimeter reports and ``alt_m`` the geometric altitude (standard atmosphere) where the true
    wind ``wind_u, wind_v`` was taken. ``heading_bias_deg`` (n_aircraft,) and ``meteo`` (n_aircraft,) are
    per aircraft; ``declination_deg`` is the WMM2025 declination at each state.
    """

    time_s: np.ndarray
    icao: tuple[str, ...]
    active: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    pressure_altitude_ft: np.ndarray
    alt_m: np.ndarray
    ground_speed_m_s: np.ndarray
    track_deg: np.ndarray
    true_airspeed_m_s: np.ndarray
    heading_deg: np.ndarray
    roll_deg: np.ndarray
    track_rate_deg_s: np.ndarray
    vertical_rate_ft_min: np.ndarray
    mach: np.ndarray
    wind_u: np.ndarray
    wind_v: np.ndarray
    declination_deg: np.ndarray
    heading_bias_deg: np.ndarray
    meteo: np.ndarray
    noise: TrafficNoise


def _waypoints(center_lat: float, center_lon: float) -> tuple[np.ndarray, np.ndarray, tuple[float, float]]:
    """Eight invented ring waypoints (every 45 degrees, 160 km) and the airport (25 km at 200 degrees)."""
    az = np.arange(8) * 45.0 + 10.0
    lat, lon = forward(np.full(8, center_lat), np.full(8, center_lon), az, np.full(8, 160_000.0))
    a_lat, a_lon = forward(center_lat, center_lon, 200.0, 25_000.0)
    return np.asarray(lat), np.asarray(lon), (float(a_lat), float(a_lon))


def simulate_traffic(
    truth: object,
    center_lat: float,
    center_lon: float,
    t0_s: float,
    duration_s: float,
    rng: np.random.Generator,
    n_aircraft: int = 40,
    heading_bias_fraction: float = 0.15,
    meteo_fraction: float = 0.1,
    step_s: float = 1.0,
    noise: TrafficNoise | None = None,
) -> Traffic:
    """Simulate invented traffic around a scenario centre with winds from ``truth``.

    Parameters
    ----------
    truth : object with ``wind(lat, lon, alt_m, time_s) -> (u, v)``
        The true wind field.
    center_lat, center_lon : float
        Scenario centre, degrees.
    t0_s, duration_s : float
        Reported period (POSIX seconds and length); aircraft already en route at t0 are included.
    rng : numpy.random.Generator
        All random choices.
    n_aircraft : int
        Number of flights: 70 % cruise on airways, 15 % departures, 15 % arrivals.
    heading_bias_fraction, meteo_fraction : float
        Fractions of aircraft with a heading bias (2-4 degrees, either sign) and with BDS 4,4 wind reports.
    step_s : float
        Time step of the simulation and of the stored states.

    Returns
    -------
    Traffic
    """
    noise = noise or TrafficNoise()
    ring_lat, ring_lon, airport = _waypoints(center_lat, center_lon)
    n = int(n_aircraft)
    kinds = rng.choice(3, size=n, p=[0.7, 0.15, 0.15])  # 0 cruise, 1 departure, 2 arrival
    routes_lat = np.zeros((n, 3))
    routes_lon = np.zeros((n, 3))
    start = rng.integers(0, 8, size=n)
    for i in range(n):
        s = start[i]
        if kinds[i] == 0:  # ring -> dog-leg point near the centre -> opposite side (+/- one)
            e = (s + 4 + rng.integers(-1, 2)) % 8
            mid_lat, mid_lon = forward(center_lat, center_lon, rng.uniform(0, 360), rng.uniform(10e3, 50e3))
            routes_lat[i] = [ring_lat[s], float(mid_lat), ring_lat[e]]
            routes_lon[i] = [ring_lon[s], float(mid_lon), ring_lon[e]]
        elif kinds[i] == 1:  # departure: airport -> ring
            routes_lat[i] = [airport[0], airport[0], ring_lat[s]]
            routes_lon[i] = [airport[1], airport[1], ring_lon[s]]
        else:  # arrival: ring -> airport
            routes_lat[i] = [ring_lat[s], ring_lat[s], airport[0]]
            routes_lon[i] = [ring_lon[s], ring_lon[s], airport[1]]
    cruise_ft = rng.integers(30, 42, size=n) * 1000.0
    mach_cruise = rng.uniform(0.76, 0.84, size=n)
    # A flight takes about 25-40 minutes; start some before t0 so that traffic is already en route.
    lead = 2400.0
    entry = t0_s - lead + rng.uniform(0.0, duration_s + lead, size=n)
    n_steps = int(math.ceil((duration_s + lead) / step_s)) + 1
    times = t0_s - lead + np.arange(n_steps) * step_s

    lat = routes_lat[:, 0].copy()
    lon = routes_lon[:, 0].copy()
    leg = np.ones(n, dtype=int)  # index of the waypoint being flown to
    alt_ft = np.where(kinds == 1, 1500.0, cruise_ft)
    _, track = inverse(lat, lon, routes_lat[:, 2], routes_lon[:, 2])
    track = np.asarray(track, dtype=float)
    alive = np.ones(n, dtype=bool)
    bias = np.where(rng.random(n) < heading_bias_fraction,
                    rng.choice([-1.0, 1.0], size=n) * rng.uniform(noise.heading_bias_min_deg,
                                                                  noise.heading_bias_max_deg, size=n), 0.0)
    meteo = rng.random(n) < meteo_fraction
    icao = tuple(f"{v:06X}" for v in rng.choice(np.arange(0x3C0000, 0x3CFFFF), size=n, replace=False))

    names = ("lat", "lon", "pressure_altitude_ft", "alt_m", "ground_speed_m_s", "track_deg",
             "true_airspeed_m_s", "heading_deg", "roll_deg", "track_rate_deg_s", "vertical_rate_ft_min", "mach",
             "wind_u", "wind_v")
    store = {k: np.full((n_steps, n), np.nan) for k in names}
    active = np.zeros((n_steps, n), dtype=bool)
    for k, t in enumerate(times):
        flying = alive & (entry <= t)
        if not np.any(flying):
            continue
        idx = np.nonzero(flying)[0]
        z = altitude_from_pressure_altitude(m_from_ft(alt_ft[idx]))
        u, v = truth.wind(lat[idx], lon[idx], z, np.full(idx.size, t))
        u, v = np.broadcast_to(u, idx.shape).astype(float), np.broadcast_to(v, idx.shape).astype(float)
        a = speed_of_sound_m_s(z)
        cas = np.where(alt_ft[idx] < 10_000.0, 250.0, 290.0) * KNOT_M_S
        tas_climb = cas * np.sqrt(1.225 / density_kg_m3(z))
        tas = np.minimum(mach_cruise[idx] * a, tas_climb)
        tas = np.where(kinds[idx] == 0, mach_cruise[idx] * a, tas)
        # Steering toward the next waypoint at most at the 25-degree-bank turn rate.
        dist, desired = inverse(lat[idx], lon[idx], routes_lat[idx, leg[idx]], routes_lon[idx, leg[idx]])
        dist, desired = np.asarray(dist, dtype=float), np.asarray(desired, dtype=float)
        max_rate = np.degrees(G0 * math.tan(math.radians(MAX_BANK_DEG)) / tas)
        diff = (desired - track[idx] + 180.0) % 360.0 - 180.0
        turn = np.clip(diff, -max_rate * step_s, max_rate * step_s)
        rate = turn / step_s
        roll = np.degrees(np.arctan(tas * np.radians(rate) / G0))
        heading, gs = heading_and_ground_speed(tas, track[idx], u, v)
        # Vertical profile.
        vr = np.zeros(idx.size)
        dep = kinds[idx] == 1
        arr = kinds[idx] == 2
        vr[dep & (alt_ft[idx] < cruise_ft[idx])] = 2500.0
        if np.any(arr):
            total, _ = inverse(lat[idx], lon[idx], routes_lat[idx, 2], routes_lon[idx, 2])
            target = 3000.0 + np.asarray(total) / 1852.0 * 318.0  # 3-degree path, about 318 ft per NM
            vr = np.where(arr & (alt_ft[idx] > target), -2500.0, vr)
        for name, value in (("lat", lat[idx]), ("lon", lon[idx]), ("pressure_altitude_ft", alt_ft[idx]),
                            ("alt_m", z), ("ground_speed_m_s", gs), ("track_deg", track[idx]),
                            ("true_airspeed_m_s", tas), ("heading_deg", heading), ("roll_deg", roll),
                            ("track_rate_deg_s", rate), ("vertical_rate_ft_min", vr), ("mach", tas / a),
                            ("wind_u", u), ("wind_v", v)):
            store[name][k, idx] = value
        active[k, idx] = t >= t0_s
        # Advance.
        trk = np.radians(track[idx])
        new_lat, new_lon = step_east_north(lat[idx], lon[idx], gs * np.sin(trk) * step_s,
                                           gs * np.cos(trk) * step_s, z)
        lat[idx], lon[idx] = new_lat, new_lon
        track[idx] = (track[idx] + turn) % 360.0
        alt_ft[idx] = np.clip(alt_ft[idx] + vr * step_s / 60.0, 1000.0,
                              np.where(dep, cruise_ft[idx], 50_000.0))
        reached = dist < np.maximum(gs * step_s * 3.0, 3_000.0)
        last = leg[idx] == 2
        leg[idx[reached & ~last]] += 1
        alive[idx[reached & last]] = False
        alive[idx[(arr & (alt_ft[idx] <= 3000.0))]] = False

    keep = times >= t0_s - 1e-9
    decl = np.full((n_steps, n), np.nan)
    on = np.isfinite(store["lat"])
    decl[on] = declination_deg(store["lat"][on], store["lon"][on], store["alt_m"][on],
                               np.broadcast_to(times[:, None], on.shape)[on], resolution_deg=0.02)
    sl = {k: val[keep] for k, val in store.items()}
    return Traffic(
        time_s=times[keep], icao=icao, active=active[keep], declination_deg=decl[keep],
        heading_bias_deg=bias, meteo=meteo, noise=noise, **sl,
    )


def _row_noise(traffic: Traffic, rng: np.random.Generator, shape: tuple[int, ...]) -> dict[str, np.ndarray]:
    nz = traffic.noise
    return {
        "gs": rng.normal(0.0, nz.ground_speed_m_s, shape), "trk": rng.normal(0.0, nz.track_deg, shape),
        "tas": rng.normal(0.0, nz.true_airspeed_m_s, shape), "hdg": rng.normal(0.0, nz.heading_deg, shape),
    }


def write_report_table(traffic: Traffic, path: str | Path, rng: np.random.Generator, interval_s: float = 4.0,
                       magnetic_fraction: float = 0.5, include_roll: bool = True) -> Path:
    """Write a report table (CSV, columns of docs/aircraft-winds.md) with noisy measured values.

    Each aircraft reports every ``interval_s``; rows of a ``magnetic_fraction`` of aircraft give the magnetic
    heading (true - declination), the others the true heading; heading bias and noise are added to both.
    Meteo aircraft add rows with their reported wind (``wind_u_m_s``, ``wind_v_m_s``).
    """
    from balloonpath.timeutil import iso_from_posix

    step = max(1, round(interval_s / float(traffic.time_s[1] - traffic.time_s[0]))) \
        if traffic.time_s.size > 1 else 1
    n_ac = len(traffic.icao)
    magnetic = rng.random(n_ac) < magnetic_fraction
    header = ["time", "aircraft", "latitude", "longitude", "pressure_altitude_ft", "ground_speed_kt",
              "track_deg", "true_airspeed_kt", "heading_deg", "heading_reference"]
    if include_roll:
        header.append("roll_deg")
    header += ["wind_u_m_s", "wind_v_m_s"]
    lines = [",".join(header)]
    for k in range(0, traffic.time_s.size, step):
        on = np.nonzero(traffic.active[k])[0]
        if on.size == 0:
            continue
        e = _row_noise(traffic, rng, on.shape)
        wn = rng.normal(0.0, traffic.noise.reported_wind_m_s, (2, on.size))
        stamp = iso_from_posix(traffic.time_s[k])
        for j, i in enumerate(on):
            heading = traffic.heading_deg[k, i] + traffic.heading_bias_deg[i] + e["hdg"][j]
            ref = "true"
            if magnetic[i]:
                heading -= traffic.declination_deg[k, i]
                ref = "magnetic"
            cells = [stamp, traffic.icao[i], f"{traffic.lat[k, i]:.5f}", f"{traffic.lon[k, i]:.5f}",
                     f"{traffic.pressure_altitude_ft[k, i]:.0f}",
                     f"{(traffic.ground_speed_m_s[k, i] + e['gs'][j]) / KNOT_M_S:.2f}",
                     f"{(traffic.track_deg[k, i] + e['trk'][j]) % 360.0:.3f}",
                     f"{(traffic.true_airspeed_m_s[k, i] + e['tas'][j]) / KNOT_M_S:.2f}",
                     f"{heading % 360.0:.3f}", ref]
            if include_roll:
                cells.append(f"{traffic.roll_deg[k, i]:.2f}")
            lines.append(",".join(cells + ["", ""]))
            if traffic.meteo[i]:
                wind = [f"{traffic.wind_u[k, i] + wn[0, j]:.2f}", f"{traffic.wind_v[k, i] + wn[1, j]:.2f}"]
                lines.append(",".join(cells[:5] + [""] * (len(header) - 7) + wind))
    with atomic_path(path) as tmp:
        tmp.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return Path(path)


def write_raw_messages(
    traffic: Traffic,
    path: str | Path,
    rng: np.random.Generator,
    commb_interval_s: float = 4.0,
    corrupt_fraction: float = 0.0,
    malformed_fraction: float = 0.0,
    time_format: str = "iso",
) -> tuple[Path, int]:
    """Write raw messages (CSV ``time,message``), streaming one simulation step at a time.

    Every stored state gives an ADS-B airborne position (even and odd frames alternate) and an airborne
    velocity (subtype 1); every ``commb_interval_s`` (phase random per aircraft) a Comm-B BDS 5,0 reply and
    0.4 s later a BDS 6,0 reply (magnetic heading = true - declination + bias + noise), and meteo aircraft a
    BDS 4,4 reply. A ``corrupt_fraction`` of messages get one flipped bit (a wrong CRC) and a
    ``malformed_fraction`` of lines are garbage. ``time_format`` is ``"iso"`` (ISO 8601 with milliseconds)
    or ``"posix"`` (seconds). Returns the path and the number of lines written.
    """
    from datetime import UTC, datetime

    nz = traffic.noise
    n_ac = len(traffic.icao)
    phase = rng.uniform(0.0, commb_interval_s, size=n_ac)
    next_commb = traffic.time_s[0] + phase
    count = 0

    def stamp(t: float) -> str:
        if time_format == "posix":
            return f"{t:.3f}"
        return datetime.fromtimestamp(t, tz=UTC).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"

    with atomic_path(path) as tmp, tmp.open("w", encoding="utf-8") as out:
        out.write("time,message\n")
        for k in range(traffic.time_s.size):
            on = np.nonzero(traffic.active[k])[0]
            if on.size == 0:
                continue
            t = float(traffic.time_s[k])
            e = _row_noise(traffic, rng, on.shape)
            jitter = rng.uniform(0.0, 0.4, size=(2, on.size))
            chunk: list[tuple[float, str]] = []
            for j, i in enumerate(on):
                icao = traffic.icao[i]
                palt = float(traffic.pressure_altitude_ft[k, i])
                chunk.append((t + jitter[0, j], enc.airborne_position(
                    icao, float(traffic.lat[k, i]), float(traffic.lon[k, i]), palt, odd=bool(k % 2))))
                gs_kt = (traffic.ground_speed_m_s[k, i] + e["gs"][j]) / KNOT_M_S
                trk = traffic.track_deg[k, i] + e["trk"][j]
                vr = float(traffic.vertical_rate_ft_min[k, i])
                chunk.append((t + 0.5 + jitter[1, j], enc.airborne_velocity(icao, gs_kt, trk, vr)))
                if t >= next_commb[i]:
                    next_commb[i] += commb_interval_s
                    tas_kt = (traffic.true_airspeed_m_s[k, i] + e["tas"][j]) / KNOT_M_S
                    mach = float(traffic.mach[k, i])
                    ias = float(calibrated_airspeed_kt_from_mach(mach, palt))
                    hdg_mag = (traffic.heading_deg[k, i] + traffic.heading_bias_deg[i] + e["hdg"][j]
                               - traffic.declination_deg[k, i])
                    chunk.append((t + 0.1, enc.comm_b(icao, palt, enc.bds50(
                        float(traffic.roll_deg[k, i]), trk, gs_kt, float(traffic.track_rate_deg_s[k, i]),
                        tas_kt))))
                    chunk.append((t + 0.5, enc.comm_b(icao, palt, enc.bds60(hdg_mag, ias, mach, vr, vr))))
                    if traffic.meteo[i]:
                        wu = traffic.wind_u[k, i] + rng.normal(0.0, nz.reported_wind_m_s)
                        wv = traffic.wind_v[k, i] + rng.normal(0.0, nz.reported_wind_m_s)
                        direction, speed = direction_speed_from_uv(wu, wv)
                        sat = float(temperature_k(traffic.alt_m[k, i])) - 273.15
                        chunk.append((t + 0.8, enc.comm_b(icao, palt, enc.bds44(
                            float(speed) / KNOT_M_S, float(direction), sat))))
            chunk.sort(key=lambda item: item[0])
            for tm, message in chunk:
                if corrupt_fraction and rng.random() < corrupt_fraction:
                    bit = int(rng.integers(0, 112))
                    message = f"{int(message, 16) ^ (1 << bit):028X}"
                if malformed_fraction and rng.random() < malformed_fraction:
                    out.write(f"{stamp(tm)},{message[: int(rng.integers(3, 20))]}Z\n")
                else:
                    out.write(f"{stamp(tm)},{message}\n")
                count += 1
    return Path(path), count


__all__ = ["Traffic", "TrafficNoise", "simulate_traffic", "write_raw_messages", "write_report_table"]
