"""Time conversions: timezone-aware UTC datetimes at the boundary, POSIX seconds (float64) inside."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np


def posix_from_datetime(moment: datetime) -> float:
    """POSIX seconds of a timezone-aware datetime.

    Raises
    ------
    ValueError
        If ``moment`` has no timezone (naive times are ambiguous).
    """
    if moment.tzinfo is None or moment.utcoffset() is None:
        raise ValueError(f"time {moment.isoformat()} has no timezone; write it in UTC with a trailing Z")
    return moment.timestamp()


def datetime_from_posix(seconds: float) -> datetime:
    """Timezone-aware UTC datetime of POSIX seconds."""
    return datetime.fromtimestamp(float(seconds), tz=UTC)


def iso_from_posix(seconds: float) -> str:
    """ISO 8601 UTC text with a trailing Z, rounded to whole seconds (stable output)."""
    moment = datetime.fromtimestamp(round(float(seconds)), tz=UTC)
    return moment.strftime("%Y-%m-%dT%H:%M:%SZ")


def parse_iso(text: str) -> float:
    """POSIX seconds of ISO 8601 text; a trailing Z or an offset is required.

    Raises
    ------
    ValueError
        If the text is not ISO 8601 or has no timezone.
    """
    cleaned = text.strip()
    if cleaned.endswith(("Z", "z")):
        cleaned = cleaned[:-1] + "+00:00"
    moment = datetime.fromisoformat(cleaned)
    return posix_from_datetime(moment)


def parse_iso_array(values: np.ndarray | list[str]) -> np.ndarray:
    """Vector form of :func:`parse_iso` (float64 POSIX seconds)."""
    return np.array([parse_iso(str(v)) for v in values], dtype=float)
