"""A small Mode-S / ADS-B encoder for invented demo and test traffic.

Builds 112-bit messages (28 hex digits) that a decoder such as pyModeS reads back: ADS-B airborne position
(TC 11, barometric altitude, CPR even/odd), ADS-B airborne velocity (TC 19 subtype 1 ground speed, subtype 3
heading and airspeed) and Comm-B altitude replies (DF 20) carrying BDS 4,4, 5,0 or 6,0. Values are rounded
to the field resolutions, so the decoded values differ from the inputs by at most half a resolution step.

References
----------
[Sun2021] Sun, J., The 1090 Megahertz Riddle, 2nd ed., TU Delft OPEN Publishing, doi:10.34641/mg.11:
    message structure and CRC-24 (generator 0x1FFF409), altitude code, CPR encoding (chapter "Airborne
    position": Dlat = 360 / (4 NZ - i), NZ = 15, 17-bit YZ/XZ, NL function), airborne velocity, Comm-B
    register layouts of BDS 4,4, 5,0 and 6,0 (ICAO Doc 9871 tables A-2-68, A-2-80, A-2-96).
"""

from __future__ import annotations

import math

CRC_GENERATOR = 0x1FFF409
_NZ = 15
_CPR_BITS = 1 << 17

_CRC_TABLE: list[int] = []
for _byte in range(256):
    _reg = _byte << 16
    for _ in range(8):
        _reg = ((_reg << 1) ^ CRC_GENERATOR) if _reg & 0x800000 else (_reg << 1)
    _CRC_TABLE.append(_reg & 0xFFFFFF)


def crc24(data: int, n_bits: int) -> int:
    """CRC-24 remainder of the first ``n_bits`` (a multiple of 8) of a message, as an int.

    Notes
    -----
    Polynomial division by the Mode-S generator G(x) = 0x1FFF409 ([Sun2021] chapter "Mode S basics"),
    byte-wise with a lookup table.
    """
    reg = 0
    for shift in range(n_bits - 8, -8, -8):
        byte = (data >> shift) & 0xFF
        reg = ((reg << 8) & 0xFFFFFF) ^ _CRC_TABLE[((reg >> 16) ^ byte) & 0xFF]
    return reg


def _frame(df: int, second: int, icao24: int, payload56: int, xor: int = 0) -> str:
    """32-bit header (5-bit DF, 3-bit field, 24-bit address or header fields) + 56-bit payload + parity."""
    head = (df << 83) | (second << 80) | (icao24 << 56) | payload56
    return f"{(head << 24) | (crc24(head, 88) ^ xor):028X}"


def _signed_field(value_lsb: int, width: int) -> tuple[int, int]:
    """Sign bit and magnitude of Mode-S sign-magnitude fields (value = magnitude - 2**width if sign)."""
    raw = value_lsb % (1 << (width + 1))
    return raw >> width, raw & ((1 << width) - 1)


def _insert_q_bit(n: int, low_bits: int) -> int:
    """Insert Q = 1 above the lowest ``low_bits`` bits of n (25-ft altitude coding)."""
    return ((n >> low_bits) << (low_bits + 1)) | (1 << low_bits) | (n & ((1 << low_bits) - 1))


def altitude_code_13(altitude_ft: float) -> int:
    """13-bit AC field (DF 0/4/16/20) with M = 0, Q = 1: N = (alt + 1000) / 25 in the other 11 bits."""
    n = max(0, min(2047, round((altitude_ft + 1000.0) / 25.0)))
    # Layout C1 A1 C2 A2 C4 A4 M B1 Q B2 D2 B4 D4: N's top 6 bits, M=0, next bit, Q=1, last 4 bits.
    return ((n >> 5) << 7) | (((n >> 4) & 1) << 5) | (1 << 4) | (n & 0xF)


