"""The demo database: the invented portfolio of ``demo_data/`` imported and analysed.

Building it again reuses what is there: the import finds every series unchanged and the run
finds nothing left to analyse, so a second ``lagdesk demo`` takes seconds.
"""

from __future__ import annotations

import csv
from collections.abc import Callable
from pathlib import Path

import app
from app.core.errors import LagdeskError
from app.core.portfolio_file import DEFAULT_ID_COL
from app.jobs.analyze import ProgressCallback, run_analysis
from app.store.database import open_database
from app.store.imports import ImportReport, import_portfolio
from app.store.series import series_ids_to_analyse

DEMO_PORTFOLIO = Path(app.__file__).resolve().parent.parent / "demo_data" / "portfolio.csv"


def build_demo_database(
    db_path: str | Path, workers: int, on_progress: ProgressCallback | None = None,
    on_import: Callable[[ImportReport], None] | None = None,
) -> Path:
    """Import the demo portfolio into ``db_path`` (created if needed) and analyse it.

    Returns the database's path. The import is the store's usual merge, so a database that
    already holds the demo is left as it is. ``on_import`` is given the import's report before
    the analysis starts; ``on_progress`` follows the analysis (:func:`run_analysis`).

    Raises
    ------
    LagdeskError
        When the demo file is missing (Lagdesk installed without its source folder), or when
        the database holds series that are not demo series: the invented data must not be
        mixed into a real portfolio.
    """
    path = Path(db_path)
    if not DEMO_PORTFOLIO.is_file():
        raise LagdeskError(f"the demo portfolio {DEMO_PORTFOLIO} is missing; the demo needs Lagdesk's source folder")
    db = open_database(path)
    try:
        demo_ids = _demo_series_ids()
        foreign = [series_id for series_id in series_ids_to_analyse(db, everything=True) if series_id not in demo_ids]
        if foreign:
            raise LagdeskError(
                f"{path}: holds {len(foreign)} series that are not demo series (e.g. {foreign[0]!r}), perhaps "
                f"uploaded on the demo's dashboard; the demo keeps away from them: serve that file with "
                f"'lagdesk serve --db {path}', or choose another file for the demo with --db"
            )
        report = import_portfolio(db, DEMO_PORTFOLIO, display_name="demo_data/portfolio.csv")
    finally:
        db.close()
    if on_import is not None:
        on_import(report)
    run_analysis(path, workers=workers, on_progress=on_progress)
    return path


def _demo_series_ids() -> set[str]:
    with DEMO_PORTFOLIO.open(newline="", encoding="utf-8") as handle:
        return {row[DEFAULT_ID_COL] for row in csv.DictReader(handle)}
