"""Raw Mode-S decoding to winds; the encoder checked against pyModeS and the 1090 MHz Riddle examples."""

from __future__ import annotations

import warnings

import numpy as np
import pyModeS
import pytest
from pyModeS import util

from balloonpath.errors import DataQualityWarning, InputDataError
from balloonpath.timeutil import parse_iso
from balloonpath.units import KNOT_M_S
from balloonpath.winds import modes_encode as enc
from balloonpath.winds.aircraft import QCConfig, ReadCounts, derive_observations, quality_control
from balloonpath.winds.modes import calibrated_airspeed_kt_from_mach, read_raw_messages
from balloonpath.winds.traffic import simulate_traffic, write_raw_messages

T0 = parse_iso("2027-05-14T06:00:00Z")


class ShearField:
    def wind(self, lat, lon, alt_m, time_s):
        z = np.asarray(alt_m, dtype=float)
        return 8.0 + 2.5e-3 * z + 0 * np.asarray(lat), -3.0 + 1e-3 * z + 0 * np.asarray(lon)


def test_riddle_examples_crc_and_encoder() -> None:
    # J. Sun, The 1090 Megahertz Riddle, 2nd ed. (TU Delft OPEN), worked examples (REFERENCES.md section 7).
    velocity = "8D485020994409940838175B284F"
    assert f"{enc.crc24(int(velocity[:22], 16), 88):06X}" == velocity[22:]
    # Airborne position example, even frame at 52.2572 N, 3.91937 E, 38000 ft: encoded bit for bit.
    assert enc.airborne_position("40621D", 52.2572, 3.91937, 38000, odd=False) == "8D40621D58C382D690C8AC2863A7"
    # Velocity example: GS 159 kt, track 182.88 deg, -832 ft/min (book values), decoded back by pyModeS.
    d = pyModeS.decode(enc.airborne_velocity("485020", 159.20, 182.88, -832))
    assert d["groundspeed"] == 159 and d["track"] == pytest.approx(182.88, abs=0.01)
    assert d["vertical_rate"] == -832 and d["crc_valid"] is True
    # The book's BDS 5,0 / 6,0 / 4,4 examples re-encoded, decoded by pyModeS to the book's values.
    d50 = pyModeS.decode(enc.comm_b("4CA53F", 36000, enc.bds50(-9.7, 140.273, 476, -0.406, 466)))
    assert (d50["bds"], d50["true_airspeed"], d50["groundspeed"]) == ("5,0", 466, 476)
    assert d50["true_track"] == pytest.approx(140.273, abs=0.09) and d50["roll"] == pytest.approx(-9.7, abs=0.09)
    d60 = pyModeS.decode(enc.comm_b("4CA53F", 36000, enc.bds60(110.391, 259, 0.700, -2144, -2016)))
    assert (d60["bds"], d60["indicated_airspeed"], d60["baro_vertical_rate"]) == ("6,0", 259, -2144)
    assert d60["magnetic_heading"] == pytest.approx(110.391, abs=0.09) and d60["mach"] == pytest.approx(0.7)
    d44 = pyModeS.decode(enc.comm_b("3C4DD7", 35050, enc.bds44(22, 344.53, -48.75)), include_meteo=True)
    assert (d44["bds"], d44["wind_speed"], d44["altitude"]) == ("4,4", 22, 35050)
    assert d44["wind_direction"] == pytest.approx(344.53, abs=0.36)
    assert d44["static_air_temperature"] == -48.75


