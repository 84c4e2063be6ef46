"""Flight-plan files: TOML → validated, frozen objects in SI units.

Each table of the plan is a frozen dataclass whose fields carry their bounds and documentation as metadata
(:func:`key`). The loader checks types, bounds, choices and unknown keys (with a "did you mean" hint) and
resolves file paths relative to the plan. A new table is one dataclass plus one entry in :data:`TABLES`.
"""

from __future__ import annotations

import dataclasses
import difflib
import tomllib
from dataclasses import dataclass, field, fields
from datetime import datetime
from pathlib import Path
from typing import Any, get_args, get_origin, get_type_hints

from balloonpath.errors import PlanError
from balloonpath.geodesy import normalize_longitude

_MISSING = dataclasses.MISSING


def key(
    default: Any = _MISSING,
    *,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    choices: tuple[str, ...] | None = None,
    path: bool = False,
    doc: str = "",
) -> Any:
    """Declare a plan key: default (omit for required), bounds, allowed choices, file path, documentation."""
    meta = {"low": low, "high": high, "low_open": low_open, "choices": choices, "path": path, "doc": doc}
    if isinstance(default, list | dict):
        return field(default_factory=lambda: type(default)(default), metadata=meta)
    return field(default=default, metadata=meta)


@dataclass(frozen=True, kw_only=True)
class LaunchSpec:
    """Where and when the balloon is released."""

    latitude: float = key(low=-90.0, high=90.0, doc="degrees north")
    longitude: float = key(low=-180.0, high=360.0, doc="degrees east (negative west); stored in [-180, 180)")
    time: datetime = key(doc="release time, ISO 8601 with timezone, e.g. 2027-05-14T12:30:00Z")
    elevation_m: float = key(0.0, low=-450.0, high=8_000.0, doc="ground elevation at the launch site, m")
    time_zone: str = key("", doc="IANA time zone for local times (e.g. America/Chicago); empty: looked up")
    site_name: str = key("", doc="a name for the launch site, shown in outputs")


@dataclass(frozen=True, kw_only=True)
class RatesSpec:
    """Simple mode: known rates."""

    ascent_m_s: float = key(low=0.0, high=30.0, low_open=True, doc="ascent rate, m/s")
    burst_altitude_m: float = key(low=100.0, high=60_000.0, doc="burst altitude, m above sea level")
    descent_sea_level_m_s: float = key(
        5.0, low=0.0, high=50.0, low_open=True,
        doc="descent speed at sea-level density; faster aloft as sqrt(rho0/rho)",
    )


@dataclass(frozen=True, kw_only=True)
class BalloonSpec:
    """Physics mode: the envelope and its gas."""

    envelope_mass_kg: float = key(low=0.0, high=100.0, low_open=True, doc="mass of the latex envelope, kg")
    burst_diameter_m: float = key(low=0.3, high=50.0, doc="diameter at which the envelope bursts, m")
    gas: str = key("helium", choices=("helium", "hydrogen"), doc="lifting gas")
    gas_purity: float = key(1.0, low=0.5, high=1.0, doc="mole fraction of lifting gas (rest is air)")
    neck_lift_kg: float | None = key(None, low=0.0, high=200.0, low_open=True, doc="neck lift, kg")
    target_ascent_m_s: float | None = key(
        None, low=0.0, high=30.0, low_open=True, doc="wanted launch ascent rate; the neck lift is solved for"
    )
    drag_coefficient: float = key(
        0.30, low=0.05, high=2.0,
        doc="ascent drag coefficient of the envelope; with drag_model reynolds: its value at launch "
        "(see docs/physics.md)",
    )
    drag_model: str = key(
        "reynolds", choices=("constant", "reynolds"),
        doc="ascent drag law: constant Cd, or Cd following the Reynolds number through the drag crisis "
        "(default; fits a real radiosonde ascent better, docs/physics.md)",
    )


@dataclass(frozen=True, kw_only=True)
class PackageSpec:
    """One payload package (for the airspace classification of the checklist)."""

    name: str = key("package", doc="label")
    mass_kg: float = key(low=0.0, high=500.0, low_open=True, doc="package mass, kg")
    smallest_face_area_cm2: float | None = key(
        None, low=0.0, low_open=True, doc="area of the package's smallest face, cm^2"
    )


