"""The hand-off to forecasting: the decided orders as one JSON document or one CSV table.

The JSON document (schema ``schemas/lagdesk-orders.schema.json``)::

    {"schema": "lagdesk-orders", "version": 4, "generated_at": "...",
     "orders": [{field: value, ...}, ...], "left_out": {"pending": n, "parked": n, "recheck": n},
     "not_arima": [{"series_id": ..., "reviewer": ..., "decided_at": ..., "note": ...}, ...]}

with the record fields of :data:`app.store.orders.ORDER_FIELDS`; ``transform`` and
``include_constant`` are the reviewer's. Version 2 added ``not_arima``: the series a reviewer
decided no ARIMA order should forecast (intermittent or lumpy demand, say), for the forecasting
job to route to another method; version 1 had no such list (and no such verdict). Version 3
added ``interventions`` to each order: the outliers and level shifts to take out of the series
before the ARIMA applies (:mod:`app.store.orders`). Version 4 spells the interventions' time
stamps as ``last_timestamp`` is spelt (ISO 8601, ``2013-12-31T23:00:00``); version 3 wrote them
as the pages do (``2013-12-31 23:00``, a date alone at midnight).

The CSV holds the orders only: one header row with the same field names and one row per order,
``period`` empty for a non-seasonal model, ``include_constant`` ``true``/``false``,
``transform`` ``none``, ``log`` or the JSON object ``{"box_cox": lambda}``, ``parameters`` as a
JSON object, ``interventions`` as a JSON array. A text cell that a spreadsheet would
read as a formula (one starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return)
gets a leading single quote, as OWASP's guidance on CSV injection advises; numbers are left as
they are, so a negative value stays a number. A cell holding a semicolon is quoted, so a
spreadsheet that splits on semicolons keeps it whole, and a part after a semicolon that
starts like a formula gets the quote too (such a spreadsheet starts a cell there when the
line is read with semicolons).

A file is written whole or not at all: into a temporary file in the same folder, flushed to
disk, then renamed over the target (:func:`os.replace` is atomic on one file system). A new
file gets the permissions any program of the user's would (``0666`` less the umask: ``0644``
under the usual ``022``, ``0640`` under ``027``), so the forecasting job's account can read it
as the site's policy says; a file that already exists keeps its own permissions, so an export
someone restricted on purpose (orders are business data) stays restricted when it is written
again.

References
----------
.. [1] OWASP Foundation. *CSV Injection*. https://owasp.org/www-community/attacks/CSV_Injection
"""

from __future__ import annotations

import json
import os
import re
import secrets
import stat
from collections.abc import Sequence
from pathlib import Path
from typing import BinaryIO

import sqlite_utils

from app.core.errors import LagdeskError
from app.store.database import open_database, utc_now
from app.store.orders import ORDER_FIELDS, export_snapshot, not_arima_series, read_snapshot
from app.store.verdicts import DECIDED

SCHEMA_NAME = "lagdesk-orders"
SCHEMA_VERSION = 4
FORMATS = ("json", "csv")
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
CSV_QUOTED = (",", '"', "\r", "\n", ";")
NEUTRALISING_PREFIX = "'"
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def build_orders_document(db: sqlite_utils.Database, statuses: Sequence[str] = DECIDED) -> dict:
    """The export document of every series whose verdict has one of ``statuses``.

    Orders whose parameters no stored fit provides are refitted here (and the refit kept, so
    the next export is quick).

    Raises
    ------
    LagdeskError
        When a status is not approved or overridden, or a decided order cannot be fitted to its
        series (the message names the series).
    """
    (decided, left_out), routed = read_snapshot(db, lambda: (export_snapshot(db, statuses), not_arima_series(db)))
    for order in decided:
        if order.record["parameters"] is None:
            from app.jobs.order_fits import fill_parameters  # loads the engine: only for an order without a kept fit

            fill_parameters(db, order)
    return {
        "schema": SCHEMA_NAME,
        "version": SCHEMA_VERSION,
        "generated_at": utc_now(),
        "orders": [order.record for order in decided],
        "left_out": left_out,
        "not_arima": routed,
    }


def write_export(db: sqlite_utils.Database, path: str | Path, fmt: str = "json", statuses: Sequence[str] = DECIDED) -> dict:
    """Build the export document and write it to ``path`` as ``fmt``; returns the document.

    Raises
    ------
    LagdeskError
        An unknown format, a folder that does not exist, or what :func:`build_orders_document`
        raises; the target file is then untouched.
    """
    if fmt not in FORMATS:
        raise LagdeskError(f"the export format must be {' or '.join(FORMATS)}, not {fmt!r}")
    target = Path(path)
    if not target.parent.is_dir():
        raise LagdeskError(f"{target}: the folder {str(target.parent)!r} does not exist")
    document = build_orders_document(db, statuses)
    write_atomically(target, orders_text(document, fmt))
    return document


def orders_text(document: dict, fmt: str) -> str:
    """The export document as the text of a ``json`` or ``csv`` file."""
    return json.dumps(document, indent=2, ensure_ascii=False) + "\n" if fmt == "json" else orders_csv(document["orders"])


def parse_statuses(text: str | Sequence[str] | None) -> list[str]:
    """The decisions to export from a comma-separated text (``"approved,overridden"``) or a
    list; all decided ones when empty. Unknown names are refused by :func:`build_orders_document`."""
    if text is None:
        return list(DECIDED)
    chosen = [s.strip() for s in text.split(",")] if isinstance(text, str) else list(text)
    return [s for s in chosen if s] or list(DECIDED)


