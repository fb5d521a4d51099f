"""The unit of work sent to a worker: identify one series, return plain data."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from app.core.analysis import Analysis
from app.core.errors import SeriesProblem
from app.core.identify import EngineOptions, identify_series


@dataclass
class SeriesTask:
    series_id: str
    values: pd.Series
    lines: np.ndarray | None = None
    options: EngineOptions = EngineOptions()


@dataclass
class SeriesOutcome:
    """Either ``result`` (the engine's analysis) or ``problem`` (a SeriesProblem as a dict)."""

    series_id: str
    result: Analysis | None = None
    problem: dict | None = None


def identify_task(task: SeriesTask) -> SeriesOutcome:
    """Identify one series; a series the engine cannot analyse becomes a problem, not a crash."""
    try:
        found = identify_series(task.values, task.series_id, task.options, task.lines)
    except SeriesProblem as problem:
        return SeriesOutcome(task.series_id, problem=problem.to_dict())
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        # A numerical failure inside a fit must cost this series only, never the whole run.
        failure = SeriesProblem(task.series_id, f"an internal error ({type(exc).__name__}: {exc})", flag="analysis_error")
        return SeriesOutcome(task.series_id, problem=failure.to_dict())
    return SeriesOutcome(task.series_id, result=found.to_analysis())
