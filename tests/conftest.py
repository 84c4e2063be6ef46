"""Shared test fixtures. Keep this small; module-specific helpers belong in the test module.

All places and plans here are invented (the launch site "Brambleford Common" does not exist).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from pathlib import Path

import pytest

# A complete, valid plan in simple ("rates") mode. Its only wind source, sounding.csv, is
# created (empty) by ``write_plan`` so that the plan's file-existence checks pass.
MINIMAL_PLAN = """\
[launch]
latitude = 47.25
longitude = 8.5
time = 2027-05-14T12:30:00Z
elevation_m = 420.0
site_name = "Brambleford Common"

[rates]
ascent_m_s = 5.0
burst_altitude_m = 30000.0
descent_sea_level_m_s = 5.5

[winds]
sounding = "sounding.csv"
"""


def _write_plan(
    tmp_path: Path,
    text: str,
    *,
    name: str = "plan.toml",
    touch: Iterable[str] = ("sounding.csv",),
) -> Path:
    """Write ``text`` to ``tmp_path / name`` and create the (empty) files named in ``touch``."""
    for rel in touch:
        f = tmp_path / rel
        f.parent.mkdir(parents=True, exist_ok=True)
        f.touch()
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def write_plan() -> Callable[..., Path]:
    """``write_plan(tmp_path, text, name="plan.toml", touch=("sounding.csv",)) -> Path``."""
    return _write_plan


@pytest.fixture
def minimal_plan_text() -> str:
    """The text of a valid rates-mode plan whose wind source is ``sounding.csv``."""
    return MINIMAL_PLAN
