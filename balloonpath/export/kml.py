"""KML (OGC KML 2.2) export of a forecast, for phones and desktop globes, built with simplekml.

Layout of ``flight.kml``: a Document with the folders *Flight* (the nominal track as a LineString
with absolute altitudes and a TimeSpan, and the launch, burst and landing placemarks with
descriptions), *Track times* (points along the track with TimeStamps, for a viewer's time slider;
hidden by default), *Landing zones* (the ellipses and the non-parametric 90 % region as ground
polygons), *Burst zones* and *Member landings*. Colours come from :data:`balloonpath.plots.PALETTE`
(colour-blind safe); icons are the viewer's default, tinted, so the file needs no network.

References
----------
[OGC07-147r2] OGC KML 2.2.0, Open Geospatial Consortium 07-147r2 (2008): colours are aabbggrr hex,
    coordinates lon,lat[,alt].
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import simplekml

from balloonpath.export.geojson import polygon_geometry
from balloonpath.fileio import atomic_write_text
from balloonpath.geodesy import inverse
from balloonpath.plots import PALETTE
from balloonpath.result import ForecastResult
from balloonpath.timeutil import iso_from_posix
from balloonpath.zones import Ring, Zones

TRACK_TIME_STEP_S = 60.0
DISCLAIMER = (
    "Forecast only. It does not say that a flight is legal or safe: check the rules and get the "
    "clearances of your local aviation authority."
)


def kml_color(hex_rgb: str, alpha: float = 1.0) -> str:
    """KML colour ``aabbggrr`` of an ``#rrggbb`` colour and an opacity in [0, 1]."""
    h = hex_rgb.lstrip("#")
    a = int(round(255 * min(max(alpha, 0.0), 1.0)))
    return f"{a:02x}{h[4:6]}{h[2:4]}{h[0:2]}".lower()


def _r(x: float, nd: int = 6) -> float:
    return round(float(x), nd) + 0.0


def _style_line(color: str, width: float, fill_alpha: float | None = None) -> simplekml.Style:
    st = simplekml.Style()
    st.linestyle.color = kml_color(color)
    st.linestyle.width = width
    if fill_alpha is None:
        st.polystyle.fill = 0
    else:
        st.polystyle.color = kml_color(color, fill_alpha)
    return st


def _style_icon(color: str, scale: float) -> simplekml.Style:
    st = simplekml.Style()
    st.iconstyle.color = kml_color(color)
    st.iconstyle.scale = scale
    st.labelstyle.scale = 0.9 if scale >= 1.0 else 0.0
    return st


def _add_polygons(
    folder: simplekml.Folder,
    name: str,
    rings: tuple[Ring, ...] | list[Ring],
    style: simplekml.Style,
    description: str,
) -> None:
    geom = polygon_geometry(list(rings))
    if geom is None:
        return
    parts = [geom["coordinates"]] if geom["type"] == "Polygon" else geom["coordinates"]
    if len(parts) == 1:
        pol = folder.newpolygon(name=name, description=description)
        pol.outerboundaryis = [tuple(c) for c in parts[0][0]]
        pol.altitudemode = simplekml.AltitudeMode.clamptoground
        pol.tessellate = 1
        pol.style = style
        return
    multi = folder.newmultigeometry(name=name, description=description)
    for part in parts:
        pol = multi.newpolygon()
        pol.outerboundaryis = [tuple(c) for c in part[0]]
        pol.altitudemode = simplekml.AltitudeMode.clamptoground
        pol.tessellate = 1
    multi.style = style


def _renumber_ids(text: str) -> str:
    """simplekml numbers ids with a process-wide counter: renumber them for stable bytes."""
    mapping: dict[str, str] = {}

    def new(old: str) -> str:
        if old not in mapping:
            mapping[old] = f"bp{len(mapping) + 1}"
        return mapping[old]

    text = re.sub(r'id="([^"]+)"', lambda m: f'id="{new(m.group(1))}"', text)
    return re.sub(
        r"<styleUrl>#([^<]+)</styleUrl>", lambda m: f"<styleUrl>#{new(m.group(1))}</styleUrl>", text
    )


