"""A flown track: where a balloon actually was, from telemetry or a radiosonde file.

Readers of particular formats (the DWD high-resolution radiosonde file is read by
``balloonpath.winds.sounding.read_dwd_highres``) return a :class:`FlownTrack`; the recovery,
fly-back and verification code consume it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class FlownTrack:
    """Positions of one flight, in time order, arrays of one length.

    Attributes
    ----------
    time_s : numpy.ndarray
        POSIX seconds UTC.
    lat, lon : numpy.ndarray
        Degrees (longitude in [-180, 180)).
    alt_m : numpy.ndarray
        Geometric altitude above mean sea level, m.
    source : str
        Where the track came from (file name and format), for reports.
    """

    time_s: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    alt_m: np.ndarray
    source: str

    def __post_init__(self) -> None:
        sizes = {np.asarray(getattr(self, f)).size for f in ("time_s", "lat", "lon", "alt_m")}
        if len(sizes) != 1:
            raise ValueError(
                f"FlownTrack from {self.source}: arrays have different lengths {sorted(sizes)}"
            )

    def __len__(self) -> int:
        return int(np.asarray(self.time_s).size)
