"""The flight report: one self-contained ``report.html`` a team can open offline, print or mail.

Everything is inline: the stylesheet (``balloonpath/data/report.css``) and the figures as PNG data
URIs (``map.png`` and ``profile.png`` from the forecast folder, and the wind profile drawn here).
There are no scripts, no fonts or images from the network, and a Content-Security-Policy that
forbids them, so the page reads the same on a laptop in a field as in a mail client. All text from
inputs is escaped. The output depends only on its inputs (no generation time; PNGs without
software metadata), so the same forecast gives the same bytes. See docs/report.md.
"""

from __future__ import annotations

import base64
import functools
import html
import io
import json
import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from importlib import resources
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np

from balloonpath import __version__
from balloonpath.errors import DataQualityWarning
from balloonpath.fileio import atomic_write_text
from balloonpath.geodesy import inverse
from balloonpath.result import ForecastResult

#: Colours of the report's own figure, by role. Chosen to stay apart under the common
#: colour-vision deficiencies (blue against orange; the speed line is near-black) and drawn with
#: different line styles as well, so no curve is told apart by colour alone.
REPORT_COLOURS: dict[str, str] = {
    "u": "#1d5a85",
    "v": "#c7661a",
    "speed": "#1b2430",
    "observations": "#5b4a8b",
    "burst": "#8c1d40",
    "grid": "#c9d1d9",
}

#: Text of the cautions box (our own wording).
CAUTIONS: tuple[str, ...] = (
    "A balloon and its payload can endanger aircraft in flight and people and property on the "
    "ground.",
    "Rules for free balloons differ from country to country. The local aviation authority decides "
    "whether, where and when a flight may take place; file every notice it asks for.",
    "This report is not legal advice. It does not say that a flight is allowed or that it is safe.",
    "The forecast is an estimate with uncertainty: winds, ascent rate and burst altitude vary, and "
    "the balloon can land outside every zone shown here. Keep the recovery plan flexible.",
)

_COMPASS = (
    "N", "NNE", "NE", "ENE", "E", "ESE", "SE", "SSE",
    "S", "SSW", "SW", "WSW", "W", "WNW", "NW", "NNW",
)
_DASH = "\u2014"
_NNBSP = "\u202f"  # narrow no-break space: thousands separator and number-unit gap


# ----------------------------------------------------------------------------------- formatting
def _e(value: Any) -> str:
    """HTML-escaped text of a value."""
    return html.escape(str(value), quote=True)


def _finite(x: Any) -> bool:
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def fmt_number(x: Any, decimals: int = 0, unit: str = "") -> str:
    """A number with ``decimals`` digits, thousands grouped by a narrow space; a dash if missing.

    Parameters
    ----------
    x : float or None
        The value.
    decimals : int
        Digits after the point.
    unit : str
        Appended after a narrow no-break space.

    Returns
    -------
    str
        E.g. ``fmt_number(31204.4, 0, "m") == "31 204 m"`` (narrow spaces).
    """
    if not _finite(x):
        return _DASH
    text = f"{float(x):,.{decimals}f}".replace(",", _NNBSP)
    if text.startswith("-") and float(text.replace(_NNBSP, "")) == 0.0:
        text = text[1:]
    return f"{text}{_NNBSP}{unit}" if unit else text


def fmt_percent(p: Any) -> str:
    """A probability as a percentage with one decimal (``0.0321 -> "3.2 %"``)."""
    if not _finite(p):
        return _DASH
    return f"{100.0 * float(p):.1f}{_NNBSP}%"


def fmt_degrees(x: Any) -> str:
    """An angle in whole degrees, ``"75°"``."""
    return f"{float(x):.0f}°" if _finite(x) else _DASH


def compass_point(bearing_deg: float) -> str:
    """The nearest of the 16 compass points of a bearing in degrees (``67.5 -> "ENE"``)."""
    return _COMPASS[int(math.floor((float(bearing_deg) % 360.0) / 22.5 + 0.5)) % 16]


def fmt_duration(seconds: Any) -> str:
    """A duration as ``"2 h 31 min"`` (rounded to the minute)."""
    if not _finite(seconds):
        return _DASH
    minutes = int(round(float(seconds) / 60.0))
    sign = "-" if minutes < 0 else ""
    h, m = divmod(abs(minutes), 60)
    return f"{sign}{h}{_NNBSP}h {m:02d}{_NNBSP}min" if h else f"{sign}{m}{_NNBSP}min"


@functools.lru_cache(maxsize=1)
def _timezone_finder() -> Any:
    from timezonefinder import TimezoneFinder

    return TimezoneFinder()


def local_zone(time_zone: str | None, lat: float, lon: float) -> ZoneInfo | None:
    """The IANA zone for local times: the plan's ``time_zone``, else looked up at (lat, lon).

    Returns None (with a :class:`DataQualityWarning`) when neither gives a known zone; the report
    then shows UTC only.
    """
    name = (time_zone or "").strip()
    if not name:
        try:
            name = _timezone_finder().timezone_at(lng=float(lon), lat=float(lat)) or ""
        except Exception:  # noqa: BLE001 - a failed lookup only costs the local times
            name = ""
    if not name:
        warnings.warn(
            f"report: no time zone found at {lat:.4f}, {lon:.4f}; local times are not shown "
            "(set [launch] time_zone in the plan)",
            DataQualityWarning,
            stacklevel=2,
        )
        return None
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        warnings.warn(
            f"report: unknown time zone {name!r}; local times are not shown "
            "(fix [launch] time_zone, e.g. Europe/Zurich)",
            DataQualityWarning,
            stacklevel=2,
        )
        return None


def _to_minute(seconds: float) -> datetime:
    return datetime.fromtimestamp(round(float(seconds) / 60.0) * 60.0, tz=UTC)


