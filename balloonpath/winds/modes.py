"""Raw Mode-S / ADS-B messages -> aircraft states for the wind triangle (streaming, bounded memory).

Input: CSV lines ``time,message`` (ISO 8601 UTC or POSIX seconds; 28- or 14-hex-digit message), read one line
at a time and decoded with pyModeS 3 (:class:`pyModeS.PipeDecoder`, which pairs even/odd CPR frames, resolves
later frames locally and remembers which addresses were seen in CRC-checked ADS-B). Per aircraft, the most
recent piece of each kind is kept:

* ground velocity: ADS-B airborne velocity (TC 19 subtype 1/2: ground speed, track) or BDS 5,0 (ground speed,
  true track);
* air velocity: BDS 5,0 true airspeed + BDS 6,0 magnetic heading, or ADS-B TC 19 subtype 3/4 (magnetic
  heading, true airspeed);
* position (latitude, longitude) and barometric altitude;
* BDS 4,4 reported wind (direction FROM, speed) and temperature.

A state row is emitted when a heading arrives (BDS 6,0 or TC 19 subtype 3) and a true airspeed is known, or when
a BDS 5,0 arrives and the last heading has not been used yet. Its time is the heading's time; the ground
velocity is the piece closest in time (ADS-B preferred at equal distance, being the finer). ``pair_age_s`` is
the largest time difference among the velocity pieces: quality control rejects rows older than the pairing
window (default 2 s, ``QCConfig.max_pair_age_s``). Position and altitude must be at most
``MAX_POSITION_AGE_S`` old.

Memory: the per-aircraft state is constant in size, aircraft silent for ``MAX_SILENT_S`` are forgotten (the
pyModeS decoder evicts them after 5 minutes) and rows are handed on in chunks
(:func:`iter_raw_message_states`), so memory does not grow with the file.

References
----------
[Sun2021] Sun, J., The 1090 Megahertz Riddle, 2nd ed., TU Delft OPEN Publishing, doi:10.34641/mg.11
    (chapters on ADS-B airborne velocity, Comm-B inference and Mode-S EHS).
[Doc9871] ICAO Doc 9871, Technical Provisions for Mode S Services and Extended Squitter: BDS 4,4/5,0/6,0.
[NOAA1976] U.S. Standard Atmosphere 1976: speed of sound a0 = 340.294 m/s and p0 = 101325 Pa at sea level.
"""

from __future__ import annotations

import math
from array import array
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from balloonpath.atmosphere import Atmosphere, pressure_pa
from balloonpath.timeutil import parse_iso
from balloonpath.units import m_from_ft, m_s_from_kt
from balloonpath.winds.aircraft import (
    KIND_DERIVED,
    KIND_REPORTED,
    AircraftStates,
    ReadCounts,
    altitude_from_pressure_altitude,
)
from balloonpath.winds.field import uv_from_direction_speed
from balloonpath.winds.magnetic import declination_deg, true_from_magnetic_heading

MAX_POSITION_AGE_S = 10.0
MAX_PIECE_AGE_S = 30.0
MAX_SILENT_S = 600.0  # aircraft not heard for this long are forgotten
WATERMARK_LAG_S = MAX_PIECE_AGE_S + 30.0  # rows are stamped at most MAX_PIECE_AGE_S before their message
_SPEED_OF_SOUND_SEA_LEVEL_KT = 661.4788  # a0 = 340.294 m/s [NOAA1976]
_P0 = 101_325.0


def calibrated_airspeed_kt_from_mach(mach: np.ndarray | float, pressure_altitude_ft: np.ndarray | float
                                     ) -> np.ndarray:
    """Calibrated airspeed (kt) of a Mach number at a pressure altitude (subsonic, standard atmosphere).

    Notes
    -----
    Impact pressure q_c = p [(1 + 0.2 M^2)^3.5 - 1] (isentropic, gamma = 1.4); CAS = a0 sqrt(5 [(q_c / p0 + 1)
    ^(2/7) - 1]) with a0, p0 at sea level ([NOAA1976] constants; standard compressible-flow relations,
    common practice). Used only to check that a BDS 6,0 candidate's IAS and Mach agree.
    """
    m = np.asarray(mach, dtype=float)
    p = pressure_pa(np.clip(m_from_ft(np.asarray(pressure_altitude_ft, dtype=float)), -5000, 86000))
    qc = p * ((1.0 + 0.2 * m * m) ** 3.5 - 1.0)
    return _SPEED_OF_SOUND_SEA_LEVEL_KT * np.sqrt(5.0 * ((qc / _P0 + 1.0) ** (2.0 / 7.0) - 1.0))


