"""The portfolio database: series and their observations, analyses, runs, verdicts.

This package is the only place that holds SQL. Every connection is made by
:func:`app.store.database.open_database`; the other modules take the
:class:`sqlite_utils.Database` it returns as their first argument.

sqlite-utils imports pandas and numpy when they are installed, only to add their scalar types
to the map it uses when it creates a table from Python values. Lagdesk's tables are created by
SQL in :mod:`app.store.migrations`, so that map is never used here; the package imports
sqlite-utils once with the two hidden (a ``None`` entry in ``sys.modules`` makes an import
raise ImportError), which saves commands that only read the database, such as ``lagdesk
status``, about 0.3 s of pandas import. Modules elsewhere that name ``sqlite_utils.Database``
in annotations import it under ``TYPE_CHECKING`` so that this import stays the first.
"""

import sys

_HIDDEN = ("pandas", "numpy")
_loaded = {name: sys.modules.get(name) for name in _HIDDEN}
try:
    for _name in _HIDDEN:
        sys.modules[_name] = None  # type: ignore[assignment]
    import sqlite_utils  # noqa: F401  (imported here first, see above)
finally:
    for _name, _module in _loaded.items():
        if _module is None:
            del sys.modules[_name]
        else:
            sys.modules[_name] = _module