def test_encoder_round_trip_within_resolution() -> None:
    rng = np.random.default_rng(3)
    for _ in range(100):
        lat, lon = rng.uniform(-80, 80), rng.uniform(-180, 180)
        alt = float(rng.integers(0, 1600) * 25)
        even = enc.airborne_position("ABCDEF", lat, lon, alt, odd=False)
        d = pyModeS.decode(even, reference=(lat + 0.3, lon - 0.3))
        assert d["crc_valid"] and d["altitude"] == alt
        # CPR 17-bit resolution: 360 / 60 / 2^17 deg in latitude (about 5 m).
        assert d["latitude"] == pytest.approx(lat, abs=1e-4)
        assert d["longitude"] == pytest.approx(lon, abs=2e-3)
        gs, trk = rng.uniform(150, 500), rng.uniform(0, 360)
        v = pyModeS.decode(enc.airborne_velocity("ABCDEF", gs, trk))
        assert v["groundspeed"] == pytest.approx(gs, abs=1.5)
        hdg, tas = rng.uniform(0, 360), gs + rng.uniform(-80, 80)
        b60 = pyModeS.decode(enc.comm_b("ABCDEF", alt, enc.bds60(hdg, 250, 0.6)))
        assert abs((b60["magnetic_heading"] - hdg + 180) % 360 - 180) <= 90 / 512 / 2 + 1e-9
        b50 = pyModeS.decode(enc.comm_b("ABCDEF", alt, enc.bds50(3.0, trk, gs, 0.1, tas)))
        assert "5,0" in (b50.get("bds_candidates") or [b50["bds"]])
        assert b50["icao"] == "ABCDEF"  # parity overlaid with the address
    for lat in (0.0, 10.0, 45.0, 52.25, 86.9, 87.0, 89.0):
        assert enc.cpr_nl(lat) == util.cprNL(lat)


def test_cas_from_mach_sea_level_identity() -> None:
    # At sea level in the standard atmosphere CAS = TAS = M a0 (common practice; a0 = 661.48 kt, NOAA1976).
    assert float(calibrated_airspeed_kt_from_mach(0.5, 0.0)) == pytest.approx(0.5 * 661.4788, rel=1e-6)
    assert float(calibrated_airspeed_kt_from_mach(0.8, 35_000.0)) < 0.8 * 661.4788 * 0.6


def _traffic(seed: int, duration: float = 900.0, n: int = 10):
    return simulate_traffic(ShearField(), 46.5, 9.0, T0, duration, np.random.default_rng(seed), n_aircraft=n,
                            heading_bias_fraction=0.0, meteo_fraction=0.3)


def test_round_trip_raw_messages(tmp_path) -> None:
    traffic = _traffic(21)
    path, n_lines = write_raw_messages(traffic, tmp_path / "raw.csv", np.random.default_rng(22))
    counts = ReadCounts()
    states = read_raw_messages(path, counts)
    assert counts.lines == n_lines and counts.crc_failed == 0
    corrected, ok, _ = quality_control(states)
    acc = corrected.select(ok & (corrected.kind == 0))
    u, v = acc.winds()
    tu, tv = ShearField().wind(acc.lat, acc.lon, acc.alt_m, acc.time_s)
    rmse = float(np.sqrt(np.mean(0.5 * ((u - tu) ** 2 + (v - tv) ** 2))))
    # Injected noise propagated (GS 0.3 m/s, track 0.1 deg, TAS 0.5 m/s, heading 0.2 deg at ~230 m/s) plus
    # the quantisation of the fields (uniform, step^2/12): TAS 2 kt, heading 90/512 deg, GS 1 kt per axis.
    nz = traffic.noise
    tas = float(np.nanmean(traffic.true_airspeed_m_s[traffic.active]))
    var = 0.5 * (nz.ground_speed_m_s**2 + nz.true_airspeed_m_s**2) + 0.5 * tas**2 * (
        np.radians(nz.track_deg) ** 2 + np.radians(nz.heading_deg) ** 2)
    var += 0.5 * ((2 * KNOT_M_S) ** 2 / 12 + tas**2 * np.radians(90 / 512) ** 2 / 12 + KNOT_M_S**2 / 12)
    assert rmse <= 1.2 * np.sqrt(var), (rmse, np.sqrt(var))
    # BDS 4,4 rows are reported winds (noise 1 m/s, 1 kt and 0.7 deg steps).
    met = corrected.select(ok & (corrected.kind == 1))
    assert len(met) > 10
    mu, mv = met.winds()
    su, sv = ShearField().wind(met.lat, met.lon, met.alt_m, met.time_s)
    assert float(np.sqrt(np.mean(0.5 * ((mu - su) ** 2 + (mv - sv) ** 2)))) < 1.5


