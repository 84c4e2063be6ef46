"""Wiring of the forecast pipeline: the plan's choices reach the models, outputs exist and parse, reruns are
byte-identical, errors are one line. The numbers themselves are checked in the module tests."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from balloonpath.cli import main
from balloonpath.forecast import load_winds, run_forecast, write_outputs
from balloonpath.geodesy import inverse
from balloonpath.plan import load_plan, schema_markdown

ROOT = Path(__file__).resolve().parents[1]
COASTAL = ROOT / "scenarios" / "coastal"


@pytest.fixture(scope="module")
def coastal_plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("coastal")
    for f in COASTAL.iterdir():
        if f.is_file():
            shutil.copy(f, folder / f.name)
    text = (folder / "plan.toml").read_text().replace("water = true", "water = false")
    (folder / "plan.toml").write_text(text)
    return load_plan(folder / "plan.toml")


@pytest.fixture(scope="module")
def coastal_winds(coastal_plan):
    return load_winds(coastal_plan)


def test_outputs_exist_parse_and_are_byte_identical(coastal_plan, tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    for out in (a, b):
        write_outputs(run_forecast(coastal_plan, members=40, seed=3), coastal_plan, out, report=False)
    names = {"summary.json", "track.csv", "members.csv", "zones.geojson", "flight.kml", "map.png", "profile.png"}
    assert names <= {p.name for p in a.iterdir()}
    for name in sorted(names):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    assert not list(a.glob(".*.part"))
    s = json.loads((a / "summary.json").read_text())
    for key in ("launch", "burst", "landing", "flight_time_s", "ensemble", "warnings", "probabilities"):
        assert key in s
    assert s["ensemble"]["members"] == 40 and s["ensemble"]["seed"] == 3
    assert {e["probability"] for e in s["ensemble"]["ellipses"]} == {0.5, 0.9, 0.95}
    for e in s["ensemble"]["ellipses"]:
        assert 0 <= e["major_axis_azimuth_deg"] < 180 and e["semi_major_m"] >= e["semi_minor_m"] > 0
    # the avoid areas of the plan reach the zones
    assert set(s["probabilities"]["avoid"]) == {"Kestrel Reservoir", "Marrow Quarry restricted area"}
    # the launch of the plan reaches the summary
    assert s["launch"]["latitude"] == pytest.approx(coastal_plan.launch.latitude)
    assert s["launch"]["time"] == "2027-09-03T14:00:00Z"
    # the nominal burst is the plan's burst altitude (rates mode)
    assert s["burst"]["altitude_m"] == pytest.approx(27_000.0, abs=0.5)
    track = (a / "track.csv").read_text().splitlines()
    assert track[0].startswith("time,latitude,longitude,altitude_m,phase")
    assert track[-1].endswith("landed")


def test_nominal_landing_does_not_depend_on_members_or_seed(coastal_plan, coastal_winds):
    r1 = run_forecast(coastal_plan, members=5, seed=1, winds=coastal_winds)
    r2 = run_forecast(coastal_plan, members=60, seed=99, winds=coastal_winds)
    assert r1.landing.lat[0] == r2.landing.lat[0] and r1.landing.lon[0] == r2.landing.lon[0]
    assert r1.landing.time_s[0] == r2.landing.time_s[0]
    # the members do differ between seeds
    r3 = run_forecast(coastal_plan, members=5, seed=2, winds=coastal_winds)
    assert not np.array_equal(r1.landing.lat[1:], r3.landing.lat[1:])


def test_ensemble_spread_comes_from_the_wind_uncertainty(coastal_plan, coastal_winds):
    from dataclasses import replace

    with_winds = run_forecast(coastal_plan, members=60, seed=4, winds=coastal_winds)
    calm_plan = coastal_plan.with_changes(ensemble=replace(coastal_plan.ensemble, wind_uncertainty=False))
    without = run_forecast(calm_plan, members=60, seed=4, winds=coastal_winds)
    d_with, _ = inverse(with_winds.landing.lat[0], with_winds.landing.lon[0], with_winds.landing.lat[1:],
                        with_winds.landing.lon[1:])
    d_without, _ = inverse(without.landing.lat[0], without.landing.lon[0], without.landing.lat[1:],
                           without.landing.lon[1:])
    assert np.median(d_with) > 1.5 * np.median(d_without)


def test_cli_forecast_and_bad_plan(tmp_path, capsys, coastal_plan):
    out = tmp_path / "fc"
    assert main(["forecast", str(coastal_plan.path), "--out", str(out), "--members", "20", "--no-report"]) == 0
    assert (out / "summary.json").exists() and not (out / "report.html").exists()
    bad = tmp_path / "bad.toml"
    bad.write_text(coastal_plan.path.read_text().replace("latitude = 40.15", "latitude = 123.0"))
    (tmp_path / "sounding.csv").write_text((COASTAL / "sounding.csv").read_text())
    (tmp_path / "avoid.geojson").write_text((COASTAL / "avoid.geojson").read_text())
    capsys.readouterr()
    out2 = tmp_path / "fc2"
    assert main(["forecast", str(bad), "--out", str(out2)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("error: bad.toml: [launch] latitude = 123.0 is outside -90..90")
    assert "Traceback" not in err and len(err.splitlines()) == 1
    assert not out2.exists()


def test_winds_that_do_not_cover_the_flight_fail_cleanly(tmp_path, capsys):
    lines = (COASTAL / "sounding.csv").read_text().splitlines()
    # keep the header and the levels below 12 km only
    kept = [ln for ln in lines if ln.startswith("#") or not ln[0].isdigit() or float(ln.split(",")[0]) < 12_000]
    (tmp_path / "sounding.csv").write_text("\n".join(kept) + "\n")
    (tmp_path / "avoid.geojson").write_text((COASTAL / "avoid.geojson").read_text())
    (tmp_path / "plan.toml").write_text((COASTAL / "plan.toml").read_text())
    out = tmp_path / "fc"
    assert main(["forecast", str(tmp_path / "plan.toml"), "--out", str(out), "--members", "5"]) == 2
    err = capsys.readouterr().err.strip()
    assert "outside the field's coverage" in err and "fix:" in err and len(err.splitlines()) == 1
    assert not out.exists()


def test_plan_reference_doc_is_in_step_with_the_schema():
    assert (ROOT / "docs" / "plan.md").read_text() == schema_markdown()


def test_plan_with_observations_and_with_a_saved_field(tmp_path, coastal_plan):
    """[winds] observations are fused on the fly; [winds] field uses a saved fit; both reach the summary."""
    from balloonpath.winds.gp import fit_wind_field
    from balloonpath.winds.observations import WindObservations, write_observations
    from balloonpath.winds.sounding import sounding_field_from_paths

    rng = np.random.default_rng(5)
    n = 60
    t0 = coastal_plan.launch_time_s
    obs = WindObservations(
        time_s=t0 - rng.uniform(0, 3600, n), lat=40.15 + rng.normal(0, 0.3, n), lon=-75.15 + rng.normal(0, 0.3, n),
        alt_m=rng.uniform(8_000, 12_000, n), u=rng.normal(25, 1, n), v=rng.normal(0, 1, n),
        sigma=np.full(n, 1.5), source=np.array(["test"] * n, dtype=object))
    folder = coastal_plan.path.parent
    write_observations(obs, tmp_path / "obs.csv")
    text = coastal_plan.path.read_text().replace(
        'sounding = ["sounding.csv"]', f'sounding = ["{folder / "sounding.csv"}"]\nobservations = ["obs.csv"]'
    ).replace('avoid = "avoid.geojson"', f'avoid = "{folder / "avoid.geojson"}"')
    (tmp_path / "plan.toml").write_text(text)
    fused = run_forecast(load_plan(tmp_path / "plan.toml"), members=10, seed=1)
    assert fused.wind_info["observations"] == n
    assert fused.wind_info["gp"] is not None and "length" in json.dumps(fused.wind_info["gp"])

    background = sounding_field_from_paths([folder / "sounding.csv"])
    fitted = fit_wind_field(obs, background, center=(40.15, -75.15), lead_time_h=2.0)
    fitted.save(tmp_path / "field.npz")
    text2 = coastal_plan.path.read_text().replace('sounding = ["sounding.csv"]', 'field = "field.npz"').replace(
        'avoid = "avoid.geojson"', f'avoid = "{folder / "avoid.geojson"}"')
    (tmp_path / "plan2.toml").write_text(text2)
    saved = run_forecast(load_plan(tmp_path / "plan2.toml"), members=10, seed=1)
    assert any("fitted field" in s for s in saved.wind_info["sources"])
    # the saved fit and the on-the-fly fit agree on the nominal landing (same data, same model)
    d, _ = inverse(fused.landing.lat[0], fused.landing.lon[0], saved.landing.lat[0], saved.landing.lon[0])
    assert float(d) < 2_000.0


def test_a_failure_while_writing_leaves_no_partial_outputs(coastal_plan, coastal_winds, tmp_path, monkeypatch):
    from balloonpath import plots

    result = run_forecast(coastal_plan, members=8, seed=1, winds=coastal_winds)

    def broken(*args, **kwargs):
        raise RuntimeError("disk full")

    monkeypatch.setattr(plots, "plot_profile", broken)
    out = tmp_path / "fc"
    with pytest.raises(RuntimeError, match="disk full"):
        write_outputs(result, coastal_plan, out, report=False)
    assert list(out.iterdir()) == []  # neither the files written before the failure nor the staging folder
