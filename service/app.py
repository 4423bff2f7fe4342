"""Builds the HTTP service from settings (:func:`create_app`) and starts it on uvicorn
(:func:`run_server`, called by ``rutwise serve``). Wiring only: the resources live in
:mod:`service.routes`, the error mapping in :mod:`service.problems`.
"""

from __future__ import annotations

import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from dataclasses import dataclass

from fastapi import FastAPI
from fastapi.middleware.cors import CORSMiddleware

import geoops

from .headers import SecurityHeaders
from .jobs import JobStore
from .problems import install_handlers
from .processes import ProcessRegistry, load_registry
from .ratelimit import RateLimiter
from .routes import router
from .settings import Settings, load_settings
from .worker import Runner

log = logging.getLogger("service")

EXPOSED_HEADERS = ["Location", "Preference-Applied", "Link", "Content-Crs"]


@dataclass
class Service:
    """What the routes share: settings, the store, the processes, the rate limit and (once
    started) the runner."""

    settings: Settings
    store: JobStore
    registry: ProcessRegistry
    limiter: RateLimiter
    runner: Runner | None = None


def create_app(settings: Settings | None = None, registry: ProcessRegistry | None = None
               ) -> FastAPI:
    """The FastAPI application for ``settings`` (default: from the environment)."""
    settings = settings or load_settings()
    service = Service(settings, JobStore(settings.data_dir), registry or load_registry(),
                      RateLimiter(settings.rate_per_s, settings.rate_burst))

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        lost = service.store.recover()
        if lost:
            log.warning("%d job(s) were left unfinished by a stopped service; marked failed",
                        lost)
        service.runner = Runner(service.store, settings)
        await service.runner.start()
        try:
            yield
        finally:
            await service.runner.close()

    app = FastAPI(
        title="rutwise processing service",
        version=geoops.__version__,
        description=(
            "OGC API - Processes (Part 1: Core) for reading vehicle passes from mapped wheel "
            "ruts. Results are estimates from geometry; a qualified examiner interprets them."
        ),
        lifespan=lifespan,
    )
    app.state.service = service
    install_handlers(app)
    if settings.cors_origins:
        app.add_middleware(
            CORSMiddleware,
            allow_origins=list(settings.cors_origins),
            allow_methods=["GET", "POST", "DELETE", "OPTIONS"],
            allow_headers=["Authorization", "Content-Type", "Prefer", "Accept"],
            expose_headers=EXPOSED_HEADERS,
        )
    app.add_middleware(SecurityHeaders, hsts_max_age_s=settings.hsts_max_age_s)
    app.include_router(router)
    return app


def run_server(host: str | None = None, port: int | None = None) -> None:
    """Serve on uvicorn; ``host``/``port`` override the settings when given."""
    import uvicorn

    settings = load_settings(host=host, port=port)
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(levelname)s %(message)s")
    uvicorn.run(create_app(settings), host=settings.host, port=settings.port,
                log_level="info", timeout_graceful_shutdown=10)