def test_bad_lines_are_counted_never_crash(tmp_path) -> None:
    traffic = _traffic(31, duration=400.0, n=6)
    path, _ = write_raw_messages(traffic, tmp_path / "raw.csv", np.random.default_rng(32),
                                 corrupt_fraction=0.02, malformed_fraction=0.01)
    with path.open("a") as f:
        f.write("garbage line without comma\n2027-05-14T06:10:00Z,nan\nnot-a-time,8D485020994409940838175B284F\n"
                "2027-05-14T06:10:01Z,ZZ485020994409940838175B284F\n2027-05-14T06:10:02Z,5D4840D6202CC3\n")
    # A verified address whose BDS 6,0 content is inconsistent (IAS 400 kt at Mach 0.3, FL350).
    i = int(np.nonzero(traffic.active[-1])[0][0])
    heading = float(traffic.heading_deg[-1, i])
    palt = float(traffic.pressure_altitude_ft[-1, i])
    with path.open("a") as f:
        f.write(f"{T0 + 401.0},{enc.comm_b(traffic.icao[i], palt, enc.bds60(heading, 400, 0.3))}\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        obs, report = derive_observations(path)
    assert report.malformed_lines >= 4 and report.crc_failed > 0 and report.ambiguous_bds >= 1
    assert report.short_skipped == 1
    assert len(obs) > 0
    assert any("bad CRC" in line for line in report.lines())


def test_no_usable_wind_is_a_clear_error(tmp_path) -> None:
    path = tmp_path / "empty.csv"
    path.write_text("time,message\n2027-05-14T06:00:00Z,8D485020994409940838175B284F\n")
    with pytest.raises(InputDataError, match=r"empty.csv: rows: no usable wind in 1 lines; fix:"):
        derive_observations(path)


def test_pairing_window_rejects_stale_pairs(tmp_path) -> None:
    traffic = _traffic(41, duration=300.0, n=4)
    path, _ = write_raw_messages(traffic, tmp_path / "raw.csv", np.random.default_rng(42))
    states = read_raw_messages(path, ReadCounts())
    _, ok, counts = quality_control(states, None, QCConfig(max_pair_age_s=0.05))
    _, ok2, counts2 = quality_control(states, None, QCConfig())
    assert counts["stale_pair"] > counts2["stale_pair"]
    assert ok.sum() < ok2.sum()


def test_order_statistics_match_numpy_with_a_tiny_cap() -> None:
    # Streaming selection (histogram narrowing, 16 values held at once) against numpy's sort and median.
    from balloonpath.winds.aircraft import _order_statistics, _stream_median_mad

    rng = np.random.default_rng(7)
    data = np.concatenate([rng.standard_t(2, 3001), np.zeros(40), np.full(25, 3.5)])
    chunks = np.array_split(data, 13)
    ranks = [0, 1499, 1500, 3065]
    assert _order_statistics(lambda: iter(chunks), ranks, cap=16) == [float(np.sort(data)[r]) for r in ranks]
    med, mad = _stream_median_mad(lambda: iter(chunks), data.size, cap=16)
    assert med == float(np.median(data))
    assert mad == float(np.median(np.abs(data - np.median(data))))


def test_windowed_derivation_equals_in_memory(tmp_path, monkeypatch) -> None:
    # Tiny windows (90 s of message time), reader chunks, spill chunks and median buffer force every
    # streaming path; the result must be the in-memory QC + super-observations up to summation order.
    from balloonpath.winds import aircraft

    traffic = simulate_traffic(ShearField(), 46.5, 9.0, T0, 480.0, np.random.default_rng(53), n_aircraft=10,
                               heading_bias_fraction=0.5, meteo_fraction=0.3)
    path, _ = write_raw_messages(traffic, tmp_path / "raw.csv", np.random.default_rng(54),
                                 corrupt_fraction=0.002)
    states = read_raw_messages(path, ReadCounts())
    states = states.select(np.isfinite(states.alt_m))
    corrected, ok, qc = quality_control(states)
    expected = aircraft.superobservations(corrected.select(ok))
    monkeypatch.setattr(aircraft, "RAW_CHUNK_ROWS", 37)
    monkeypatch.setattr(aircraft, "SPILL_CHUNK_ROWS", 101)
    monkeypatch.setattr(aircraft, "SELECT_CAP", 64)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)  # the corrupted frames
        obs, report = derive_observations(path, window_s=90.0)
    assert report.rows == len(states) and report.accepted == int(ok.sum())
    assert (report.stale_pair, report.turning, report.outlier) == (qc["stale_pair"], qc["turning"], qc["outlier"])
    assert report.heading_bias_aircraft == len(qc["heading_bias_deg"]) >= 1
    for name, bias in report.heading_bias_deg:
        assert bias == pytest.approx(qc["heading_bias_deg"][name], abs=1e-9)
    assert len(obs) == len(expected) and list(obs.source) == list(expected.source)
    for f in ("time_s", "lat", "lon", "alt_m", "u", "v", "sigma"):
        np.testing.assert_allclose(getattr(obs, f), getattr(expected, f), rtol=1e-12, atol=1e-9)