def _isa_scalar(pressure_altitude_ft: float) -> tuple[float, float]:
    """Standard temperature (K) and pressure (Pa) at a pressure altitude below 20 km (scalar, fast).

    [NOAA1976] layers 0-11 km (lapse -6.5 K/km) and 11-20 km (isothermal 216.65 K), geopotential height.
    """
    h = pressure_altitude_ft * 0.3048
    if h <= 11_000.0:
        t = 288.15 - 0.0065 * h
        return t, 101_325.0 * (t / 288.15) ** 5.255877
    return 216.65, 22_632.06 * math.exp(-(min(h, 20_000.0) - 11_000.0) / 6_341.62)


def _cas_kt_scalar(mach: float, pressure_altitude_ft: float) -> float:
    p = _isa_scalar(pressure_altitude_ft)[1]
    qc = p * ((1.0 + 0.2 * mach * mach) ** 3.5 - 1.0)
    return _SPEED_OF_SOUND_SEA_LEVEL_KT * math.sqrt(5.0 * ((qc / _P0 + 1.0) ** (2.0 / 7.0) - 1.0))


def _angle_diff(a: float, b: float) -> float:
    return abs((a - b + 180.0) % 360.0 - 180.0)


class _Aircraft:
    __slots__ = ("gv", "b50", "heading", "air", "pos", "alt", "heading_used", "last")

    def __init__(self) -> None:
        self.gv: tuple[float, float, float] | None = None  # t, gs_kt, track
        self.b50: tuple[float, float, float, float, float, float] | None = None  # t,tas,trk,gs,roll,rate
        self.heading: tuple[float, float] | None = None  # t, magnetic heading (BDS 6,0)
        self.air: tuple[float, float, float] | None = None  # t, magnetic heading, tas (TC 19 st 3)
        self.pos: tuple[float, float, float] | None = None  # t, lat, lon
        self.alt: tuple[float, float] | None = None  # t, baro altitude ft
        self.heading_used = True
        self.last = -math.inf  # time of the latest message


def _consistent(code: str, fields: dict, ac: _Aircraft, t: float, altitude_ft: float | None) -> bool:
    """Does a Comm-B candidate's content agree with what the aircraft's ADS-B says? (documented tolerances)"""
    gv = ac.gv if ac.gv is not None and t - ac.gv[0] <= MAX_PIECE_AGE_S else None
    if code == "5,0":
        if not all(k in fields for k in ("true_airspeed", "true_track", "groundspeed")):
            return False
        if gv is not None and (abs(fields["groundspeed"] - gv[1]) > 20 or
                               _angle_diff(fields["true_track"], gv[2]) > 10):
            return False
        return 80 <= fields["true_airspeed"] <= 620
    if code == "6,0":
        if not all(k in fields for k in ("magnetic_heading", "indicated_airspeed", "mach")):
            return False
        if not 0.1 <= fields["mach"] <= 0.95:
            return False
        if gv is not None and _angle_diff(fields["magnetic_heading"], gv[2]) > 45:
            return False
        if altitude_ft is not None:
            cas = _cas_kt_scalar(fields["mach"], altitude_ft)
            return abs(cas - fields["indicated_airspeed"]) <= 30
        return True
    if code == "4,4":
        if "wind_speed" not in fields or "wind_direction" not in fields or fields["wind_speed"] > 250:
            return False
        if altitude_ft is not None:
            t_std = _isa_scalar(altitude_ft)[0] - 273.15
            return abs(fields["static_air_temperature"] - t_std) <= 35
        return True
    return False


def _decode_register(code: str, payload: int) -> dict:
    from pyModeS.decoder.bds import bds44, bds50, bds60

    return {"4,4": bds44.decode_bds44, "5,0": bds50.decode_bds50, "6,0": bds60.decode_bds60}[code](payload)