def _fmt(x: float, nd: int, unit: str) -> str:
    return f"{x:.{nd}f} {unit}" if math.isfinite(x) else "n/a"


def forecast_kml(result: ForecastResult, zones: Zones) -> str:
    """The forecast as KML 2.2 text (deterministic: same result and zones, same bytes)."""
    kml = simplekml.Kml(name=f"balloonpath forecast: {Path(result.plan_path).name}")
    doc = kml.document
    t0 = float(result.launch_time_s)
    doc.description = (
        f"Launch {iso_from_posix(t0)}, {result.n_members} members (seed {result.seed}), mode "
        f"{result.mode}. {DISCLAIMER}"
    )
    st_track = _style_line(PALETTE["track"], 3)
    st_launch = _style_icon(PALETTE["launch"], 1.2)
    st_burst = _style_icon(PALETTE["burst"], 1.2)
    st_landing = _style_icon(PALETTE["landing"], 1.3)
    st_time = _style_icon(PALETTE["track"], 0.5)
    st_member = _style_icon(PALETTE["member_landing"], 0.45)
    st_region = _style_line(PALETTE["region"], 2, fill_alpha=0.25)
    widths = {0: 3.0, 1: 2.0, 2: 1.5}

    flight = kml.newfolder(name="Flight")
    tr = result.nominal
    ok = np.isfinite(tr.lat) & np.isfinite(tr.lon) & np.isfinite(tr.alt_m)
    line = flight.newlinestring(name="Nominal track")
    line.coords = [
        (_r(lo), _r(la), _r(z, 1))
        for lo, la, z in zip(tr.lon[ok], tr.lat[ok], tr.alt_m[ok], strict=True)
    ]
    line.altitudemode = simplekml.AltitudeMode.absolute
    line.extrude = 0
    line.timespan.begin = iso_from_posix(float(tr.time_s[0]))
    line.timespan.end = iso_from_posix(float(tr.time_s[-1]))
    line.description = (
        f"Nominal flight, {iso_from_posix(float(tr.time_s[0]))} to "
        f"{iso_from_posix(float(tr.time_s[-1]))}; highest point "
        f"{_fmt(float(np.nanmax(tr.alt_m)), 0, 'm')} above sea level."
    )
    line.style = st_track

    pt = flight.newpoint(
        name="Launch",
        coords=[(_r(result.launch_lon), _r(result.launch_lat), _r(result.launch_alt_m, 1))],
    )
    pt.timestamp.when = iso_from_posix(t0)
    pt.description = (
        f"Launch at {iso_from_posix(t0)}, {_fmt(result.launch_alt_m, 0, 'm')} above sea level."
    )
    pt.style = st_launch
    b, land = result.burst, result.landing
    if math.isfinite(float(b.lat[0])):
        pt = flight.newpoint(name="Burst", coords=[(_r(b.lon[0]), _r(b.lat[0]), _r(b.alt_m[0], 1))])
        pt.altitudemode = simplekml.AltitudeMode.absolute
        pt.timestamp.when = iso_from_posix(float(b.time_s[0]))
        pt.description = (
            f"Nominal burst at {iso_from_posix(float(b.time_s[0]))}, "
            f"{_fmt(float(b.alt_m[0]), 0, 'm')} above sea level, "
            f"{(float(b.time_s[0]) - t0) / 60:.0f} min after launch."
        )
        pt.style = st_burst
    if math.isfinite(float(land.lat[0])):
        dist, bearing = inverse(result.launch_lat, result.launch_lon, land.lat[0], land.lon[0])
        pt = flight.newpoint(
            name="Landing", coords=[(_r(land.lon[0]), _r(land.lat[0]), _r(land.alt_m[0], 1))]
        )
        pt.timestamp.when = iso_from_posix(float(land.time_s[0]))
        window = ""
        if math.isfinite(zones.landing_time_p05):
            window = (
                f" 90 % of members land between {iso_from_posix(zones.landing_time_p05)} and "
                f"{iso_from_posix(zones.landing_time_p95)}."
            )
        pt.description = (
            f"Nominal landing at {iso_from_posix(float(land.time_s[0]))}, ground "
            f"{_fmt(float(land.alt_m[0]), 0, 'm')}, {float(dist) / 1e3:.1f} km from "
            f"launch at bearing {float(bearing):.0f} deg, descending "
            f"{_fmt(result.landing_speed_m_s, 1, 'm/s')}.{window}"
        )
        pt.style = st_landing

    times = kml.newfolder(name="Track times")
    times.visibility = 0
    phases = tr.phase_names()
    valid = np.flatnonzero(ok)
    next_t = -math.inf
    for i in valid:
        if float(tr.time_s[i]) < next_t and i != valid[-1]:
            continue
        next_t = float(tr.time_s[i]) + TRACK_TIME_STEP_S
        when = iso_from_posix(float(tr.time_s[i]))
        p = times.newpoint(coords=[(_r(tr.lon[i]), _r(tr.lat[i]), _r(tr.alt_m[i], 1))])
        p.altitudemode = simplekml.AltitudeMode.absolute
        p.timestamp.when = when
        p.description = f"{when}: {_fmt(float(tr.alt_m[i]), 0, 'm')}, {phases[i]}"
        p.visibility = 0
        p.style = st_time

    zf = kml.newfolder(name="Landing zones")
    for k, (e, ring) in enumerate(zip(zones.ellipses, zones.ellipse_rings, strict=True)):
        if e.area_m2 <= 0:
            continue
        st = _style_line(PALETTE["landing_ellipse"], widths.get(k, 1.5), fill_alpha=0.08)
        _add_polygons(
            zf,
            f"Landing {e.probability:.0%} ellipse",
            [ring],
            st,
            f"Probability {e.probability:.0%} (normal fit): semi-axes "
            f"{e.semi_major_m / 1e3:.2f} x {e.semi_minor_m / 1e3:.2f} km, major axis "
            f"{e.major_axis_azimuth_deg:.0f} deg from north.",
        )
    if zones.region_90_rings:
        _add_polygons(
            zf,
            "Landing 90% region",
            zones.region_90_rings,
            st_region,
            f"90 % of members land inside ({zones.region_90_method}); area "
            f"{zones.region_90_area_m2 / 1e6:.1f} km2.",
        )
    bf = kml.newfolder(name="Burst zones")
    for k, (e, ring) in enumerate(zip(zones.burst.ellipses, zones.burst.rings, strict=True)):
        if e.area_m2 <= 0:
            continue
        st = _style_line(PALETTE["burst"], widths.get(k, 1.5))
        _add_polygons(
            bf,
            f"Burst {e.probability:.0%} ellipse",
            [ring],
            st,
            f"Ground position under the burst, probability {e.probability:.0%}: semi-axes "
            f"{e.semi_major_m / 1e3:.2f} x {e.semi_minor_m / 1e3:.2f} km.",
        )
    mf = kml.newfolder(name="Member landings")
    for i in range(result.n_members):
        la, lo = float(land.lat[i]), float(land.lon[i])
        if not (math.isfinite(la) and math.isfinite(lo)):
            continue
        p = mf.newpoint(name=f"{i}", coords=[(_r(lo), _r(la))])
        p.description = (
            f"Member {i}: lands {iso_from_posix(float(land.time_s[i]))}, ground "
            f"{_fmt(float(land.alt_m[i]), 0, 'm')}."
        )
        p.style = st_member
    return _renumber_ids(kml.kml())


def write_forecast_kml(result: ForecastResult, zones: Zones, path: str | Path) -> Path:
    """Write ``flight.kml`` atomically (see :func:`forecast_kml` and the module notes)."""
    return atomic_write_text(path, forecast_kml(result, zones))
