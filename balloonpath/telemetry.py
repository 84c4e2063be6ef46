"""Telemetry readers: a balloon's (or the crew car's) position reports as a :class:`FlownTrack`.

One entry point, :func:`read_track`, detects the format and returns ``(FlownTrack, ReadReport)``:

- **CSV** with a header naming ``time, latitude, longitude, altitude_m`` (any order, extra columns ignored);
  times ISO 8601 in UTC (a trailing ``Z`` or an offset; a time without one is read as UTC).
- **APRS log**: one packet a line in the TNC-2 text form ``SOURCE>DEST,PATH:payload``, preceded by the
  receive time in UTC (``2027-05-14T12:31:05Z N0CALL-11>APRS:...``; a space, comma, ``|`` or ``;`` may
  separate the two). Packets are decoded with aprslib, which converts the ``/A=`` altitude (feet) to metres and
  the speed (knots) to km/h. The packet's own ``h``/``z`` timestamp is NOT used: aprslib dates it with the
  machine's clock, which is wrong when a log is replayed later; the receive time is used instead.
- **DWD high-resolution radiosonde CSV** (``balloonpath.winds.sounding.read_dwd_highres``): its flown track.

Bad input never stops the reader: every line that cannot be used is skipped and counted by reason in the
:class:`ReadReport` (reasons in :data:`SKIP_REASONS`). Only a file that yields no usable fix at all, or a CSV
without the required columns, raises :class:`~balloonpath.errors.InputDataError`.

The returned track is sorted by time, one fix per time stamp (later duplicates dropped), with
implausible jumps (faster than :data:`MAX_HORIZONTAL_SPEED_M_S` or :data:`MAX_VERTICAL_SPEED_M_S` from
the previous kept fix) removed. Out-of-order lines are valid data: they are sorted in and counted.

:class:`TrackFollower` reads a growing file incrementally for the live loop (only complete new lines are
parsed; a half-written last line waits for the next poll).

References
----------
[APRS101] APRS Protocol Reference, version 1.0.1, APRS Working Group (2000): position formats
    (chapter 8), altitude in the comment ``/A=aaaaaa`` in feet (chapter 6), time stamps ``DHM``/``HMS``
    (chapter 6). From memory; the decoding itself is aprslib's.
[DWD-CDC] Deutscher Wetterdienst, Climate Data Center, high-resolution radiosonde data (see
    ``balloonpath.winds.sounding``).
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from balloonpath.errors import InputDataError, input_error
from balloonpath.geodesy import inverse, normalize_longitude
from balloonpath.timeutil import posix_from_datetime
from balloonpath.track import FlownTrack

#: Why a line or fix was not used (keys of :attr:`ReadReport.skipped`).
SKIP_REASONS = {
    "malformed": "line is not a record of the format (wrong number of cells, not a packet)",
    "bad_time": "time missing or not ISO 8601 UTC",
    "bad_number": "latitude, longitude or altitude is not a number",
    "out_of_range": "latitude outside [-90, 90], longitude outside [-180, 360] or altitude outside "
    "[-500, 60000] m",
    "bad_packet": "APRS packet that aprslib cannot decode",
    "no_position": "APRS packet without a position (status, message, telemetry...)",
    "no_altitude": "APRS position without altitude",
    "other_station": "APRS packet from another station than the one followed",
    "duplicate": "same time stamp as an earlier fix",
    "implausible_jump": "faster than physically possible from the previous fix",
}

#: Fixes further apart in time than this many times the median interval count as a gap (reported only).
GAP_FACTOR = 5.0
#: Fastest plausible horizontal speed of a balloon (jet-stream winds stay below ~120 m/s), m/s.
MAX_HORIZONTAL_SPEED_M_S = 150.0
#: Fastest plausible vertical speed (a payload falling in thin air after burst reaches ~50-70 m/s), m/s.
MAX_VERTICAL_SPEED_M_S = 120.0
#: Position noise assumed for a GPS fix (1-sigma, per horizontal axis), m. Common practice: consumer GPS
#: receivers under an open sky are good to a few metres.
GPS_SIGMA_M = 5.0
#: Resolution of an uncompressed APRS position: 0.01 arc-minute of latitude = 18.5 m [APRS101].
APRS_RESOLUTION_M = 1852.0 * 0.01
#: Resolution of the DWD file's positions: 0.01 degree of latitude, m.
DWD_RESOLUTION_M = 0.01 * 111_195.0

_TIME_RE = re.compile(
    r"^\s*(\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:[Zz]|[+-]\d{2}:?\d{2})?)\s*[,;|]?\s*(.*?)\s*$"
)
_CSV_COLUMNS = ("time", "latitude", "longitude", "altitude_m")
_CSV_ALIASES = {
    "time": ("time", "time_utc", "timestamp", "utc"),
    "latitude": ("latitude", "lat", "latitude_deg"),
    "longitude": ("longitude", "lon", "lng", "longitude_deg"),
    "altitude_m": ("altitude_m", "alt_m", "altitude"),
}


@dataclass
class ReadReport:
    """What a reader did with a file.

    Attributes
    ----------
    source : str
        File name.
    format : str
        ``"csv"``, ``"aprs"`` or ``"dwd"``.
    lines : int
        Data lines read (header and blank lines not counted).
    fixes : int
        Fixes in the returned track.
    skipped : dict
        Reason (:data:`SKIP_REASONS`) -> number of lines or fixes not used.
    out_of_order : int
        Lines whose time was earlier than an earlier line's (kept, sorted in).
    gaps : int
        Intervals longer than :data:`GAP_FACTOR` times the median interval.
    longest_gap_s : float
        Longest interval between kept fixes, s.
    position_sigma_m : float
        1-sigma position noise of one fix per horizontal axis (GPS noise and the format's rounding,
        resolution / sqrt(12), added in quadrature), for the wind-from-fixes error model.
    station : str or None
        APRS source callsign followed.
    stations : dict
        APRS: callsign -> number of position packets with altitude seen.
    """

    source: str
    format: str
    lines: int = 0
    fixes: int = 0
    skipped: dict[str, int] = field(default_factory=dict)
    out_of_order: int = 0
    gaps: int = 0
    longest_gap_s: float = 0.0
    position_sigma_m: float = GPS_SIGMA_M
    station: str | None = None
    stations: dict[str, int] = field(default_factory=dict)

    def skip(self, reason: str, count: int = 1) -> None:
        """Count ``count`` lines skipped for ``reason``."""
        if reason not in SKIP_REASONS:
            raise KeyError(reason)
        if count:
            self.skipped[reason] = self.skipped.get(reason, 0) + int(count)

    @property
    def total_skipped(self) -> int:
        """All skipped lines and fixes."""
        return int(sum(self.skipped.values()))

    def describe(self) -> str:
        """One line for a terminal: fixes, skipped by reason, gaps."""
        parts = [f"{self.source} ({self.format}): {self.fixes} fixes from {self.lines} lines"]
        if self.station:
            parts.append(f"station {self.station}")
        if self.skipped:
            parts.append("skipped " + ", ".join(f"{k} {v}" for k, v in sorted(self.skipped.items())))
        if self.out_of_order:
            parts.append(f"{self.out_of_order} out of order (sorted in)")
        if self.gaps:
            parts.append(f"{self.gaps} gaps (longest {self.longest_gap_s:.0f} s)")
        return "; ".join(parts)

    def as_dict(self) -> dict[str, Any]:
        """Plain dict for JSON."""
        return {
            "source": self.source, "format": self.format, "lines": self.lines, "fixes": self.fixes,
            "skipped": dict(sorted(self.skipped.items())), "out_of_order": self.out_of_order,
            "gaps": self.gaps, "longest_gap_s": round(self.longest_gap_s, 1),
            "position_sigma_m": round(self.position_sigma_m, 2), "station": self.station,
        }


# ---------------------------------------------------------------------------------------- helpers
def parse_utc(text: str) -> float:
    """POSIX seconds of an ISO 8601 time; without a zone the time is read as UTC.

    Raises
    ------
    ValueError
        If the text is not ISO 8601.
    """
    from datetime import UTC, datetime

    cleaned = text.strip()
    if cleaned.endswith(("Z", "z")):
        cleaned = cleaned[:-1] + "+00:00"
    moment = datetime.fromisoformat(cleaned)
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return posix_from_datetime(moment)


def _plausible(lat: float, lon: float, alt: float) -> bool:
    return -90.0 <= lat <= 90.0 and -180.0 <= lon <= 360.0 and -500.0 <= alt <= 60_000.0


@dataclass
class _Fixes:
    """Accumulated raw fixes in arrival order."""

    time_s: list[float] = field(default_factory=list)
    lat: list[float] = field(default_factory=list)
    lon: list[float] = field(default_factory=list)
    alt_m: list[float] = field(default_factory=list)
    station: list[str] = field(default_factory=list)

    def add(self, t: float, lat: float, lon: float, alt: float, station: str = "") -> None:
        self.time_s.append(t)
        self.lat.append(lat)
        self.lon.append(lon)
        self.alt_m.append(alt)
        self.station.append(station)


def _csv_columns(header: list[str], path: Path) -> dict[str, int]:
    names = [h.strip().lower() for h in header]
    idx: dict[str, int] = {}
    for col in _CSV_COLUMNS:
        for alias in _CSV_ALIASES[col]:
            if alias in names:
                idx[col] = names.index(alias)
                break
        else:
            raise input_error(
                path, f"column {col}", f"is missing from the header {','.join(header)!r}",
                "write a header line time,latitude,longitude,altitude_m (altitude in metres)",
            )
    return idx


def _parse_csv_row(cells: list[str], idx: dict[str, int], fixes: _Fixes, report: ReadReport) -> None:
    if len(cells) <= max(idx.values()):
        report.skip("malformed")
        return
    try:
        t = parse_utc(cells[idx["time"]])
    except ValueError:
        report.skip("bad_time")
        return
    try:
        lat, lon, alt = (float(cells[idx[c]]) for c in ("latitude", "longitude", "altitude_m"))
    except ValueError:
        report.skip("bad_number")
        return
    if not (math.isfinite(lat) and math.isfinite(lon) and math.isfinite(alt)):
        report.skip("bad_number")
        return
    if not _plausible(lat, lon, alt):
        report.skip("out_of_range")
        return
    fixes.add(t, lat, lon, alt)


def parse_aprs_line(line: str) -> tuple[str, dict[str, Any] | None]:
    """Decode one log line ``<receive time UTC> <APRS packet>``.

    Returns
    -------
    (status, fix)
        ``status`` is ``"ok"`` or a key of :data:`SKIP_REASONS`; ``fix`` is a dict with ``time_s``
        (the receive time), ``lat``, ``lon``, ``alt_m`` and ``station`` (source callsign) when ok.
        A position without altitude returns ``("no_altitude", fix)`` with ``alt_m`` NaN (the crew's
        car may send such packets).
    """
    import aprslib
    from aprslib.exceptions import ParseError, UnknownFormat

    m = _TIME_RE.match(line)
    if m is None:
        return "bad_time", None
    try:
        t = parse_utc(m.group(1))
    except ValueError:
        return "bad_time", None
    packet = m.group(2)
    if ">" not in packet or ":" not in packet:
        return "malformed", None
    try:
        decoded = aprslib.parse(packet)
    except UnknownFormat:
        return "no_position", None
    except (ParseError, ValueError, IndexError, KeyError, TypeError):
        return "bad_packet", None
    if "latitude" not in decoded or "longitude" not in decoded:
        return "no_position", None
    lat, lon = float(decoded["latitude"]), float(decoded["longitude"])
    alt = float(decoded.get("altitude", math.nan))
    fix = {"time_s": t, "lat": lat, "lon": lon, "alt_m": alt, "station": str(decoded.get("from", ""))}
    if not (-90.0 <= lat <= 90.0 and -180.0 <= lon <= 360.0):
        return "out_of_range", None
    if not math.isfinite(alt):
        return "no_altitude", fix
    if not -500.0 <= alt <= 60_000.0:
        return "out_of_range", None
    return "ok", fix


def _clean(fixes: _Fixes, report: ReadReport, source: str, slack_m: float = 100.0) -> FlownTrack:
    """Sort, drop duplicate times and implausible jumps; count out-of-order lines and gaps.

    A jump is implausible when the distance from the last kept fix exceeds the fastest plausible speed times
    the interval plus ``slack_m`` (the format's rounding: positions rounded to 0.01 deg jump by a cell).
    """
    t = np.asarray(fixes.time_s, dtype=float)
    lat = np.asarray(fixes.lat, dtype=float)
    lon = np.asarray(normalize_longitude(np.asarray(fixes.lon, dtype=float)), dtype=float)
    alt = np.asarray(fixes.alt_m, dtype=float)
    if t.size:
        running_max = np.maximum.accumulate(t)
        report.out_of_order += int(np.count_nonzero(t[1:] < running_max[:-1]))
    order = np.argsort(t, kind="stable")
    t, lat, lon, alt = t[order], lat[order], lon[order], alt[order]
    if t.size:
        first = np.concatenate([[True], np.diff(t) > 0.0])
        report.skip("duplicate", int(np.count_nonzero(~first)))
        t, lat, lon, alt = t[first], lat[first], lon[first], alt[first]
    keep = np.ones(t.size, dtype=bool)
    last = 0
    for i in range(1, t.size):  # sequential by nature: each fix is judged against the last good one
        dt = t[i] - t[last]
        dist, _ = inverse(lat[last], lon[last], lat[i], lon[i])
        if float(dist) > MAX_HORIZONTAL_SPEED_M_S * dt + slack_m or abs(alt[i] - alt[last]) > (
            MAX_VERTICAL_SPEED_M_S * dt + 50.0
        ):
            keep[i] = False
        else:
            last = i
    report.skip("implausible_jump", int(np.count_nonzero(~keep)))
    t, lat, lon, alt = t[keep], lat[keep], lon[keep], alt[keep]
    if t.size >= 3:
        dts = np.diff(t)
        med = float(np.median(dts))
        report.gaps = int(np.count_nonzero(dts > GAP_FACTOR * med))
        report.longest_gap_s = float(dts.max())
    report.fixes = int(t.size)
    return FlownTrack(t, lat, lon, alt, source)


def _no_fixes(path: Path, report: ReadReport) -> InputDataError:
    why = report.describe()
    return input_error(  # type: ignore[return-value]
        path, "file", f"holds no usable position fix ({why})",
        "give a telemetry CSV (time,latitude,longitude,altitude_m), an APRS log with receive times, "
        "or a DWD radiosonde file",
    )


def _quadrature(*sig: float) -> float:
    return float(math.sqrt(sum(s * s for s in sig)))


# ---------------------------------------------------------------------------------------- format detection
def detect_format(path: str | Path, text: str | None = None) -> str:
    """``"dwd"``, ``"csv"`` or ``"aprs"`` from the first non-blank line of the file.

    DWD: the header names ``MESSZEITPUNKT``. CSV: the header names a latitude column. APRS: the line starts
    with a time stamp and holds ``>`` and ``:`` (a TNC-2 packet).

    Raises
    ------
    InputDataError
        If the first line fits none of the formats.
    """
    path = Path(path)
    if text is None:
        with open(path, encoding="latin-1") as f:
            head = f.read(4096)
    else:
        head = text[:4096]
    first = next((ln for ln in head.splitlines() if ln.strip()), "")
    upper = first.upper()
    if "MESSZEITPUNKT" in upper and "AE_GB_POS" in upper:
        return "dwd"
    if _TIME_RE.match(first) and ">" in first and ":" in first.split(">", 1)[-1]:
        return "aprs"
    names = [c.strip().lower() for c in re.split(r"[,;]", first)]
    if any(n in _CSV_ALIASES["latitude"] for n in names):
        return "csv"
    raise input_error(
        path, "line 1", f"is not a telemetry header or APRS log line: {first[:60]!r}",
        "give a CSV with header time,latitude,longitude,altitude_m, an APRS log "
        "('<UTC time> CALL>DEST:packet' per line) or a DWD radiosonde file",
    )


# ---------------------------------------------------------------------------------------- readers
def read_csv_track(path: str | Path, text: str | None = None) -> tuple[FlownTrack, ReadReport]:
    """Read a telemetry CSV (``time,latitude,longitude,altitude_m``); see the module notes."""
    path = Path(path)
    text = path.read_text(encoding="utf-8-sig") if text is None else text
    report = ReadReport(path.name, "csv", position_sigma_m=GPS_SIGMA_M)
    rows = [r for r in csv.reader(io.StringIO(text)) if any(c.strip() for c in r)]
    if not rows:
        raise input_error(path, "file", "is empty", "give a telemetry CSV with a header line")
    idx = _csv_columns(rows[0], path)
    fixes = _Fixes()
    for cells in rows[1:]:
        report.lines += 1
        _parse_csv_row(cells, idx, fixes, report)
    track = _clean(fixes, report, f"{path.name} (csv)")
    if len(track) == 0:
        raise _no_fixes(path, report)
    return track, report


def _choose_station(fixes: _Fixes, callsign: str | None, report: ReadReport) -> _Fixes:
    counts: dict[str, int] = {}
    for s in fixes.station:
        counts[s] = counts.get(s, 0) + 1
    report.stations = dict(sorted(counts.items()))
    if not counts:
        return fixes
    if callsign is not None:
        chosen = callsign.strip().upper()
    else:  # the station with the most position reports with altitude: the balloon
        chosen = sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))[0][0]
    report.station = chosen
    out = _Fixes()
    other = 0
    for i, s in enumerate(fixes.station):
        if s.upper() == chosen.upper():
            out.add(fixes.time_s[i], fixes.lat[i], fixes.lon[i], fixes.alt_m[i], s)
        else:
            other += 1
    report.skip("other_station", other)
    return out


def read_aprs_log(
    path: str | Path, callsign: str | None = None, require_altitude: bool = True, text: str | None = None
) -> tuple[FlownTrack, ReadReport]:
    """Read an APRS log (receive time UTC, then the packet, one a line).

    Parameters
    ----------
    path : str or Path
    callsign : str, optional
        Source callsign to follow (with SSID, e.g. ``N0CALL-11``); default: the station with the most
        position packets with altitude (the balloon).
    require_altitude : bool
        Skip positions without altitude (counted ``no_altitude``). False for the crew's car, whose
        altitude is then set to 0.
    """
    path = Path(path)
    text = path.read_text(encoding="utf-8", errors="replace") if text is None else text
    report = ReadReport(path.name, "aprs", position_sigma_m=_quadrature(GPS_SIGMA_M, APRS_RESOLUTION_M / math.sqrt(12)))
    fixes = _Fixes()
    for line in text.splitlines():
        if not line.strip():
            continue
        report.lines += 1
        _aprs_line_into(line, fixes, report, require_altitude)
    fixes = _choose_station(fixes, callsign, report)
    track = _clean(fixes, report, f"{path.name} (aprs {report.station or '?'})")
    if len(track) == 0:
        raise _no_fixes(path, report)
    return track, report


def _aprs_line_into(line: str, fixes: _Fixes, report: ReadReport, require_altitude: bool) -> None:
    status, fix = parse_aprs_line(line)
    if status == "no_altitude" and not require_altitude and fix is not None:
        fix["alt_m"] = 0.0
        status = "ok"
    if status != "ok" or fix is None:
        report.skip(status)
        return
    fixes.add(fix["time_s"], fix["lat"], fix["lon"], fix["alt_m"], fix["station"])


def read_dwd_track(path: str | Path) -> tuple[FlownTrack, ReadReport]:
    """The flown track of a DWD high-resolution radiosonde file (``read_dwd_highres``), with a report.

    Rows without a position or height are counted ``bad_number``. Positions are rounded to 0.01 degree in
    these files, so the position noise is dominated by the rounding (0.01 deg / sqrt(12), about 320 m).
    """
    from balloonpath.winds.sounding import read_dwd_highres

    path = Path(path)
    _, flown = read_dwd_highres(path)
    n_lines = sum(1 for ln in path.read_text(encoding="latin-1").splitlines()[1:] if ln.strip())
    report = ReadReport(path.name, "dwd", position_sigma_m=_quadrature(GPS_SIGMA_M, DWD_RESOLUTION_M / math.sqrt(12)))
    report.lines = n_lines
    report.skip("bad_number", max(n_lines - len(flown), 0))
    fixes = _Fixes()
    for i in range(len(flown)):
        fixes.add(float(flown.time_s[i]), float(flown.lat[i]), float(flown.lon[i]), float(flown.alt_m[i]))
    track = _clean(fixes, report, f"{path.name} (dwd)", slack_m=100.0 + 2.0 * DWD_RESOLUTION_M)
    if len(track) == 0:
        raise _no_fixes(path, report)
    return track, report


def read_track(
    path: str | Path, callsign: str | None = None, require_altitude: bool = True
) -> tuple[FlownTrack, ReadReport]:
    """Read telemetry of any supported format (detected from the first line) as a flown track.

    Parameters
    ----------
    path : str or Path
        Telemetry CSV, APRS log, or DWD high-resolution radiosonde CSV (see the module notes).
    callsign : str, optional
        APRS only: the station to follow (default: the one with the most position reports with altitude).
    require_altitude : bool
        APRS only: skip positions without altitude (default). Pass False for a crew tracker.

    Returns
    -------
    (FlownTrack, ReadReport)
        The cleaned track (time-sorted, unique times) and what was skipped, by reason.

    Raises
    ------
    InputDataError
        If the format is not recognised, required CSV columns are missing, or no usable fix remains.
    FileNotFoundError
        If the file does not exist.
    """
    path = Path(path)
    if not path.exists():
        raise FileNotFoundError(2, "No such file", str(path))
    fmt = detect_format(path)
    if fmt == "dwd":
        return read_dwd_track(path)
    if fmt == "aprs":
        return read_aprs_log(path, callsign=callsign, require_altitude=require_altitude)
    return read_csv_track(path)


# ---------------------------------------------------------------------------------------- live reading
class TrackFollower:
    """Read a growing telemetry file incrementally (the ``--follow`` loop).

    Each :meth:`poll` parses only the complete lines appended since the last poll (a last line without
    its newline waits). The format is detected from the first line once it is complete. DWD files are
    re-read whole (they are complete files, used for replays).

    Parameters
    ----------
    path : str or Path
    callsign : str, optional
        APRS station to follow; default: the station with most position packets so far.
    require_altitude : bool
        See :func:`read_track`.
    """

    def __init__(self, path: str | Path, callsign: str | None = None, require_altitude: bool = True) -> None:
        self.path = Path(path)
        self.callsign = callsign
        self.require_altitude = require_altitude
        self.format: str | None = None
        self._offset = 0
        self._pending = b""
        self._fixes = _Fixes()
        self._csv_idx: dict[str, int] | None = None
        self.report = ReadReport(self.path.name, "?")
        self._track: FlownTrack | None = None
        self._n_seen = 0

    def _complete_lines(self) -> list[str]:
        if not self.path.exists():
            return []
        with open(self.path, "rb") as f:
            f.seek(self._offset)
            data = f.read()
        self._offset += len(data)
        data = self._pending + data
        cut = data.rfind(b"\n")
        if cut < 0:
            self._pending = data
            return []
        self._pending = data[cut + 1 :]
        return data[: cut + 1].decode("utf-8", errors="replace").splitlines()

    def poll(self) -> bool:
        """Read what was appended; True if the track gained fixes."""
        if self.format == "dwd":
            return False
        lines = self._complete_lines()
        lines = [ln.lstrip("\ufeff") for ln in lines]
        for line in lines:
            if not line.strip():
                continue
            if self.format is None:
                self.format = detect_format(self.path, text=line)
                if self.format == "dwd":
                    self._track, self.report = read_dwd_track(self.path)
                    return True
                pos = GPS_SIGMA_M if self.format == "csv" else _quadrature(
                    GPS_SIGMA_M, APRS_RESOLUTION_M / math.sqrt(12))
                self.report = ReadReport(self.path.name, self.format, position_sigma_m=pos)
                if self.format == "csv":
                    self._csv_idx = _csv_columns(next(csv.reader([line])), self.path)
                    continue
            self.report.lines += 1
            if self.format == "csv":
                assert self._csv_idx is not None
                _parse_csv_row(next(csv.reader([line]), []), self._csv_idx, self._fixes, self.report)
            else:
                _aprs_line_into(line, self._fixes, self.report, self.require_altitude)
        if not lines:
            return False
        report = ReadReport(self.report.source, self.report.format, self.report.lines,
                            skipped=dict(self.report.skipped), position_sigma_m=self.report.position_sigma_m)
        fixes = _choose_station(self._fixes, self.callsign, report) if self.format == "aprs" else self._fixes
        track = _clean(fixes, report, f"{self.path.name} ({self.format})")
        self._final_report = report
        grew = len(track) > self._n_seen
        self._n_seen = len(track)
        self._track = track
        return grew

    @property
    def track(self) -> FlownTrack | None:
        """The cleaned track so far (None before the first fix)."""
        return self._track if self._track is not None and len(self._track) else None

    @property
    def read_report(self) -> ReadReport:
        """The report of the track so far (skips counted over all lines read)."""
        return getattr(self, "_final_report", self.report)
