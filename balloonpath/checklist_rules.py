"""Jurisdiction rule profiles as data: loading, payload classification and notice timing.

A profile is a TOML file (``balloonpath/data/rules/<name>.toml`` or any path) that lists payload
classes with
their criteria, the notices an operator files, the equipment each class needs and operating limits
to watch.
Every threshold carries its published source and how we know it (``how = "read"`` or ``"memory"``),
following
``REFERENCES.md`` §9. Nothing here states that a flight is allowed: the profile only says which of
its
thresholds the payload as entered meets. The local aviation authority decides.

References
----------
[CFR101] 14 CFR Part 101 (US), §101.1(a)(4) applicability thresholds, §101.33, §101.35, §101.37,
§101.39.
[ICAO-A2] ICAO Annex 2, Rules of the Air, Appendix 5 (unmanned free balloons); classification read
in the UK
    retained SERA Appendix 2 (Reg. (EU) 923/2012 as retained), which is identical.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from importlib import resources
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from balloonpath.errors import PlanError, input_error
from balloonpath.units import INCH_M, OUNCE_KG, POUND_FORCE_N, POUND_KG

BUILTIN_PROFILES: tuple[str, ...] = ("us-part101", "icao-annex2", "generic")

# Relative tolerance at a threshold: values entered in other units (4 lb typed as 1.81437 kg) round,
# so a value
# within one part in 10^9 of a threshold counts as *at* the threshold. Printed inputs never carry 9
# digits.
THRESHOLD_RTOL = 1e-9

# Quantity -> {unit: factor to SI}. SI: kg, kg/m^2, N, count. Pounds, ounces and inches are exact by
# definition
# (NIST SP 811 appendix B; balloonpath.units); 1 g/cm^2 = 10 kg/m^2.
_UNITS: dict[str, dict[str, float]] = {
    "package_mass": {"kg": 1.0, "g": 1e-3, "lb": POUND_KG},
    "total_mass": {"kg": 1.0, "g": 1e-3, "lb": POUND_KG},
    "package_area_density": {"kg/m2": 1.0, "g/cm2": 10.0, "oz/in2": OUNCE_KG / INCH_M**2},
    "suspension_force": {"N": 1.0, "lbf": POUND_FORCE_N},
    "package_count": {"count": 1.0},
}
_PER_PACKAGE = ("package_mass", "package_area_density")
_OPS = (">", ">=", "<", "<=")
_HOW = ("read", "memory")
_ANCHORS = ("launch", "descent", "landing")
_WHEN = ("always", "darkness")
_PLAN_KEYS = ("cutdown_systems", "has_radar_reflector", "night_lighting")


@dataclass(frozen=True)
class Condition:
    """One comparison of a payload quantity with a threshold (``value`` in ``unit``; ``value_si`` in
    SI).
    """

    quantity: str
    op: str
    value: float
    unit: str
    value_si: float

    def describe(self) -> str:
        """The condition as written, e.g. ``package_mass > 4 lb``."""
        return f"{self.quantity.replace('_', ' ')} {self.op} {self.value:g} {self.unit}"


@dataclass(frozen=True)
class Criterion:
    """A criterion of a payload class: all its conditions must hold (per-package ones for one
    package).
    """

    label: str
    source: str
    how: str
    conditions: tuple[Condition, ...]


@dataclass(frozen=True)
class PayloadClass:
    """A payload class; it applies when any of its criteria is met. A class without criteria is the
    default.
    """

    name: str
    rank: int
    meaning: str
    criteria: tuple[Criterion, ...]


@dataclass(frozen=True)
class NoticeRule:
    """A notice or report: when it falls due relative to launch, start of descent or landing
    (hours).
    """

    id: str
    title: str
    to: str
    anchor: str
    opens_h: float | None
    due_h: float | None
    every_h: float | None
    until: str | None
    applies_to: tuple[str, ...]
    source: str
    how: str
    content: tuple[str, ...]
    content_how: str
    note: str


@dataclass(frozen=True)
class EquipmentRule:
    """Equipment a class needs, checked against a ``[checklist]`` key of the plan."""

    id: str
    label: str
    title: str
    plan_key: str
    minimum: int | None
    applies_to: tuple[str, ...]
    when: str
    either_or: bool
    source: str
    how: str


@dataclass(frozen=True)
class WatchRule:
    """An operating limit the team watches on the day (cloud, visibility, airspace)."""

    text: str
    source: str
    how: str
    applies_to: tuple[str, ...]


@dataclass(frozen=True)
class RuleProfile:
    """A jurisdiction profile loaded from TOML (see ``docs/checklist.md`` for the format)."""

    name: str
    title: str
    authority: str
    note: str
    regulated_class: tuple[str, ...]
    classes: tuple[PayloadClass, ...]
    notices: tuple[NoticeRule, ...]
    equipment: tuple[EquipmentRule, ...]
    watch: tuple[WatchRule, ...]
    questions: tuple[str, ...]
    low_altitude_rule_m: float | None
    low_altitude_rule_text: str
    low_altitude_rule_source: str
    low_altitude_rule_how: str
    night_below_m: float | None
    path: str


# --------------------------------------------------------------------------------------------------
# -- loading


def _get(
    raw: Mapping[str, Any],
    key: str,
    kind: type | tuple[type, ...],
    file: str,
    where: str,
    default: Any = ...,
) -> Any:
    if key not in raw:
        if default is ...:
            raise input_error(
                file, f"{where}.{key}", "is missing", f"add {key} = ... to {where}", cls=PlanError
            )
        return default
    value = raw[key]
    kinds = kind if isinstance(kind, tuple) else (kind,)
    if isinstance(value, bool) and bool not in kinds:
        raise input_error(
            file,
            f"{where}.{key}",
            f"is {value!r}, expected {kinds[0].__name__}",
            "write the value without true/false",
            cls=PlanError,
        )
    if not isinstance(value, kinds):
        raise input_error(
            file,
            f"{where}.{key}",
            f"is {value!r}, expected {kinds[0].__name__}",
            "correct the value's type",
            cls=PlanError,
        )
    return value


def _choice(value: str, allowed: Sequence[str], file: str, where: str) -> str:
    if value not in allowed:
        raise input_error(
            file,
            where,
            f"is {value!r}, not one of {', '.join(allowed)}",
            f"use one of {', '.join(allowed)}",
            cls=PlanError,
        )
    return value


def _str_list(raw: Mapping[str, Any], key: str, file: str, where: str) -> tuple[str, ...]:
    values = _get(raw, key, list, file, where, [])
    if not all(isinstance(v, str) for v in values):
        raise input_error(
            file,
            f"{where}.{key}",
            "has a non-text entry",
            "write a list of quoted names",
            cls=PlanError,
        )
    return tuple(values)


def _opt_float(raw: Mapping[str, Any], key: str, file: str, where: str) -> float | None:
    value = _get(raw, key, (int, float), file, where, None)
    return None if value is None else float(value)


def _parse_condition(raw: Any, file: str, where: str) -> Condition:
    if not isinstance(raw, dict):
        raise input_error(
            file,
            where,
            "is not a table",
            "write { quantity = ..., op = ..., value = ..., unit = ... }",
            cls=PlanError,
        )
    quantity = _choice(
        _get(raw, "quantity", str, file, where), tuple(_UNITS), file, f"{where}.quantity"
    )
    op = _choice(_get(raw, "op", str, file, where), _OPS, file, f"{where}.op")
    value = float(_get(raw, "value", (int, float), file, where))
    unit = _choice(
        _get(raw, "unit", str, file, where), tuple(_UNITS[quantity]), file, f"{where}.unit"
    )
    return Condition(
        quantity=quantity, op=op, value=value, unit=unit, value_si=value * _UNITS[quantity][unit]
    )


def parse_profile(data: Mapping[str, Any], path: str | Path) -> RuleProfile:
    """Validate an already-parsed profile document (see :func:`load_profile`).

    Raises
    ------
    PlanError
        One line naming the profile file, the entry, the problem and the fix.
    """
    file = str(path)
    head = _get(data, "profile", dict, file, "profile")
    classes = []
    for i, c in enumerate(_get(data, "class", list, file, "[[class]]", [])):
        where = f"class[{i}]"
        criteria = []
        for j, cr in enumerate(_get(c, "criterion", list, file, where, [])):
            w2 = f"{where}.criterion[{j}]"
            conditions = tuple(
                _parse_condition(x, file, f"{w2}.conditions[{k}]")
                for k, x in enumerate(_get(cr, "conditions", list, file, w2))
            )
            if not conditions:
                raise input_error(
                    file,
                    f"{w2}.conditions",
                    "is empty",
                    "give at least one condition",
                    cls=PlanError,
                )
            criteria.append(
                Criterion(
                    label=_get(cr, "label", str, file, w2),
                    source=_get(cr, "source", str, file, w2),
                    how=_choice(_get(cr, "how", str, file, w2), _HOW, file, f"{w2}.how"),
                    conditions=conditions,
                )
            )
        classes.append(
            PayloadClass(
                name=_get(c, "name", str, file, where),
                rank=_get(c, "rank", int, file, where),
                meaning=_get(c, "meaning", str, file, where, ""),
                criteria=tuple(criteria),
            )
        )
    names = [c.name for c in classes]
    notices = []
    for i, n in enumerate(_get(data, "notice", list, file, "[[notice]]", [])):
        where = f"notice[{i}]"
        applies = _str_list(n, "applies_to", file, where)
        for a in applies:
            _choice(a, names, file, f"{where}.applies_to")
        rule = NoticeRule(
            id=_get(n, "id", str, file, where),
            title=_get(n, "title", str, file, where),
            to=_get(n, "to", str, file, where, ""),
            anchor=_choice(
                _get(n, "anchor", str, file, where, "launch"), _ANCHORS, file, f"{where}.anchor"
            ),
            opens_h=_opt_float(n, "opens_h", file, where),
            due_h=_opt_float(n, "due_h", file, where),
            every_h=_opt_float(n, "every_h", file, where),
            until=_get(n, "until", str, file, where, None),
            applies_to=applies,
            source=_get(n, "source", str, file, where),
            how=_choice(_get(n, "how", str, file, where), _HOW, file, f"{where}.how"),
            content=_str_list(n, "content", file, where),
            content_how=_choice(
                _get(n, "content_how", str, file, where, "read"), _HOW, file, f"{where}.content_how"
            ),
            note=_get(n, "note", str, file, where, ""),
        )
        if rule.every_h is not None and rule.every_h <= 0:
            raise input_error(
                file,
                f"{where}.every_h",
                f"is {rule.every_h:g}",
                "give a positive interval in hours",
                cls=PlanError,
            )
        if rule.opens_h is None and rule.due_h is None and rule.every_h is None:
            raise input_error(
                file,
                where,
                "has none of opens_h, due_h, every_h",
                "say when the notice falls due",
                cls=PlanError,
            )
        if rule.opens_h is not None and rule.due_h is not None and rule.opens_h > rule.due_h:
            raise input_error(
                file,
                f"{where}.opens_h",
                f"({rule.opens_h:g} h) is after due_h ({rule.due_h:g} h)",
                "swap them: opens_h is the earliest time, due_h the latest",
                cls=PlanError,
            )
        notices.append(rule)
    equipment = []
    for i, e in enumerate(_get(data, "equipment", list, file, "[[equipment]]", [])):
        where = f"equipment[{i}]"
        applies = _str_list(e, "applies_to", file, where)
        for a in applies:
            _choice(a, names, file, f"{where}.applies_to")
        equipment.append(
            EquipmentRule(
                id=_get(e, "id", str, file, where),
                label=_get(e, "label", str, file, where, "") or _get(e, "id", str, file, where),
                title=_get(e, "title", str, file, where),
                plan_key=_choice(
                    _get(e, "plan_key", str, file, where), _PLAN_KEYS, file, f"{where}.plan_key"
                ),
                minimum=_get(e, "minimum", int, file, where, None),
                applies_to=applies,
                when=_choice(
                    _get(e, "when", str, file, where, "always"), _WHEN, file, f"{where}.when"
                ),
                either_or=_get(e, "either_or", bool, file, where, False),
                source=_get(e, "source", str, file, where),
                how=_choice(_get(e, "how", str, file, where), _HOW, file, f"{where}.how"),
            )
        )
    watch = []
    for i, w in enumerate(_get(data, "watch", list, file, "[[watch]]", [])):
        where = f"watch[{i}]"
        watch.append(
            WatchRule(
                text=_get(w, "text", str, file, where),
                source=_get(w, "source", str, file, where),
                how=_choice(_get(w, "how", str, file, where), _HOW, file, f"{where}.how"),
                applies_to=_str_list(w, "applies_to", file, where),
            )
        )
    regulated = _str_list(head, "regulated_class", file, "profile")
    for r in regulated:
        _choice(r, names, file, "profile.regulated_class")
    return RuleProfile(
        name=_get(head, "name", str, file, "profile"),
        title=_get(head, "title", str, file, "profile"),
        authority=_get(head, "authority", str, file, "profile"),
        note=_get(head, "note", str, file, "profile", ""),
        regulated_class=regulated,
        classes=tuple(sorted(classes, key=lambda c: c.rank)),
        notices=tuple(notices),
        equipment=tuple(equipment),
        watch=tuple(watch),
        questions=_str_list(data, "questions", file, "top level"),
        low_altitude_rule_m=_opt_float(head, "low_altitude_rule_m", file, "profile"),
        low_altitude_rule_text=_get(head, "low_altitude_rule_text", str, file, "profile", ""),
        low_altitude_rule_source=_get(head, "low_altitude_rule_source", str, file, "profile", ""),
        low_altitude_rule_how=_get(head, "low_altitude_rule_how", str, file, "profile", "memory"),
        night_below_m=_opt_float(head, "night_below_m", file, "profile"),
        path=file,
    )


def load_profile(name_or_path: str | Path) -> RuleProfile:
    """Load a built-in profile by name (``us-part101``, ``icao-annex2``, ``generic``) or a TOML
    file.

    Raises
    ------
    PlanError
        Unknown name, missing file, TOML syntax error or a malformed entry (one line with the fix).
    """
    text_name = str(name_or_path)
    if text_name in BUILTIN_PROFILES:
        resource = resources.files("balloonpath").joinpath("data", "rules", f"{text_name}.toml")
        text = resource.read_text(encoding="utf-8")
        label: str | Path = f"{text_name}.toml"
    else:
        path = Path(name_or_path)
        if not path.exists():
            raise input_error(
                None,
                f"rules {text_name!r}",
                "is neither a built-in profile nor an existing file",
                f"use one of {', '.join(BUILTIN_PROFILES)} or the path of a profile TOML file",
                cls=PlanError,
            )
        text = path.read_text(encoding="utf-8")
        label = path
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise input_error(
            label, "TOML", f"syntax error: {exc}", "correct the line shown", cls=PlanError
        ) from None
    return parse_profile(data, label)


# -------------------------------------------------------------------------------------------
# classification


@dataclass(frozen=True)
class PackageMeasure:
    """A payload package as classified: mass, smallest face area and mass per area (None when
    unknown).
    """

    name: str
    mass_kg: float
    smallest_face_area_cm2: float | None
    area_density_kg_m2: float | None


@dataclass(frozen=True)
class CriterionResult:
    """One criterion evaluated: ``met`` is True, False or None (not decidable: data missing)."""

    class_name: str
    label: str
    source: str
    how: str
    met: bool | None
    detail: str


@dataclass(frozen=True)
class Classification:
    """Which class of a profile the payload meets, as entered.

    Attributes
    ----------
    class_name, rank, meaning : the class assigned (the highest-ranked class with a criterion met;
    when missing
        data leave a higher class possible, that higher class, with ``assumed`` True).
    regulated : the class is one the profile lists as needing notices and equipment.
    packages : the packages with their mass per area. total_mass_kg : the packages' combined mass.
    suspension_n : the suspension's separation force, N (None: not entered).
    results : every criterion evaluated. missing : what to enter to decide the open criteria.
    """

    profile: str
    class_name: str
    rank: int
    meaning: str
    regulated: bool
    assumed: bool
    packages: tuple[PackageMeasure, ...]
    total_mass_kg: float
    suspension_n: float | None
    results: tuple[CriterionResult, ...]
    missing: tuple[str, ...]


def _compare(x: float, op: str, t: float) -> bool:
    tol = THRESHOLD_RTOL * max(abs(t), 1e-300)
    if op == ">":
        return x > t + tol
    if op == ">=":
        return x >= t - tol
    if op == "<":
        return x < t - tol
    return x <= t + tol


def _package_fields(p: Any) -> tuple[str, float, float | None]:
    if isinstance(p, Mapping):
        return str(p.get("name", "package")), float(p["mass_kg"]), p.get("smallest_face_area_cm2")
    return (
        str(getattr(p, "name", "package")),
        float(p.mass_kg),
        getattr(p, "smallest_face_area_cm2", None),
    )


def package_measures(packages: Iterable[Any]) -> tuple[PackageMeasure, ...]:
    """Packages (plan ``PackageSpec`` or mappings with ``mass_kg``, ``smallest_face_area_cm2``) with
    mass per area.

    Notes
    -----
    Mass per area of the smallest face, as in 14 CFR 101.1(a)(4)(i) ("weight/size ratio ...
    determined by
    dividing the total weight in ounces ... by the area in square inches of its smallest surface")
    and
    ICAO Annex 2 App. 5 §1 ("area density ... determined by dividing the total mass ... by the area
    of its
    smallest surface"): sigma = m / A, here in kg/m^2 with A in m^2 = cm^2 * 1e-4.
    """
    out = []
    for p in packages:
        name, mass, area = _package_fields(p)
        density = None if area is None else mass / (float(area) * 1e-4)
        out.append(
            PackageMeasure(
                name=name,
                mass_kg=mass,
                smallest_face_area_cm2=None if area is None else float(area),
                area_density_kg_m2=density,
            )
        )
    return tuple(out)


def _evaluate(cond: Condition, value: float | None) -> bool | None:
    return None if value is None else _compare(value, cond.op, cond.value_si)


def _and(values: Iterable[bool | None]) -> bool | None:
    vals = list(values)
    if any(v is False for v in vals):
        return False
    if any(v is None for v in vals):
        return None
    return True


def _or(values: Iterable[bool | None]) -> bool | None:
    vals = list(values)
    if any(v is True for v in vals):
        return True
    if any(v is None for v in vals):
        return None
    return False


def classify_payload(
    packages: Iterable[Any], profile: RuleProfile, suspension_n: float | None = None
) -> Classification:
    """Classify a payload against a profile's thresholds, strictness as written (``>`` vs ``>=``).

    Parameters
    ----------
    packages : iterable
        Plan ``PackageSpec`` entries or mappings with ``name``, ``mass_kg``,
        ``smallest_face_area_cm2``.
    profile : RuleProfile
        The jurisdiction profile.
    suspension_n : float, optional
        Impact force needed to separate the payload from the balloon, N (None: unknown).

    Returns
    -------
    Classification

    Notes
    -----
    A criterion is met when all its totals conditions hold and one package meets all its per-package
    conditions. Values within ``THRESHOLD_RTOL`` of a threshold count as at it. Unknown areas or
    suspension
    strength make a criterion undecided; the classification then takes the highest class still
    possible and
    says so (``assumed``). Three-valued logic: False beats unknown in AND, True beats unknown in OR.
    """
    measures = package_measures(packages)
    total = float(sum(p.mass_kg for p in measures))
    totals = {
        "total_mass": total,
        "package_count": float(len(measures)),
        "suspension_force": suspension_n,
    }
    results: list[CriterionResult] = []
    missing: set[str] = set()
    certain: dict[str, bool | None] = {}
    for cls in profile.classes:
        outcomes = []
        for crit in cls.criteria:
            total_conds = [c for c in crit.conditions if c.quantity not in _PER_PACKAGE]
            pkg_conds = [c for c in crit.conditions if c.quantity in _PER_PACKAGE]
            met_totals = _and(_evaluate(c, totals[c.quantity]) for c in total_conds)
            if pkg_conds:
                per_pkg = []
                for p in measures:
                    vals = {"package_mass": p.mass_kg, "package_area_density": p.area_density_kg_m2}
                    per_pkg.append(_and(_evaluate(c, vals[c.quantity]) for c in pkg_conds))
                met_pkgs = _or(per_pkg)
            else:
                met_pkgs = True
            met = _and([met_totals, met_pkgs])
            if met is None:
                if (
                    any(c.quantity == "suspension_force" for c in crit.conditions)
                    and suspension_n is None
                ):
                    missing.add("[payload] suspension_breaking_strength_n")
                if any(c.quantity == "package_area_density" for c in crit.conditions):
                    missing.add("[[payload.package]] smallest_face_area_cm2")
            detail = "; ".join(c.describe() for c in crit.conditions)
            results.append(
                CriterionResult(
                    class_name=cls.name,
                    label=crit.label,
                    source=crit.source,
                    how=crit.how,
                    met=met,
                    detail=detail,
                )
            )
            outcomes.append(met)
        certain[cls.name] = _or(outcomes) if cls.criteria else None
    met_classes = [c for c in profile.classes if certain[c.name] is True]
    possible = [c for c in profile.classes if certain[c.name] in (True, None) and c.criteria]
    default = [c for c in profile.classes if not c.criteria]
    chosen = None
    if possible:
        chosen = max(possible, key=lambda c: c.rank)
    elif default:
        chosen = min(default, key=lambda c: c.rank)
    floor = (
        max(met_classes, key=lambda c: c.rank)
        if met_classes
        else (min(default, key=lambda c: c.rank) if default else None)
    )
    assumed = chosen is not None and (floor is None or chosen.rank > floor.rank)
    if chosen is None:
        name, rank, meaning = "unclassified", -1, "the profile defines no payload classes"
    else:
        name, rank, meaning = chosen.name, chosen.rank, chosen.meaning
    return Classification(
        profile=profile.name,
        class_name=name,
        rank=rank,
        meaning=meaning,
        regulated=name in profile.regulated_class,
        assumed=bool(assumed),
        packages=measures,
        total_mass_kg=total,
        suspension_n=suspension_n,
        results=tuple(results),
        missing=tuple(sorted(missing)) if assumed else (),
    )


# --------------------------------------------------------------------------------------------
# notice timing


@dataclass(frozen=True)
class NoticeItem:
    """A notice with its times in UTC (None when its anchor time is unknown).

    ``times`` holds the repeated times of a periodic report (position reports), else is empty.
    """

    id: str
    title: str
    to: str
    opens: datetime | None
    due: datetime | None
    times: tuple[datetime, ...]
    every_h: float | None
    anchor: str
    anchor_known: bool
    applies: bool
    source: str
    how: str
    note: str
    content: tuple[str, ...]
    content_how: str


def resolve_zone(tz: str | ZoneInfo | None) -> ZoneInfo:
    """A ZoneInfo from an IANA name (None or "" give UTC).

    Raises
    ------
    PlanError
        If the name is not a known IANA time zone.
    """
    if isinstance(tz, ZoneInfo):
        return tz
    if not tz:
        return ZoneInfo("UTC")
    try:
        return ZoneInfo(str(tz))
    except (ZoneInfoNotFoundError, ValueError):
        raise input_error(
            None,
            f"time zone {tz!r}",
            "is not an IANA time zone name",
            "write e.g. America/Chicago or Europe/Berlin in [launch] time_zone",
            cls=PlanError,
        ) from None


def format_time(moment: datetime | None, tz: str | ZoneInfo | None) -> str:
    """``2027-05-13 22:00 CDT (2027-05-14 03:00Z)``: local date and time with the UTC time beside
    it.
    """
    if moment is None:
        return "(time not known)"
    zone = resolve_zone(tz)
    utc = moment.astimezone(UTC)
    local = moment.astimezone(zone)
    if zone.key == "UTC":
        return utc.strftime("%Y-%m-%d %H:%MZ")
    return f"{local.strftime('%Y-%m-%d %H:%M %Z')} ({utc.strftime('%Y-%m-%d %H:%MZ')})"


def notice_schedule(
    launch_time: datetime,
    profile: RuleProfile,
    tz: str | ZoneInfo | None = None,
    *,
    descent_time: datetime | None = None,
    landing_time: datetime | None = None,
    class_name: str | None = None,
) -> list[NoticeItem]:
    """When each notice of a profile opens and falls due, for a planned launch.

    Parameters
    ----------
    launch_time : datetime
        Planned launch, timezone-aware.
    profile : RuleProfile
    tz : str or ZoneInfo, optional
        Time zone for the local times (checked here; times are stored in UTC).
    descent_time, landing_time : datetime, optional
        Forecast start of descent (burst) and landing, for notices anchored there.
    class_name : str, optional
        The payload class; notices whose ``applies_to`` omit it get ``applies`` False. None: all
        apply.

    Notes
    -----
    Offsets are elapsed hours (UTC arithmetic), so a window across a daylight-saving change or a
    date change
    keeps its length; local times are only a view.
    """
    if launch_time.tzinfo is None:
        raise input_error(
            None,
            "launch time",
            f"{launch_time.isoformat()} has no timezone",
            "give an aware datetime (UTC or with an offset)",
            cls=PlanError,
        )
    resolve_zone(tz)
    anchors = {"launch": launch_time, "descent": descent_time, "landing": landing_time}
    items = []
    for rule in profile.notices:
        base = anchors[rule.anchor]
        applies = class_name is None or not rule.applies_to or class_name in rule.applies_to
        opens = due = None
        times: tuple[datetime, ...] = ()
        if base is not None:
            base = base.astimezone(UTC)
            opens = None if rule.opens_h is None else base + timedelta(hours=rule.opens_h)
            due = None if rule.due_h is None else base + timedelta(hours=rule.due_h)
            if rule.every_h is not None:
                end = anchors.get(rule.until or "", None)
                if end is not None:
                    span_h = (end.astimezone(UTC) - base).total_seconds() / 3600.0
                    n = int(math.floor(span_h / rule.every_h + 1e-9))
                    times = tuple(
                        base + timedelta(hours=rule.every_h * k) for k in range(1, max(n, 0) + 1)
                    )
        items.append(
            NoticeItem(
                id=rule.id,
                title=rule.title,
                to=rule.to,
                opens=opens,
                due=due,
                times=times,
                every_h=rule.every_h,
                anchor=rule.anchor,
                anchor_known=base is not None,
                applies=applies,
                source=rule.source,
                how=rule.how,
                note=rule.note,
                content=rule.content,
                content_how=rule.content_how,
            )
        )
    return items


def describe_notice_timing(item: NoticeItem, tz: str | ZoneInfo | None) -> str:
    """A short sentence saying when a notice is due, in local time with UTC beside it."""
    if not item.anchor_known:
        return f"relative to {item.anchor}: time not known without a forecast"
    if item.every_h is not None:
        text = f"at least every {item.every_h:g} h after {item.anchor}"
        if item.times:
            zone = resolve_zone(tz)
            shown = ", ".join(t.astimezone(zone).strftime("%H:%M") for t in item.times[:6])
            more = " ..." if len(item.times) > 6 else ""
            text += f" (local {shown}{more})"
        return text
    if item.opens is not None and item.due is not None and item.opens != item.due:
        return f"from {format_time(item.opens, tz)} to {format_time(item.due, tz)}"
    if item.due is not None and item.opens is not None:
        return f"at {format_time(item.due, tz)}"
    if item.due is not None:
        return f"by {format_time(item.due, tz)}"
    return f"from {format_time(item.opens, tz)}"
