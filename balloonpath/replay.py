"""Fly a prescribed altitude profile: horizontal drift only, the height given as a function of time.

A flown track (radiosonde, telemetry) says how high the balloon was at each moment. Flying a wind
field along that same time–height profile isolates the horizontal part of a forecast's error from the
vertical part (ascent rate, burst altitude, descent speed): with the sonde's own winds it must bring
the model back to where the sonde was (``docs/real-flight.md``); with a forecast's winds the miss is
the wind error alone. Verification reuses this to split a landing error into the two parts.

Numerical method
----------------
The same explicit midpoint rule (second-order Runge-Kutta) as :func:`balloonpath.ensemble.integrate`,
with the altitude not integrated but read from the profile:

    z(t)  = linear interpolation of the given (time, altitude) pairs,
    k1    = V(x, z(t), t),
    x_mid = x (+) dt/2 k1              (horizontal step at height z(t)),
    k2    = V(x_mid, z(t + dt/2), t + dt/2),
    x_new = x (+) dt k2                (horizontal step at height z(t + dt/2)),

where V = (u, v) is the wind and (+) is :func:`balloonpath.geodesy.step_east_north` (a step of
east/north metres on the WGS84 ellipsoid, scaled by R / (R + h)). Each interval between consecutive
profile times is cut into ceil(interval / dt_s) equal sub-steps, so every profile time is hit
exactly and the result is reported there.
"""

from __future__ import annotations

import math

import numpy as np

from balloonpath.errors import InputDataError, input_error
from balloonpath.geodesy import step_east_north
from balloonpath.winds.field import MemberWinds, WindField


def fly_prescribed_profile(
    time_s: np.ndarray,
    alt_m: np.ndarray,
    start_lat: np.ndarray | float,
    start_lon: np.ndarray | float,
    winds: WindField | MemberWinds,
    dt_s: float = 10.0,
    members: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Drift with the wind while the altitude follows a given time–height profile.

    Parameters
    ----------
    time_s : array_like, shape (T,)
        Profile times, POSIX seconds, strictly increasing (T >= 2).
    alt_m : array_like, shape (T,)
        Geometric altitude above sea level at those times, m (linearly interpolated in between).
    start_lat, start_lon : float or array_like, shape (N,)
        Position(s) at ``time_s[0]``, degrees. N starts fly the same profile together.
    winds : WindField or MemberWinds
        A wind field (``wind(lat, lon, alt_m, time_s)``), or, with ``members``, per-member wind
        realisations (``wind(members, lat, lon, alt_m, time_s)``).
    dt_s : float
        Longest integration step, s; intervals of the profile longer than this are subdivided.
    members : array_like of int, shape (N,), optional
        Member index of each start (only with a ``MemberWinds``).

    Returns
    -------
    lat, lon : numpy.ndarray
        Positions at every profile time, degrees: shape (T,) for a scalar start, (N, T) for N
        starts. Element 0 is the start.

    Raises
    ------
    InputDataError
        If the profile has fewer than two points, lengths differ, values are not finite, or times
        do not increase; if ``dt_s`` is not positive.
    CoverageError
        As raised by the wind field when the profile leaves its coverage.

    Notes
    -----
    Explicit midpoint rule as in :func:`balloonpath.ensemble.integrate` (see the module notes),
    second-order in the step. Altitude is not integrated: z(t) is the piecewise-linear profile, so
    the horizontal position depends only on the winds met along it. The wind field's own
    interpolation (for soundings: linear in altitude) is used between its levels.
    """
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(alt_m, dtype=float)
    where = "fly_prescribed_profile"
    if t.ndim != 1 or t.size < 2 or z.shape != t.shape:
        raise input_error(
            None, f"{where}: time_s/alt_m",
            f"need two 1-D arrays of one length >= 2, got shapes {t.shape} and {z.shape}",
            "give the track's times and altitudes", cls=InputDataError,
        )
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(z))):
        raise input_error(
            None, f"{where}: time_s/alt_m", "contain NaN or infinite values",
            "drop rows without a time or altitude", cls=InputDataError,
        )
    if np.any(np.diff(t) <= 0.0):
        k = int(np.flatnonzero(np.diff(t) <= 0.0)[0]) + 1
        raise input_error(
            None, f"{where}: time_s", f"does not increase at index {k}",
            "sort the track by time and drop repeated times", cls=InputDataError,
        )
    if not (dt_s > 0.0 and math.isfinite(dt_s)):
        raise input_error(
            None, f"{where}: dt_s", f"{dt_s} is not a positive number of seconds",
            "give a step such as 10", cls=InputDataError,
        )
    scalar = np.ndim(start_lat) == 0 and np.ndim(start_lon) == 0
    lat, lon = (np.atleast_1d(np.asarray(a, dtype=float)).copy()
                for a in np.broadcast_arrays(start_lat, start_lon))
    n = lat.size
    if members is None:
        def wind_at(la: np.ndarray, lo: np.ndarray, zz: float, tt: float) -> tuple[np.ndarray, ...]:
            u, v = winds.wind(la, lo, np.full(n, zz), np.full(n, tt))  # type: ignore[call-arg]
            return np.asarray(u, dtype=float), np.asarray(v, dtype=float)
    else:
        rows = np.broadcast_to(np.asarray(members, dtype=int), (n,))

        def wind_at(la: np.ndarray, lo: np.ndarray, zz: float, tt: float) -> tuple[np.ndarray, ...]:
            u, v = winds.wind(rows, la, lo, np.full(n, zz), np.full(n, tt))  # type: ignore[call-arg]
            return np.asarray(u, dtype=float), np.asarray(v, dtype=float)

    out_lat = np.empty((n, t.size))
    out_lon = np.empty((n, t.size))
    out_lat[:, 0], out_lon[:, 0] = lat, lon
    for k in range(t.size - 1):
        t0, t1, z0, z1 = t[k], t[k + 1], z[k], z[k + 1]
        n_sub = max(1, math.ceil((t1 - t0) / dt_s - 1e-9))
        h = (t1 - t0) / n_sub
        for j in range(n_sub):
            ta = t0 + j * h
            za = z0 + (z1 - z0) * (j / n_sub)
            zm = z0 + (z1 - z0) * ((j + 0.5) / n_sub)
            u1, v1 = wind_at(lat, lon, za, ta)
            la_m, lo_m = step_east_north(lat, lon, u1 * 0.5 * h, v1 * 0.5 * h, za)
            u2, v2 = wind_at(la_m, lo_m, zm, ta + 0.5 * h)
            lat, lon = step_east_north(lat, lon, u2 * h, v2 * h, zm)
        out_lat[:, k + 1], out_lon[:, k + 1] = lat, lon
    if scalar:
        return out_lat[0], out_lon[0]
    return out_lat, out_lon
