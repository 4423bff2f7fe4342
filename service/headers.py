"""Security headers on every response of the service (an ASGI middleware).

- ``X-Content-Type-Options: nosniff`` and ``Referrer-Policy: no-referrer`` everywhere;
- ``Content-Security-Policy: default-src 'none'; frame-ancestors 'none'`` and
  ``X-Frame-Options: DENY`` on every response that is not an HTML page (the JSON API, result
  files): nothing in them may run, load or be framed. The HTML API documentation (``/docs``)
  keeps FastAPI's own page, which loads its script from a CDN;
- ``Cache-Control: no-store`` on jobs, results and uploads (private to a key, and changing);
- ``Strict-Transport-Security`` only when the setting ``hsts_max_age_s`` is above 0.

Headers a route set itself are kept. Nothing else is changed.
"""

from __future__ import annotations

from starlette.datastructures import MutableHeaders
from starlette.types import ASGIApp, Message, Receive, Scope, Send

API_CSP = "default-src 'none'; frame-ancestors 'none'"
PRIVATE_PREFIXES = ("/jobs", "/uploads", "/processes/")


class SecurityHeaders:
    """Adds the headers of the module docstring to each HTTP response."""

    def __init__(self, app: ASGIApp, hsts_max_age_s: int = 0) -> None:
        self.app = app
        self.hsts = f"max-age={hsts_max_age_s}" if hsts_max_age_s > 0 else ""

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path: str = scope.get("path", "")
        private = path.startswith(PRIVATE_PREFIXES) and (
            not path.startswith("/processes/") or path.endswith("/execution"))

        async def with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                headers.setdefault("X-Content-Type-Options", "nosniff")
                headers.setdefault("Referrer-Policy", "no-referrer")
                if not headers.get("content-type", "").startswith("text/html"):
                    headers.setdefault("Content-Security-Policy", API_CSP)
                    headers.setdefault("X-Frame-Options", "DENY")
                if private:
                    headers["Cache-Control"] = "no-store"
                if self.hsts:
                    headers.setdefault("Strict-Transport-Security", self.hsts)
            await send(message)

        await self.app(scope, receive, with_headers)