def cpr_nl(lat_deg: float) -> int:
    """Number of longitude zones NL(lat) ([Sun2021] CPR chapter, closed form with NZ = 15)."""
    lat = abs(lat_deg)
    if lat == 0.0:
        return 59
    if lat == 87.0:
        return 2
    if lat > 87.0:
        return 1
    a = 1.0 - math.cos(math.pi / (2.0 * _NZ))
    b = math.cos(math.radians(lat)) ** 2
    return int(math.floor(2.0 * math.pi / math.acos(1.0 - a / b)))


def cpr_encode(lat_deg: float, lon_deg: float, odd: bool) -> tuple[int, int]:
    """17-bit CPR latitude and longitude of an airborne position ([Sun2021] CPR encoding).

    Notes
    -----
    i = 0 (even) or 1 (odd); Dlat = 360 / (60 - i); YZ = floor(2^17 mod(lat, Dlat) / Dlat + 1/2);
    Rlat = Dlat (YZ / 2^17 + floor(lat / Dlat)); Dlon = 360 / max(NL(Rlat) - i, 1);
    XZ = floor(2^17 mod(lon, Dlon) / Dlon + 1/2); both taken modulo 2^17.
    """
    i = 1 if odd else 0
    dlat = 360.0 / (4 * _NZ - i)
    yz = math.floor(_CPR_BITS * (lat_deg % dlat) / dlat + 0.5)
    rlat = dlat * (yz / _CPR_BITS + math.floor(lat_deg / dlat))
    dlon = 360.0 / max(cpr_nl(rlat) - i, 1)
    xz = math.floor(_CPR_BITS * (lon_deg % dlon) / dlon + 0.5)
    return yz % _CPR_BITS, xz % _CPR_BITS


def airborne_position(icao: str, lat_deg: float, lon_deg: float, altitude_ft: float, odd: bool) -> str:
    """DF 17 TC 11 airborne position with barometric altitude (25-ft coding) and CPR lat/lon."""
    n = max(0, min(2047, round((altitude_ft + 1000.0) / 25.0)))
    alt12 = _insert_q_bit(n, 4)
    yz, xz = cpr_encode(lat_deg, lon_deg, odd)
    me = (11 << 51) | (alt12 << 36) | ((1 if odd else 0) << 34) | (yz << 17) | xz
    return _frame(17, 5, int(icao, 16), me)


def _vertical_rate_bits(vertical_rate_ft_min: float, baro: bool) -> int:
    mag = min(511, round(abs(vertical_rate_ft_min) / 64.0) + 1)
    return ((1 if baro else 0) << 20) | ((1 if vertical_rate_ft_min < 0 else 0) << 19) | (mag << 10)


def airborne_velocity(icao: str, ground_speed_kt: float, track_deg: float,
                      vertical_rate_ft_min: float = 0.0) -> str:
    """DF 17 TC 19 subtype 1: east and north ground-velocity components (1 kt) and vertical rate (64 ft/min)."""
    ve = ground_speed_kt * math.sin(math.radians(track_deg))
    vn = ground_speed_kt * math.cos(math.radians(track_deg))
    ew, ns = min(1022, round(abs(ve))), min(1022, round(abs(vn)))
    me = ((19 << 51) | (1 << 48) | ((1 if ve < 0 else 0) << 42) | ((ew + 1) << 32)
          | ((1 if vn < 0 else 0) << 31) | ((ns + 1) << 21) | _vertical_rate_bits(vertical_rate_ft_min, False))
    return _frame(17, 5, int(icao, 16), me)


def airborne_airspeed(icao: str, heading_magnetic_deg: float, true_airspeed_kt: float,
                      vertical_rate_ft_min: float = 0.0) -> str:
    """DF 17 TC 19 subtype 3: magnetic heading (360/1024 deg) and true airspeed (1 kt)."""
    hdg = round((heading_magnetic_deg % 360.0) / 360.0 * 1024.0) % 1024
    tas = min(1022, round(true_airspeed_kt))
    me = ((19 << 51) | (3 << 48) | (1 << 42) | (hdg << 32) | (1 << 31) | ((tas + 1) << 21)
          | _vertical_rate_bits(vertical_rate_ft_min, True))
    return _frame(17, 5, int(icao, 16), me)


