"""Offline figures of a forecast: a map of the flight and its zones, and the altitude profile.

Built on ``matplotlib.figure.Figure`` with the Agg canvas (no pyplot, no global backend, no web
tiles). PNG files are written atomically with ``metadata={"Software": None}``, so the same forecast
gives the same bytes. Colours: :data:`PALETTE`, taken from the colour-blind-safe set of Okabe & Ito
([Okabe2008]), assigned by balloonpath.

References
----------
[Okabe2008] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and
    presentations that are friendly to colorblind people" (2008): black, orange #E69F00, sky blue
    #56B4E9, bluish green #009E73, yellow #F0E442, blue #0072B2, vermillion #D55E00, reddish purple
    #CC79A7 (from memory).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from balloonpath.fileio import atomic_path
from balloonpath.flight.phases import PHASE_NAMES
from balloonpath.geodesy import forward, inverse, normalize_longitude
from balloonpath.result import ForecastResult
from balloonpath.timeutil import iso_from_posix

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from balloonpath.zones import Zones

PALETTE: dict[str, str] = {
    "track": "#0072B2",
    "member_track": "#9A9A9A",
    "launch": "#009E73",
    "burst": "#E69F00",
    "landing": "#000000",
    "member_landing": "#555555",
    "landing_ellipse": "#D55E00",
    "region": "#56B4E9",
    "rings": "#8C8C8C",
    "text": "#222222",
}
"""Colours of balloonpath figures and KML (hex ``#rrggbb``), colour-blind safe ([Okabe2008])."""

PHASE_COLORS: dict[str, str] = {
    "ascent": "#0072B2",
    "float": "#009E73",
    "descent": "#CC79A7",
    "landed": "#000000",
}
"""Colour of each flight phase in profiles and tracks."""

ELLIPSE_STYLES = ("-", "--", ":")
"""Line styles of the ellipses, in the order of their probabilities (50, 90, 95 % by default)."""

DPI = 120


def new_figure(width_in: float = 8.0, height_in: float = 7.0) -> Figure:
    """A matplotlib Figure on an Agg canvas (independent of pyplot and of the global backend)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def save_png(fig: Figure, path: str | Path, dpi: int = DPI) -> Path:
    """Save a figure as PNG atomically, without a time- or version-dependent metadata field."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=dpi, metadata={"Software": None})
    return Path(path)


def unwrap_longitude(lon: np.ndarray | float, lon_ref: float) -> np.ndarray:
    """Longitudes shifted by multiples of 360 deg to lie within 180 deg of ``lon_ref`` (plots)."""
    lon = np.asarray(lon, dtype=float)
    return lon_ref + (lon - lon_ref + 180.0) % 360.0 - 180.0


def set_equal_distance_aspect(ax: Axes, lat0: float) -> None:
    """Degrees on both axes with one km the same length east-west and north-south at ``lat0``.

    The aspect ratio is 1 / cos(lat0) (a plate carree scaled at the map's centre, exact there and
    within 0.2 % over +-0.25 deg of latitude at mid latitudes).
    """
    ax.set_aspect(1.0 / max(math.cos(math.radians(lat0)), 1e-3), adjustable="box")
    from matplotlib.ticker import FuncFormatter

    ax.xaxis.set_major_formatter(
        FuncFormatter(lambda v, _p: f"{float(normalize_longitude(v)):.2f}°")
    )
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _p: f"{v:.2f}°"))
    ax.set_xlabel("Longitude (degrees east)")
    ax.set_ylabel("Latitude (degrees north)")


def nice_ring_radii(max_distance_m: float, count: int = 4) -> np.ndarray:
    """Round ring radii (1, 2, 5 x 10^k m) so that about ``count`` rings reach the distance."""
    if not math.isfinite(max_distance_m) or max_distance_m <= 0:
        return np.array([1_000.0])
    raw = max_distance_m / count
    k = 10.0 ** math.floor(math.log10(raw))
    step = min((m * k for m in (1, 2, 5, 10) if m * k >= raw), default=10 * k)
    return step * np.arange(1, int(math.ceil(max_distance_m / step)) + 1)


