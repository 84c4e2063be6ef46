"""Flight-plan loading and validation (balloonpath.plan) and the ``check-plan`` command.

Every error is one line naming the file, the table and key, what is expected and the fix; the CLI
turns it into exit status 2 with one line on stderr and no traceback. All plans are invented.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime
from pathlib import Path

import pytest

from balloonpath.cli import main
from balloonpath.errors import PlanError
from balloonpath.plan import TABLES, load_plan, parse_plan

PHYSICS_PLAN = """\
[launch]
latitude = -33.5
longitude = 151.25
time = 2027-09-02T23:15:00+10:00

[balloon]
envelope_mass_kg = 0.6
burst_diameter_m = 6.0
gas = "hydrogen"
neck_lift_kg = 1.9

[payload]
mass_kg = 1.1

[parachute]
diameter_m = 1.2

[winds]
sounding = "data/day.csv"
"""


def _load(write_plan, tmp_path: Path, text: str, **kw) -> object:
    return load_plan(write_plan(tmp_path, text, **kw))


def _replace(text: str, old: str, new: str) -> str:
    assert old in text, old  # guard: the edit must hit the base plan
    return text.replace(old, new)


# ----------------------------------------------------------------------------------------------
# Valid plans
# ----------------------------------------------------------------------------------------------


def test_minimal_plan_loads_in_si(write_plan, tmp_path, minimal_plan_text):
    plan = _load(write_plan, tmp_path, minimal_plan_text)
    assert plan.mode == "rates"
    assert plan.launch.latitude == 47.25
    assert plan.launch.longitude == 8.5
    assert plan.launch.time == datetime(2027, 5, 14, 12, 30, tzinfo=UTC)
    assert plan.launch_time_s == datetime(2027, 5, 14, 12, 30, tzinfo=UTC).timestamp()
    assert plan.rates.burst_altitude_m == 30_000.0
    # paths resolved relative to the plan file
    assert plan.winds.sounding == [(tmp_path / "sounding.csv").resolve()]
    # defaulted tables exist with their declared defaults
    assert plan.ensemble.members == 500 and plan.winds.outside == "error"
    assert plan.balloon is None and plan.float is None


def test_physics_plan_loads_and_resolves_nested_paths(write_plan, tmp_path):
    plan = _load(write_plan, tmp_path, PHYSICS_PLAN, touch=("data/day.csv",))
    assert plan.mode == "physics"
    assert plan.balloon.gas == "hydrogen" and plan.balloon.neck_lift_kg == 1.9
    assert plan.parachute.drag_coefficient == 0.75  # declared default
    assert plan.winds.sounding[0] == (tmp_path / "data" / "day.csv").resolve()
    # +10:00 offset kept: 23:15+10:00 is 13:15Z
    assert plan.launch_time_s == datetime(2027, 9, 2, 13, 15, tzinfo=UTC).timestamp()


@pytest.mark.parametrize(
    ("given", "stored"), [(350.0, -10.0), (180.0, -180.0), (-180.0, -180.0), (359.5, -0.5)]
)
def test_longitudes_are_normalised(write_plan, tmp_path, minimal_plan_text, given, stored):
    text = _replace(minimal_plan_text, "longitude = 8.5", f"longitude = {given}")
    text += f"\n[recovery]\nbase_latitude = 47.0\nbase_longitude = {given}\n"
    plan = _load(write_plan, tmp_path, text)
    assert plan.launch.longitude == pytest.approx(stored, abs=1e-12)
    assert plan.recovery.base_longitude == pytest.approx(stored, abs=1e-12)


def test_every_table_is_a_frozen_dataclass_with_documented_keys():
    import dataclasses

    for name, cls in TABLES.items():
        assert dataclasses.is_dataclass(cls), name
        assert cls.__dataclass_params__.frozen, name
        for f in dataclasses.fields(cls):
            assert f.metadata.get("doc"), f"[{name}] {f.name} has no doc"


# ----------------------------------------------------------------------------------------------
# Keys: types, bounds, choices, unknown keys
# ----------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("old", "new", "pattern"),
    [
        # the example message of issue [1]
        ("latitude = 47.25", "latitude = 123.0",
         r"^plan\.toml: \[launch\] latitude = 123\.0 is outside -90\.\.90; fix: give latitude in "
         r"-90\.\.90 \(degrees north\)$"),
        ("ascent_m_s = 5.0", "ascent_m_s = 0",
         r"^plan\.toml: \[rates\] ascent_m_s = 0 is not > 0 and <= 30; fix: give ascent_m_s > 0"),
        ("ascent_m_s = 5.0", "ascent_m_s = 31",
         r"\[rates\] ascent_m_s = 31 is not > 0 and <= 30"),
        ("latitude = 47.25", 'latitude = "47.25"',
         r"\[launch\] latitude = '47\.25' is not a number; fix: write a number without quotes"),
        ("latitude = 47.25", "latitude = nan", r"\[launch\] latitude = nan is not finite"),
        ("latitude = 47.25", "latitude = true", r"\[launch\] latitude = True is not a number"),
        ("latitude = 47.25\n", "", r"\[launch\] latitude is missing; fix: add latitude = \.\.\."),
        ("time = 2027-05-14T12:30:00Z", "time = 2027-05-14T12:30:00",
         r"\[launch\] time = 2027-05-14T12:30:00 has no timezone; fix: append Z"),
        ("time = 2027-05-14T12:30:00Z", 'time = "2027-05-14T12:30:00Z"',
         r"\[launch\] time = '2027-05-14T12:30:00Z' is not a TOML date-time"),
        ("time = 2027-05-14T12:30:00Z", "time = 2027-05-14",
         r"\[launch\] time = datetime\.date\(2027, 5, 14\) is not a TOML date-time"),
        ('site_name = "Brambleford Common"', "site_name = 7",
         r"\[launch\] site_name = 7 is not text"),
        ('sounding = "sounding.csv"', "sounding = 3",
         r"\[winds\] sounding = 3 is not a file path; fix: write the path as a quoted string"),
        ('sounding = "sounding.csv"', 'sounding = "sounding.csv"\noutside = "clamp"',
         r"\[winds\] outside = 'clamp' is not allowed; fix: use one of error, hold"),
    ],
)
def test_bad_values_name_file_key_and_fix(write_plan, tmp_path, minimal_plan_text, old, new,
                                          pattern):
    with pytest.raises(PlanError, match=pattern):
        _load(write_plan, tmp_path, _replace(minimal_plan_text, old, new))


@pytest.mark.parametrize(
    ("extra", "pattern"),
    [
        ("[ensemble]\nmembers = 0\n",
         r"\[ensemble\] members = 0 is outside 1\.\.1000000; fix: give members in 1\.\.1000000"),
        ("[ensemble]\nmembers = 50.0\n", r"\[ensemble\] members = 50\.0 is not a whole number"),
        ("[ensemble]\nseed = -1\n", r"\[ensemble\] seed = -1 is not >= 0; fix: give seed >= 0"),
        ("[zones]\nwater = 1\n", r"\[zones\] water = 1 is not true/false"),
        ("[windows]\nmax_distance_km = 0\n", r"\[windows\] max_distance_km = 0 is not > 0"),
        ("[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0\ngas = \"neon\"\n",
         r"\[balloon\] gas = 'neon' is not allowed; fix: use one "
         r"of helium, hydrogen"),
        ("[payload]\nmass_kg = 1.0\n[[payload.package]]\nnme = \"box\"\nmass_kg = 0.5\n",
         r"\[payload\.package\] nme is not a known key; fix: did you mean 'name'\?"),
        ("[payload]\nmass_kg = 1.0\npackage = 3\n",
         r"\[payload\] package must be a list of tables; fix: write \[\[payload\.package\]\]"),
        ("[[ensemble]]\nmembers = 5\n", r"\[ensemble\] is not a table"),
    ],
)
def test_bad_tables_name_file_key_and_fix(write_plan, tmp_path, minimal_plan_text, extra, pattern):
    with pytest.raises(PlanError, match=r"^plan\.toml: .*" + pattern):
        _load(write_plan, tmp_path, minimal_plan_text + "\n" + extra)


def test_unknown_key_suggests_the_close_name(write_plan, tmp_path, minimal_plan_text):
    text = _replace(minimal_plan_text, "ascent_m_s = 5.0", "ascent_rate = 5.0")
    with pytest.raises(PlanError, match=r"^plan\.toml: \[rates\] ascent_rate is not a known key; "
                                        r"fix: did you mean 'ascent_m_s'\?$"):
        _load(write_plan, tmp_path, text)


def test_unknown_key_without_a_close_name_lists_the_allowed(write_plan, tmp_path,
                                                            minimal_plan_text):
    text = _replace(minimal_plan_text, "ascent_m_s = 5.0", "ascent_m_s = 5.0\nwobble = 1")
    with pytest.raises(PlanError, match=r"\[rates\] wobble is not a known key; fix: allowed: "
                                        r"ascent_m_s, burst_altitude_m, descent_sea_level_m_s$"):
        _load(write_plan, tmp_path, text)


def test_unknown_table_suggests_the_close_name(write_plan, tmp_path, minimal_plan_text):
    text = _replace(minimal_plan_text, "[launch]", "[launc]")
    with pytest.raises(PlanError, match=r"^plan\.toml: \[launc\] is not a known table; "
                                        r"fix: did you mean 'launch'\?$"):
        _load(write_plan, tmp_path, text)


def test_toml_syntax_error_names_the_file(write_plan, tmp_path, minimal_plan_text):
    text = _replace(minimal_plan_text, "latitude = 47.25", "latitude = 47.25 =")
    with pytest.raises(PlanError, match=r"^plan\.toml: TOML syntax error: .*line 2.*; fix:"):
        _load(write_plan, tmp_path, text)


def test_missing_plan_file(tmp_path):
    with pytest.raises(PlanError, match=r"nowhere\.toml: file does not exist; fix: check the path"):
        load_plan(tmp_path / "nowhere.toml")


def test_not_utf8(tmp_path):
    path = tmp_path / "plan.toml"
    path.write_bytes(b"[launch]\nsite_name = \"\xff\xfe\"\n")
    with pytest.raises(PlanError, match=r"^plan\.toml: not UTF-8 text; fix: save the plan as UTF"):
        load_plan(path)


# ----------------------------------------------------------------------------------------------
# Consistency rules (plan._check_consistency and parse_plan), one test each
# ----------------------------------------------------------------------------------------------

RATES = "[rates]\nascent_m_s = 5.0\nburst_altitude_m = 30000.0\ndescent_sea_level_m_s = 5.5\n"


def _without_rates(text: str) -> str:
    return _replace(text, RATES, "")


@pytest.mark.parametrize(
    ("edit", "pattern"),
    [
        # rates and balloon both
        (lambda t: t + "\n[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0\n",
         r"\[rates\] and \[balloon\] are both given; fix: use \[rates\] \(simple mode\) or "
         r"\[balloon\]"),
        # neither rates nor balloon
        (_without_rates, r"\[rates\] or \[balloon\] is missing; fix: add \[rates\]"),
        # physics mode without payload
        (lambda t: _without_rates(t) + "\n[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0"
         "\nneck_lift_kg = 1.9\n[parachute]\ndiameter_m = 1.0\n",
         r"\[payload\] is missing; fix: physics mode needs \[payload\] mass_kg"),
        # neither neck_lift_kg nor target_ascent_m_s
        (lambda t: _without_rates(t) + "\n[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0"
         "\n[payload]\nmass_kg = 1.0\n[parachute]\ndiameter_m = 1.0\n",
         r"\[balloon\] neck_lift_kg / target_ascent_m_s need exactly one of the two"),
        # both neck_lift_kg and target_ascent_m_s
        (lambda t: _without_rates(t) + "\n[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0"
         "\nneck_lift_kg = 1.9\ntarget_ascent_m_s = 5.0\n[payload]\nmass_kg = 1.0\n"
         "[parachute]\ndiameter_m = 1.0\n",
         r"\[balloon\] neck_lift_kg / target_ascent_m_s need exactly one of the two"),
        # physics mode without parachute
        (lambda t: _without_rates(t) + "\n[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0"
         "\nneck_lift_kg = 1.9\n[payload]\nmass_kg = 1.0\n",
         r"\[parachute\] is missing; fix: physics mode needs \[parachute\] diameter_m"),
        # neck lift not above the payload mass: free lift <= 0
        (lambda t: _without_rates(t) + "\n[balloon]\nenvelope_mass_kg = 0.6\nburst_diameter_m = 6.0"
         "\nneck_lift_kg = 1.0\n[payload]\nmass_kg = 1.0\n[parachute]\ndiameter_m = 1.0\n",
         r"\[balloon\] neck_lift_kg = 1\.0 is not above the payload mass 1 kg, so the free lift is "
         r"<= 0"),
        # float at or above the burst altitude
        (lambda t: t + "\n[float]\naltitude_m = 30000.0\nduration_min = 30.0\n",
         r"\[float\] altitude_m = 30000\.0 is not below the burst altitude"),
        # cutdown with no trigger
        (lambda t: t + "\n[cutdown]\n",
         r"\[cutdown\] has neither altitude_m nor after_min; fix: give one of them"),
        # no wind source at all
        (lambda t: _replace(t, 'sounding = "sounding.csv"', 'outside = "hold"'),
         r"\[winds\] has no wind source; fix: give sounding ="),
        # list-valued wind files that do not exist
        (lambda t: _replace(t, 'sounding = "sounding.csv"', 'sounding = ["sounding.csv", '
                                                            '"later.csv"]'),
         r"\[winds\] sounding file later\.csv does not exist; fix: check the path"),
        (lambda t: t.replace('sounding = "sounding.csv"', 'sounding = "sounding.csv"\n'
                                                          'aircraft = ["reports.csv"]'),
         r"\[winds\] aircraft file reports\.csv does not exist"),
        (lambda t: t.replace('sounding = "sounding.csv"', 'sounding = "sounding.csv"\n'
                                                          'observations = "obs.csv"'),
         r"\[winds\] observations file obs\.csv does not exist"),
        # single-path wind files that do not exist
        (lambda t: _replace(t, 'sounding = "sounding.csv"', 'grid = "model.nc"'),
         r"\[winds\] grid file model\.nc does not exist"),
        (lambda t: _replace(t, 'sounding = "sounding.csv"', 'field = "fitted.npz"'),
         r"\[winds\] field file fitted\.npz does not exist"),
        # terrain and avoid-area files
        (lambda t: t + '\n[terrain]\nfiles = ["N47E008.hgt"]\n',
         r"\[terrain\] files file N47E008\.hgt does not exist"),
        (lambda t: t + '\n[zones]\navoid = "keep_out.geojson"\n',
         r"\[zones\] avoid file keep_out\.geojson does not exist"),
        # recovery base needs both coordinates (parse_plan)
        (lambda t: t + "\n[recovery]\nbase_longitude = 8.0\n",
         r"\[recovery\] needs both base_latitude and base_longitude; fix: give both, or neither"),
        # no [launch] table (parse_plan)
        (lambda t: t.split("[rates]")[0].replace("[launch]", "[ensemble]").replace(
            "latitude = 47.25\nlongitude = 8.5\ntime = 2027-05-14T12:30:00Z\nelevation_m = 420.0\n"
            'site_name = "Brambleford Common"\n', "members = 3\n") + RATES,
         r"\[launch\] is missing; fix: add a \[launch\] table"),
    ],
)
def test_consistency_rules(write_plan, tmp_path, minimal_plan_text, edit, pattern):
    with pytest.raises(PlanError, match=r"^plan\.toml: " + pattern):
        _load(write_plan, tmp_path, edit(minimal_plan_text))


def test_float_below_burst_and_existing_files_are_accepted(write_plan, tmp_path, minimal_plan_text):
    # the counterpart of the rules above: the same tables with consistent values load
    text = minimal_plan_text.replace('sounding = "sounding.csv"',
                                     'sounding = "sounding.csv"\ngrid = "model.nc"')
    text += ("\n[float]\naltitude_m = 29999.0\nduration_min = 30.0\n[cutdown]\nafter_min = 90\n"
             '[zones]\navoid = "keep_out.geojson"\n')
    plan = _load(write_plan, tmp_path, text, touch=("sounding.csv", "model.nc",
                                                    "keep_out.geojson"))
    assert plan.float.altitude_m == 29_999.0
    assert plan.cutdown.after_min == 90.0 and plan.cutdown.altitude_m is None


def test_parse_plan_reports_the_given_file_name(tmp_path):
    with pytest.raises(PlanError, match=r"^mission\.toml: \[launch\] is missing"):
        parse_plan({}, tmp_path / "mission.toml")


# ----------------------------------------------------------------------------------------------
# Through the command line: exit 2, one line on stderr, no traceback
# ----------------------------------------------------------------------------------------------


def test_cli_check_plan_bad_value(write_plan, tmp_path, minimal_plan_text, capsys):
    path = write_plan(tmp_path, _replace(minimal_plan_text, "latitude = 47.25", "latitude = 123.0"))
    code = main(["check-plan", str(path)])
    out, err = capsys.readouterr()
    assert code == 2
    assert "Traceback" not in err + out
    lines = err.strip().splitlines()
    assert len(lines) == 1
    assert re.match(r"^error: plan\.toml: \[launch\] latitude = 123\.0 is outside -90\.\.90; fix: ",
                    lines[0])


def test_cli_check_plan_unknown_key(write_plan, tmp_path, minimal_plan_text, capsys):
    text = _replace(minimal_plan_text, "[winds]\n", "[winds]\nsoundings = []\n")
    path = write_plan(tmp_path, text)
    code = main(["check-plan", str(path)])
    _, err = capsys.readouterr()
    assert code == 2 and "Traceback" not in err
    assert err.strip().splitlines() == [
        "error: plan.toml: [winds] soundings is not a known key; fix: did you mean 'sounding'?"
    ]


def test_cli_check_plan_missing_file(tmp_path, capsys):
    code = main(["check-plan", str(tmp_path / "absent.toml")])
    _, err = capsys.readouterr()
    assert code == 2 and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1 and "absent.toml: file does not exist" in err


def test_cli_check_plan_valid(write_plan, tmp_path, minimal_plan_text, capsys):
    code = main(["check-plan", str(write_plan(tmp_path, minimal_plan_text))])
    out, err = capsys.readouterr()
    assert code == 0 and err == ""
    assert "plan plan.toml: valid (rates mode)" in out
    assert "burst 30000 m" in out


def test_cli_usage_error_is_short(capsys):
    code = main(["check-plan"])  # missing argument
    out, err = capsys.readouterr()
    assert code == 2 and "Traceback" not in out + err
    assert "Missing argument" in err


# ----------------------------------------------------------------------------------------------
# balloonpath.errors: the message format every module uses
# ----------------------------------------------------------------------------------------------


def test_input_error_is_one_line_naming_file_field_problem_fix():
    from balloonpath.errors import BalloonpathError, InputDataError, input_error

    err = input_error("/flights/day1/sounding.csv", "column pressure_hpa",
                      "is empty\n on row 3", "give the pressure in hPa")
    assert isinstance(err, InputDataError) and isinstance(err, BalloonpathError)
    assert isinstance(err, ValueError)
    assert str(err) == ("sounding.csv: column pressure_hpa: is empty on row 3; "
                        "fix: give the pressure in hPa")
    assert isinstance(input_error(None, "f", "p", "x", cls=PlanError), PlanError)
    assert str(input_error(None, "f", "p", "x")) == "f: p; fix: x"


def test_warning_log_records_categories_once():
    import warnings

    from balloonpath.errors import CoverageWarning, WarningLog, recording_warnings

    log = WarningLog()
    with recording_warnings(log):
        for _ in range(3):
            warnings.warn("held at the top of the grid", CoverageWarning, stacklevel=1)
    assert log.messages == ["CoverageWarning: held at the top of the grid"]
