"""The version of the engine's rules, stored with every analysis, run and order fit.

It changes with every change to the engine that can move a suggestion, its confidence, its
candidates or their figures (the date of that change, ``.2`` after a second one that day), and
with nothing else: the package's version says which program is installed, this one which rules
made a stored result.
``lagdesk analyze`` analyses again every series whose stored analysis or failure an earlier
engine made (:func:`app.store.series.series_ids_to_analyse`), so an upgrade does not leave
results in the database that the installed engine would no longer give. Kept apart from
:mod:`app.core.identify` so that ``lagdesk status`` reads it without loading the engine.
"""

from __future__ import annotations

ENGINE_VERSION = "2026-12-05.33"