def draw_range_rings(
    ax: Axes,
    lat0: float,
    lon0: float,
    radii_m: np.ndarray | list[float],
    lon_ref: float | None = None,
    color: str = PALETTE["rings"],
    label: bool = True,
) -> None:
    """Geodesic circles of given radii around (lat0, lon0), labelled in km on their east side.

    Each ring is 181 points of the direct geodesic problem (``geodesy.forward``, [Karney2013]).
    """
    ref = lon0 if lon_ref is None else lon_ref
    az = np.linspace(0.0, 360.0, 181)
    for r in np.asarray(radii_m, dtype=float):
        la, lo = forward(lat0, lon0, az, r)
        ax.plot(unwrap_longitude(lo, ref), la, color=color, lw=0.7, ls="-", alpha=0.8, zorder=1)
        if label:
            la_l, lo_l = forward(lat0, lon0, 90.0, r)
            ax.annotate(
                f"{r / 1e3:g} km",
                (float(unwrap_longitude(lo_l, ref)), float(la_l)),
                fontsize=7,
                color=color,
                ha="left",
                va="bottom",
                zorder=1,
            )


def draw_north_arrow(ax: Axes, x: float = 0.95, y: float = 0.86, length: float = 0.08) -> None:
    """A north arrow in axes coordinates (the map's y axis points to true north)."""
    ax.annotate(
        "",
        xy=(x, y + length),
        xytext=(x, y),
        xycoords="axes fraction",
        arrowprops={"arrowstyle": "-|>", "color": PALETTE["text"], "lw": 1.5},
    )
    ax.text(
        x,
        y + length + 0.012,
        "N",
        transform=ax.transAxes,
        ha="center",
        va="bottom",
        fontsize=11,
        fontweight="bold",
        color=PALETTE["text"],
    )


def _phase_segments(ax: Axes, x: np.ndarray, y: np.ndarray, phase: np.ndarray, lw: float) -> None:
    """Draw a line coloured by phase; consecutive points share the later point's phase colour."""
    phase = np.asarray(phase, dtype=int)
    seen: set[int] = set()
    start = 0
    for i in range(1, phase.size + 1):
        if i == phase.size or phase[i] != phase[start]:
            stop = min(i + 1, phase.size)
            code = int(phase[start])
            name = PHASE_NAMES[code] if 0 <= code < len(PHASE_NAMES) else str(code)
            if stop - start < 2:  # a lone point (the landed point): nothing to draw
                start = i
                continue
            ax.plot(
                x[start:stop],
                y[start:stop],
                color=PHASE_COLORS.get(name, PALETTE["track"]),
                lw=lw,
                label=None if code in seen else f"Track: {name}",
                zorder=4,
            )
            seen.add(code)
            start = i