def fmt_time(seconds: Any, zone: ZoneInfo | None = None, ref_s: float | None = None) -> str:
    """A moment rounded to the minute, in UTC or in ``zone``.

    The date is shown when there is no reference time ``ref_s`` or when the day differs from the
    reference's day in the same zone: ``"14:02 UTC"``, ``"2027-05-15 00:12 UTC"``, ``"16:02 CEST"``.
    """
    if not _finite(seconds):
        return _DASH
    moment = _to_minute(float(seconds))
    label = "UTC"
    if zone is not None:
        moment = moment.astimezone(zone)
        label = moment.tzname() or str(zone)
    same_day = False
    if ref_s is not None and _finite(ref_s):
        ref = _to_minute(float(ref_s))
        ref = ref.astimezone(zone) if zone is not None else ref
        same_day = ref.date() == moment.date()
    text = moment.strftime("%H:%M") if same_day else moment.strftime("%Y-%m-%d %H:%M")
    return f"{text} {label}"


def fmt_time_range(start_s: Any, end_s: Any, zone: ZoneInfo | None = None,
                   ref_s: float | None = None) -> str:
    """Two moments as ``"14:36\u201315:03 UTC"`` (zone label once when both share it)."""
    a, b = fmt_time(start_s, zone, ref_s), fmt_time(end_s, zone, ref_s)
    if _DASH in (a, b):
        return f"{a} \u2013 {b}"
    (a_time, a_label), (b_time, b_label) = a.rsplit(" ", 1), b.rsplit(" ", 1)
    if a_label == b_label:
        return f"{a_time}\u2013{b_time} {a_label}"
    return f"{a} \u2013 {b}"


def _utc_offset(seconds: float, zone: ZoneInfo) -> str:
    off = _to_minute(seconds).astimezone(zone).utcoffset()
    total = int(off.total_seconds()) // 60 if off is not None else 0
    sign = "+" if total >= 0 else "-"
    h, m = divmod(abs(total), 60)
    return f"UTC{sign}{h:02d}:{m:02d}"


def _parse_time(text: Any) -> float | None:
    if not isinstance(text, str) or not text:
        return None
    from balloonpath.timeutil import parse_iso

    try:
        return parse_iso(text)
    except ValueError:
        return None


def fmt_latlon(lat: Any, lon: Any, decimals: int = 5) -> str:
    """Signed decimal degrees ``"47.12345, 8.61234"`` (latitude first), ready to type into a GPS."""
    if not (_finite(lat) and _finite(lon)):
        return _DASH
    return f"{float(lat):.{decimals}f}, {float(lon):.{decimals}f}"


# ------------------------------------------------------------------------------------ statistics
@dataclass(frozen=True)
class StatRow:
    """One row of the ensemble-statistics table (values in the row's display unit)."""

    label: str
    unit: str
    decimals: int
    nominal: float
    mean: float
    sd: float
    p05: float
    p50: float
    p95: float
    count: int


def _members_for_statistics(n: int) -> np.ndarray:
    # As balloonpath.zones: the random members 1 .. N-1; member 0 alone when it is the only one.
    return np.arange(1, n) if n > 1 else np.arange(n)


def ensemble_statistics(result: ForecastResult) -> list[StatRow]:
    """Nominal value, mean, standard deviation and 5/50/95 % quantiles of the main quantities.

    Parameters
    ----------
    result : ForecastResult
        The forecast.

    Returns
    -------
    list of StatRow
        Landing distance from launch (km), landing time after the planned launch (min), burst
        altitude (m), time to burst (min), highest altitude (m), ascent rate and sea-level descent
        rate (m/s); rows without any finite member value are left out.

    Notes
    -----
    Statistics use members 1 .. N-1 (the random draws, as :func:`balloonpath.zones.compute_zones`);
    non-finite values (members without a burst in a float or cut-down flight) are left out and
    ``count`` says how many remain. Quantiles are ``numpy.quantile`` with linear interpolation; the
    standard deviation uses the divisor N - 1.
    """
    n = result.n_members
    rows = _members_for_statistics(n)
    t0 = float(result.launch_time_s)
    land, burst = result.landing, result.burst
    dist_m, _ = inverse(
        np.full(n, result.launch_lat), np.full(n, result.launch_lon),
        np.asarray(land.lat, float), np.asarray(land.lon, float),
    )
    params = result.member_params
    candidates: list[tuple[str, str, int, np.ndarray]] = [
        ("Landing distance from launch", "km", 1, np.asarray(dist_m, float) / 1000.0),
        ("Landing, after planned launch", "min", 0, (np.asarray(land.time_s, float) - t0) / 60.0),
        ("Burst altitude", "m", 0, np.asarray(burst.alt_m, float)),
        ("Time to burst", "min", 0, (np.asarray(burst.time_s, float) - t0) / 60.0),
    ]
    for key, label, unit, decimals, scale in (
        ("max_altitude_m", "Highest altitude", "m", 0, 1.0),
        ("ascent_rate_m_s", "Ascent rate", "m/s", 2, 1.0),
        ("descent_sea_level_m_s", "Descent rate at sea level", "m/s", 2, 1.0),
        ("launch_delay_s", "Launch delay", "min", 1, 1.0 / 60.0),
    ):
        if key in params:
            values = np.asarray(params[key], float).ravel()
            if values.size == n:
                candidates.append((label, unit, decimals, values * scale))
    out: list[StatRow] = []
    for label, unit, decimals, values in candidates:
        sample = values[rows]
        sample = sample[np.isfinite(sample)]
        if sample.size == 0:
            continue
        if label == "Launch delay" and not np.any(sample != 0.0):
            continue
        q05, q50, q95 = np.quantile(sample, [0.05, 0.5, 0.95])
        sd = float(np.std(sample, ddof=1)) if sample.size > 1 else 0.0
        out.append(StatRow(label, unit, decimals, float(values[0]), float(np.mean(sample)), sd,
                           float(q05), float(q50), float(q95), int(sample.size)))
    return out


