"""A real flight as a check (issue [14]): a real radiosonde's drift, flown back.

Data: Deutscher Wetterdienst, Climate Data Center: high-resolution radiosonde ascent, station 4928
(Stuttgart-Schnarrenberg), 2021-06-01 12 UTC (open data, attribution required; see
/work/shared/data/README.md). The file stays in shared/data; these tests skip when it is absent.
What the case shows and what it cannot: docs/real-flight.md.

The synthetic tests of :func:`balloonpath.replay.fly_prescribed_profile` at the end check it against
closed-form drifts and pyproj's geodesics ([Karney2013]).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from balloonpath.errors import CoverageWarning, FitWarning, InputDataError
from balloonpath.forecast import fly_nominal, load_winds
from balloonpath.geodesy import inverse
from balloonpath.plan import load_plan
from balloonpath.replay import fly_prescribed_profile
from balloonpath.timeutil import iso_from_posix
from balloonpath.winds.field import OffsetMemberWinds, UniformField, direction_speed_from_uv
from balloonpath.winds.sounding import Sounding, SoundingField, read_dwd_highres

DATA = (
    Path(__file__).resolve().parents[2] / "shared" / "data" / "dwd-radiosonde-04928-2021060112.csv"
)
if not DATA.exists():
    DATA = Path("/work/shared/data/dwd-radiosonde-04928-2021060112.csv")


@pytest.fixture(scope="module")
def dwd():
    if not DATA.exists():
        pytest.skip(
            "real-flight check needs shared/data/dwd-radiosonde-04928-2021060112.csv "
            "(Deutscher Wetterdienst, Climate Data Center), which is not present"
        )
    return read_dwd_highres(DATA)


class _ForwardAndReversed:
    """Member 0: the sounding's winds; member 1: the same winds reversed (direction read as TO)."""

    n_members = 2

    def __init__(self, field: SoundingField) -> None:
        self.field = field

    def wind(self, members, lat, lon, alt_m, time_s):
        u, v = self.field.wind(lat, lon, alt_m, time_s)
        sign = np.where(np.asarray(members) == 1, -1.0, 1.0)
        return sign * u, sign * v


@pytest.fixture(scope="module")
def replayed(dwd):
    """Both members flown along the sonde's own time-height profile (one pass for speed)."""
    sounding, track = dwd
    lat, lon = fly_prescribed_profile(
        track.time_s, track.alt_m, np.full(2, track.lat[0]), np.full(2, track.lon[0]),
        _ForwardAndReversed(SoundingField([sounding])), dt_s=10.0, members=np.array([0, 1]),
    )
    return lat, lon


def test_own_winds_along_own_profile_return_to_the_sonde(dwd, replayed):
    # Deutscher Wetterdienst, Climate Data Center: the sonde's winds come from its own GPS drift, so
    # integrating them along its own time-height profile must retrace its positions. Independent
    # figure (shared/data/README.md): 0.04 km from the last position after 16.7 km of drift, 0.8 km
    # at worst along the track; positions are rounded to 0.01 deg (up to ~0.56 km N-S, ~0.37 km E-W
    # at 48.8 deg, at the start and at every reported point).
    _, track = dwd
    lat, lon = replayed
    drift, _ = inverse(track.lat[0], track.lon[0], track.lat[-1], track.lon[-1])
    assert 16_000 < drift < 17_500  # README: 16.7 km
    miss, _ = inverse(lat[0, -1], lon[0, -1], track.lat[-1], track.lon[-1])
    print(f"\nDWD 4928 2021-06-01 12 UTC: own winds along own profile end {miss / 1000:.3f} km "
          f"from the last reported position after {drift / 1000:.1f} km of drift")
    assert miss < 500.0, f"replay ends {miss:.0f} m from the sonde's last position (limit 500 m)"
    along, _ = inverse(lat[0], lon[0], track.lat, track.lon)
    assert along.max() < 1_000.0, f"worst along-track miss {along.max():.0f} m (README: 0.8 km)"


def test_direction_read_the_wrong_way_round_misses_by_tens_of_km(dwd, replayed):
    # Deutscher Wetterdienst, Climate Data Center; README figure for direction read as "towards":
    # 33 km. This is what makes the previous check able to fail.
    _, track = dwd
    lat, lon = replayed
    miss, _ = inverse(lat[1, -1], lon[1, -1], track.lat[-1], track.lon[-1])
    print(f"\nDWD 4928: winds reversed miss the last position by {miss / 1000:.1f} km")
    assert miss > 10_000.0, f"reversed winds miss by only {miss:.0f} m"
    assert miss == pytest.approx(33_000.0, abs=2_000.0)