def comm_b(icao: str, altitude_ft: float, mb56: int) -> str:
    """DF 20 Comm-B altitude reply: AC altitude code, 56-bit MB, AP = CRC XOR address."""
    header = (altitude_code_13(altitude_ft) & 0x1FFF)
    head = (20 << 83) | (header << 56) | mb56
    return f"{(head << 24) | (crc24(head, 88) ^ int(icao, 16)):028X}"


def bds50(roll_deg: float, true_track_deg: float, ground_speed_kt: float, track_rate_deg_s: float,
          true_airspeed_kt: float) -> int:
    """BDS 5,0 track-and-turn payload: roll (45/256 deg), true track (90/512 deg), GS and TAS (2 kt),
    track rate (8/256 deg/s); all status bits set."""
    rs, rm = _signed_field(round(roll_deg / (45.0 / 256.0)), 9)
    ts, tm = _signed_field(round(((true_track_deg + 180.0) % 360.0 - 180.0) / (90.0 / 512.0)), 10)
    gs = min(1023, round(ground_speed_kt / 2.0))
    qs, qm = _signed_field(round(track_rate_deg_s / (8.0 / 256.0)), 9)
    tas = min(1023, round(true_airspeed_kt / 2.0))
    return ((1 << 55) | (rs << 54) | (rm << 45) | (1 << 44) | (ts << 43) | (tm << 33) | (1 << 32)
            | (gs << 22) | (1 << 21) | (qs << 20) | (qm << 11) | (1 << 10) | tas)


def bds60(heading_magnetic_deg: float, indicated_airspeed_kt: float, mach: float,
          baro_vertical_rate_ft_min: float = 0.0, inertial_vertical_rate_ft_min: float = 0.0) -> int:
    """BDS 6,0 heading-and-speed payload: magnetic heading (90/512 deg), IAS (1 kt), Mach (2.048/512),
    barometric and inertial vertical rates (32 ft/min); all status bits set."""
    hs, hm = _signed_field(round(((heading_magnetic_deg + 180.0) % 360.0 - 180.0) / (90.0 / 512.0)), 10)
    ias = min(1023, round(indicated_airspeed_kt))
    mach_raw = min(1023, round(mach / (2.048 / 512.0)))
    bs, bm = _signed_field(round(baro_vertical_rate_ft_min / 32.0), 9)
    is_, im = _signed_field(round(inertial_vertical_rate_ft_min / 32.0), 9)
    return ((1 << 55) | (hs << 54) | (hm << 44) | (1 << 43) | (ias << 33) | (1 << 32) | (mach_raw << 22)
            | (1 << 21) | (bs << 20) | (bm << 11) | (1 << 10) | (is_ << 9) | im)


def bds44(wind_speed_kt: float, wind_direction_deg: float, static_air_temperature_c: float,
          figure_of_merit: int = 1) -> int:
    """BDS 4,4 meteorological routine air report: wind speed (1 kt), direction FROM (180/256 deg), static air
    temperature (0.25 degC); pressure, turbulence and humidity not available."""
    speed = min(511, round(wind_speed_kt))
    direction = round((wind_direction_deg % 360.0) / (180.0 / 256.0)) % 512
    ts, tm = _signed_field(round(static_air_temperature_c / 0.25), 10)
    return ((figure_of_merit & 0xF) << 52) | (1 << 51) | (speed << 42) | (direction << 33) | (ts << 32) | (tm << 22)


__all__ = [
    "airborne_airspeed", "airborne_position", "airborne_velocity", "altitude_code_13", "bds44", "bds50",
    "bds60", "comm_b", "cpr_encode", "cpr_nl", "crc24",
]