def iter_message_lines(path: str | Path, counts: ReadCounts) -> Iterator[tuple[float, str]]:
    """Yield ``(time_s, hex)`` for each well-formed line of a ``time,message`` file; count the others."""
    with Path(path).open(encoding="utf-8", errors="replace") as handle:
        for line in handle:
            text = line.strip()
            if not text or text[0] == "#":
                continue
            parts = text.split(",")
            if len(parts) == 2 and parts[0].strip().lower() == "time":
                continue
            counts.lines += 1
            if len(parts) != 2:
                counts.malformed += 1
                continue
            stamp, message = parts[0].strip(), parts[1].strip()
            if len(message) != 28:
                try:
                    int(message, 16)
                    valid = len(message) == 14
                except ValueError:
                    valid = False
                if valid:
                    counts.short_skipped += 1  # DF 0/4/5/11: nothing for the wind triangle
                else:
                    counts.malformed += 1
                continue
            try:
                t = float(stamp)
            except ValueError:
                try:
                    t = parse_iso(stamp)
                except ValueError:
                    counts.malformed += 1
                    continue
            if not math.isfinite(t):
                counts.malformed += 1
                continue
            yield t, message


def read_raw_messages(
    path: str | Path,
    counts: ReadCounts,
    *,
    atmosphere: Atmosphere | None = None,
    pair_window_s: float = 2.0,
    reference: tuple[float, float] | None = None,
    declination_resolution_deg: float = 0.02,
) -> AircraftStates:
    """Decode a whole raw-message file into aircraft states in memory (see :func:`iter_raw_message_states`).

    ``pair_window_s`` is recorded only through ``pair_age_s``; QC applies it.
    """
    del pair_window_s  # applied in quality control
    states: AircraftStates | None = None
    for part, _ in iter_raw_message_states(path, counts, atmosphere=atmosphere, reference=reference,
                                           declination_resolution_deg=declination_resolution_deg):
        states = part if states is None else states.concat(part)
    assert states is not None
    return states


