"""GeoJSON (RFC 7946) export of a forecast: track, event points, zones and member landings.

Coordinates are [longitude, latitude(, altitude m)] in WGS84, rounded to 6 decimals (0.1 m) and
altitudes to 0.1 m, so the same forecast gives the same bytes. Lines and polygons that cross the
antimeridian are cut into parts (RFC 7946 §3.1.9); polygon exterior rings are counter-clockwise (the
right-hand rule, §3.1.6). Every feature has a ``kind`` property (docs/zones.md lists them) and
readable properties.

References
----------
[RFC7946] H. Butler et al., "The GeoJSON Format", IETF RFC 7946 (2016).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from balloonpath.fileio import atomic_write_text
from balloonpath.geodesy import inverse, normalize_longitude
from balloonpath.result import ForecastResult
from balloonpath.timeutil import iso_from_posix
from balloonpath.zones import Ring, Zones

COORD_DECIMALS = 6
ALT_DECIMALS = 1


def _c(lon: float, lat: float, alt: float | None = None) -> list[float]:
    out = [round(float(lon), COORD_DECIMALS) + 0.0, round(float(lat), COORD_DECIMALS) + 0.0]
    if alt is not None and math.isfinite(alt):
        out.append(round(float(alt), ALT_DECIMALS) + 0.0)
    return out


def _num(x: float, nd: int) -> float | None:
    x = float(x)
    return round(x, nd) + 0.0 if math.isfinite(x) else None


def _when(t: float) -> str | None:
    return iso_from_posix(t) if math.isfinite(float(t)) else None


def split_antimeridian(
    lons: np.ndarray, lats: np.ndarray, alts: np.ndarray | None = None
) -> list[list[list[float]]]:
    """Cut a line into parts that do not cross the antimeridian (RFC 7946 §3.1.9).

    Parameters
    ----------
    lons, lats : array_like, shape (T,)
        Vertices, degrees (longitudes in any range; non-finite vertices are dropped).
    alts : array_like, shape (T,), optional
        Altitudes, m; when given each position is [lon, lat, alt].

    Returns
    -------
    list of coordinate lists
        One list of positions per part, longitudes in [-180, 180]. A segment whose longitude step is
        over 180 degrees crosses the antimeridian: it ends at +-180 at the latitude (and altitude)
        interpolated linearly in unwrapped longitude, and the next part starts at the opposite
        meridian.
    """
    lon = np.asarray(lons, dtype=float).ravel()
    lat = np.asarray(lats, dtype=float).ravel()
    alt = None if alts is None else np.asarray(alts, dtype=float).ravel()
    ok = np.isfinite(lon) & np.isfinite(lat)
    if alt is not None:
        ok &= np.isfinite(alt)
    lon, lat = normalize_longitude(lon[ok]), lat[ok]
    alt = None if alt is None else alt[ok]
    parts: list[list[list[float]]] = []
    if lon.size == 0:
        return parts
    current = [_c(lon[0], lat[0], None if alt is None else alt[0])]
    for i in range(1, lon.size):
        d = lon[i] - lon[i - 1]
        if abs(d) > 180.0:
            eastward = d < 0  # e.g. 179 -> -179: eastward through +180
            edge = 180.0 if eastward else -180.0
            target = lon[i] + 360.0 if eastward else lon[i] - 360.0
            frac = (edge - lon[i - 1]) / (target - lon[i - 1])
            lat_x = lat[i - 1] + frac * (lat[i] - lat[i - 1])
            alt_x = None if alt is None else alt[i - 1] + frac * (alt[i] - alt[i - 1])
            current.append(_c(edge, lat_x, alt_x))
            if len(current) >= 2:
                parts.append(current)
            current = [_c(-edge, lat_x, alt_x)]
        current.append(_c(lon[i], lat[i], None if alt is None else alt[i]))
    parts.append(current)
    return [p for p in parts if len(p) >= 2] or [parts[-1]]


def polygon_geometry(rings: list[Ring] | tuple[Ring, ...]) -> dict[str, Any] | None:
    """GeoJSON Polygon / MultiPolygon of closed geographic rings, cut at the antimeridian.

    Each ring is unwrapped (longitudes made continuous from its first vertex); a ring reaching
    beyond +-180 degrees is split by intersecting it with the two world halves (shapely). Exterior
    rings come out counter-clockwise ([RFC7946] §3.1.6). Rings with zero area are left out; None
    when none is left.
    """
    from shapely.geometry import Polygon, box
    from shapely.geometry.polygon import orient

    polys: list[Any] = []
    for ring in rings:
        lon = np.asarray(ring.lon, dtype=float)
        lat = np.asarray(ring.lat, dtype=float)
        if lon.size < 4 or not (np.all(np.isfinite(lon)) and np.all(np.isfinite(lat))):
            continue
        un = lon[0] + np.concatenate([[0.0], np.cumsum((np.diff(lon) + 180.0) % 360.0 - 180.0)])
        poly = Polygon(np.column_stack([un, lat]))
        if not poly.is_valid:
            poly = poly.buffer(0)
        if poly.is_empty or poly.area <= 0.0:
            continue
        if float(np.min(un)) >= -180.0 and float(np.max(un)) <= 180.0:
            polys.append(poly)  # no crossing: keep the ring's own vertices and order
            continue
        for shift in (-360.0, 0.0, 360.0):
            world = box(-180.0 + shift, -90.0, 180.0 + shift, 90.0)
            piece = poly.intersection(world)
            for g in getattr(piece, "geoms", [piece]):
                if isinstance(g, Polygon) and g.area > 0.0:
                    polys.append(_shift_polygon(g, -shift))
    if not polys:
        return None
    coords = []
    for p in polys:
        p = orient(p, sign=1.0)
        coords.append([[_c(x, y) for x, y in p.exterior.coords]])
    if len(coords) == 1:
        return {"type": "Polygon", "coordinates": coords[0]}
    return {"type": "MultiPolygon", "coordinates": coords}


def _shift_polygon(poly: Any, dx: float) -> Any:
    from shapely import affinity

    return affinity.translate(poly, xoff=dx) if dx else poly


def _line_geometry(lons: np.ndarray, lats: np.ndarray, alts: np.ndarray | None) -> dict[str, Any]:
    parts = split_antimeridian(lons, lats, alts)
    if len(parts) == 1:
        return {"type": "LineString", "coordinates": parts[0]}
    return {"type": "MultiLineString", "coordinates": parts}


def _feature(geometry: dict[str, Any], properties: dict[str, Any]) -> dict[str, Any]:
    return {"type": "Feature", "geometry": geometry, "properties": properties}


def _ellipse_props(kind: str, what: str, e: Any) -> dict[str, Any]:
    return {
        "kind": kind,
        "name": f"{what} {e.probability:.0%} ellipse",
        "probability": _num(e.probability, 4),
        "semi_major_m": _num(e.semi_major_m, 1),
        "semi_minor_m": _num(e.semi_minor_m, 1),
        "major_axis_azimuth_deg": _num(e.major_axis_azimuth_deg, 1),
        "area_km2": _num(e.area_m2 / 1e6, 3),
    }


def forecast_geojson(result: ForecastResult, zones: Zones) -> dict[str, Any]:
    """The forecast as an RFC 7946 FeatureCollection.

    Features, in this order (``kind`` property): ``track`` (nominal track, LineString or
    MultiLineString with altitude), ``launch``, ``burst``, ``landing`` (nominal points),
    ``landing_mean`` (mean of the members with the 5-95 % landing-time window), ``landing_ellipse``
    (one per probability), ``landing_region`` (non-parametric 90 % region), ``burst_ellipse``,
    ``member_landings`` and ``member_bursts`` (MultiPoint). Zero-size zones are left out (the
    summary still reports them).
    """
    tr = result.nominal
    feats: list[dict[str, Any]] = []
    t0 = float(result.launch_time_s)
    feats.append(
        _feature(
            _line_geometry(tr.lon, tr.lat, tr.alt_m),
            {
                "kind": "track",
                "name": "Nominal track",
                "start_time": _when(float(tr.time_s[0])),
                "end_time": _when(float(tr.time_s[-1])),
                "max_altitude_m": _num(float(np.nanmax(tr.alt_m)), 1),
                "points": len(tr),
            },
        )
    )
    feats.append(
        _feature(
            {
                "type": "Point",
                "coordinates": _c(result.launch_lon, result.launch_lat, result.launch_alt_m),
            },
            {
                "kind": "launch",
                "name": "Launch",
                "time": _when(t0),
                "altitude_m": _num(result.launch_alt_m, 1),
            },
        )
    )
    b, land = result.burst, result.landing
    if math.isfinite(float(b.lat[0])):
        feats.append(
            _feature(
                {"type": "Point", "coordinates": _c(b.lon[0], b.lat[0], b.alt_m[0])},
                {
                    "kind": "burst",
                    "name": "Burst (nominal)",
                    "time": _when(float(b.time_s[0])),
                    "altitude_m": _num(float(b.alt_m[0]), 1),
                    "minutes_after_launch": _num((float(b.time_s[0]) - t0) / 60.0, 1),
                },
            )
        )
    if math.isfinite(float(land.lat[0])):
        dist, bearing = inverse(result.launch_lat, result.launch_lon, land.lat[0], land.lon[0])
        feats.append(
            _feature(
                {"type": "Point", "coordinates": _c(land.lon[0], land.lat[0], land.alt_m[0])},
                {
                    "kind": "landing",
                    "name": "Landing (nominal)",
                    "time": _when(float(land.time_s[0])),
                    "elevation_m": _num(float(land.alt_m[0]), 1),
                    "distance_km": _num(float(dist) / 1e3, 2),
                    "bearing_deg": _num(float(bearing), 1),
                    "vertical_speed_m_s": _num(result.landing_speed_m_s, 2),
                },
            )
        )
    feats.append(
        _feature(
            {"type": "Point", "coordinates": _c(zones.center_lon, zones.center_lat)},
            {
                "kind": "landing_mean",
                "name": "Mean landing",
                "members": zones.n_used,
                "landing_time_p05": _when(zones.landing_time_p05),
                "landing_time_p95": _when(zones.landing_time_p95),
            },
        )
    )
    for e, ring in zip(zones.ellipses, zones.ellipse_rings, strict=True):
        geom = polygon_geometry([ring]) if e.area_m2 > 0 else None
        if geom is not None:
            feats.append(_feature(geom, _ellipse_props("landing_ellipse", "Landing", e)))
    geom = polygon_geometry(zones.region_90_rings)
    if geom is not None:
        feats.append(
            _feature(
                geom,
                {
                    "kind": "landing_region",
                    "name": "Landing 90% region",
                    "probability": 0.9,
                    "method": zones.region_90_method,
                    "area_km2": _num(zones.region_90_area_m2 / 1e6, 3),
                },
            )
        )
    for e, ring in zip(zones.burst.ellipses, zones.burst.rings, strict=True):
        geom = polygon_geometry([ring]) if e.area_m2 > 0 else None
        if geom is not None:
            feats.append(_feature(geom, _ellipse_props("burst_ellipse", "Burst", e)))
    for kind, pts, label in (
        ("member_landings", land, "Member landings"),
        ("member_bursts", b, "Member bursts"),
    ):
        ok = np.isfinite(pts.lat) & np.isfinite(pts.lon)
        idx = np.flatnonzero(ok)
        if idx.size == 0:
            continue
        feats.append(
            _feature(
                {
                    "type": "MultiPoint",
                    "coordinates": [_c(pts.lon[i], pts.lat[i], pts.alt_m[i]) for i in idx],
                },
                {
                    "kind": kind,
                    "name": label,
                    "members": int(idx.size),
                    "member_index": [int(i) for i in idx],
                    "time_first": _when(float(np.min(pts.time_s[idx]))),
                    "time_last": _when(float(np.max(pts.time_s[idx]))),
                },
            )
        )
    return {"type": "FeatureCollection", "features": feats}


def write_geojson(obj: dict[str, Any], path: str | Path) -> Path:
    """Write a GeoJSON object atomically (fixed key order as built, compact, UTF-8, final newline).

    Floats must already be rounded (as :func:`forecast_geojson` does); NaN is refused (RFC 8259).
    """
    text = json.dumps(obj, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    return atomic_write_text(path, text + "\n")