def _write_sounding_table(sounding: Sounding, path: Path) -> None:
    """The DWD sounding in our own sounding-table format (docs/winds.md), full precision."""
    direction, speed = direction_speed_from_uv(sounding.u, sounding.v)
    lines = [
        "# converted from a DWD high-resolution radiosonde file (Deutscher Wetterdienst, CDC)",
        f"# site_latitude = {sounding.lat}",
        f"# site_longitude = {sounding.lon}",
        f"# time = {iso_from_posix(sounding.time_s)}",
        "altitude_m,pressure_hpa,temperature_c,dewpoint_c,wind_direction_deg,wind_speed_m_s",
    ]
    for k in range(sounding.alt_m.size):
        lines.append(
            f"{sounding.alt_m[k]:.2f},{sounding.pressure_pa[k] / 100:.3f},"
            f"{sounding.temperature_k[k] - 273.15:.2f},{sounding.dewpoint_k[k] - 273.15:.2f},"
            f"{direction[k]:.3f},{speed[k]:.3f}"
        )
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def test_rates_mode_forecast_bursts_near_the_reported_burst(dwd, tmp_path, write_plan):
    # Deutscher Wetterdienst, Climate Data Center: a rates-mode forecast at the sonde's mean ascent
    # rate (README: 5.12 m/s) up to its highest altitude, through its own winds, through the whole
    # pipeline (sounding table -> plan -> load_winds -> fly_nominal). Independent figure (README):
    # burst point 3.1 km from the reported one; limit 4.5 km. The file ends at the top of the
    # ascent, taken here as the burst.
    sounding, track = dwd
    ascent = (track.alt_m[-1] - track.alt_m[0]) / (track.time_s[-1] - track.time_s[0])
    assert ascent == pytest.approx(5.12, abs=0.005)  # README
    top = float(track.alt_m.max())
    assert top == track.alt_m[-1]  # the ascent ends at its highest point
    _write_sounding_table(sounding, tmp_path / "sounding.csv")
    plan_path = write_plan(
        tmp_path,
        f"""\
[launch]
latitude = {track.lat[0]}
longitude = {track.lon[0]}
time = {iso_from_posix(track.time_s[0])}
elevation_m = {track.alt_m[0]:.1f}
site_name = "DWD station 4928 (real data)"

[rates]
ascent_m_s = {ascent:.6f}
burst_altitude_m = {top:.2f}
descent_sea_level_m_s = 5.0

[winds]
sounding = "sounding.csv"
outside = "hold"
""",
        touch=(),
    )
    plan = load_plan(plan_path)
    with pytest.warns(FitWarning, match="no usable observations"):
        winds = load_winds(plan)
    # The step that crosses the burst altitude looks past the sounding's top before it is cut
    # back to end exactly at the burst: the top wind is held there (CoverageWarning).
    with pytest.warns(CoverageWarning):
        traj, _ = fly_nominal(plan, winds)
    assert traj.burst_alt_m[0] == pytest.approx(top, abs=1.0)
    assert traj.burst_time_s[0] == pytest.approx(track.time_s[-1], abs=1.0)
    miss, _ = inverse(traj.burst_lat[0], traj.burst_lon[0], track.lat[-1], track.lon[-1])
    print(f"\nDWD 4928: rates-mode forecast at {ascent:.2f} m/s bursts {miss / 1000:.2f} km from "
          "the reported burst position (independent figure: 3.1 km)")
    assert miss < 4_500.0, f"burst {miss / 1000:.2f} km from the reported one (limit 4.5 km)"
    # The constant rate, not the winds, makes this miss: it is far larger than the replay's.
    assert miss > 1_000.0, f"burst only {miss:.0f} m away: not testing the ascent profile"


def test_telemetry_reader_takes_the_dwd_file_as_a_flown_track(dwd):
    # Deutscher Wetterdienst, Climate Data Center: the same file as the flown track of verification
    # and the replay input of recovery, through telemetry.read_track (format detected from the
    # header). Every fix it keeps is the DWD reader's fix at that time, launch and top included.
    from balloonpath.telemetry import read_track

    _, reference = dwd
    track, report = read_track(DATA)
    assert report.format == "dwd"
    assert len(track) >= 0.9 * len(reference)  # see docs/real-flight.md: rounding-step drops
    k = np.searchsorted(reference.time_s, track.time_s)
    assert np.array_equal(reference.time_s[k], track.time_s)
    assert np.allclose(track.lat, reference.lat[k], atol=1e-9)
    assert np.allclose(track.lon, reference.lon[k], atol=1e-9)
    assert np.allclose(track.alt_m, reference.alt_m[k], atol=1e-6)
    assert track.time_s[0] == reference.time_s[0] and track.time_s[-1] == reference.time_s[-1]


