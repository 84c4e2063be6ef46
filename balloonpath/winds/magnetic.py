"""Magnetic declination from the World Magnetic Model 2025, and magnetic-to-true heading.

Aircraft report **magnetic** heading (Mode-S BDS 6,0; ADS-B airborne velocity subtypes 3/4), while the wind
triangle needs the **true** heading. True heading = magnetic heading + declination D (D positive east).

References
----------
[WMM2025] Chulliat, A. et al. (2024), The US/UK World Magnetic Model for 2025-2030, NOAA NCEI / BGS
    technical report; coefficient file ``WMM_2025.COF`` (header ``2025.0 WMM-2025 11/13/2024``, valid
    2025.0-2030.0), as shipped by the ``pygeomag`` package. The model's global 1-sigma declination error is
    sqrt(0.26^2 + (5417/H)^2) degrees with H the horizontal intensity in nT (REFERENCES.md section 8).
"""

from __future__ import annotations

import warnings
from datetime import UTC, datetime
from functools import lru_cache

import numpy as np

from balloonpath.errors import DataQualityWarning

WMM_VALID_FROM_YEAR = 2025.0
WMM_VALID_TO_YEAR = 2030.0


@lru_cache(maxsize=1)
def _model():  # noqa: ANN202 - pygeomag object
    from pygeomag import GeoMag

    return GeoMag(coefficients_file="wmm/WMM_2025.COF")


def decimal_year_from_posix(time_s: np.ndarray | float) -> np.ndarray:
    """Decimal year of POSIX seconds (UTC): year + elapsed fraction of that calendar year.

    This is the time argument of the WMM ([WMM2025], e.g. 2027.5 = 2 July 2027 12:00 UTC).
    """
    t = np.asarray(time_s, dtype=float)
    flat = t.ravel()
    out = np.empty_like(flat)
    for i, seconds in enumerate(flat):
        moment = datetime.fromtimestamp(float(seconds), tz=UTC)
        start = datetime(moment.year, 1, 1, tzinfo=UTC).timestamp()
        end = datetime(moment.year + 1, 1, 1, tzinfo=UTC).timestamp()
        out[i] = moment.year + (seconds - start) / (end - start)
    return out.reshape(t.shape)


def declination_deg(
    lat: np.ndarray | float,
    lon: np.ndarray | float,
    alt_m: np.ndarray | float,
    time_s: np.ndarray | float,
    *,
    resolution_deg: float = 0.0,
) -> np.ndarray:
    """Magnetic declination D (degrees, positive east of true north) from WMM2025.

    Parameters
    ----------
    lat, lon : array_like
        Geodetic latitude and longitude, degrees (broadcast together with the other arguments).
    alt_m : array_like
        Height, m. The WMM takes height above the WGS84 ellipsoid; altitude above mean sea level is used as
        given (the geoid undulation, at most about 100 m, changes D by far less than 0.001 degree).
    time_s : array_like
        POSIX seconds UTC.
    resolution_deg : float
        0 (default) evaluates the model at every distinct point. A positive value first rounds latitude and
        longitude to this step (and height to 100 m, time to 1 day): the field varies by less than about
        0.01 degree per km away from the magnetic poles, so 0.02 degree (about 2 km) changes D by a few
        hundredths of a degree while making large tables fast.

    Returns
    -------
    numpy.ndarray
        Declination in degrees, of the broadcast shape.

    Notes
    -----
    Spherical-harmonic model of degree 12 evaluated by ``pygeomag`` ([WMM2025]); D = atan2(Y, X) with X, Y
    the north and east components of the main field. Outside 2025.0-2030.0 the model is extrapolated and a
    :class:`DataQualityWarning` is issued. One Python call per distinct point (about 65 microseconds).
    """
    la, lo, al, tt = np.broadcast_arrays(
        *(np.asarray(a, dtype=float) for a in (lat, lon, alt_m, time_s))
    )
    shape = la.shape
    la, lo, al, tt = (a.ravel() for a in (la, lo, al, tt))
    if la.size == 0:
        return np.zeros(shape)
    years = decimal_year_from_posix(tt)
    if resolution_deg > 0:
        la = np.round(la / resolution_deg) * resolution_deg
        lo = np.round(lo / resolution_deg) * resolution_deg
        al = np.round(al / 100.0) * 100.0
        years = np.round(years * 365.25) / 365.25
    if np.any((years < WMM_VALID_FROM_YEAR) | (years > WMM_VALID_TO_YEAR)):
        warnings.warn(
            f"magnetic declination: time outside the WMM2025 validity {WMM_VALID_FROM_YEAR:.0f}-"
            f"{WMM_VALID_TO_YEAR:.0f}; the model is extrapolated and headings may be off by a degree",
            DataQualityWarning, stacklevel=2,
        )
    keys = np.stack([la, lo, al, years], axis=1)
    unique, inverse = np.unique(keys, axis=0, return_inverse=True)
    model = _model()
    values = np.array([
        model.calculate(float(k[0]), float(((k[1] + 180.0) % 360.0) - 180.0), float(k[2]) / 1000.0,
                        float(k[3]), allow_date_outside_lifespan=True).d
        for k in unique
    ])
    return values[np.asarray(inverse).ravel()].reshape(shape)


def true_from_magnetic_heading(
    heading_magnetic_deg: np.ndarray | float, declination: np.ndarray | float
) -> np.ndarray:
    """True heading (degrees, [0, 360)) from magnetic heading and declination (positive east).

    Notes
    -----
    psi_true = psi_magnetic + D (the definition of declination, [WMM2025]).
    """
    return (np.asarray(heading_magnetic_deg, dtype=float) + np.asarray(declination, dtype=float)) % 360.0
