"""The dashboard application: ``create_app(settings)`` builds it; tests build it the same way."""

from __future__ import annotations

import threading

from fastapi import FastAPI
from fastapi.staticfiles import StaticFiles

from app import __version__
from app.config import Settings
from app.web.deps import SeriesSlots
from app.web.errors import install_error_handlers
from app.web.head import HeadAsGet
from app.web.routes import access, api, compare, pages
from app.web.security import AccessGuard
from app.web.templating import STATIC_DIR


def create_app(settings: Settings) -> FastAPI:
    """The FastAPI app serving the pages, the JSON API and the static files for ``settings``."""
    app = FastAPI(title="Lagdesk", version=__version__, summary="Review ARIMA orders for a portfolio of series",
                  # FastAPI's documentation pages load their scripts from a CDN; nothing may leave
                  # this machine, so only the schema itself is served.
                  docs_url=None, redoc_url=None)
    app.state.settings = settings
    app.state.series_slots = SeriesSlots()
    app.state.export_lock = threading.Lock()
    app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")
    app.include_router(access.router)
    # Before the pages and the API: their /series/{id} routes would take .../compare as an id.
    app.include_router(compare.router)
    app.include_router(pages.router)
    app.include_router(api.router)
    install_error_handlers(app)
    app.add_middleware(AccessGuard, settings=settings)
    app.add_middleware(HeadAsGet)  # outermost: the guard sees a HEAD as the GET it is served as
    return app
