"""Profile of a fitted wind field at one point and time: table and PNG (mean, +-2 sd bands, hodograph)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from balloonpath.fileio import atomic_path
from balloonpath.geodesy import inverse
from balloonpath.winds.gp import GPWindField


@dataclass(frozen=True)
class WindProfile:
    """Mean u, v, speed and posterior sd by altitude at one point and time; nearby observation altitudes."""

    lat: float
    lon: float
    time_s: float
    alt_m: np.ndarray
    u: np.ndarray
    v: np.ndarray
    speed: np.ndarray
    sd: np.ndarray
    obs_alt_m: np.ndarray


def wind_profile(
    field: GPWindField,
    lat: float,
    lon: float,
    time_s: float,
    alt_max_m: float = 30_000.0,
    step_m: float = 250.0,
    obs_radius_km: float = 100.0,
    obs_window_h: float = 3.0,
) -> WindProfile:
    """Evaluate the field's mean and sd on a vertical line; list observations within a radius and window."""
    alt = np.arange(0.0, alt_max_m + 0.5 * step_m, step_m)
    ones = np.ones_like(alt)
    u, v = field.wind(lat * ones, lon * ones, alt, time_s * ones)
    sd, _ = field.std(lat * ones, lon * ones, alt, time_s * ones)
    pts = field.obs_points
    near = np.zeros(0)
    if pts.size:
        dist, _ = inverse(np.full(len(pts), lat), np.full(len(pts), lon), pts[:, 0], pts[:, 1])
        sel = (np.asarray(dist) <= obs_radius_km * 1e3) & (np.abs(pts[:, 3] - time_s) <= obs_window_h * 3600)
        near = np.sort(pts[sel, 2])
    return WindProfile(float(lat), float(lon), float(time_s), alt, np.asarray(u), np.asarray(v),
                       np.hypot(u, v), np.asarray(sd), near)


def plot_profile(profile: WindProfile, path: str | Path, title: str = "") -> Path:
    """Write a PNG (atomic): u, v and speed with +-2 sd bands by altitude, and a hodograph."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (ax, hodo) = plt.subplots(1, 2, figsize=(11, 6), gridspec_kw={"width_ratios": [3, 2]})
    km = profile.alt_m / 1e3
    for values, label, colour in ((profile.u, "u (east)", "tab:blue"), (profile.v, "v (north)", "tab:orange"),
                                  (profile.speed, "speed", "0.2")):
        ax.plot(values, km, color=colour, label=label)
        ax.fill_betweenx(km, values - 2 * profile.sd, values + 2 * profile.sd, color=colour, alpha=0.15)
    for z in profile.obs_alt_m:
        ax.axhline(z / 1e3, color="tab:green", lw=0.4, alpha=0.5)
    if profile.obs_alt_m.size:
        ax.plot([], [], color="tab:green", lw=0.8, label="observation altitudes (nearby)")
    ax.set_xlabel("wind, m/s (bands: +-2 sd)")
    ax.set_ylabel("altitude, km")
    ax.grid(alpha=0.3)
    ax.legend(loc="best", fontsize=8)
    points = hodo.scatter(profile.u, profile.v, c=km, s=6, cmap="viridis")
    hodo.plot(profile.u, profile.v, color="0.5", lw=0.6)
    hodo.axhline(0, color="0.6", lw=0.5)
    hodo.axvline(0, color="0.6", lw=0.5)
    hodo.set_aspect("equal", adjustable="datalim")
    hodo.set_xlabel("u, m/s")
    hodo.set_ylabel("v, m/s")
    hodo.set_title("hodograph")
    fig.colorbar(points, ax=hodo, label="altitude, km")
    fig.suptitle(title or f"wind profile at {profile.lat:.4f}, {profile.lon:.4f}")
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110, metadata={"Software": None})
    plt.close(fig)
    return Path(path)
