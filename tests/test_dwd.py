"""The DWD high-resolution radiosonde reader, on the real file in shared/data when present.

Data: Deutscher Wetterdienst, Climate Data Center (high-resolution radiosonde data, station 4928,
2021-06-01 12 UTC); open data, attribution required.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from balloonpath.atmosphere import geometric_from_geopotential
from balloonpath.errors import InputDataError
from balloonpath.timeutil import parse_iso
from balloonpath.winds.sounding import read_dwd_highres

DATA = (
    Path(__file__).resolve().parents[2] / "shared" / "data" / "dwd-radiosonde-04928-2021060112.csv"
)
if not DATA.exists():
    DATA = Path("/work/shared/data/dwd-radiosonde-04928-2021060112.csv")


@pytest.fixture(scope="module")
def dwd():
    if not DATA.exists():
        pytest.skip(
            "DWD radiosonde file (shared/data/dwd-radiosonde-04928-2021060112.csv) not present"
        )
    return read_dwd_highres(DATA)


def test_reader_matches_raw_file(dwd):
    # Deutscher Wetterdienst, Climate Data Center: raw rows of the file, read independently here.
    sounding, track = dwd
    rows = [line.split(",") for line in DATA.read_text().splitlines()[1:] if line.strip()]
    first, last = rows[0], rows[-1]
    assert len(track) == len(rows)  # every row has a position and a height
    assert 1000 < sounding.alt_m.size <= len(rows)  # 2-s rows to ~30 km: thousands of levels
    assert track.lat[0] == float(first[4]) and track.lon[0] == float(first[5])
    assert track.lat[-1] == float(last[4]) and track.lon[-1] == float(last[5])
    assert track.time_s[0] == parse_iso("2021-06-01T12:00:00Z") + float(first[2])
    assert track.time_s[-1] - track.time_s[0] == float(last[2]) - float(first[2])
    # Geometric altitude exceeds geopotential height (USSA 1976 eq. 18), by ~150 m at 30.5 km.
    assert track.alt_m[-1] > float(last[6]) and track.alt_m[0] > float(first[6])
    assert track.alt_m[-1] == pytest.approx(float(geometric_from_geopotential(float(last[6]))))
    assert 100 < track.alt_m[-1] - float(last[6]) < 200
    # First wind: 5.5 m/s from 135 deg (south-east) -> blowing toward the north-west: u < 0, v > 0.
    assert np.hypot(sounding.u[0], sounding.v[0]) == pytest.approx(float(first[11]))
    assert sounding.u[0] < 0 and sounding.v[0] > 0
    assert sounding.pressure_pa[0] == pytest.approx(float(first[7]) * 100)
    assert sounding.temperature_k[0] == pytest.approx(float(first[8]) + 273.15)
    # Altitude rises (monotone-ish track, strictly increasing sounding levels).
    assert np.all(np.diff(sounding.alt_m) > 0)
    assert np.mean(np.diff(track.alt_m) > 0) > 0.95


def test_missing_column_is_named(tmp_path):
    p = tmp_path / "bad.csv"
    p.write_text("STATIONS_ID,BEZUGSDATUM_SYNOP,MESSZEITPUNKT\n4928,2021060112,0\n")
    with pytest.raises(InputDataError, match=r"bad\.csv: column AE_GB_POS: is missing"):
        read_dwd_highres(p)
