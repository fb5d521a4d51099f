"""Receiving a portfolio file from the upload page and importing it into the database.

The upload is copied to a private temporary folder named after the server's process
(``lagdesk-upload-PID-…``) and removed when the import ends; a server killed mid-upload cannot
remove its own, so every upload first removes the folders of processes that no longer run.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path
from typing import Literal

import sqlite_utils
from fastapi import UploadFile
from pydantic import BaseModel

from app.config import Settings
from app.core.errors import LagdeskError
from app.core.portfolio_file import DEFAULT_ID_COL, DEFAULT_TIME_COL, DEFAULT_VALUE_COL, ReadLimits
from app.core.series_ids import printable
from app.store.imports import ImportReport, import_portfolio

COPY_CHUNK = 1024 * 1024
# A file name of most file systems holds at most 255 bytes; a long name keeps a suffix this short.
MAX_NAME_BYTES = 255
MAX_SUFFIX_BYTES = 16
UPLOAD_FOLDER_PREFIX = "lagdesk-upload-"


class UploadTooLarge(LagdeskError):
    """A file bigger than the server's upload limit."""

    http_status = 413


class UploadOptions(BaseModel):
    """How to read the uploaded CSV (the column names matter for the long layout, the time column
    and the date format for both; an empty date format means the first timestamp's)."""

    layout: Literal["long", "wide"] = "long"
    id_col: str = DEFAULT_ID_COL
    time_col: str = DEFAULT_TIME_COL
    value_col: str = DEFAULT_VALUE_COL
    date_format: str = ""


def upload_name(upload: UploadFile) -> str:
    """The file's own name without any folder the browser sent with it, without control or
    direction characters, and short enough for any file system (255 bytes; the end of a long
    name is cut, its suffix kept); ``upload.csv`` when nothing usable is left."""
    name = printable(Path((upload.filename or "").replace("\\", "/")).name).strip()
    if name in ("", ".", ".."):
        return "upload.csv"
    suffix = Path(name).suffix if len(Path(name).suffix.encode()) <= MAX_SUFFIX_BYTES else ""
    stem = name[: len(name) - len(suffix)] if suffix else name
    room = MAX_NAME_BYTES - len(suffix.encode())
    return stem.encode()[:room].decode(errors="ignore") + suffix  # a character cut in two is dropped


def import_upload(db: sqlite_utils.Database, upload: UploadFile, options: UploadOptions, settings: Settings) -> ImportReport:
    """Copy the upload to a private temporary file (refusing it past ``settings.max_upload_bytes``)
    and import it within the settings' series and points limits.

    Raises
    ------
    UploadTooLarge
        When the file is bigger than the limit; nothing is stored.
    InputFileError
        When the file cannot be used or holds too many series (see
        :func:`app.store.imports.import_portfolio`).
    """
    max_bytes = settings.max_upload_bytes
    name = upload_name(upload)
    remove_stale_upload_folders()
    with tempfile.TemporaryDirectory(prefix=f"{UPLOAD_FOLDER_PREFIX}{os.getpid()}-") as folder:
        path = Path(folder) / name
        copied = 0
        with path.open("wb") as out:
            while chunk := upload.file.read(COPY_CHUNK):
                copied += len(chunk)
                if copied > max_bytes:
                    raise UploadTooLarge(f"{name}: larger than the upload limit of {max_bytes // (1024 * 1024)} MiB")
                out.write(chunk)
        return import_portfolio(
            db, path, layout=options.layout, id_col=options.id_col.strip() or DEFAULT_ID_COL,
            time_col=options.time_col.strip() or DEFAULT_TIME_COL,
            value_col=options.value_col.strip() or DEFAULT_VALUE_COL, display_name=name,
            limits=ReadLimits(settings.max_upload_series, settings.max_upload_points),
            date_format=options.date_format.strip() or None,
        )


def remove_stale_upload_folders(parent: Path | None = None) -> list[Path]:
    """Remove the upload folders (in ``parent``, by default the temporary folder) left by server
    processes that no longer run; those of running processes, this one included, are kept.
    Returns the folders removed."""
    removed = []
    for folder in Path(parent or tempfile.gettempdir()).glob(f"{UPLOAD_FOLDER_PREFIX}*"):
        pid = folder.name.removeprefix(UPLOAD_FOLDER_PREFIX).partition("-")[0]
        if folder.is_dir() and pid.isdigit() and not _process_runs(int(pid)):
            shutil.rmtree(folder, ignore_errors=True)
            removed.append(folder)
    return removed


def _process_runs(pid: int) -> bool:
    """Whether a process with this id runs (one of another user's included)."""
    try:
        os.kill(pid, 0)  # signal 0: nothing is sent, only the process looked up
    except (ProcessLookupError, OverflowError):
        return False
    except PermissionError:
        return True
    return True