@dataclass(frozen=True, kw_only=True)
class PayloadSpec:
    """What hangs under the balloon."""

    mass_kg: float = key(low=0.0, high=500.0, doc="total payload mass below the neck (incl. parachute, line)")
    package: list[PackageSpec] = key([], doc="[[payload.package]] entries (optional)")
    suspension_breaking_strength_n: float | None = key(
        None, low=0.0, low_open=True, doc="force needed to separate the payload from the balloon, N"
    )
    suspension_length_m: float | None = key(None, low=0.0, doc="length of the suspension line, m")


@dataclass(frozen=True, kw_only=True)
class ParachuteSpec:
    """The descent parachute."""

    diameter_m: float = key(low=0.05, high=30.0, doc="nominal (flat) diameter, m")
    drag_coefficient: float = key(0.75, low=0.1, high=2.5, doc="drag coefficient on nominal area (Knacke)")


@dataclass(frozen=True, kw_only=True)
class FloatSpec:
    """Optional float at an altitude."""

    altitude_m: float = key(low=100.0, high=60_000.0, doc="float altitude, m")
    duration_min: float = key(low=0.0, high=10_000.0, doc="time at float before descent or burst, minutes")


@dataclass(frozen=True, kw_only=True)
class CutdownSpec:
    """Optional commanded termination."""

    altitude_m: float | None = key(None, low=100.0, high=60_000.0, doc="cut down on reaching this altitude")
    after_min: float | None = key(None, low=0.0, low_open=True, doc="cut down this long after launch")


@dataclass(frozen=True, kw_only=True)
class WindsSpec:
    """Where the winds come from."""

    sounding: list[Path] = key([], path=True, doc="one or more sounding CSV files")
    grid: Path | None = key(None, path=True, doc="gridded forecast file (NetCDF or GRIB2)")
    aircraft: list[Path] = key([], path=True, doc="aircraft report tables or raw-message files")
    observations: list[Path] = key([], path=True, doc="wind-observation tables (winds derive output)")
    field: Path | None = key(None, path=True, doc="a fitted wind field (winds fit output)")
    outside: str = key("error", choices=("error", "hold"), doc="what to do outside the winds' coverage")
    forecast_lead_h: float | None = key(
        None, low=0.0, high=480.0, doc="lead time of the background forecast, h (for its error model)"
    )


@dataclass(frozen=True, kw_only=True)
class EnsembleSpec:
    """Monte Carlo ensemble. Standard deviations are fractions of the nominal value (see docs/forecast.md)."""

    members: int = key(500, low=1, high=1_000_000, doc="number of members (member 0 is the nominal run)")
    seed: int = key(1, low=0, doc="random seed")
    ascent_sigma_fraction: float = key(0.05, low=0.0, high=1.0, doc="sd of the ascent rate (or free lift)")
    burst_sigma_fraction: float = key(0.05, low=0.0, high=1.0, doc="sd of the burst altitude (or diameter)")
    descent_sigma_fraction: float = key(0.10, low=0.0, high=1.0, doc="sd of the descent rate")
    launch_delay_sigma_min: float = key(0.0, low=0.0, high=1_440.0, doc="sd of a (half-normal) launch delay")
    wind_uncertainty: bool = key(True, doc="draw wind realisations from the field's uncertainty model")
    wind_spread_factor: float = key(
        1.0, low=0.1, high=10.0,
        doc="scale of the wind realisations' spread about the mean (a calibration: `verify --many`)",
    )
    wind_spread_tail_dof: float | None = key(
        None, low=2.5, high=1000.0,
        doc="Student-t degrees of freedom of the wind spread (heavier tails; `verify --many`); empty: Gaussian",
    )
    time_step_s: float = key(10.0, low=0.5, high=120.0, doc="integration step, s")


@dataclass(frozen=True, kw_only=True)
class TerrainSpec:
    """Ground under the landing."""

    files: list[Path] = key([], path=True, doc="SRTM .hgt tiles or GeoTIFF files; empty: flat")
    flat_elevation_m: float | None = key(None, low=-450.0, high=8_000.0, doc="flat ground; default: launch")


