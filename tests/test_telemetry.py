"""Telemetry readers: APRS against the protocol reference's examples, CSV, DWD, broken input, live reading.

APRS examples are those of the APRS Protocol Reference 1.0.1 (APRS Working Group, 2000), all FROM MEMORY
(the document was not at hand): chapter 8 uncompressed position reports ("!4903.50N/07201.75W-Test
/A=001234", "@092345z4903.50N/07201.75W>088/036", "/234517h4903.50N/07201.75W>PHG5132"), chapter 9
compressed reports ("=/5L!!<*e7>7P[" = 49 deg 30' N, 72 deg 45' W, course 88, speed 36.2 kt;
"!/5L!!<*e7OS]S" = altitude 10004 ft via 1.002^cs). The foot is 0.3048 m exactly (international yard
and pound agreement, 1959); the knot is 1852 m/h exactly.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from balloonpath.errors import InputDataError
from balloonpath.telemetry import (
    TrackFollower,
    detect_format,
    parse_aprs_line,
    read_aprs_log,
    read_csv_track,
    read_track,
)
from balloonpath.timeutil import parse_iso

RX = "2027-05-14T12:31:05Z"
DWD_FILE = Path("/work/shared/data/dwd-radiosonde-04928-2021060112.csv")


def test_aprs_uncompressed_with_altitude() -> None:
    # APRS101 ch. 8 (from memory): 49 deg 03.50' N, 072 deg 01.75' W, altitude /A=001234 ft.
    status, fix = parse_aprs_line(f"{RX} N0CALL-11>APRS,WIDE2-1:!4903.50N/07201.75W-Test /A=001234")
    assert status == "ok"
    assert fix["lat"] == pytest.approx(49 + 3.50 / 60, abs=1e-9)
    assert fix["lon"] == pytest.approx(-(72 + 1.75 / 60), abs=1e-9)
    assert fix["alt_m"] == pytest.approx(1234 * 0.3048, abs=1e-6)  # foot = 0.3048 m exactly
    assert fix["station"] == "N0CALL-11"
    assert fix["time_s"] == parse_iso(RX)


def test_aprs_timestamp_ignored_receive_time_used() -> None:
    # APRS101 ch. 8 (from memory): DHM zulu time stamp 09 23:45z; the log's receive time is used instead,
    # because aprslib dates the stamp with the machine clock.
    status, fix = parse_aprs_line(f"{RX} N0CALL>APRS:@092345z4903.50N/07201.75W>088/036/A=034567")
    assert status == "ok"
    assert fix["time_s"] == parse_iso(RX)
    assert fix["alt_m"] == pytest.approx(34567 * 0.3048, abs=1e-6)
    status, fix = parse_aprs_line(f"{RX} N0CALL>APRS:/234517h4903.50N/07201.75W>PHG5132")
    assert status == "no_altitude" and fix["time_s"] == parse_iso(RX)


def test_aprs_compressed_examples() -> None:
    import aprslib

    # APRS101 ch. 9 (from memory): course 88 deg, speed 36.2 kt.
    p = aprslib.parse("N0CALL>APRS:=/5L!!<*e7>7P[")
    assert p["latitude"] == pytest.approx(49.5, abs=1e-4)
    assert p["longitude"] == pytest.approx(-72.75, abs=1e-4)
    assert p["speed"] / 1.852 == pytest.approx(36.2, abs=0.1)  # aprslib gives km/h; 1 kt = 1.852 km/h
    status, fix = parse_aprs_line(f"{RX} N0CALL>APRS:!/5L!!<*e7OS]S")
    assert status == "ok"
    assert fix["alt_m"] / 0.3048 == pytest.approx(10004, abs=1.0)  # 1.002^4610 ft


@pytest.mark.parametrize(
    ("line", "reason"),
    [
        ("no time N0CALL>APRS:!4903.50N/07201.75W-", "bad_time"),
        (f"{RX} this is not a packet", "malformed"),
        (f"{RX} N0CALL>APRS:>status text", "no_position"),
        (f"{RX} N0CALL>APRS::N0CALL-1 :hello{{1", "no_position"),
        (f"{RX} N0CALL>APRS:!49XX.50N/07201.75W-", "bad_packet"),
        (f"{RX} N0CALL>APRS:!4903.50N/07201.75W-no altitude", "no_altitude"),
    ],
)
def test_aprs_bad_lines_have_reasons(line: str, reason: str) -> None:
    status, _ = parse_aprs_line(line)
    assert status == reason


def _aprs_log(tmp_path: Path) -> Path:
    lines = [
        "2027-05-14T12:30:00Z N0CALL-11>APRS:!4715.00N/00830.00EO/A=001378",
        "2027-05-14T12:30:30Z N0CALL-11>APRS:!4715.05N/00830.10EO/A=001870",
        "2027-05-14T12:30:30Z N0CALL-11>APRS:!4715.05N/00830.10EO/A=001870",  # duplicate
        "2027-05-14T12:31:30Z N0CALL-11>APRS:!4715.15N/00830.30EO/A=002854",
        "2027-05-14T12:31:00Z N0CALL-11>APRS:!4715.10N/00830.20EO/A=002362",  # out of order
        "2027-05-14T12:31:45Z N0CALL-9>APRS:!4714.00N/00829.00E>",  # other station, no altitude
        "garbage line",
        "2027-05-14T12:32:00Z N0CALL-11>APRS:!4815.20N/00830.40EO/A=003346",  # 111 km jump in 30 s
        "2027-05-14T12:32:30Z N0CALL-11>APRS:!47XX.25N/00830.50EO/A=003838",  # bad packet
        "2027-05-14T12:33:00Z N0CALL-11>APRS:!4715.30N/00830.60EO/A=004331",
        "",
    ]
    path = tmp_path / "rx.log"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def test_aprs_log_counts_and_cleans(tmp_path: Path) -> None:
    track, report = read_track(_aprs_log(tmp_path))
    assert report.format == "aprs" and report.station == "N0CALL-11"
    assert len(track) == 5
    assert np.all(np.diff(track.time_s) > 0)
    assert report.skipped == {"bad_time": 1, "duplicate": 1, "implausible_jump": 1, "bad_packet": 1,
                              "no_altitude": 1}
    assert report.out_of_order == 1
    assert "skipped" in report.describe()


def test_aprs_crew_track_without_altitude(tmp_path: Path) -> None:
    track, report = read_aprs_log(_aprs_log(tmp_path), callsign="N0CALL-9", require_altitude=False)
    assert len(track) == 1 and track.lat[0] == pytest.approx(47 + 14 / 60)
    assert report.skipped["other_station"] == 7


def test_csv_reader_skips_and_counts(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text(
        "time,latitude,longitude,altitude_m,extra\n"
        "2027-05-14T12:30:00Z,47.25,8.5,420,a\n"
        "2027-05-14T12:30:20Z,47.2503,8.5004,520,b\n"
        "not a time,47.25,8.5,600,c\n"
        "2027-05-14T12:30:40Z,abc,8.5,600,d\n"
        "2027-05-14T12:31:00Z,95.0,8.5,600,e\n"
        "2027-05-14T12:31:20Z,47.2509\n"
        "2027-05-14T12:31:40Z,47.2512,8.5016,920,f\n",
        encoding="utf-8",
    )
    track, report = read_csv_track(path)
    assert len(track) == 3
    assert report.skipped == {"bad_time": 1, "bad_number": 1, "out_of_range": 1, "malformed": 1}
    assert track.alt_m[-1] == 920.0


def test_csv_missing_column_error(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text("time,latitude,longitude\n2027-05-14T12:30:00Z,47,8\n", encoding="utf-8")
    with pytest.raises(InputDataError, match=r"t\.csv: column altitude_m: is missing.*fix: write a header"):
        read_track(path)


def test_unknown_format_and_empty_errors(tmp_path: Path) -> None:
    path = tmp_path / "x.txt"
    path.write_text("hello world\n", encoding="utf-8")
    with pytest.raises(InputDataError, match=r"x\.txt: line 1: is not a telemetry header"):
        detect_format(path)
    log = tmp_path / "bad.log"
    log.write_text(f"{RX} N0CALL>APRS:>only status\n", encoding="utf-8")
    with pytest.raises(InputDataError, match=r"bad\.log: file: holds no usable position fix"):
        read_track(log)


@pytest.mark.skipif(not DWD_FILE.exists(), reason="shared DWD file not present")
def test_dwd_file_as_track() -> None:
    # Deutscher Wetterdienst, Climate Data Center: station 4928, 2021-06-01 12 UTC, one row every 2 s.
    track, report = read_track(DWD_FILE)
    assert report.format == "dwd"
    assert len(track) > 1000
    assert np.median(np.diff(track.time_s)) == pytest.approx(2.0)
    assert 300.0 < report.position_sigma_m < 340.0  # 0.01 deg rounding / sqrt(12) plus GPS noise
    assert track.alt_m.max() > 30_000.0
    assert report.total_skipped == 0  # the 0.01 deg rounding steps are not taken for jumps


def test_follower_reads_growing_file(tmp_path: Path) -> None:
    path = tmp_path / "live.csv"
    path.write_text("time,latitude,longitude,altitude_m\n2027-05-14T12:30:00Z,47.25,8.5,420\n"
                    "2027-05-14T12:30:20Z,47.2503,8.50", encoding="utf-8")  # second line half-written
    f = TrackFollower(path)
    assert f.poll() is True
    assert len(f.track) == 1
    with open(path, "a", encoding="utf-8") as fh:
        fh.write("04,520\nbroken,line\n")
    assert f.poll() is True
    assert len(f.track) == 2 and f.track.lon[1] == pytest.approx(8.5004)
    assert f.read_report.skipped == {"malformed": 1}  # two cells, four expected
    assert f.poll() is False