# ------------------------------------------------------------- fly_prescribed_profile, synthetic
def test_uniform_wind_at_sea_level_moves_along_the_geodesic():
    # pyproj.Geod ([Karney2013]): at zero height a constant wind of 6 m/s from the south-west for
    # one hour moves 21 600 m toward azimuth 45 deg; the step is a rhumb line, which differs from
    # the geodesic over 21.6 km at 48.8 deg by ~s^2 tan(phi) / (2 N) ~ 40 m sideways, ~0 in length.
    t = np.array([0.0, 1800.0, 3600.0])
    z = np.zeros(3)
    u = v = 6.0 / np.sqrt(2.0)
    lat, lon = fly_prescribed_profile(t, z, 48.83, 9.20, UniformField(u, v), dt_s=60.0)
    dist, az = inverse(48.83, 9.20, lat, lon)
    assert dist[-1] == pytest.approx(21_600.0, abs=1.0)
    assert dist[1] == pytest.approx(10_800.0, abs=1.0)
    assert az[-1] == pytest.approx(45.0, abs=0.2)
    assert lat[0] == 48.83 and lon[0] == 9.20


class _LinearShear:
    """u = a * z (east), v = 0: the drift depends on the altitude profile."""

    def __init__(self, a_per_s: float) -> None:
        self.a = a_per_s

    def wind(self, lat, lon, alt_m, time_s):
        z = np.asarray(alt_m, dtype=float)
        return self.a * z, np.zeros_like(z)

    def coverage(self):  # pragma: no cover - not used here
        raise NotImplementedError


def test_altitude_follows_the_profile_linear_shear_closed_form():
    # Closed form (calculus): u = a z with z rising at w for T1 and then held at w T1 for T2 moves
    # east by a w T1^2 / 2 + a w T1 T2. At the equator an eastward move follows the equator, whose
    # length is exact in pyproj ([Karney2013]); heights <= 1 km shrink the angle by h / R < 1.6e-4.
    a, w, t1, t2 = 0.004, 5.0, 200.0, 300.0
    t = np.array([0.0, t1, t1 + t2])
    z = np.array([0.0, w * t1, w * t1])
    lat, lon = fly_prescribed_profile(t, z, 0.0, 10.0, _LinearShear(a), dt_s=7.0)
    expected = a * w * t1**2 / 2 + a * w * t1 * t2
    dist, az = inverse(0.0, 10.0, lat[-1], lon[-1])
    assert dist == pytest.approx(expected, rel=2e-4)
    assert az == pytest.approx(90.0, abs=1e-6)
    d1, _ = inverse(0.0, 10.0, lat[1], lon[1])
    assert d1 == pytest.approx(a * w * t1**2 / 2, rel=2e-4)
    # Reversing the profile (held high first) changes the drift: altitude is not ignored.
    lat2, lon2 = fly_prescribed_profile(t, z[::-1], 0.0, 10.0, _LinearShear(a), dt_s=7.0)
    d2, _ = inverse(0.0, 10.0, lat2[-1], lon2[-1])
    # held at w T1 for T1, then falling linearly to 0 over T2 (mean height w T1 / 2)
    assert d2 == pytest.approx(a * w * t1**2 + a * w * t1 * t2 / 2, rel=2e-4)


def test_member_winds_move_each_member_by_its_own_offset():
    # Zero background plus one constant offset per member (OffsetMemberWinds): member k drifts
    # (du_k, dv_k) * T, less h / R = 1.6e-5 at 100 m; distances from pyproj.Geod ([Karney2013]).
    du, dv = np.array([0.0, 3.0, 0.0]), np.array([0.0, 0.0, -4.0])
    winds = OffsetMemberWinds(UniformField(0.0, 0.0), du, dv)
    t, z = np.array([0.0, 1000.0]), np.array([100.0, 100.0])
    lat, lon = fly_prescribed_profile(
        t, z, np.full(3, 45.0), np.full(3, 7.0), winds, dt_s=10.0, members=np.arange(3)
    )
    assert lat.shape == (3, 2)
    dist, az = inverse(45.0, 7.0, lat[:, -1], lon[:, -1])
    assert dist[0] == pytest.approx(0.0, abs=1e-6)
    # an eastward step follows the parallel (rhumb line): the geodesic's initial azimuth differs
    # from 90 deg by s tan(phi) / (2 N) = 0.0135 deg for s = 3 km at 45 deg
    assert dist[1] == pytest.approx(3_000.0, rel=1e-4) and az[1] == pytest.approx(90.0, abs=0.02)
    assert dist[2] == pytest.approx(4_000.0, rel=1e-4) and az[2] == pytest.approx(180.0, abs=0.01)


def test_times_must_increase():
    with pytest.raises(InputDataError, match=r"time_s: does not increase at index 2; fix: sort"):
        fly_prescribed_profile(
            np.array([0.0, 10.0, 10.0]), np.zeros(3), 0.0, 0.0, UniformField(1.0, 0.0)
        )
    with pytest.raises(InputDataError, match=r"dt_s: 0.0 is not a positive number"):
        fly_prescribed_profile(
            np.array([0.0, 10.0]), np.zeros(2), 0.0, 0.0, UniformField(1.0, 0.0), dt_s=0.0
        )