@dataclass(frozen=True, kw_only=True)
class ZonesSpec:
    """Landing-zone options."""

    avoid: Path | None = key(None, path=True, doc="GeoJSON of areas to avoid, each feature with a name")
    water: bool = key(False, doc="compute the probability of landing on water (loads a land mask)")


@dataclass(frozen=True, kw_only=True)
class RecoverySpec:
    """The recovery crew's base."""

    base_latitude: float | None = key(None, low=-90.0, high=90.0, doc="degrees north")
    base_longitude: float | None = key(None, low=-180.0, high=360.0, doc="degrees east")


@dataclass(frozen=True, kw_only=True)
class WindowsSpec:
    """Constraints for the launch-window sweep."""

    max_distance_km: float | None = key(None, low=0.0, low_open=True, doc="largest acceptable landing distance")
    max_water_probability: float | None = key(None, low=0.0, high=1.0, doc="largest acceptable P(water)")
    latest_landing_before_sunset_min: float | None = key(
        None, low=-1440.0, high=1440.0, doc="landing must be this many minutes before sunset"
    )
    avoid_probability_max: float | None = key(None, low=0.0, high=1.0, doc="largest P(avoid area), each area")
    max_zone_km: float | None = key(None, low=0.0, low_open=True, doc="largest 90 % zone semi-major axis")


@dataclass(frozen=True, kw_only=True)
class ChecklistSpec:
    """Pre-flight checklist settings."""

    rules: str = key("generic", doc="jurisdiction profile: us-part101, icao-annex2, generic, or a TOML path")
    max_surface_wind_m_s: float = key(8.0, low=0.0, low_open=True, doc="team's surface-wind limit at launch")
    min_free_lift_fraction: float = key(
        0.10, low=0.0, high=10.0, doc="minimum free lift as a fraction of payload mass"
    )
    low_altitude_check_m: float = key(300.0, low=0.0, doc="height AGL below which avoid areas are checked")
    contact: str = key("", doc="operator contact for notices")
    balloon_id: str = key("", doc="flight identification for notices")
    has_radar_reflector: bool | None = key(None, doc="radar-reflective material fitted")
    cutdown_systems: int | None = key(None, low=0, high=10, doc="independent payload cut-down systems")
    night_lighting: bool | None = key(None, doc="lights fitted for flight between sunset and sunrise")
    max_landing_speed_m_s: float | None = key(None, low=0.0, low_open=True, doc="team's landing-speed limit")
    max_landing_energy_j: float | None = key(None, low=0.0, low_open=True, doc="team's landing-energy limit")


TABLES: dict[str, type] = {
    "launch": LaunchSpec,
    "rates": RatesSpec,
    "balloon": BalloonSpec,
    "payload": PayloadSpec,
    "parachute": ParachuteSpec,
    "float": FloatSpec,
    "cutdown": CutdownSpec,
    "winds": WindsSpec,
    "ensemble": EnsembleSpec,
    "terrain": TerrainSpec,
    "zones": ZonesSpec,
    "recovery": RecoverySpec,
    "windows": WindowsSpec,
    "checklist": ChecklistSpec,
}


@dataclass(frozen=True, kw_only=True)
class Plan:
    """A validated flight plan. Optional tables are None when absent."""

    path: Path
    launch: LaunchSpec
    winds: WindsSpec
    ensemble: EnsembleSpec
    terrain: TerrainSpec
    zones: ZonesSpec
    checklist: ChecklistSpec
    windows: WindowsSpec
    recovery: RecoverySpec
    rates: RatesSpec | None = None
    balloon: BalloonSpec | None = None
    payload: PayloadSpec | None = None
    parachute: ParachuteSpec | None = None
    float: FloatSpec | None = None
    cutdown: CutdownSpec | None = None

    @property
    def mode(self) -> str:
        """``"rates"`` or ``"physics"``."""
        return "rates" if self.rates is not None else "physics"

    @property
    def launch_time_s(self) -> float:
        """Launch time in POSIX seconds."""
        return self.launch.time.timestamp()

    def with_changes(self, **tables: Any) -> Plan:
        """A copy with some tables replaced (e.g. ``launch=...``)."""
        return dataclasses.replace(self, **tables)