def iter_raw_message_states(
    path: str | Path,
    counts: ReadCounts,
    *,
    atmosphere: Atmosphere | None = None,
    reference: tuple[float, float] | None = None,
    declination_resolution_deg: float = 0.02,
    chunk_rows: int = 4096,
    max_silent_s: float = MAX_SILENT_S,
) -> Iterator[tuple[AircraftStates, float]]:
    """Decode a raw-message file into aircraft states, streaming (see the module notes for the pairing).

    Yields ``(states, watermark)`` every ``chunk_rows`` emitted rows and once at the end (possibly empty,
    watermark +inf): no row yielded later has a time before ``watermark`` (message time minus
    ``WATERMARK_LAG_S``) when the file is in time order. Aircraft not heard for ``max_silent_s`` are
    forgotten (checked once a minute of message time), so memory is bounded by the traffic in the air.

    Counts malformed lines, bad CRC (DF 17/18), Comm-B replies whose address was not seen in ADS-B
    (``unverified_address``: a corrupted DF 20/21 reply yields a wrong address, as its parity is overlaid with
    the address), and ambiguous or inconsistent Comm-B replies (``ambiguous_bds``).
    """
    import pyModeS

    pipe = pyModeS.PipeDecoder(include_meteo=True)
    craft: dict[str, _Aircraft] = {}
    next_sweep = -math.inf
    # Compact row storage (8 bytes per number; aircraft ids are shared string objects).
    out: dict[str, Any] = {k: array("d") for k in (
        "time_s", "lat", "lon", "alt_ft", "ground_speed_kt", "track_deg", "true_airspeed_kt",
        "heading_mag", "roll_deg", "track_rate_deg_s", "pair_age_s", "wind_u", "wind_v")}
    out["aircraft"] = []
    out["kind"] = array("b")

    def emit(icao: str, ac: _Aircraft, t: float, heading: float, tas_piece: tuple[float, float]) -> None:
        grounds = []
        if ac.gv is not None:
            grounds.append((abs(t - ac.gv[0]), 0, ac.gv[0], ac.gv[1], ac.gv[2]))
        if ac.b50 is not None:
            grounds.append((abs(t - ac.b50[0]), 1, ac.b50[0], ac.b50[3], ac.b50[2]))
        if not grounds or ac.pos is None or ac.alt is None or t - ac.pos[0] > MAX_POSITION_AGE_S or \
                t - ac.alt[0] > MAX_POSITION_AGE_S:
            counts.unpaired += 1
            return
        _, _, tg, gs, trk = min(grounds)
        roll, rate = (ac.b50[4], ac.b50[5]) if ac.b50 is not None and abs(t - ac.b50[0]) <= MAX_PIECE_AGE_S \
            else (math.nan, math.nan)
        out["time_s"].append(t)
        out["aircraft"].append(icao)
        out["lat"].append(ac.pos[1])
        out["lon"].append(ac.pos[2])
        out["alt_ft"].append(ac.alt[1])
        out["ground_speed_kt"].append(gs)
        out["track_deg"].append(trk)
        out["true_airspeed_kt"].append(tas_piece[1])
        out["heading_mag"].append(heading)
        out["roll_deg"].append(roll)
        out["track_rate_deg_s"].append(rate)
        out["pair_age_s"].append(max(abs(t - tg), abs(t - tas_piece[0])))
        out["wind_u"].append(math.nan)
        out["wind_v"].append(math.nan)
        out["kind"].append(KIND_DERIVED)

    for t, message in iter_message_lines(path, counts):
        if len(out["time_s"]) >= chunk_rows:
            yield _states_from_rows(out, atmosphere, declination_resolution_deg), t - WATERMARK_LAG_S
            for column in out.values():
                del column[:]
        if t >= next_sweep:
            for icao in [k for k, a in craft.items() if a.last < t - max_silent_s]:
                del craft[icao]
            next_sweep = t + 60.0
        result = pipe.decode(message, timestamp=t)
        if "error" in result:
            counts.malformed += 1
            continue
        df = result.get("df")
        icao = result.get("icao")
        if df in (17, 18):
            if result.get("crc_valid") is False:
                counts.crc_failed += 1
                continue
            ac = craft.get(icao)
            if ac is None:
                ac = craft[icao] = _Aircraft()
            ac.last = t
            tc = result.get("typecode") or 0
            if 9 <= tc <= 18:
                if result.get("altitude") is not None:
                    ac.alt = (t, float(result["altitude"]))
                lat, lon = result.get("latitude"), result.get("longitude")
                if lat is None and reference is not None:
                    single = pyModeS.decode(message, reference=reference)
                    lat, lon = single.get("latitude"), single.get("longitude")
                if lat is not None and lon is not None:
                    ac.pos = (t, float(lat), float(lon))
            elif tc == 19:
                sub = result.get("subtype")
                if sub in (1, 2) and result.get("groundspeed") is not None and result.get("track") is not None:
                    ac.gv = (t, float(result["groundspeed"]), float(result["track"]))
                elif sub in (3, 4) and result.get("heading") is not None and \
                        result.get("airspeed_type") == "TAS" and result.get("airspeed") is not None:
                    ac.air = (t, float(result["heading"]), float(result["airspeed"]))
                    emit(icao, ac, t, ac.air[1], (t, ac.air[2]))
            continue
        if df not in (20, 21):
            continue
        if not result.get("icao_verified"):
            counts.unverified_address += 1
            continue
        if result.get("altitude_mismatch") or result.get("velocity_mismatch"):
            counts.ambiguous_bds += 1  # pyModeS found the content inconsistent with the aircraft's ADS-B
            continue
        candidates = result.get("bds_candidates") or ([result["bds"]] if result.get("bds") else [])
        wanted = [c for c in candidates if c in ("4,4", "5,0", "6,0")]
        if not wanted:
            continue
        ac = craft.get(icao)
        if ac is None:
            ac = craft[icao] = _Aircraft()
        ac.last = t
        altitude_ft = result.get("altitude")
        if altitude_ft is None and ac.alt is not None:
            altitude_ft = ac.alt[1]
        payload = int(message[8:22], 16)
        decoded = {c: (_decode_register(c, payload) if len(candidates) > 1 else result) for c in wanted}
        good = [c for c in wanted if _consistent(c, decoded[c], ac, t, altitude_ft)]
        if len(good) != 1:
            counts.ambiguous_bds += 1
            continue
        code, f = good[0], decoded[good[0]]
        if df == 20 and result.get("altitude") is not None:
            ac.alt = (t, float(result["altitude"]))
        if code == "5,0":
            ac.b50 = (t, float(f["true_airspeed"]), float(f["true_track"]), float(f["groundspeed"]),
                      float(f.get("roll", math.nan)), float(f.get("track_rate", math.nan)))
            if not ac.heading_used and ac.heading is not None and t - ac.heading[0] <= MAX_PIECE_AGE_S:
                ac.heading_used = True
                emit(icao, ac, ac.heading[0], ac.heading[1], (t, ac.b50[1]))
        elif code == "6,0":
            ac.heading = (t, float(f["magnetic_heading"]))
            ac.heading_used = False
            if ac.b50 is not None and t - ac.b50[0] <= MAX_PIECE_AGE_S:
                ac.heading_used = True
                emit(icao, ac, t, ac.heading[1], (ac.b50[0], ac.b50[1]))
        else:  # 4,4: a reported wind
            if ac.pos is None or t - ac.pos[0] > MAX_POSITION_AGE_S or altitude_ft is None:
                counts.unpaired += 1
                continue
            u, v = uv_from_direction_speed(f["wind_direction"], m_s_from_kt(f["wind_speed"]))
            out["time_s"].append(t)
            out["aircraft"].append(icao)
            out["lat"].append(ac.pos[1])
            out["lon"].append(ac.pos[2])
            out["alt_ft"].append(float(altitude_ft))
            for k in ("ground_speed_kt", "track_deg", "true_airspeed_kt", "heading_mag", "roll_deg",
                      "track_rate_deg_s"):
                out[k].append(math.nan)
            out["pair_age_s"].append(0.0)
            out["wind_u"].append(float(u))
            out["wind_v"].append(float(v))
            out["kind"].append(KIND_REPORTED)

    yield _states_from_rows(out, atmosphere, declination_resolution_deg), math.inf