def plot_map(result: ForecastResult, zones: Zones, path: str | Path) -> Path:
    """Map of the flight: track, member landings, zones, launch, range rings, north arrow (PNG).

    Axes are longitude and latitude in degrees with equal distances in x and y at the map's centre
    (:func:`set_equal_distance_aspect`); longitudes are unwrapped around the launch so a flight over
    the antimeridian stays in one piece. No background map (offline).
    """
    fig = new_figure(8.0, 7.5)
    ax = fig.add_subplot(1, 1, 1)
    ref = float(result.launch_lon)
    xs: list[np.ndarray] = []
    ys: list[np.ndarray] = []

    mt = result.member_tracks or {}
    if "lat" in mt and "lon" in mt and np.size(mt["lat"]) > 0:
        mlat = np.atleast_2d(np.asarray(mt["lat"], dtype=float))
        mlon = unwrap_longitude(np.atleast_2d(np.asarray(mt["lon"], dtype=float)), ref)
        for k in range(mlat.shape[0]):
            ax.plot(
                mlon[k],
                mlat[k],
                color=PALETTE["member_track"],
                lw=0.5,
                alpha=0.35,
                label="Member tracks" if k == 0 else None,
                zorder=2,
            )
    tr = result.nominal
    tlon = unwrap_longitude(tr.lon, ref)
    _phase_segments(ax, tlon, np.asarray(tr.lat, dtype=float), tr.phase, lw=1.8)
    xs.append(tlon)
    ys.append(np.asarray(tr.lat, dtype=float))

    land = result.landing
    lon_m = unwrap_longitude(land.lon, ref)
    ax.scatter(
        lon_m,
        land.lat,
        s=5,
        color=PALETTE["member_landing"],
        alpha=0.6,
        lw=0,
        label=f"Member landings ({zones.n_used})",
        zorder=3,
    )
    xs.append(lon_m)
    ys.append(np.asarray(land.lat, dtype=float))

    for k, (e, ring) in enumerate(zip(zones.ellipses, zones.ellipse_rings, strict=True)):
        if e.area_m2 <= 0:
            continue
        rl = unwrap_longitude(ring.lon, ref)
        ax.plot(
            rl,
            ring.lat,
            color=PALETTE["landing_ellipse"],
            lw=1.4,
            ls=ELLIPSE_STYLES[k % len(ELLIPSE_STYLES)],
            label=f"Landing {e.probability:.0%} ellipse",
            zorder=5,
        )
        xs.append(rl)
        ys.append(np.asarray(ring.lat))
    for j, ring in enumerate(zones.region_90_rings):
        rl = unwrap_longitude(ring.lon, ref)
        ax.fill(
            rl,
            ring.lat,
            facecolor=PALETTE["region"],
            alpha=0.25,
            edgecolor=PALETTE["region"],
            lw=1.0,
            label="Landing 90% region" if j == 0 else None,
            zorder=2,
        )
        xs.append(rl)
        ys.append(np.asarray(ring.lat))
    for k, (e, ring) in enumerate(zip(zones.burst.ellipses, zones.burst.rings, strict=True)):
        if e.area_m2 <= 0 or k != len(zones.burst.ellipses) - 1:
            continue
        rl = unwrap_longitude(ring.lon, ref)
        ax.plot(
            rl,
            ring.lat,
            color=PALETTE["burst"],
            lw=1.2,
            ls="--",
            label=f"Burst {e.probability:.0%} ellipse",
            zorder=5,
        )

    ax.plot(
        [ref],
        [result.launch_lat],
        marker="^",
        ms=10,
        color=PALETTE["launch"],
        mec="white",
        ls="none",
        label="Launch",
        zorder=6,
    )
    b = result.burst
    if math.isfinite(float(b.lat[0])):
        ax.plot(
            unwrap_longitude(b.lon[0], ref),
            b.lat[0],
            marker="*",
            ms=13,
            color=PALETTE["burst"],
            mec="black",
            mew=0.5,
            ls="none",
            label="Burst (nominal)",
            zorder=6,
        )
    if math.isfinite(float(land.lat[0])):
        ax.plot(
            unwrap_longitude(land.lon[0], ref),
            land.lat[0],
            marker="X",
            ms=10,
            color=PALETTE["landing"],
            mec="white",
            ls="none",
            label="Landing (nominal)",
            zorder=6,
        )
    ax.plot(
        unwrap_longitude(zones.center_lon, ref),
        zones.center_lat,
        marker="P",
        ms=9,
        color=PALETTE["landing_ellipse"],
        mec="white",
        ls="none",
        label="Mean landing",
        zorder=6,
    )

    allx = np.concatenate([np.ravel(a) for a in xs])
    ally = np.concatenate([np.ravel(a) for a in ys])
    ok = np.isfinite(allx) & np.isfinite(ally)
    allx, ally = allx[ok], ally[ok]
    dist, _ = inverse(result.launch_lat, result.launch_lon, ally, normalize_longitude(allx))
    far = float(np.max(dist)) if dist.size else 1_000.0
    draw_range_rings(ax, result.launch_lat, result.launch_lon, nice_ring_radii(far), lon_ref=ref)
    lat_c = 0.5 * (float(np.min(ally)) + float(np.max(ally)))
    lon_c = 0.5 * (float(np.min(allx)) + float(np.max(allx)))
    coslat = max(math.cos(math.radians(lat_c)), 1e-3)
    # A square map: the same ground distance across as up, 8 % margin, at least 1 km.
    half = 0.54 * max((float(np.max(ally)) - float(np.min(ally))),
                      (float(np.max(allx)) - float(np.min(allx))) * coslat, 0.01)
    ax.set_xlim(lon_c - half / coslat, lon_c + half / coslat)
    ax.set_ylim(lat_c - half, lat_c + half)
    set_equal_distance_aspect(ax, lat_c)
    draw_north_arrow(ax)
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.set_title(
        f"Forecast from {iso_from_posix(result.launch_time_s)}, {result.n_members} members",
        fontsize=11,
    )
    lines = []
    if zones.p_water is not None and math.isfinite(zones.p_water):
        lines.append(f"P(water) = {zones.p_water:.0%}")
    lines += [f"P({name}) = {p:.0%}" for name, p in zones.p_avoid.items() if math.isfinite(p)]
    if math.isfinite(zones.landing_time_p05):
        lines.append(
            f"Landing {iso_from_posix(zones.landing_time_p05)[11:16]}–"
            f"{iso_from_posix(zones.landing_time_p95)[11:16]} UTC (5–95 %)"
        )
    if lines:
        ax.text(
            0.02,
            0.02,
            "\n".join(lines),
            transform=ax.transAxes,
            fontsize=8,
            va="bottom",
            bbox={"boxstyle": "round", "fc": "white", "ec": PALETTE["rings"], "alpha": 0.9},
            zorder=7,
        )
    ax.legend(loc="upper left", fontsize=7, framealpha=0.9)
    fig.tight_layout()
    return save_png(fig, path)


