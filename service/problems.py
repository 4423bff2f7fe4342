"""The one place where errors become HTTP problem details (RFC 7807, application/problem+json).

Routes raise :class:`Problem` (or let a :class:`geoops.errors.RutwiseError` through); the
handlers installed by :func:`install_handlers` turn every 4xx/5xx into a problem document with
``type``, ``title``, ``status`` and ``detail`` (what is wrong, then what to do).
"""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from geoops.errors import BadInput, LimitExceeded, NotEstimable, RutwiseError

MEDIA_TYPE = "application/problem+json"
OGC_EXCEPTIONS = "http://www.opengis.net/def/exceptions/ogcapi-processes-1/1.0/"
NO_SUCH_PROCESS = OGC_EXCEPTIONS + "no-such-process"
NO_SUCH_JOB = OGC_EXCEPTIONS + "no-such-job"
RESULT_NOT_READY = OGC_EXCEPTIONS + "result-not-ready"
OWN = "urn:rutwise:problem:"

log = logging.getLogger("service")


class Problem(Exception):
    """An HTTP problem: raise it from a route; the handler renders it."""

    def __init__(self, status: int, kind: str, title: str, detail: str,
                 headers: dict[str, str] | None = None, **extra: Any) -> None:
        super().__init__(detail)
        self.status = status
        self.type = kind if ":" in kind else OWN + kind
        self.title = title
        self.detail = detail
        self.headers = headers or {}
        self.extra = extra

    def body(self, instance: str | None = None) -> dict[str, Any]:
        doc: dict[str, Any] = {"type": self.type, "title": self.title, "status": self.status,
                               "detail": self.detail}
        if instance:
            doc["instance"] = instance
        doc.update(self.extra)
        return doc

    @classmethod
    def from_body(cls, doc: dict[str, Any]) -> Problem:
        """Rebuild a problem stored as a document (a failed job's reason)."""
        extra = {k: v for k, v in doc.items()
                 if k not in ("type", "title", "status", "detail", "instance")}
        return cls(int(doc.get("status", 500)), str(doc.get("type", OWN + "job-failed")),
                   str(doc.get("title", "job failed")), str(doc.get("detail", "")), **extra)


def _status_of(exc: RutwiseError) -> int:
    if exc.kind == "cluster-unavailable":  # service.cluster.ClusterUnavailable
        return 503
    if isinstance(exc, LimitExceeded):
        return 413
    if isinstance(exc, NotEstimable):
        return 422
    if isinstance(exc, BadInput):
        return 400
    return 400


def from_rutwise_error(exc: RutwiseError, input_id: str | None = None) -> Problem:
    """The problem for an engine error: its kind names the type, message + hint the detail."""
    detail = f"{exc.message} {exc.hint}".strip()
    title = {
        "bad-input": "input cannot be used",
        "crs-error": "coordinate reference system problem",
        "limit-exceeded": "input over a limit",
        "not-estimable": "not estimable from this geometry",
        "cluster-unavailable": "computing cluster unavailable",
    }.get(exc.kind, "request cannot be processed")
    extra: dict[str, Any] = {"input": input_id} if input_id else {}
    return Problem(_status_of(exc), exc.kind, title, detail, **extra)


def not_found_process(process_id: str) -> Problem:
    return Problem(404, NO_SUCH_PROCESS, "no such process",
                   f"There is no process {process_id!r}. GET /processes lists the processes.")


def not_found_job(job_id: str) -> Problem:
    return Problem(404, NO_SUCH_JOB, "no such job",
                   f"There is no job {job_id!r} for this caller. GET /jobs lists your jobs.")


def invalid_input(input_id: str, detail: str) -> Problem:
    return Problem(400, "invalid-input", f"invalid input {input_id!r}", detail, input=input_id)


def render(problem: Problem, request: Request | None = None) -> JSONResponse:
    instance = str(request.url.path) if request is not None else None
    return JSONResponse(problem.body(instance), status_code=problem.status,
                        media_type=MEDIA_TYPE, headers=problem.headers)


_HTTP_TITLES = {
    401: ("unauthorized", "Send a valid API key as 'Authorization: Bearer <key>'."),
    404: ("not found", "Check the path; GET / lists the resources of this service."),
    405: ("method not allowed", "Use a method listed in the Allow header."),
}


def install_handlers(app: FastAPI) -> None:
    """Map every error to a problem response (the only error mapping of the service)."""

    @app.exception_handler(Problem)
    async def _problem(request: Request, exc: Problem) -> JSONResponse:
        return render(exc, request)

    @app.exception_handler(RutwiseError)
    async def _engine(request: Request, exc: RutwiseError) -> JSONResponse:
        return render(from_rutwise_error(exc), request)

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
        parts = []
        for err in exc.errors():
            where = ".".join(str(p) for p in err.get("loc", ()) if p not in ("query", "path"))
            parts.append(f"{where}: {err.get('msg', 'invalid')}")
        detail = "; ".join(parts) + ". Fix the parameter and retry; /openapi.json describes it."
        return render(Problem(400, "invalid-parameter", "invalid request parameter", detail),
                      request)

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        title, todo = _HTTP_TITLES.get(exc.status_code, ("request failed", ""))
        detail = f"{exc.detail}. {todo}".strip() if exc.detail else todo
        headers = dict(exc.headers or {})
        return render(Problem(exc.status_code, title.replace(" ", "-"), title, detail,
                              headers=headers), request)

    @app.exception_handler(Exception)
    async def _bug(request: Request, exc: Exception) -> JSONResponse:
        log.exception("internal error on %s %s", request.method, request.url.path)
        return render(Problem(500, "internal-error", "internal error",
                              f"The service failed unexpectedly ({type(exc).__name__}). "
                              "Retry later; if it persists, report it with the time of the "
                              "request."), request)