def _states_from_rows(out: dict[str, Any], atmosphere: Atmosphere | None,
                      declination_resolution_deg: float) -> AircraftStates:
    time_s = np.array(out["time_s"], dtype=float)
    lat = np.array(out["lat"], dtype=float)
    lon = np.array(out["lon"], dtype=float)
    alt = altitude_from_pressure_altitude(m_from_ft(np.array(out["alt_ft"], dtype=float)), atmosphere)
    heading = np.array(out["heading_mag"], dtype=float)
    derived = np.isfinite(heading)
    if np.any(derived):
        heading[derived] = true_from_magnetic_heading(
            heading[derived],
            declination_deg(lat[derived], lon[derived], np.nan_to_num(alt[derived]), time_s[derived],
                            resolution_deg=declination_resolution_deg))
    kind = np.array(out["kind"], dtype=np.int8)
    return AircraftStates.from_columns({
        "time_s": time_s, "aircraft": out["aircraft"], "lat": lat, "lon": lon, "alt_m": alt,
        "ground_speed_m_s": m_s_from_kt(np.array(out["ground_speed_kt"], dtype=float)),
        "track_deg": np.asarray(out["track_deg"], dtype=float),
        "true_airspeed_m_s": m_s_from_kt(np.array(out["true_airspeed_kt"], dtype=float)),
        "heading_true_deg": heading, "roll_deg": np.asarray(out["roll_deg"], dtype=float),
        "track_rate_deg_s": np.asarray(out["track_rate_deg_s"], dtype=float),
        "pair_age_s": np.asarray(out["pair_age_s"], dtype=float), "wind_u": np.asarray(out["wind_u"], dtype=float),
        "wind_v": np.asarray(out["wind_v"], dtype=float), "kind": kind,
        "source": np.where(kind == KIND_REPORTED, "aircraft-modes-meteo", "aircraft-modes"),
    })


__all__ = ["calibrated_airspeed_kt_from_mach", "iter_message_lines", "iter_raw_message_states",
           "read_raw_messages"]