_OPTIONAL_TABLES = ("rates", "balloon", "payload", "parachute", "float", "cutdown")
_DEFAULTED_TABLES = ("ensemble", "terrain", "zones", "checklist", "windows", "recovery", "winds")


def _fail(plan_path: Path, where: str, problem: str, fix: str) -> PlanError:
    return PlanError(f"{plan_path.name}: {where} {problem}; fix: {fix}")


def _suggest(name: str, options: list[str]) -> str:
    close = difflib.get_close_matches(name, options, n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'?" if close else "allowed: " + ", ".join(sorted(options))


def _fmt(x: float) -> str:
    """A bound as the user would write it: 90 not 90.0, 1000000 not 1e+06."""
    return str(int(x)) if float(x).is_integer() and abs(x) < 1e15 else f"{x:g}"


def _range_text(low: float | None, high: float | None, low_open: bool) -> str:
    if low is not None and high is not None:
        return f"> {_fmt(low)} and <= {_fmt(high)}" if low_open else f"in {_fmt(low)}..{_fmt(high)}"
    if low is not None:
        return f"> {_fmt(low)}" if low_open else f">= {_fmt(low)}"
    return f"<= {_fmt(high)}" if high is not None else "any value"


def _convert(plan_path: Path, table: str, name: str, value: Any, hint: Any, meta: dict) -> Any:
    shown = value.isoformat() if isinstance(value, datetime) else repr(value)
    where = f"[{table}] {name} = {shown}"
    origin = get_origin(hint)
    args = [a for a in get_args(hint) if a is not type(None)]
    if value is None:
        return None
    if origin is list:
        item_type = args[0]
        items = value if isinstance(value, list) else [value]
        if dataclasses.is_dataclass(item_type):
            if not all(isinstance(it, dict) for it in items):
                raise _fail(plan_path, f"[{table}] {name}", "must be a list of tables", f"write [[{table}.{name}]]")
            return [_build(plan_path, f"{table}.{name}", item_type, it) for it in items]
        return [_convert(plan_path, table, name, it, item_type, meta) for it in items]
    target = args[0] if args else hint
    if meta.get("path"):
        if not isinstance(value, str) or not value:
            raise _fail(plan_path, where, "is not a file path", "write the path as a quoted string")
        resolved = (plan_path.parent / value).resolve()
        return resolved
    if target is bool:
        if not isinstance(value, bool):
            raise _fail(plan_path, where, "is not true/false", "write true or false without quotes")
        return value
    if target is datetime:
        if not isinstance(value, datetime):
            raise _fail(plan_path, where, "is not a TOML date-time", "write e.g. 2027-05-14T12:30:00Z (no quotes)")
        if value.tzinfo is None:
            raise _fail(plan_path, where, "has no timezone", "append Z for UTC or an offset like +02:00")
        return value
    if target is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise _fail(plan_path, where, "is not a whole number", "write an integer without quotes")
        number: Any = value
    elif target is float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise _fail(plan_path, where, "is not a number", "write a number without quotes or units")
        number = float(value)
        if number != number or number in (float("inf"), float("-inf")):
            raise _fail(plan_path, where, "is not finite", "write a finite number")
    elif target is str:
        if not isinstance(value, str):
            raise _fail(plan_path, where, "is not text", "write the value in double quotes")
        if meta.get("choices") and value not in meta["choices"]:
            raise _fail(plan_path, where, "is not allowed", "use one of " + ", ".join(meta["choices"]))
        return value
    else:
        return value
    low, high, low_open = meta.get("low"), meta.get("high"), bool(meta.get("low_open"))
    too_low = low is not None and (number < low or (low_open and number == low))
    if too_low or (high is not None and number > high):
        rng = _range_text(low, high, low_open)
        problem = f"is outside {rng[3:]}" if rng.startswith("in ") else f"is not {rng}"
        doc = f" ({meta['doc']})" if meta.get("doc") else ""
        raise _fail(plan_path, where, problem, f"give {name} {rng}{doc}")
    return number


def _build(plan_path: Path, table: str, cls: type, raw: dict[str, Any]) -> Any:
    if not isinstance(raw, dict):
        raise _fail(plan_path, f"[{table}]", "is not a table", f"write [{table}] followed by key = value lines")
    hints = get_type_hints(cls)
    known = {f.name: f for f in fields(cls)}
    for name in raw:
        if name not in known:
            raise _fail(plan_path, f"[{table}] {name}", "is not a known key", _suggest(name, list(known)))
    values: dict[str, Any] = {}
    for name, f in known.items():
        if name in raw:
            values[name] = _convert(plan_path, table, name, raw[name], hints[name], dict(f.metadata))
        elif f.default is _MISSING and f.default_factory is _MISSING:  # type: ignore[misc]
            raise _fail(plan_path, f"[{table}] {name}", "is missing",
                        f"add {name} = ... ({f.metadata.get('doc', '')}) to [{table}]")
    return cls(**values)


def parse_plan(data: dict[str, Any], plan_path: Path) -> Plan:
    """Validate an already-parsed TOML document (see :func:`load_plan`)."""
    plan_path = Path(plan_path)
    for table in data:
        if table not in TABLES:
            raise _fail(plan_path, f"[{table}]", "is not a known table", _suggest(table, list(TABLES)))
    if "launch" not in data:
        raise _fail(plan_path, "[launch]", "is missing", "add a [launch] table with latitude, longitude and time")
    built: dict[str, Any] = {
        name: _build(plan_path, name, TABLES[name], data.get(name, {}))
        for name in ("launch", *_DEFAULTED_TABLES)
    }
    for name in _OPTIONAL_TABLES:
        if name in data:
            built[name] = _build(plan_path, name, TABLES[name], data[name])
    launch: LaunchSpec = built["launch"]
    built["launch"] = dataclasses.replace(launch, longitude=float(normalize_longitude(launch.longitude)))
    rec: RecoverySpec = built["recovery"]
    if (rec.base_latitude is None) != (rec.base_longitude is None):
        raise _fail(plan_path, "[recovery]", "needs both base_latitude and base_longitude",
                    "give both, or neither")
    if rec.base_longitude is not None:
        built["recovery"] = dataclasses.replace(rec, base_longitude=float(normalize_longitude(rec.base_longitude)))
    plan = Plan(path=plan_path, **built)
    _check_consistency(plan)
    return plan


def _check_consistency(plan: Plan) -> None:
    p = plan.path
    if plan.rates is not None and plan.balloon is not None:
        raise _fail(p, "[rates] and [balloon]", "are both given", "use [rates] (simple mode) or [balloon] "
                    "with [payload] (physics mode), not both")
    if plan.rates is None and plan.balloon is None:
        raise _fail(p, "[rates] or [balloon]", "is missing", "add [rates] with ascent_m_s, burst_altitude_m, "
                    "descent_sea_level_m_s, or [balloon] + [payload] + [parachute]")
    if plan.balloon is not None:
        b = plan.balloon
        if plan.payload is None:
            raise _fail(p, "[payload]", "is missing", "physics mode needs [payload] mass_kg")
        if (b.neck_lift_kg is None) == (b.target_ascent_m_s is None):
            raise _fail(p, "[balloon] neck_lift_kg / target_ascent_m_s", "need exactly one of the two",
                        "give the measured neck lift or the wanted ascent rate")
        if plan.parachute is None:
            raise _fail(p, "[parachute]", "is missing", "physics mode needs [parachute] diameter_m")
        if b.neck_lift_kg is not None and b.neck_lift_kg <= plan.payload.mass_kg:
            raise _fail(p, f"[balloon] neck_lift_kg = {b.neck_lift_kg!r}",
                        f"is not above the payload mass {plan.payload.mass_kg:g} kg, so the free lift is <= 0 and "
                        "the balloon will not rise", "add gas until the neck lift exceeds the payload mass")
    if plan.float is not None and plan.rates is not None and plan.float.altitude_m >= plan.rates.burst_altitude_m:
        raise _fail(p, f"[float] altitude_m = {plan.float.altitude_m!r}", "is not below the burst altitude",
                    "float below [rates] burst_altitude_m")
    if plan.cutdown is not None and plan.cutdown.altitude_m is None and plan.cutdown.after_min is None:
        raise _fail(p, "[cutdown]", "has neither altitude_m nor after_min", "give one of them")
    w = plan.winds
    if not (w.sounding or w.grid or w.field):
        raise _fail(p, "[winds]", "has no wind source", "give sounding = \"file.csv\", grid = \"file.nc\" or "
                    "field = \"fitted.npz\"")
    for name in ("sounding", "aircraft", "observations"):
        for path in getattr(w, name):
            if not path.exists():
                raise _fail(p, f"[winds] {name}", f"file {path.name} does not exist",
                            "check the path (relative to the plan file)")
    for name in ("grid", "field"):
        path = getattr(w, name)
        if path is not None and not path.exists():
            raise _fail(p, f"[winds] {name}", f"file {path.name} does not exist",
                        "check the path (relative to the plan file)")
    for path in plan.terrain.files:
        if not path.exists():
            raise _fail(p, "[terrain] files", f"file {path.name} does not exist", "check the path")
    if plan.zones.avoid is not None and not plan.zones.avoid.exists():
        raise _fail(p, "[zones] avoid", f"file {plan.zones.avoid.name} does not exist", "check the path")


def load_plan(path: str | Path) -> Plan:
    """Read and validate a flight-plan TOML file.

    Raises
    ------
    PlanError
        One line naming the file, the table and key, what is expected and the fix.
    """
    path = Path(path)
    if not path.exists():
        raise PlanError(f"{path}: file does not exist; fix: check the path to the flight plan")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise PlanError(f"{path.name}: TOML syntax error: {exc}; fix: correct the line shown") from None
    except UnicodeDecodeError:
        raise PlanError(f"{path.name}: not UTF-8 text; fix: save the plan as UTF-8") from None
    return parse_plan(data, path.resolve())


def _type_name(hint: Any) -> str:
    origin = get_origin(hint)
    args = [a for a in get_args(hint) if a is not type(None)]
    if origin is list:
        inner = args[0]
        return "list of tables" if dataclasses.is_dataclass(inner) else f"list of {_type_name(inner)}"
    target = args[0] if args else hint
    return {float: "number", int: "integer", str: "text", bool: "true/false", datetime: "date-time",
            Path: "path"}.get(target, getattr(target, "__name__", str(target)))


def schema_markdown() -> str:
    """The plan reference (docs/plan.md), generated from the table declarations so it cannot drift."""
    lines = [
        "# Flight-plan reference",
        "",
        "Generated from `balloonpath/plan.py` by `balloonpath.plan.schema_markdown()`; a test keeps it in step.",
        "Paths are relative to the plan file. Keys without a default are required when their table is given.",
        "Give either `[rates]` (simple mode) or `[balloon]` + `[payload]` + `[parachute]` (physics mode).",
        "",
    ]
    for table, cls in TABLES.items():
        lines += [f"## [{table}]", "", (cls.__doc__ or "").strip(), "",
                  "| key | type | default | range | meaning |", "|---|---|---|---|---|"]
        hints = get_type_hints(cls)
        for f in fields(cls):
            meta = f.metadata
            if f.default is not _MISSING:
                default = "—" if f.default is None else repr(f.default)
            elif f.default_factory is not _MISSING:  # type: ignore[misc]
                default = "[]"
            else:
                default = "required"
            low, high = meta.get("low"), meta.get("high")
            rng = ""
            if meta.get("choices"):
                rng = " / ".join(meta["choices"])
            elif low is not None or high is not None:
                rng = f"{'>' if meta.get('low_open') else '≥'} {low:g}" if low is not None else ""
                if high is not None:
                    rng += (", " if rng else "") + f"≤ {high:g}"
            lines.append(f"| `{f.name}` | {_type_name(hints[f.name])} | {default} | {rng} | {meta.get('doc', '')} |")
        lines.append("")
    return "\n".join(lines)