def orders_csv(orders: list[dict]) -> str:
    """The orders as CSV text: a header row of :data:`ORDER_FIELDS`, then one row per order."""
    rows = [list(ORDER_FIELDS), *([_csv_cell(order[name]) for name in ORDER_FIELDS] for order in orders)]
    return "".join(",".join(_quoted(cell) for cell in row) + "\r\n" for row in rows)


def _quoted(cell: str) -> str:
    """A cell as RFC 4180 writes it (in double quotes, its own doubled, when it holds a comma, a
    quote or a line break), and quoted as well when it holds a semicolon, which a spreadsheet
    set to split on semicolons then keeps whole (:func:`neutralise_formula` guards the parts
    for one that reads the whole line with semicolons)."""
    if any(c in cell for c in CSV_QUOTED):
        return '"' + cell.replace('"', '""') + '"'
    return cell


def _csv_cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, (dict, list)):
        return json.dumps(value, ensure_ascii=False)
    return neutralise_formula(str(value))


def neutralise_formula(text: str) -> str:
    """``text`` with a leading single quote when a spreadsheet would run it as a formula.

    So does each part after a semicolon: a spreadsheet that splits on semicolons starts a cell
    there, quoted or not (a quote in mid-field opens nothing). A plain number (``-3``,
    ``+1.5e2``) is left alone: it is not a formula.
    """
    return ";".join(NEUTRALISING_PREFIX + part if part.startswith(FORMULA_STARTS) and not _PLAIN_NUMBER.fullmatch(part)
                    else part for part in text.split(";"))


def write_atomically(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` so that a reader sees the old file or the new one, never a part;
    with the permissions of the module notes."""
    temporary = path.with_name(f".{path.name}.{secrets.token_hex(8)}.tmp")
    try:
        # Created as any new file is (0666 less the umask, applied by the kernel); not tempfile's 0600.
        fd = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except OSError as exc:  # said of the file asked for: the temporary one is ours, not the user's
        raise OSError(exc.errno, f"cannot write it ({exc.strerror})", str(path)) from exc
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
            handle.flush()
            if path.exists():
                os.chmod(handle.fileno(), stat.S_IMODE(path.stat().st_mode))
            os.fsync(handle.fileno())
        os.replace(temporary, path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise


def export_format(given: str | None, output: str | Path | None) -> str:
    """The format of an export: ``given``, else the one the output file's extension names
    (``orders.csv``), else JSON.

    Raises
    ------
    LagdeskError
        When ``given`` and the extension name different formats (JSON in a ``.csv`` file would
        break the job that reads it).
    """
    suffix = Path(str(output)).suffix.lower().lstrip(".") if output is not None else ""
    named = suffix if suffix in FORMATS else None
    if given is not None and named is not None and given != named:
        raise LagdeskError(f"{output}: the file is named .{named} but --format is {given}; name it .{given} or drop --format")
    return given or named or FORMATS[0]


def export_command(
    db_path: str | Path, fmt: str | None = None, output: str | Path | None = None, statuses: str | Sequence[str] = DECIDED
) -> str:
    """``lagdesk export``: write the export of the database at ``db_path``; returns a summary line.

    ``fmt`` defaults to the format ``output``'s extension names, else JSON (:func:`export_format`).
    ``output`` defaults to ``lagdesk-orders.<fmt>`` in the current folder, and a folder given as
    ``output`` gets that file name in it (one written with a trailing slash is a folder, and
    must exist); ``statuses`` is a list or a comma-separated text (``"approved,overridden"``).
    """
    fmt = export_format(fmt, output)
    chosen = parse_statuses(statuses)
    target = Path(output) if output is not None else Path.cwd()
    if target.is_dir() or str(output).endswith(("/", os.sep)):
        target = target / f"lagdesk-orders.{fmt}"
    db = open_database(db_path)
    try:
        document = write_export(db, target, fmt, chosen)
    finally:
        db.close()
    return export_summary(document, target, fmt)


def export_to_stream(db_path: str | Path, stream: BinaryIO, fmt: str = "json", statuses: str | Sequence[str] = DECIDED) -> str:
    """``lagdesk export -o -``: the bytes the export file would hold (UTF-8, whatever the
    terminal's encoding) written to ``stream`` once the whole document is built; returns the
    summary line, which the caller puts elsewhere (stderr) so that the stream holds the orders
    alone."""
    chosen = parse_statuses(statuses)
    db = open_database(db_path)
    try:
        document = build_orders_document(db, chosen)
    finally:
        db.close()
    stream.write(orders_text(document, fmt).encode("utf-8"))
    stream.flush()
    return export_summary(document, "standard output", fmt)


def export_summary(document: dict, target: str | Path, fmt: str) -> str:
    """One line: what was written where, what was left out, the series marked ``not_arima``, and
    which orders await a re-check (``data_changed``)."""
    orders = document["orders"]
    moved = [o["series_id"] for o in orders if o["data_changed"]]
    by_decision = {d: sum(o["decision"] == d for o in orders) for d in DECIDED}
    decided = ", ".join(f"{n} {d}" for d, n in by_decision.items() if n)
    left = ", ".join(f"{n} {status}" for status, n in document["left_out"].items())
    line = f"{len(orders)} order{'' if len(orders) == 1 else 's'}{f' ({decided})' if decided else ''} written to {target} as {fmt}; left out: {left}"
    routed = len(document["not_arima"])
    if routed:
        line += f"; {routed} series marked not_arima" + (" (listed apart in the JSON)" if fmt == "json" else " (in the JSON export only)")
    if moved:
        line += (
            f"; {len(moved)} of them {'was' if len(moved) == 1 else 'were'} decided on data that has changed since "
            f"(e.g. {moved[0]!r}), marked data_changed: run the analysis to re-check them"
        )
    return line
