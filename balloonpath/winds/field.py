"""The wind-field interface, coverage policy and composition.

A wind field answers ``wind(lat, lon, alt_m, time_s) -> (u, v)`` for arrays of points (u east, v north, m/s;
time in POSIX seconds UTC). A field with an uncertainty model also gives its standard deviation and draws
``MemberWinds``: N smooth wind functions, one per ensemble member, drawn once and then evaluated wherever that
member flies. Fresh noise at every step would shrink the ensemble spread by orders of magnitude; a drawn
function keeps the error correlated along each member's path.

References
----------
[WMO8] WMO-No. 8, Guide to Instruments and Methods of Observation, Vol. I ch. 5 and Vol. III ch. 3:
    the reported wind direction is the direction FROM which the wind blows, degrees clockwise from true north.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Literal, Protocol, runtime_checkable

import numpy as np

from balloonpath.errors import CoverageError, CoverageWarning

CoveragePolicy = Literal["error", "hold"]


def uv_from_direction_speed(
    direction_deg: np.ndarray | float, speed_m_s: np.ndarray | float
) -> tuple[np.ndarray, np.ndarray]:
    """Wind components from direction FROM (degrees true) and speed ([WMO8] convention).

    u = -s sin(d), v = -s cos(d): a wind from 270 deg (west) blows toward the east, u > 0.
    """
    d = np.radians(np.asarray(direction_deg, dtype=float))
    s = np.asarray(speed_m_s, dtype=float)
    return -s * np.sin(d), -s * np.cos(d)


def direction_speed_from_uv(u: np.ndarray | float, v: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    """Direction FROM (degrees true, [0, 360)) and speed of wind components ([WMO8] convention)."""
    u = np.asarray(u, dtype=float)
    v = np.asarray(v, dtype=float)
    return np.degrees(np.arctan2(-u, -v)) % 360.0, np.hypot(u, v)


@dataclass(frozen=True)
class Coverage:
    """Where and when a field has data. ``None`` bounds are unbounded."""

    alt_min_m: float | None = None
    alt_max_m: float | None = None
    time_min_s: float | None = None
    time_max_s: float | None = None
    lat_min: float | None = None
    lat_max: float | None = None
    lon_min: float | None = None
    lon_max: float | None = None

    def intersect(self, other: Coverage) -> Coverage:
        """The region covered by both."""

        def hi(a: float | None, b: float | None) -> float | None:
            return b if a is None else a if b is None else max(a, b)

        def lo(a: float | None, b: float | None) -> float | None:
            return b if a is None else a if b is None else min(a, b)

        return Coverage(
            hi(self.alt_min_m, other.alt_min_m), lo(self.alt_max_m, other.alt_max_m),
            hi(self.time_min_s, other.time_min_s), lo(self.time_max_s, other.time_max_s),
            hi(self.lat_min, other.lat_min), lo(self.lat_max, other.lat_max),
            hi(self.lon_min, other.lon_min), lo(self.lon_max, other.lon_max),
        )


def _fmt(name: str, value: float) -> str:
    if name == "time_s":
        from balloonpath.timeutil import iso_from_posix

        return iso_from_posix(value)
    return f"{value:.6g}"


def check_coverage(
    coverage: Coverage,
    lat: np.ndarray,
    lon: np.ndarray,
    alt_m: np.ndarray,
    time_s: np.ndarray,
    policy: CoveragePolicy = "error",
    source: str = "wind field",
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Check that points lie inside ``coverage``; raise, or hold them at the edge with a warning.

    Returns the (possibly clamped) lat, lon, alt_m, time_s arrays. Longitude bounds are compared after
    wrapping the point into the field's own longitude range by the caller.

    Raises
    ------
    CoverageError
        With policy ``"error"`` when any point is outside.
    """
    out = [np.asarray(a, dtype=float) for a in (lat, lon, alt_m, time_s)]
    names = ("latitude", "longitude", "alt_m", "time_s")
    bounds = (
        (coverage.lat_min, coverage.lat_max),
        (coverage.lon_min, coverage.lon_max),
        (coverage.alt_min_m, coverage.alt_max_m),
        (coverage.time_min_s, coverage.time_max_s),
    )
    for i, (name, (low, high)) in enumerate(zip(names, bounds, strict=True)):
        arr = out[i]
        below = arr < low - 1e-9 if low is not None else np.zeros(arr.shape, bool)
        above = arr > high + 1e-9 if high is not None else np.zeros(arr.shape, bool)
        if not (np.any(below) or np.any(above)):
            continue
        worst = float(arr[below].min()) if np.any(below) else float(arr[above].max())
        span = f"{_fmt(name, low) if low is not None else '-inf'}..{_fmt(name, high) if high is not None else 'inf'}"
        message = (
            f"{source}: {name} {_fmt(name, worst)} is outside the field's coverage {span}"
        )
        if policy == "error":
            raise CoverageError(
                message + "; fix: use winds that cover the whole flight, or set "
                "[winds] outside = \"hold\" to hold the edge values"
            )
        # The warning text is stable (no per-call values) so that a run records it once.
        warnings.warn(f"{source}: {name} went outside the field's coverage {span}; edge values held",
                      CoverageWarning, stacklevel=3)
        out[i] = np.clip(arr, low if low is not None else -np.inf, high if high is not None else np.inf)
    return out[0], out[1], out[2], out[3]