def speed_with_sd(u: np.ndarray, v: np.ndarray, u_sd: np.ndarray,
                  v_sd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Wind speed of the mean wind and its standard deviation to first order.

    Parameters
    ----------
    u, v : array_like
        Mean east and north wind, m/s (any shape, broadcast).
    u_sd, v_sd : array_like
        Their standard deviations, m/s.

    Returns
    -------
    speed, speed_sd : ndarray
        s = sqrt(u^2 + v^2) and its standard deviation, m/s.

    Notes
    -----
    First-order propagation of independent errors of u and v (the delta method; JCGM 100:2008,
    "GUM", eq. 10, from memory): sd_s^2 = (u sd_u / s)^2 + (v sd_v / s)^2. Where s < 0.1 m/s the
    derivative is undefined and the root mean square sqrt((sd_u^2 + sd_v^2) / 2) is used instead.
    This is a display aid: near calm the speed's distribution is skewed and the band is only
    indicative.
    """
    u, v, su, sv = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (u, v, u_sd, v_sd)))
    s = np.hypot(u, v)
    with np.errstate(divide="ignore", invalid="ignore"):
        linear = np.sqrt((u * su) ** 2 + (v * sv) ** 2) / s
    calm = np.sqrt(0.5 * (su**2 + sv**2))
    return s, np.where(s >= 0.1, linear, calm)


# ------------------------------------------------------------------------------------- figures
#: Which colour of ``balloonpath.plots.PALETTE`` each role of the wind figure takes, so that the
#: report's figure matches the map and the profile.
_PLOT_ROLES: dict[str, str] = {
    "u": "track", "v": "landing_ellipse", "speed": "landing", "observations": "launch",
    "burst": "burst",
}


def _palette() -> dict[str, str]:
    """The wind figure's colours: the plot module's palette where it exists, else our own."""
    colours = dict(REPORT_COLOURS)
    try:
        from balloonpath.plots import PALETTE
    except ImportError:
        return colours
    for role, key in _PLOT_ROLES.items():
        if isinstance(PALETTE.get(key), str):
            colours[role] = PALETTE[key]
    return colours


def png_bytes(fig: Any, dpi: int = 150) -> bytes:
    """PNG of a matplotlib Figure without software or time metadata (same figure, same bytes)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def wind_profile_png(profile: Mapping[str, np.ndarray], burst_alt_m: float | None = None,
                     dpi: int = 150) -> bytes | None:
    """Draw the wind above the launch site: u, v and speed with their ±2σ bands.

    Parameters
    ----------
    profile : mapping
        ``ForecastResult.wind_profile``: ``alt_m, u, v, u_std, v_std`` and optionally
        ``obs_alt_m`` (altitudes of the observations used).
    burst_alt_m : float, optional
        Nominal burst altitude, drawn as a reference line.
    dpi : int
        Resolution of the PNG.

    Returns
    -------
    bytes or None
        The PNG, or None when the profile is empty.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if not profile or "alt_m" not in profile or np.asarray(profile["alt_m"]).size == 0:
        return None
    colours = _palette()
    alt_km = np.asarray(profile["alt_m"], float) / 1000.0
    u = np.asarray(profile.get("u", np.full_like(alt_km, np.nan)), float)
    v = np.asarray(profile.get("v", np.full_like(alt_km, np.nan)), float)
    su = np.asarray(profile.get("u_std", np.zeros_like(alt_km)), float)
    sv = np.asarray(profile.get("v_std", np.zeros_like(alt_km)), float)
    speed, s_sd = speed_with_sd(u, v, su, sv)
    obs = np.asarray(profile.get("obs_alt_m", np.zeros(0)), float).ravel()
    obs = obs[np.isfinite(obs)] / 1000.0

    fig = Figure(figsize=(7.4, 4.4), dpi=dpi)
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(1, 2, width_ratios=(5.2, 1.0), wspace=0.06,
                            left=0.085, right=0.985, top=0.9, bottom=0.13)
    ax = fig.add_subplot(grid[0, 0])
    side = fig.add_subplot(grid[0, 1], sharey=ax)
    for mean, sd, role, label, style, width in (
        (u, su, "u", "east (u)", "-", 1.6),
        (v, sv, "v", "north (v)", "--", 1.6),
        (speed, s_sd, "speed", "speed", "-", 2.2),
    ):
        lo, hi = mean - 2.0 * sd, mean + 2.0 * sd
        if role == "speed":
            # Outlined rather than filled, so that it does not muddy the u band it overlaps.
            ax.plot(np.maximum(lo, 0.0), alt_km, ":", color=colours[role], linewidth=0.9)
            ax.plot(hi, alt_km, ":", color=colours[role], linewidth=0.9)
        else:
            ax.fill_betweenx(alt_km, lo, hi, color=colours[role], alpha=0.18, linewidth=0)
        ax.plot(mean, alt_km, style, color=colours[role], linewidth=width, label=label)
    ax.axvline(0.0, color="#4f5b66", linewidth=0.8)
    if burst_alt_m is not None and _finite(burst_alt_m):
        top_km = float(burst_alt_m) / 1000.0
        ax.axhline(top_km, color=colours["burst"], linewidth=1.0, linestyle=":")
        ax.annotate("burst (nominal)", (0.99, top_km), xycoords=("axes fraction", "data"),
                    ha="right", va="bottom", fontsize=8, color=REPORT_COLOURS["speed"])
    ax.set_xlabel("wind, m/s (bands: \u00b12\u03c3; speed band dotted)")
    ax.set_ylabel("altitude above sea level, km")
    ax.grid(True, color=colours["grid"], linewidth=0.6)
    ax.set_axisbelow(True)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, 1.12), ncol=3, frameon=False, fontsize=9)
    lo_km, hi_km = float(np.nanmin(alt_km)), float(np.nanmax(alt_km))
    if burst_alt_m is not None and _finite(burst_alt_m):
        hi_km = max(hi_km, float(burst_alt_m) / 1000.0)
    ax.set_ylim(lo_km, hi_km + 0.02 * max(hi_km - lo_km, 1.0))

    if obs.size:
        edges = np.arange(math.floor(lo_km), math.ceil(max(hi_km, float(obs.max()))) + 1.0, 1.0)
        counts, _ = np.histogram(obs, bins=edges)
        side.barh(edges[:-1], counts, height=0.9, align="edge", color=colours["observations"],
                  alpha=0.85)
        side.set_xlabel("observations\nper km", fontsize=8)
        side.set_xlim(0, max(1, int(counts.max())) * 1.1)
    else:
        side.text(0.5, 0.5, "no\nobservations", transform=side.transAxes, ha="center",
                  va="center", fontsize=8, color="#4f5b66")
        side.set_xticks([])
    side.tick_params(labelleft=False, labelsize=8)
    side.grid(True, axis="y", color=colours["grid"], linewidth=0.6)
    return png_bytes(fig, dpi)


def _data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _figure(png: bytes | None, alt: str, caption: str, missing: str, css: str = "") -> str:
    open_tag = f'<figure class="{css}">' if css else "<figure>"
    if png is None:
        return (f'{open_tag}<div class="missing">{_e(missing)}</div>'
                f"<figcaption>{_e(caption)}</figcaption></figure>")
    return (f'{open_tag}<img src="{_data_uri(png)}" alt="{_e(alt)}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _read_png(path: Path) -> bytes | None:
    try:
        data = path.read_bytes()
    except OSError:
        return None
    return data if data.startswith(b"\x89PNG\r\n\x1a\n") else None


# ------------------------------------------------------------------------------------ checklist
#: Checklist statuses (``balloonpath.checklist``): CSS class, symbol and word. Each status has its
#: own symbol and word, so the colour is never the only cue.
_STATUS_LOOK: dict[str, tuple[str, str, str]] = {
    "pass": ("ok", "\u2713", "pass"),
    "fail": ("attention", "\u2717", "fail"),
    "warn": ("attention", "\u26a0", "check"),
    "info": ("info", "\u2139", "note"),
}


def _status_label(status: str, blocking: bool = False) -> str:
    css, symbol, word = _STATUS_LOOK.get(status, ("info", "?", status))
    if blocking and status == "fail":
        word += " (blocking)"
    return f'<span class="status {css}">{symbol} {_e(word)}</span>'


def checklist_section(folder: Path, plan_name: str, launch_time: str | None = None) -> str:
    """HTML of the checklist status from ``checklist.json`` in the folder, or how to run it.

    ``checklist.json`` is the output of ``balloonpath checklist ... --out DIR/checklist.md``
    (:func:`balloonpath.checklist.checklist_json`). When its launch time differs from
    ``launch_time`` (ISO 8601) it belongs to another forecast and is flagged as out of date.
    """
    path = folder / "checklist.json"
    # The folder is named DIR, not by its path, so that the page does not depend on where the
    # forecast was written (the same forecast in another folder gives the same bytes).
    how = (f"<p>To add it: <code>balloonpath checklist {_e(plan_name or 'PLAN.toml')} --forecast "
           "DIR --out DIR/checklist.md</code> (DIR: this forecast folder); the next forecast "
           "written into the folder shows its status here.</p>")
    if not path.exists():
        return '<p><span class="status info">\u2139 not run</span> for this forecast.</p>' + how
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
        if not isinstance(doc, Mapping):
            raise ValueError("not a JSON object")
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        warnings.warn(f"report: {path}: cannot be read ({exc}); the checklist is shown as not run",
                      DataQualityWarning, stacklevel=2)
        return '<p><span class="status info">\u2139 unreadable</span> checklist.json.</p>' + how
    items = [i for i in doc.get("items") or [] if isinstance(i, Mapping)]
    counts = doc.get("counts") or {}
    if not counts:
        for i in items:
            counts[str(i.get("status"))] = counts.get(str(i.get("status")), 0) + 1
    profile = doc.get("profile") or {}
    parts = []
    if launch_time and doc.get("launch_time") and doc.get("launch_time") != launch_time:
        parts.append('<p><span class="status attention">\u26a0 out of date</span> checklist.json '
                     f"was made for a launch at {_e(doc.get('launch_time'))}, not "
                     f"{_e(launch_time)}; run the checklist again.</p>")
    head = []
    if isinstance(profile, Mapping) and profile.get("title"):
        head.append(f"Rule profile: {_e(profile.get('title'))}"
                    + (f" ({_e(profile.get('name'))})" if profile.get("name") else ""))
    head.append(" · ".join(f"{_status_label(k)} {_e(v)}" for k, v in counts.items()))
    parts.append(f"<p>{'<br>'.join(head)}</p>")
    if doc.get("verdict"):
        parts.append(f"<p><strong>{_e(doc['verdict'])}</strong></p>")
    flagged = [i for i in items if i.get("status") in ("fail", "warn")]
    flagged.sort(key=lambda i: (i.get("status") != "fail", not i.get("blocking")))
    if flagged:
        rows = "".join(
            f"<tr><td>{_status_label(str(i.get('status')), bool(i.get('blocking')))}</td>"
            f"<td>{_e(i.get('section', ''))}</td><td>{_e(i.get('title', ''))}</td>"
            f"<td>{_e(i.get('text', ''))}</td></tr>"
            for i in flagged
        )
        parts.append("<table><caption>Items that fail or need checking (the full list is in "
                     "checklist.md).</caption><thead><tr><th>status</th><th>section</th>"
                     f"<th>item</th><th>detail</th></tr></thead><tbody>{rows}</tbody></table>")
    parts.append("<p>The checklist compares the plan, as entered, with a rule profile. It is not a "
                 "clearance: the aviation authority decides.</p>")
    return "".join(parts)


# ---------------------------------------------------------------------------------- plan tables
def _kv_table(rows: Sequence[tuple[str, str]], caption: str = "") -> str:
    body = "".join(f"<tr><th scope=\"row\">{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows)
    cap = f"<caption>{_e(caption)}</caption>" if caption else ""
    return f'<table class="kv">{cap}<tbody>{body}</tbody></table>'


def plan_rows(plan: Any, zone: ZoneInfo | None
              ) -> tuple[list[tuple[str, str]], list[tuple[str, str]]]:
    """Rows of the plan summary: (launch rows, flight-train and ensemble rows)."""
    la = plan.launch
    t = la.time.timestamp()
    launch = [
        ("Site", la.site_name or "(no name given)"),
        ("Position", fmt_latlon(la.latitude, la.longitude, 5)),
        ("Ground elevation", fmt_number(la.elevation_m, 0, "m")),
        ("Launch time (UTC)", fmt_time(t)),
    ]
    if zone is not None:
        launch.append(("Launch time (local)", f"{fmt_time(t, zone)} ({_utc_offset(t, zone)}, "
                                              f"{zone.key})"))
    launch.append(("Plan file", Path(str(plan.path)).name))
    flight: list[tuple[str, str]] = []
    if plan.rates is not None:
        r = plan.rates
        flight += [
            ("Mode", "rates (ascent, burst and descent given)"),
            ("Ascent rate", fmt_number(r.ascent_m_s, 2, "m/s")),
            ("Burst altitude", fmt_number(r.burst_altitude_m, 0, "m")),
            ("Descent rate at sea level", fmt_number(r.descent_sea_level_m_s, 2, "m/s")),
        ]
    else:
        flight.append(("Mode", "physics (balloon, gas, payload and parachute)"))
    if plan.balloon is not None:
        b = plan.balloon
        flight += [
            ("Envelope mass", fmt_number(b.envelope_mass_kg * 1000.0, 0, "g")),
            ("Burst diameter", fmt_number(b.burst_diameter_m, 2, "m")),
            ("Gas", f"{b.gas}, purity {fmt_percent(b.gas_purity)}"),
        ]
        if b.neck_lift_kg is not None:
            flight.append(("Neck lift", fmt_number(b.neck_lift_kg * 1000.0, 0, "g")))
        if b.target_ascent_m_s is not None:
            flight.append(("Target ascent rate", fmt_number(b.target_ascent_m_s, 2, "m/s")))
    if plan.payload is not None:
        p = plan.payload
        flight.append(("Payload (below the neck)", fmt_number(p.mass_kg * 1000.0, 0, "g")))
        for pkg in p.package:
            flight.append((f"Package: {pkg.name}", fmt_number(pkg.mass_kg * 1000.0, 0, "g")))
    if plan.parachute is not None:
        c = plan.parachute
        flight.append(("Parachute", f"{fmt_number(c.diameter_m, 2, 'm')} diameter, drag "
                                    f"coefficient {c.drag_coefficient:g}"))
    if plan.float is not None:
        flight.append(("Float", f"{fmt_number(plan.float.altitude_m, 0, 'm')} for "
                                f"{fmt_number(plan.float.duration_min, 0, 'min')}"))
    if plan.cutdown is not None:
        cd = plan.cutdown
        parts = []
        if cd.altitude_m is not None:
            parts.append(f"at {fmt_number(cd.altitude_m, 0, 'm')}")
        if cd.after_min is not None:
            parts.append(f"after {fmt_number(cd.after_min, 0, 'min')}")
        flight.append(("Cut-down", " or ".join(parts) or "planned"))
    e = plan.ensemble
    flight += [
        ("Ensemble spread (1σ)", f"ascent {fmt_percent(e.ascent_sigma_fraction)}, burst "
                                 f"{fmt_percent(e.burst_sigma_fraction)}, descent "
                                 f"{fmt_percent(e.descent_sigma_fraction)}"),
        ("Wind uncertainty", "drawn per member" if e.wind_uncertainty else "off (mean wind)"),
        ("Time step", fmt_number(e.time_step_s, 1, "s")),
    ]
    return launch, flight


# ------------------------------------------------------------------------------------ key cards
def _card(label: str, big: str, *subs: str, wide: bool = False) -> str:
    sub = "".join(f'<span class="sub">{_e(s)}</span>' for s in subs if s)
    css = "card wide" if wide else "card"
    return (f'<div class="{css}"><dt>{_e(label)}</dt><dd><span class="big">{_e(big)}</span>{sub}'
            "</dd></div>")


def _ellipse_of(summary: Mapping[str, Any], p: float,
                key: str = "ellipses") -> Mapping[str, Any] | None:
    for e in (summary.get("ensemble") or {}).get(key) or []:
        if _finite(e.get("probability")) and abs(float(e["probability"]) - p) < 1e-6:
            return e
    return None


def key_cards(summary: Mapping[str, Any], zone: ZoneInfo | None) -> str:
    """HTML of the key-number cards, from the summary (the same numbers as summary.json)."""
    launch = summary.get("launch") or {}
    land = summary.get("landing") or {}
    burst = summary.get("burst") or {}
    ens = summary.get("ensemble") or {}
    probs = summary.get("probabilities") or {}
    t0 = _parse_time(launch.get("time"))
    t_land = _parse_time(land.get("time"))
    t_burst = _parse_time(burst.get("time"))
    cards = []
    cards.append(_card(
        "Landing point (nominal)", fmt_latlon(land.get("latitude"), land.get("longitude")),
        f"ground {fmt_number(land.get('elevation_m'), 0, 'm')}; latitude, longitude in degrees "
        "(WGS84)", wide=True,
    ))
    cards.append(_card(
        "Landing time", fmt_time(t_land, None, t0),
        fmt_time(t_land, zone, t0) if zone is not None else "",
    ))
    bearing = land.get("bearing_deg")
    cards.append(_card(
        "Distance from launch", fmt_number(_km(land.get("distance_m")), 1, "km"),
        f"bearing {fmt_degrees(bearing)} ({compass_point(bearing)}) from the launch site"
        if _finite(bearing)
        else "",
    ))
    if t_burst is not None:
        cards.append(_card(
            "Burst", fmt_number(burst.get("altitude_m"), 0, "m"),
            f"at {fmt_time(t_burst, None, t0)}"
            + (f" / {fmt_time(t_burst, zone, t0)}" if zone is not None else ""),
            f"{fmt_duration(summary.get('time_to_burst_s'))} after launch",
        ))
    else:
        cards.append(_card("Highest altitude", fmt_number(summary.get("max_altitude_m"), 0, "m"),
                           "no burst in the nominal flight (float or cut-down)"))
    cards.append(_card("Flight time", fmt_duration(summary.get("flight_time_s")),
                       f"highest {fmt_number(summary.get('max_altitude_m'), 0, 'm')}"))
    e90 = _ellipse_of(summary, 0.9)
    if e90 is not None:
        cards.append(_card(
            "90 % landing ellipse",
            f"{fmt_number(_km(e90.get('semi_major_m')), 1)} × "
            f"{fmt_number(_km(e90.get('semi_minor_m')), 1, 'km')}",
            f"semi-axes; major axis toward {fmt_degrees(e90.get('major_axis_azimuth_deg'))}",
        ))
    cards.append(_card(
        "90 % landing region", fmt_number(ens.get("region_90_area_km2"), 1, "km²"),
        f"{ens.get('members', _DASH)} members, seed {ens.get('seed', _DASH)}",
    ))
    p05, p95 = _parse_time(ens.get("landing_time_p05")), _parse_time(ens.get("landing_time_p95"))
    if p05 is not None and p95 is not None:
        cards.append(_card(
            "Landing window (5–95 %)", *_split_label(fmt_time_range(p05, p95, None, t0),
                                                     fmt_time_range(p05, p95, zone, t0)
                                                     if zone is not None else ""),
        ))
    water = probs.get("water")
    cards.append(_card("Chance of landing on water",
                       fmt_percent(water) if _finite(water) else "not computed",
                       "" if _finite(water) else "set [zones] water = true"))
    avoid = {k: v for k, v in (probs.get("avoid") or {}).items()}
    if avoid:
        values = [float(p) for p in avoid.values() if _finite(p)]
        big = fmt_percent(max(values)) if values else _DASH
        cards.append(_card("Chance of landing in avoid areas",
                           big + (" (highest)" if len(avoid) > 1 else ""),
                           *[f"{name}: {fmt_percent(p)}" for name, p in avoid.items()]))
    else:
        cards.append(_card("Chance of landing in avoid areas", "no areas given",
                           "set [zones] avoid to a GeoJSON file"))
    speed = land.get("vertical_speed_m_s")
    energy = land.get("kinetic_energy_j")
    cards.append(_card("Touchdown speed", fmt_number(speed, 1, "m/s"),
                       f"energy {fmt_number(energy, 0, 'J')}" if _finite(energy) else ""))
    return f'<dl class="cards">{"".join(cards)}</dl>'


def _split_label(utc_range: str, local_range: str) -> tuple[str, str]:
    """``("14:36–15:03", "UTC · 16:36–17:03 CEST")``: the big number without its zone label."""
    big, _, label = utc_range.rpartition(" ")
    if not big or "\u2013" not in big or " " in big:
        return utc_range, local_range
    return big, f"{label} · {local_range}" if local_range else label


def _km(x: Any) -> float | None:
    return float(x) / 1000.0 if _finite(x) else None


# ------------------------------------------------------------------------------------- sections
def _statistics_table(stats: Sequence[StatRow]) -> str:
    head = ("<thead><tr><th>quantity</th><th class=\"num\">nominal</th><th class=\"num\">mean</th>"
            "<th class=\"num\">sd</th><th class=\"num\">5 %</th><th class=\"num\">median</th>"
            "<th class=\"num\">95 %</th></tr></thead>")
    rows = []
    for r in stats:
        cells = "".join(f'<td class="num">{_e(fmt_number(x, r.decimals))}</td>'
                        for x in (r.nominal, r.mean, r.sd, r.p05, r.p50, r.p95))
        rows.append(f"<tr><th scope=\"row\">{_e(r.label)}, {_e(r.unit)}</th>{cells}</tr>")
    counts = sorted({r.count for r in stats})
    n_text = " / ".join(str(c) for c in counts)
    cap = (f"<caption>Over {n_text} ensemble members (the nominal run, member 0, is shown apart "
           "and left out of the statistics).</caption>")
    return f"<table>{cap}{head}<tbody>{''.join(rows)}</tbody></table>"


def _ellipse_table(summary: Mapping[str, Any]) -> str:
    ens = summary.get("ensemble") or {}
    rows = []
    for what, key in (("landing", "ellipses"), ("burst", "burst_ellipses")):
        for e in ens.get(key) or []:
            rows.append(
                f"<tr><td>{what}</td><td class=\"num\">{_e(fmt_percent(e.get('probability')))}</td>"
                f"<td class=\"num\">{_e(fmt_number(_km(e.get('semi_major_m')), 2, 'km'))}</td>"
                f"<td class=\"num\">{_e(fmt_number(_km(e.get('semi_minor_m')), 2, 'km'))}</td>"
                f"<td class=\"num\">{_e(fmt_degrees(e.get('major_axis_azimuth_deg')))}</td>"
                "</tr>"
            )
    if not rows:
        return "<p>No ellipses (a single member).</p>"
    mean = ens.get("landing_mean") or {}
    cap = ("<caption>Probability ellipses of the fitted bivariate normal; mean landing point "
           f"{_e(fmt_latlon(mean.get('latitude'), mean.get('longitude')))}.</caption>")
    head = ("<thead><tr><th>points</th><th class=\"num\">probability</th><th class=\"num\">"
            "semi-major axis</th><th class=\"num\">semi-minor axis</th><th class=\"num\">"
            "major axis toward</th></tr></thead>")
    return f"<table>{cap}{head}<tbody>{''.join(rows)}</tbody></table>"


def _flatten(prefix: str, obj: Any, out: list[tuple[str, str]]) -> None:
    if isinstance(obj, Mapping):
        for k, v in obj.items():
            _flatten(f"{prefix}.{k}" if prefix else str(k), v, out)
    elif isinstance(obj, list | tuple) and obj and all(isinstance(v, Mapping) for v in obj):
        for i, v in enumerate(obj):
            _flatten(f"{prefix}[{i}]", v, out)
    elif isinstance(obj, list | tuple | np.ndarray):
        out.append((prefix, ", ".join(_scalar(v) for v in list(obj)[:12])
                    + (" …" if len(obj) > 12 else "")))
    else:
        out.append((prefix, _scalar(obj)))


def _scalar(v: Any) -> str:
    if isinstance(v, bool) or v is None:
        return str(v).lower() if isinstance(v, bool) else _DASH
    if isinstance(v, int | np.integer):
        return str(int(v))
    if isinstance(v, float | np.floating):
        return f"{float(v):.4g}" if math.isfinite(float(v)) else _DASH
    return str(v)


_WIND_INFO_LABELS = {
    "aircraft_qc": "Aircraft-report quality control",
    "forecast_lead_h_assumed": "Forecast lead time assumed, h",
}


def _compact(value: Any, depth: int = 0) -> str:
    """One line for a nested value: zero and empty entries left out, at most 12 entries a level."""
    if isinstance(value, Mapping):
        parts = [f"{str(k).replace('_', ' ')} {_compact(v, depth + 1)}" for k, v in value.items()
                 if not (v in (0, None, "") or (isinstance(v, list | tuple | Mapping) and not v))]
        text = "; ".join(parts[:12]) + (" …" if len(parts) > 12 else "")
        return f"({text})" if depth else (text or "nothing to report")
    if isinstance(value, list | tuple):
        return ", ".join(_compact(v, depth + 1) for v in list(value)[:12]) + (
            " …" if len(value) > 12 else "")
    return _scalar(value)


def method_rows(summary: Mapping[str, Any], result: ForecastResult) -> list[tuple[str, str]]:
    """Rows of "How this forecast was made": sources, observations, GP, software, seed."""
    winds = summary.get("winds") or {}
    sources = winds.get("sources") or []
    rows = [
        ("Wind sources", "; ".join(str(s) for s in sources) if sources else "none recorded"),
        ("Wind observations fused", str(winds.get("observations", 0))),
    ]
    gp = winds.get("gp")
    if gp:
        flat: list[tuple[str, str]] = []
        _flatten("", gp, flat)
        rows += [(f"GP {k}", v) for k, v in flat[:30]]
    elif winds.get("observations"):
        rows.append(("GP hyperparameters", "not reported by the wind field"))
    else:
        rows.append(("GP correction", "none: no observations were fused, the background's own "
                                      "error model gives the uncertainty"))
    for key, value in winds.items():
        if key in ("sources", "observations", "gp"):
            continue
        rows.append((_WIND_INFO_LABELS.get(key, key.replace("_", " ")), _compact(value)))
    ens = summary.get("ensemble") or {}
    rows += [
        ("Members", f"{ens.get('members', result.n_members)} (member 0 is the nominal run: mean "
                    "wind, nominal parameters)"),
        ("Seed", str(summary.get("seed", result.seed))),
        ("Mode", str(summary.get("mode", result.mode))),
        ("Plan file", str(summary.get("plan", Path(result.plan_path).name))),
        ("Software", f"balloonpath {summary.get('balloonpath_version', __version__)}"),
    ]
    return rows


def _warnings_section(summary: Mapping[str, Any]) -> str:
    items = [str(w) for w in summary.get("warnings") or []]
    if not items:
        return "<p>No warnings were recorded.</p>"
    return '<ul class="warnings">' + "".join(f"<li>{_e(w)}</li>" for w in items) + "</ul>"


@functools.lru_cache(maxsize=1)
def _stylesheet() -> str:
    return resources.files("balloonpath").joinpath("data", "report.css").read_text(encoding="utf-8")


# --------------------------------------------------------------------------------------- report
def render_report(result: ForecastResult, zones: Any, summary: Mapping[str, Any], plan: Any,
                  folder: str | Path | None = None) -> str:
    """The report as HTML text.

    Parameters
    ----------
    result : ForecastResult
        The forecast (statistics, wind profile).
    zones : balloonpath.zones.Zones
        Its zones (only the summary's copy of their numbers is shown; kept for future use and for
        callers without a summary).
    summary : mapping
        The ``summary.json`` dict (docs/design.md, "Forecast folder"); the key numbers come from it,
        so the report and the summary always agree.
    plan : balloonpath.plan.Plan
        The flight plan (balloon, gas, payload, parachute or rates; time zone and site name).
    folder : str or Path, optional
        The forecast folder: ``map.png``, ``profile.png`` and ``checklist.json`` are read from it
        when present.

    Returns
    -------
    str
        A complete HTML5 document.
    """
    if summary is None or not summary:
        from balloonpath.forecast import summary_dict

        summary = summary_dict(result, zones)
    folder_path = Path(folder) if folder is not None else None
    zone = local_zone(getattr(plan.launch, "time_zone", ""), result.launch_lat, result.launch_lon)
    t0 = float(result.launch_time_s)
    site = (plan.launch.site_name
            or f"launch at {fmt_latlon(result.launch_lat, result.launch_lon, 3)}")
    when_utc = fmt_time(t0)
    when_local = (f" · {fmt_time(t0, zone)} local ({_utc_offset(t0, zone)})"
                  if zone is not None else "")
    plan_name = str(summary.get("plan") or Path(result.plan_path).name)

    map_png = _read_png(folder_path / "map.png") if folder_path is not None else None
    profile_png = _read_png(folder_path / "profile.png") if folder_path is not None else None
    burst_alt = float(result.burst.alt_m[0]) if np.isfinite(result.burst.alt_m[0]) else None
    wind_png = wind_profile_png(result.wind_profile, burst_alt)
    launch_rows, flight_rows = plan_rows(plan, zone)
    stats = ensemble_statistics(result)
    obs_alt = np.asarray(result.wind_profile.get("obs_alt_m", np.zeros(0)), float)
    n_obs_profile = int(np.count_nonzero(np.isfinite(obs_alt)))

    body: list[str] = []
    body.append(
        '<header class="top"><p class="kicker">Balloon flight forecast</p>'
        f"<h1>{_e(site)}</h1>"
        f'<p class="when">Launch {_e(when_utc)}{_e(when_local)}</p>'
        f'<p class="meta">{_e(plan_name)} · {_e(result.mode)} mode · '
        f"{_e(result.n_members)} members · seed {_e(result.seed)}</p></header>"
    )
    body.append('<p class="caution-line">\u26a0 An estimate with uncertainty, not a clearance: '
                "the local aviation authority decides whether the flight may take place. Read "
                '<a href="#h-caution">Before you fly</a>.</p>')
    body.append('<section aria-labelledby="h-key"><h2 id="h-key">Key numbers</h2>'
                f"{key_cards(summary, zone)}</section>")
    body.append(
        '<section aria-labelledby="h-map"><h2 id="h-map">Flight and landing zones</h2>'
        + _figure(map_png, "Map of the forecast flight and landing zones",
                  "Map: launch, nominal track, ensemble landings and landing zones.",
                  "map.png was not found in the forecast folder.", css="map")
        + "</section>"
    )
    body.append('<section class="caution" aria-labelledby="h-caution">'
                '<h2 id="h-caution">\u26a0 Before you fly</h2><ul>'
                + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul></section>")
    body.append(
        '<section aria-labelledby="h-profile"><h2 id="h-profile">Altitude</h2>'
        + _figure(profile_png, "Altitude of the flight against time",
                  "Profile: altitude against time for the nominal flight and ensemble members.",
                  "profile.png was not found in the forecast folder.")
        + "</section>"
    )
    obs_text = (f"{n_obs_profile} wind observations were fused; the side panel counts them per "
                "kilometre of altitude (they may lie away from the launch site)."
                if n_obs_profile else "No wind observations were fused: the bands are the "
                "background's own uncertainty.")
    body.append(
        '<section aria-labelledby="h-wind"><h2 id="h-wind">Wind above the launch site</h2>'
        + _figure(wind_png, "Wind profile above the launch site with two-sigma bands",
                  "Mean east (u), north (v) and speed of the wind over the launch site at launch "
                  "time; the bands span ±2 standard deviations of the wind model (shaded for u "
                  f"and v, dotted for the speed, which is taken to first order). {obs_text}",
                  "The forecast result carries no wind profile.")
        + "</section>"
    )
    body.append(
        '<section aria-labelledby="h-plan"><h2 id="h-plan">Plan</h2><div class="columns">'
        + _kv_table(launch_rows, "Launch") + _kv_table(flight_rows, "Flight train and ensemble")
        + "</div></section>"
    )
    body.append(
        '<section aria-labelledby="h-stats"><h2 id="h-stats">Ensemble statistics</h2>'
        + (_statistics_table(stats) if stats else "<p>No statistics.</p>")
        + "<h3>Zones</h3>" + _ellipse_table(summary) + "</section>"
    )
    body.append('<section aria-labelledby="h-check"><h2 id="h-check">Checklist</h2>'
                + checklist_section(folder_path or Path("."), plan_name,
                                    (summary.get("launch") or {}).get("time"))
                + "</section>")
    body.append('<section aria-labelledby="h-warn"><h2 id="h-warn">Warnings</h2>'
                + _warnings_section(summary) + "</section>")
    body.append('<section aria-labelledby="h-how"><h2 id="h-how">How this forecast was made</h2>'
                "<p>Winds from the sources below, corrected by Gaussian-process regression where "
                "observations exist; flight physics with the US Standard Atmosphere 1976; a Monte "
                "Carlo ensemble whose members each fly their own smooth wind realisation and "
                "perturbed ascent, burst and descent.</p>"
                + _kv_table(method_rows(summary, result)) + "</section>")
    body.append(
        f"<footer>balloonpath {_e(summary.get('balloonpath_version', __version__))} · "
        f"{_e(plan_name)} · seed {_e(result.seed)}. A self-contained page: it can be printed, "
        "mailed or opened without a network. Times are rounded to the minute.</footer>"
    )
    title = f"Flight forecast: {site}, {when_utc}"
    csp = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f'<meta name="generator" content="balloonpath {_e(__version__)}">\n'
        f"<title>{_e(title)}</title>\n<style>\n{_stylesheet()}</style>\n</head>\n<body>\n"
        '<main class="sheet">\n' + "\n".join(body) + "\n</main>\n</body>\n</html>\n"
    )


def write_report(result: ForecastResult, zones: Any, summary: Mapping[str, Any], plan: Any,
                 path: str | Path) -> Path:
    """Write ``report.html`` (atomically) and return its path.

    ``map.png``, ``profile.png`` and ``checklist.json`` are taken from the same folder when
    present; see :func:`render_report` for the parameters.
    """
    target = Path(path)
    text = render_report(result, zones, summary, plan, folder=target.parent)
    return atomic_write_text(target, text)
