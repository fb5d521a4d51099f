"""Running the dashboard under uvicorn (``lagdesk serve`` calls :func:`run_server`)."""

from __future__ import annotations

import uvicorn

from app.config import Settings
from app.store.database import open_database
from app.web.main import create_app
from app.web.security import require_token_off_loopback


def run_server(settings: Settings) -> None:
    """Refuse to listen beyond this machine without an access token; open (or create) the
    database once, so a bad path fails before the server starts; then serve the dashboard until
    interrupted."""
    require_token_off_loopback(settings)
    open_database(settings.db_path).close()
    uvicorn.run(create_app(settings), host=settings.host, port=settings.port, log_level="warning")