def test_window_screen_sees_neighbours_across_window_edges() -> None:
    # Track-rate turning test (rows without roll) on three aircraft turning across 30 s window edges:
    # the windowed screen must give every row the status the whole table gives.
    from balloonpath.winds.aircraft import AircraftStates, _WindowScreen, screen_states

    rng = np.random.default_rng(61)
    n = 180
    t = T0 + np.sort(rng.choice(np.arange(0.0, 300.0), n, replace=False))  # whole seconds: some on edges
    ac = rng.choice(np.array(["A1", "B2", "C3"], dtype=object), n)
    track = np.where(ac == "A1", 0.6, np.where(ac == "B2", 0.3, 0.0)) * (t - T0) % 360.0
    c3 = np.nonzero(ac == "C3")[0]
    t[c3[np.searchsorted(t[c3], T0 + 30.0)]] = T0 + 30.0  # a row on the first window edge ...
    track = np.where((ac == "C3") & (t >= T0 + 30.0), track + 40.0, track)  # ... turning sharply there
    states = AircraftStates.from_columns({
        "time_s": t, "aircraft": list(ac), "lat": np.full(n, 46.5), "lon": np.full(n, 9.0),
        "alt_m": np.full(n, 10_000.0), "ground_speed_m_s": np.full(n, 240.0), "track_deg": track,
        "true_airspeed_m_s": np.full(n, 230.0), "heading_true_deg": track, "pair_age_s": np.zeros(n),
        "kind": [0] * n, "source": ["test"] * n})
    whole = screen_states(states, QCConfig())
    assert 0 < np.sum(whole == 3) < n
    seen: list[tuple[np.ndarray, np.ndarray]] = []
    screen = _WindowScreen(QCConfig(), 30.0, lambda s, status: seen.append((s.time_s, status)))
    for part in np.array_split(np.arange(n), 11):  # arrives in chunks; watermark = oldest time still to come
        screen.add(states.select(part), float(t[part[-1] + 1]) if part[-1] + 1 < n else np.inf)
    screen.finish()
    got = dict(zip(np.concatenate([a for a, _ in seen]), np.concatenate([b for _, b in seen]), strict=True))
    assert len(got) == n
    assert [got[x] for x in t] == list(whole)
