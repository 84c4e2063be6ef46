"""Aircraft-derived winds: wind triangle, heights, QC, heading bias, super-observations, round trip."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from balloonpath.atmosphere import SoundingAtmosphere, StandardAtmosphere, usa1976
from balloonpath.errors import DataQualityWarning, InputDataError
from balloonpath.timeutil import parse_iso
from balloonpath.winds.aircraft import (
    KIND_DERIVED,
    AircraftStates,
    QCConfig,
    ReadCounts,
    altitude_from_pressure_altitude,
    derive_observations,
    heading_and_ground_speed,
    observation_sigma_m_s,
    quality_control,
    read_report_table,
    superobservations,
    wind_from_triangle,
)
from balloonpath.winds.field import direction_speed_from_uv, uv_from_direction_speed
from balloonpath.winds.traffic import simulate_traffic, write_report_table

T0 = parse_iso("2027-05-14T06:00:00Z")


class JetField:
    """Analytic truth for tests: a jet near 10.5 km with gentle horizontal gradients."""

    def wind(self, lat, lon, alt_m, time_s):
        z = np.asarray(alt_m, dtype=float)
        la, lo, t = (np.asarray(a, dtype=float) for a in (lat, lon, time_s))
        u = 12.0 + 30.0 * np.exp(-(((z - 10_500.0) / 3_000.0) ** 2)) + 0.5 * (la - 47.0) + 0 * t
        v = 4.0 - 2e-4 * z + 0.5 * (lo - 8.0) + 0 * t
        return u, v


def test_wind_triangle_faa_phak_example() -> None:
    # FAA Pilot's Handbook of Aeronautical Knowledge (FAA-H-8083-25), Navigation chapter, wind triangle:
    # true course 090, TAS 120 kt, wind from 045 at 40 kt -> GS 88 kt (read, REFERENCES.md section 6);
    # heading 076.37 deg and GS 88.335 kt computed there (the printed "076" is from memory).
    u, v = uv_from_direction_speed(45.0, 40.0)
    heading, gs = heading_and_ground_speed(120.0, 90.0, u, v)
    assert heading == pytest.approx(76.37, abs=0.01)
    assert gs == pytest.approx(88.335, abs=0.001)
    assert round(float(gs)) == 88
    # Inverse: wind = ground velocity - air velocity gives back 045 at 40 kt exactly.
    wu, wv = wind_from_triangle(gs, 90.0, 120.0, heading)
    direction, speed = direction_speed_from_uv(wu, wv)
    assert direction == pytest.approx(45.0, abs=1e-9)
    assert speed == pytest.approx(40.0, abs=1e-9)


def test_heading_error_sensitivity() -> None:
    # REFERENCES.md section 6 (computed): 1 deg heading error at TAS 230 m/s -> 4.01 m/s wind error.
    u0, v0 = wind_from_triangle(230.0, 80.0, 230.0, 80.0)
    u1, v1 = wind_from_triangle(230.0, 80.0, 230.0, 81.0)
    assert np.hypot(u1 - u0, v1 - v0) == pytest.approx(4.01, abs=0.01)


def test_pressure_altitude_against_ambiance() -> None:
    ambiance = pytest.importorskip("ambiance")
    # Pressure altitude is a geopotential height of the standard atmosphere: ambiance (ICAO/USSA tables)
    # gives geopotential H and pressure at the geometric altitude we return.
    for h_ft in (5_000.0, 18_000.0, 36_089.24, 41_000.0):
        z = float(altitude_from_pressure_altitude(h_ft * 0.3048))
        atm = ambiance.Atmosphere(z)
        assert float(atm.H[0]) == pytest.approx(h_ft * 0.3048, abs=0.05)
    # Standard atmosphere object and None agree; a 10 K warmer day puts the same pressure higher.
    z = np.array([3_000.0, 9_000.0, 12_000.0])
    assert np.allclose(altitude_from_pressure_altitude(z, StandardAtmosphere()),
                       altitude_from_pressure_altitude(z), atol=0.5)
    levels = np.linspace(0.0, 20_000.0, 41)
    std = usa1976(levels)
    warm_t = std.temperature_k + 10.0
    # Hydrostatic pressure of the warm column (trapezoid in 1/T): p = p0 exp(-g/R int dz/T).
    inv = 1.0 / warm_t
    integral = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(levels))])
    warm_p = 101_325.0 * np.exp(-9.80665 / 287.0531 * integral)
    warm = SoundingAtmosphere(levels, warm_t, warm_p)
    assert np.all(altitude_from_pressure_altitude(z, warm) > altitude_from_pressure_altitude(z) + 50.0)


def test_observation_sigma_defaults_follow_sources() -> None:
    # de Haan (2016) AMT 9:4141: < 1.4 m/s near the surface, 1.1 m/s at 500 hPa (about 5.5 km);
    # Benjamin et al. (1999) via de Haan (2016): AMDAR 1.1 m/s near the surface, 1.8 m/s at 10 km.
    assert observation_sigma_m_s(0.0, KIND_DERIVED) == pytest.approx(1.4)
    assert observation_sigma_m_s(5_500.0, KIND_DERIVED) == pytest.approx(1.1)
    assert observation_sigma_m_s(10_000.0, 1) == pytest.approx(1.8)
    assert observation_sigma_m_s(0.0, 1) == pytest.approx(1.1)


def _states(n: int, **overrides) -> AircraftStates:
    base = dict(
        time_s=T0 + np.arange(n) * 4.0, aircraft=np.array(["AAA111"] * n, dtype=object),
        lat=np.full(n, 47.0), lon=np.full(n, 8.0), alt_m=np.full(n, 10_000.0),
        ground_speed_m_s=np.full(n, 250.0), track_deg=np.full(n, 90.0),
        true_airspeed_m_s=np.full(n, 230.0), heading_true_deg=np.full(n, 90.0),
        roll_deg=np.zeros(n), track_rate_deg_s=np.full(n, np.nan), pair_age_s=np.zeros(n),
        wind_u=np.full(n, np.nan), wind_v=np.full(n, np.nan), kind=np.zeros(n, dtype=np.int8),
        source=np.array(["test"] * n, dtype=object),
    )
    base.update(overrides)
    return AircraftStates(**base)


def test_qc_rules_count_each_failure_once() -> None:
    n = 40
    roll = np.zeros(n)
    roll[3] = 12.0  # turning
    tas = np.full(n, 230.0)
    tas[5] = 400.0  # implausible airspeed
    gs = np.full(n, 250.0)
    gs[7] = 380.0  # |wind| = 150 m/s
    age = np.zeros(n)
    age[9] = 5.0  # stale pair
    gs[11] = 265.0  # 35 m/s instead of 20: a gross outlier
    states = _states(n, roll_deg=roll, true_airspeed_m_s=tas, ground_speed_m_s=gs, pair_age_s=age)
    _, ok, counts = quality_control(states, None, QCConfig(heading_bias=False))
    assert counts["turning"] == 1 and counts["implausible_speed"] == 1
    assert counts["wind_too_strong"] == 1 and counts["stale_pair"] == 1 and counts["outlier"] == 1
    assert ok.sum() == n - 5
    assert not ok[[3, 5, 7, 9, 11]].any()


def test_track_change_without_roll_is_turning() -> None:
    n = 20
    track = np.full(n, 90.0)
    track[10:] = 90.0 + np.arange(10) * 8.0  # 2 deg/s
    states = _states(n, roll_deg=np.full(n, np.nan), track_deg=track, heading_true_deg=track,
                     ground_speed_m_s=np.full(n, 230.0))
    _, ok, counts = quality_control(states, None, QCConfig(heading_bias=False))
    assert counts["turning"] == 10
    assert ok[:9].all()


def test_superobservations_thin_and_shrink_sigma() -> None:
    n = 60  # 4 minutes of one aircraft at one altitude: two 120 s bins
    states = _states(n, time_s=parse_iso("2027-05-14T06:00:00Z") + np.arange(n) * 4.0)
    obs = superobservations(states, QCConfig())
    assert len(obs) == 2
    assert np.allclose(obs.u, 20.0) and np.allclose(obs.v, 0.0, atol=1e-9)
    sigma_row = observation_sigma_m_s(10_000.0, KIND_DERIVED)
    assert obs.sigma[0] == pytest.approx(sigma_row * np.sqrt(0.5 + 0.5 / 30))


def test_report_table_bad_lines_are_counted(tmp_path) -> None:
    path = tmp_path / "reports.csv"
    header = ("time,aircraft,latitude,longitude,pressure_altitude_ft,ground_speed_kt,track_deg,"
              "true_airspeed_kt,heading_deg,heading_reference,colour")
    good = "2027-05-14T06:00:{s:02d}Z,AB12CD,47.0,8.0,35000,480,90,450,85,true,red"
    lines = [header] + [good.format(s=s) for s in range(0, 40, 4)]
    lines += ["not-a-time,AB12CD,47,8,35000,480,90,450,85,true,red",  # malformed
              "2027-05-14T06:01:00Z,AB12CD,47,8,35000,480,nan,450,85,true,red",  # NaN
              "2027-05-14T06:01:04Z,AB12CD,47,8,35000,480,90",  # short row
              "2027-05-14T06:01:08Z,AB12CD,47,8,35000,480,90,450,85,sideways,red"]  # bad reference
    path.write_text("\n".join(lines) + "\n")
    with pytest.warns(DataQualityWarning) as caught:
        obs, report = derive_observations([path])
    messages = [str(w.message) for w in caught]
    assert any("unknown columns colour" in m for m in messages)
    assert any("skipped 2 malformed lines" in m for m in messages)
    assert report.malformed_lines == 2 and report.missing_values == 2 and report.rows == 10
    assert report.unknown_columns == ("colour",)
    assert len(obs) >= 1 and "superobservations" not in report.lines()[0]
    assert report.as_dict()["accepted"] == report.accepted


def test_report_table_errors_are_one_line(tmp_path) -> None:
    missing = tmp_path / "missing.csv"
    missing.write_text("time,aircraft,latitude,longitude,pressure_altitude_ft,ground_speed_kt\n")
    with pytest.raises(InputDataError, match=r"missing.csv: column track_deg: is missing"):
        read_report_table(missing, ReadCounts())
    empty = tmp_path / "nothing.csv"
    empty.write_text("time,aircraft,latitude,longitude,altitude_m,wind_u_m_s,wind_v_m_s\n"
                     "2027-05-14T06:00:00Z,X,47,8,nan,1,2\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        with pytest.raises(InputDataError, match=r"no usable wind in 1 lines; fix:"):
            derive_observations(empty)


def _expected_component_sd(traffic, noise) -> float:
    """Linear propagation of the injected noise into u and v (RMS over both components)."""
    on = traffic.active & (np.abs(traffic.roll_deg) < 5.0)
    chi = np.radians(traffic.track_deg[on])
    psi = np.radians(traffic.heading_deg[on])
    gs, tas = traffic.ground_speed_m_s[on], traffic.true_airspeed_m_s[on]
    s_trk, s_hdg = np.radians(noise.track_deg), np.radians(noise.heading_deg)
    var_u = (noise.ground_speed_m_s * np.sin(chi)) ** 2 + (gs * s_trk * np.cos(chi)) ** 2 \
        + (noise.true_airspeed_m_s * np.sin(psi)) ** 2 + (tas * s_hdg * np.cos(psi)) ** 2
    var_v = (noise.ground_speed_m_s * np.cos(chi)) ** 2 + (gs * s_trk * np.sin(chi)) ** 2 \
        + (noise.true_airspeed_m_s * np.cos(psi)) ** 2 + (tas * s_hdg * np.sin(psi)) ** 2
    return float(np.sqrt(np.mean(0.5 * (var_u + var_v))))


def test_round_trip_report_table_with_heading_bias(tmp_path) -> None:
    truth = JetField()
    traffic = simulate_traffic(truth, 47.0, 8.0, T0, 1_500.0, np.random.default_rng(11), n_aircraft=24,
                               heading_bias_fraction=0.3, meteo_fraction=0.0)
    path = write_report_table(traffic, tmp_path / "reports.csv", np.random.default_rng(12))
    counts = ReadCounts()
    states = read_report_table(path, counts)
    corrected, ok, qc = quality_control(states)
    acc = corrected.select(ok)
    u, v = acc.winds()
    tu, tv = truth.wind(acc.lat, acc.lon, acc.alt_m, acc.time_s)
    rmse = float(np.sqrt(np.mean(0.5 * ((u - tu) ** 2 + (v - tv) ** 2))))
    expected = _expected_component_sd(traffic, traffic.noise)
    assert rmse <= 1.2 * expected, (rmse, expected)
    # Every biased aircraft with enough rows is found, with the right sign and size (within 0.5 deg).
    rows = {name: int(np.sum(states.aircraft == name)) for name in set(states.aircraft)}
    biased = {traffic.icao[i]: b for i, b in enumerate(traffic.heading_bias_deg) if b != 0 and
              rows.get(traffic.icao[i], 0) >= 20}
    assert biased, "the seed should give biased aircraft in the window"
    for name, bias in biased.items():
        assert qc["heading_bias_deg"][name] == pytest.approx(bias, abs=0.5)
    assert set(qc["heading_bias_deg"]) <= set(biased) | {n for n, r in rows.items() if r < 20}
    # Without the correction the same rows are far worse (bias of 2-4 deg = 8-16 m/s).
    _, ok2, _ = quality_control(states, None, QCConfig(heading_bias=False, outlier_z=1e9))
    raw = states.select(ok2)
    ru, rv = raw.winds()
    su, sv = truth.wind(raw.lat, raw.lon, raw.alt_m, raw.time_s)
    assert float(np.sqrt(np.mean(0.5 * ((ru - su) ** 2 + (rv - sv) ** 2)))) > 2.0 * expected


def test_derive_with_background_and_reported_winds(tmp_path) -> None:
    truth = JetField()
    traffic = simulate_traffic(truth, 47.0, 8.0, T0, 900.0, np.random.default_rng(5), n_aircraft=12,
                               heading_bias_fraction=0.0, meteo_fraction=0.5)
    path = write_report_table(traffic, tmp_path / "r.csv", np.random.default_rng(6), include_roll=False)
    obs, report = derive_observations(path, background=truth)
    assert report.superobservations == len(obs) < report.accepted
    assert {"aircraft-report", "aircraft-report-wind"} <= {s.split(":")[0] for s in obs.source}
    assert all(":" in s for s in obs.source)  # "<kind>:<aircraft>" (one aircraft shares an error in the GP)
    tu, tv = truth.wind(obs.lat, obs.lon, obs.alt_m, obs.time_s)
    # Super-observations average the noise: well inside their stated sigma.
    assert float(np.sqrt(np.mean((obs.u - tu) ** 2))) < np.mean(obs.sigma)
    assert float(np.sqrt(np.mean((obs.v - tv) ** 2))) < np.mean(obs.sigma)
    assert report.heading_bias_aircraft == 0


def test_background_error_is_not_taken_for_a_heading_bias(tmp_path) -> None:
    # No aircraft has a heading bias, but the background (the reference) is wrong by a misplaced jet and
    # eddies of ~3 m/s: the bias is estimated against the other aircraft nearby (who share the background
    # error), so no aircraft may be "corrected" (a false 1.5 deg correction is a 6 m/s error at cruise:
    # 2 TAS sin(d psi / 2), FAA PHAK wind triangle). Recovery of biased aircraft: the round-trip test above.
    from balloonpath.winds.synthetic import SyntheticAtmosphereField

    rng = np.random.default_rng([2027, 1])  # the set-up of case 1 of benchmarks/skill.py
    lat0, lon0 = float(rng.uniform(32.0, 56.0)), float(rng.uniform(-115.0, 25.0))
    t0 = 1_815_000_000.0 + 86_400.0 + float(rng.uniform(0.0, 86_400.0))
    jet_alt = float(rng.uniform(9_500.0, 12_000.0))
    params = dict(jet_speed_m_s=float(rng.uniform(30.0, 60.0)), jet_altitude_m=jet_alt,
                  jet_direction_deg=float(rng.uniform(240.0, 300.0)), surface_wind_m_s=float(rng.uniform(2.0, 8.0)))
    truth = SyntheticAtmosphereField(lat0, lon0, t0, seed=101, **params)
    shifted = dict(truth.params, jet_speed_m_s=truth.params["jet_speed_m_s"] * 1.05,
                   jet_altitude_m=truth.params["jet_altitude_m"] + 300.0,
                   jet_direction_deg=truth.params["jet_direction_deg"] + 3.0)
    background = SyntheticAtmosphereField(lat0, lon0, t0, seed=101, **shifted).perturbed(seed=1_001,
                                                                                         amplitude_m_s=2.6)
    traffic = simulate_traffic(truth, lat0, lon0, t0 - 7200.0, 7200.0, rng, n_aircraft=16, step_s=4.0,
                               heading_bias_fraction=0.0)
    table = write_report_table(traffic, tmp_path / "reports.csv", rng, interval_s=20.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        _, report = derive_observations([table], background=background)
    assert report.heading_bias_aircraft == 0, report.heading_bias_deg