def plot_profile(result: ForecastResult, path: str | Path) -> Path:
    """Altitude against time since launch: the nominal run coloured by phase, members faint."""
    fig = new_figure(8.0, 4.5)
    ax = fig.add_subplot(1, 1, 1)
    t0 = float(result.launch_time_s)
    mt = result.member_tracks or {}
    if "time_s" in mt and "alt_m" in mt and np.size(mt["alt_m"]) > 0:
        mtime = np.atleast_2d(np.asarray(mt["time_s"], dtype=float))
        malt = np.atleast_2d(np.asarray(mt["alt_m"], dtype=float))
        if mtime.shape[0] == 1 and malt.shape[0] > 1:
            mtime = np.broadcast_to(mtime, malt.shape)
        for k in range(malt.shape[0]):
            ax.plot(
                (mtime[k] - t0) / 60.0,
                malt[k] / 1e3,
                color=PALETTE["member_track"],
                lw=0.5,
                alpha=0.35,
                label="Members" if k == 0 else None,
                zorder=2,
            )
    tr = result.nominal
    _phase_segments(
        ax,
        (np.asarray(tr.time_s, dtype=float) - t0) / 60.0,
        np.asarray(tr.alt_m, dtype=float) / 1e3,
        tr.phase,
        lw=2.0,
    )
    b = result.burst
    if math.isfinite(float(b.alt_m[0])):
        ax.plot(
            (float(b.time_s[0]) - t0) / 60.0,
            float(b.alt_m[0]) / 1e3,
            marker="*",
            ms=12,
            color=PALETTE["burst"],
            mec="black",
            mew=0.5,
            ls="none",
            label=f"Burst {float(b.alt_m[0]) / 1e3:.1f} km",
            zorder=5,
        )
    land = result.landing
    if math.isfinite(float(land.time_s[0])):
        ax.plot(
            (float(land.time_s[0]) - t0) / 60.0,
            float(land.alt_m[0]) / 1e3,
            marker="X",
            ms=9,
            color=PALETTE["landing"],
            ls="none",
            label="Landing",
            zorder=5,
        )
    ax.set_xlabel(f"Minutes after launch ({iso_from_posix(t0)})")
    ax.set_ylabel("Altitude above sea level (km)")
    ax.set_ylim(bottom=min(0.0, float(np.nanmin(tr.alt_m)) / 1e3))
    ax.set_xlim(left=0.0)
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.set_title("Altitude profile", fontsize=11)
    ax.legend(loc="upper right", fontsize=8, framealpha=0.9)
    fig.tight_layout()
    return save_png(fig, path)
