"""Invented traffic generator: consistent wind triangles, turns, deterministic files."""

from __future__ import annotations

import numpy as np
import pyModeS

from balloonpath.timeutil import parse_iso
from balloonpath.winds.aircraft import wind_from_triangle
from balloonpath.winds.traffic import simulate_traffic, write_raw_messages, write_report_table

T0 = parse_iso("2027-05-14T06:00:00Z")


class Uniformish:
    def wind(self, lat, lon, alt_m, time_s):
        z = np.asarray(alt_m, dtype=float)
        return 5.0 + 2e-3 * z + 0 * np.asarray(lat), -4.0 + 0 * np.asarray(lon)


def _sim(seed: int):
    return simulate_traffic(Uniformish(), 46.5, 9.0, T0, 600.0, np.random.default_rng(seed), n_aircraft=8,
                            heading_bias_fraction=0.5)


def test_states_obey_the_wind_triangle_and_envelope() -> None:
    tr = _sim(1)
    on = tr.active
    u, v = wind_from_triangle(tr.ground_speed_m_s[on], tr.track_deg[on], tr.true_airspeed_m_s[on],
                              tr.heading_deg[on])
    np.testing.assert_allclose(u, tr.wind_u[on], atol=1e-6)
    np.testing.assert_allclose(v, tr.wind_v[on], atol=1e-6)
    assert np.nanmax(np.abs(tr.roll_deg[on])) <= 25.0 + 1e-9  # 25-degree bank limit (common practice)
    assert np.nanmax(tr.pressure_altitude_ft[on]) <= 41_000.0
    assert np.all((tr.mach[on] > 0.2) & (tr.mach[on] < 0.9))
    biased = np.abs(tr.heading_bias_deg) > 0
    assert np.all((np.abs(tr.heading_bias_deg[biased]) >= 2.0) & (np.abs(tr.heading_bias_deg[biased]) <= 4.0))


def test_files_are_deterministic_and_decodable(tmp_path) -> None:
    paths = []
    for run in range(2):
        tr = _sim(7)
        report = write_report_table(tr, tmp_path / f"r{run}.csv", np.random.default_rng(8))
        raw, n = write_raw_messages(tr, tmp_path / f"m{run}.csv", np.random.default_rng(9))
        paths.append((report, raw))
    assert paths[0][0].read_bytes() == paths[1][0].read_bytes()
    assert paths[0][1].read_bytes() == paths[1][1].read_bytes()
    lines = paths[0][1].read_text().splitlines()
    assert lines[0] == "time,message" and len(lines) == n + 1
    times = [parse_iso(line.split(",")[0]) for line in lines[1:200]]
    assert times == sorted(times)
    for line in lines[1:200]:
        d = pyModeS.decode(line.split(",")[1], include_meteo=True)
        assert d["df"] in (17, 20)
        if d["df"] == 17:
            assert d["crc_valid"] is True
