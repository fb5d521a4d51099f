"""The portfolio database: series and their observations, analyses, runs, verdicts.

This package is the only place that holds SQL. Every connection is made by
:func:`app.store.database.open_database`; the other modules take the
:class:`sqlite_utils.Database` it returns as their first argument.
"""
