"""Errors and warnings with stable categories.

Every error a user can cause is a :class:`BalloonpathError` (a ``ValueError``) whose message is one line naming
the file, the field, what was wrong and the fix. Warnings use stable categories so that the orchestrator can
record them in ``summary.json`` and tests can match them.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path


class BalloonpathError(ValueError):
    """Base class of every error caused by bad input; the message is one line."""


class PlanError(BalloonpathError):
    """A flight-plan file is malformed or inconsistent."""


class InputDataError(BalloonpathError):
    """A data file (sounding, forecast grid, reports, telemetry, terrain) cannot be used."""


class CoverageError(BalloonpathError):
    """A flight leaves the space or time covered by a wind field or terrain."""


class PhysicsError(BalloonpathError):
    """The physics has no solution for these inputs (e.g. a balloon that cannot rise)."""


class BalloonpathWarning(UserWarning):
    """Base class of balloonpath's warnings."""


class CoverageWarning(BalloonpathWarning):
    """A value was held at the edge of a field's coverage."""


class DataQualityWarning(BalloonpathWarning):
    """Input rows were skipped, clipped or look suspicious (units, duplicates, outliers)."""


class PhysicsWarning(BalloonpathWarning):
    """A physical quantity is outside common practice or a model's validity."""


class FitWarning(BalloonpathWarning):
    """A statistical fit hit a bound, fell back to defaults or needed jitter."""


class PracticeWarning(BalloonpathWarning):
    """A planned value is unusual for balloon teams (common practice)."""


def input_error(
    file: str | Path | None,
    field: str,
    problem: str,
    fix: str,
    cls: type[BalloonpathError] = InputDataError,
) -> BalloonpathError:
    """Build a one-line error ``"<file>: <field>: <problem>; fix: <fix>"``.

    Parameters
    ----------
    file : str, Path or None
        The file at fault (its name is shown), or None when the value did not come from a file.
    field : str
        The key, column or line at fault.
    problem : str
        What was expected and what was found.
    fix : str
        What the user should do.
    cls : type
        The error class to build.
    """
    where = f"{Path(file).name}: " if file is not None else ""
    text = f"{where}{field}: {problem}; fix: {fix}"
    return cls(" ".join(text.split()))


@dataclass
class WarningLog:
    """Warnings recorded during a run, for ``summary.json`` and stderr."""

    messages: list[str] = field(default_factory=list)

    def add(self, message: str, category: type[Warning] = BalloonpathWarning) -> None:
        """Record a message with its category name."""
        entry = f"{category.__name__}: {message}"
        if entry not in self.messages:
            self.messages.append(entry)


@contextmanager
def recording_warnings(log: WarningLog) -> Iterator[WarningLog]:
    """Record every warning raised inside the block into ``log`` (deduplicated, in order)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            yield log
        finally:
            for w in caught:
                log.add(str(w.message), w.category)