@runtime_checkable
class WindField(Protocol):
    """A deterministic wind field (the mean)."""

    def wind(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """u (east) and v (north) in m/s at the given points (arrays broadcast together)."""
        ...

    def coverage(self) -> Coverage:
        """The space and time where the field has data."""
        ...


@runtime_checkable
class MemberWinds(Protocol):
    """N wind realisations, one smooth function per ensemble member."""

    n_members: int

    def wind(
        self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """u, v of member ``members[k]`` at point k (all arrays of one shape)."""
        ...


@runtime_checkable
class UncertainWindField(WindField, Protocol):
    """A wind field with an uncertainty model."""

    def std(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Standard deviation (m/s) of u and v at the given points."""
        ...

    def sample(self, n_members: int, rng: np.random.Generator) -> MemberWinds:
        """Draw ``n_members`` spatially correlated realisations."""
        ...


class MeanMemberWinds:
    """Every member flies the field's mean wind (the nominal run, or a deterministic ensemble)."""

    def __init__(self, field: WindField, n_members: int = 1) -> None:
        self.field = field
        self.n_members = int(n_members)

    def wind(
        self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """The mean wind at each point, whatever the member."""
        return self.field.wind(lat, lon, alt_m, time_s)


class OffsetMemberWinds:
    """Member i flies the mean wind plus a constant offset (du[i], dv[i]): a perfectly correlated error."""

    def __init__(self, field: WindField, du: np.ndarray, dv: np.ndarray) -> None:
        self.field = field
        self.du = np.asarray(du, dtype=float)
        self.dv = np.asarray(dv, dtype=float)
        self.n_members = int(self.du.size)

    def wind(
        self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Mean wind plus the member's offset."""
        u, v = self.field.wind(lat, lon, alt_m, time_s)
        idx = np.asarray(members, dtype=int)
        return u + self.du[idx], v + self.dv[idx]


class SumField:
    """Background plus correction: u = u_b + u_c, v = v_b + v_c; coverage is the background's."""

    def __init__(self, background: WindField, correction: WindField) -> None:
        self.background = background
        self.correction = correction

    def wind(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Sum of the two fields' winds."""
        ub, vb = self.background.wind(lat, lon, alt_m, time_s)
        uc, vc = self.correction.wind(lat, lon, alt_m, time_s)
        return ub + uc, vb + vc

    def coverage(self) -> Coverage:
        """The background's coverage."""
        return self.background.coverage()


class UniformField:
    """The same wind everywhere and always (tests, simple what-ifs)."""

    def __init__(self, u_m_s: float, v_m_s: float) -> None:
        self.u = float(u_m_s)
        self.v = float(v_m_s)

    def wind(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """The constant wind, broadcast to the points."""
        shape = np.broadcast(np.asarray(lat), np.asarray(lon), np.asarray(alt_m), np.asarray(time_s)).shape
        return np.full(shape, self.u), np.full(shape, self.v)

    def coverage(self) -> Coverage:
        """Unbounded."""
        return Coverage()
