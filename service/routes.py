"""The HTTP resources: each route parses, calls one store/runner/engine function, and answers.

Errors are raised as :class:`service.problems.Problem` or engine errors and rendered in one
place (:mod:`service.problems`).
"""

from __future__ import annotations

import asyncio
import datetime as dt
import hashlib
import hmac
import json
import shutil
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Annotated, Any, Literal

import anyio.to_thread
import numpy as np
from fastapi import APIRouter, Depends, Header, Query, Request, Response
from fastapi import Path as PathParam
from fastapi.responses import FileResponse, JSONResponse, PlainTextResponse
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

import geoops
from geoops.errors import BadInput, LimitExceeded, RutwiseError
from geoops.io import read_layer
from geoops.limits import parse_json

from . import documents
from .jobs import STATUSES, Job, Upload, new_id, now, parse_time
from .problems import (
    RESULT_NOT_READY,
    Problem,
    from_rutwise_error,
    invalid_input,
    not_found_job,
    not_found_process,
)
from .processes import RASTER_SUFFIXES, CheckContext, InputProblem
from .ratelimit import retry_after

router = APIRouter()
_bearer = HTTPBearer(auto_error=False, description="API key, when the service requires one")

JOB_ID = Annotated[str, PathParam(description="job id", max_length=64)]
UPLOAD_TYPES = {
    "application/geopackage+sqlite3": ".gpkg",
    "application/geo+json": ".geojson",
    "application/json": ".geojson",
    "application/gpx+xml": ".gpx",
    "application/flatgeobuf": ".fgb",
    "image/tiff": ".tif",
}
UPLOAD_SUFFIXES = {".gpkg", ".geojson", ".json", ".gpx", ".fgb", *RASTER_SUFFIXES}
_JSON_RANGES = {"*/*", "application/*", "application/json", "application/problem+json",
                "application/geo+json"}

_EXECUTE_BODY: dict[str, Any] = {
    "required": True,
    "content": {"application/json": {"schema": {
        "type": "object",
        "properties": {
            "inputs": {"type": "object", "additionalProperties": True,
                       "description": "input id -> value, {\"value\": ...} or {\"href\": ...}"},
            "outputs": {"type": "object", "additionalProperties": {
                "type": "object",
                "properties": {
                    "transmissionMode": {"type": "string", "enum": ["value", "reference"]},
                    "format": {"type": "object",
                               "properties": {"mediaType": {"type": "string"}}},
                }}},
            "response": {"type": "string", "enum": ["raw", "document"], "default": "raw"},
        },
    }}},
}
_UPLOAD_BODY: dict[str, Any] = {
    "required": True,
    "content": {media: {"schema": {"type": "string", "format": "binary"}}
                for media in [*UPLOAD_TYPES, "application/octet-stream"]},
}


def _service(request: Request) -> Any:
    return request.app.state.service


def _base(request: Request) -> str:
    return str(request.base_url).rstrip("/")


def caller(request: Request,
           credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)] = None
           ) -> str:
    """The owner key of the caller: a digest of its API key ('' on an open service).

    With keys on, every call spends a token of the caller's rate limit (a wrong key spends
    one of its client address), and a caller out of tokens gets 429.
    """
    svc = _service(request)
    keys = svc.settings.api_keys
    if not keys:
        return ""
    token = credentials.credentials if credentials is not None else ""
    known = any(hmac.compare_digest(token.encode(), key.encode()) for key in keys)
    owner = hashlib.sha256(token.encode()).hexdigest()[:32]
    wait = svc.limiter.take(owner if known else "address:" + str(
        request.client.host if request.client else ""))
    if wait > 0:
        raise Problem(429, "too-many-requests", "too many requests",
                      f"This key sent more than {svc.settings.rate_burst} requests at once or "
                      f"{svc.settings.rate_per_s:g} per second. Retry after the time in the "
                      "Retry-After header.", headers={"Retry-After": retry_after(wait)})
    if not known:
        raise Problem(401, "unauthorized", "API key needed",
                      "This service needs an API key: send 'Authorization: Bearer <key>'. Ask "
                      "the operator for a key.",
                      headers={"WWW-Authenticate": 'Bearer realm="rutwise"'})
    return owner


def json_accepted(accept: Annotated[str | None, Header()] = None) -> None:
    """406 when the client accepts no JSON answer."""
    if not accept:
        return
    ranges = {part.split(";")[0].strip().lower() for part in accept.split(",")}
    if not ranges & _JSON_RANGES:
        raise Problem(406, "not-acceptable", "not acceptable",
                      f"This resource is JSON; the request accepts only {accept!r}. Accept "
                      "application/json.")


Owner = Annotated[str, Depends(caller)]
JsonOnly = Depends(json_accepted)


# --- discovery --------------------------------------------------------------------------------


@router.get("/", dependencies=[JsonOnly], summary="Landing page")
def landing_page(request: Request) -> JSONResponse:
    return JSONResponse(documents.landing(_base(request)))


@router.get("/conformance", dependencies=[JsonOnly], summary="Conformance classes")
def conformance() -> JSONResponse:
    return JSONResponse({"conformsTo": documents.CONFORMANCE})


@router.get("/processes", dependencies=[JsonOnly], summary="The processes")
def list_processes(request: Request,
                   limit: Annotated[int, Query(ge=1, le=10000)] = 10,
                   offset: Annotated[int, Query(ge=0, le=1_000_000)] = 0) -> JSONResponse:
    base = _base(request)
    processes = _service(request).registry.all()
    page = processes[offset:offset + limit]
    links = [documents.link(f"{base}/processes?limit={limit}&offset={offset}", "self",
                            "this list")]
    if offset + limit < len(processes):
        links.append(documents.link(f"{base}/processes?limit={limit}&offset={offset + limit}",
                                    "next", "next page"))
    return JSONResponse({"processes": [documents.process_summary(p, base) for p in page],
                         "links": links})


@router.get("/processes/{process_id}", dependencies=[JsonOnly], summary="Process description")
def describe_process(request: Request, process_id: str) -> JSONResponse:
    process = _service(request).registry.get(process_id)
    if process is None:
        raise not_found_process(process_id)
    return JSONResponse(documents.process_description(process, _base(request)))


# --- execution --------------------------------------------------------------------------------


async def _read_body(request: Request, limit: int, timeout_s: float) -> bytes:
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise _too_large(int(declared), limit)
    chunks, size = [], 0
    async with _body_deadline(timeout_s):
        async for chunk in request.stream():
            size += len(chunk)
            if size > limit:
                raise _too_large(size, limit)
            chunks.append(chunk)
    return b"".join(chunks)


@asynccontextmanager
async def _body_deadline(timeout_s: float) -> AsyncIterator[None]:
    """408 when the body inside takes longer than ``timeout_s`` to arrive."""
    try:
        async with asyncio.timeout(timeout_s):
            yield
    except TimeoutError:
        raise Problem(408, "request-timeout", "request body too slow",
                      f"The request body did not arrive within {timeout_s:g} s. Send it again "
                      "over a faster connection, or in smaller parts.",
                      headers={"Connection": "close"}) from None


def _too_large(size: int, limit: int) -> Problem:
    return Problem(413, "limit-exceeded", "request too large",
                   f"The request body has {'at least ' if size <= limit else ''}{size} bytes; "
                   f"the limit is {limit}. Upload large layers to /uploads in smaller parts, or "
                   "ask the operator to raise max_upload_mb.")


def _media_type(request: Request) -> str:
    return request.headers.get("content-type", "").split(";")[0].strip().lower()


def prefer_tokens(header: str | None) -> set[str]:
    """Preference names in a Prefer header (RFC 7240), e.g. 'respond-async, wait=5'.

    >>> sorted(prefer_tokens("respond-async, wait=5"))
    ['respond-async', 'wait']
    """
    if not header:
        return set()
    return {part.split("=")[0].split(";")[0].strip().lower() for part in header.split(",")}


@router.post("/processes/{process_id}/execution", summary="Execute a process",
             openapi_extra={"requestBody": _EXECUTE_BODY},
             responses={200: {"description": "results (synchronous)"},
                        201: {"description": "job created (asynchronous)"},
                        204: {"description": "results by reference, in Link headers"}})
async def execute(request: Request, process_id: str, owner: Owner,
                  prefer: Annotated[str | None, Header()] = None) -> Response:
    svc = _service(request)
    process = svc.registry.get(process_id)
    if process is None:
        raise not_found_process(process_id)
    media = _media_type(request)
    if media != "application/json" and not media.endswith("+json"):
        raise Problem(415, "unsupported-media-type", "unsupported media type",
                      f"An execute request is JSON; got Content-Type {media or 'none'!r}. "
                      "Send 'Content-Type: application/json'.")
    body = await _read_body(request, svc.settings.max_upload_bytes,
                            svc.settings.body_timeout_s)
    try:
        doc = parse_json(body)  # refuses deep nesting, which pickling a job would not survive
    except (ValueError, RecursionError) as exc:  # also 5000-digit numbers, deep nesting
        why = "nested too deeply" if isinstance(exc, RecursionError) else str(exc)
        raise Problem(400, "malformed-json", "malformed JSON",
                      f"The request body is not valid JSON ({why}). Send an execute document "
                      "such as {\"inputs\": {...}}.") from None
    if not isinstance(doc, dict):
        raise Problem(400, "invalid-request", "invalid execute request",
                      "The execute request must be a JSON object with 'inputs'.")
    if doc.get("subscriber") is not None:
        raise Problem(400, "callbacks-unsupported", "callbacks not supported",
                      "This service does not send callbacks; drop 'subscriber' and poll the "
                      "job with Prefer: respond-async.")
    response_kind = doc.get("response", "raw")
    if response_kind not in ("raw", "document"):
        raise Problem(400, "invalid-request", "invalid response kind",
                      "'response' must be 'raw' or 'document'.")
    plan = documents.plan_outputs(process, doc.get("outputs"))
    store = svc.store

    def find_upload(upload_id: str) -> Path | None:
        upload = store.get_upload(upload_id, owner)
        return None if upload is None else store.upload_path(upload)

    ctx = CheckContext(owner, svc.settings.max_features, svc.settings.max_vertices, find_upload)
    try:
        inputs = await anyio.to_thread.run_sync(process.validate, doc.get("inputs"), ctx)
    except InputProblem as exc:
        raise invalid_input(exc.input_id, exc.message) from None
    except RutwiseError as exc:
        raise from_rutwise_error(exc) from None
    wants_async = "respond-async" in prefer_tokens(prefer)
    is_async = ("async-execute" in process.job_control
                and (wants_async or "sync-execute" not in process.job_control))
    job = store.create_job(owner, process.id, {
        "inputs": inputs, "plan": plan, "response": response_kind})
    task = svc.runner.submit(job.id, process, inputs, frozenset(m for _, m in plan.values()))
    base = _base(request)
    job_url = f"{base}/jobs/{job.id}"
    if is_async:
        headers = {"Location": job_url, "Link": f'<{job_url}>; rel="monitor"'}
        if wants_async:
            headers["Preference-Applied"] = "respond-async"
        return JSONResponse(documents.status_info(job, base), status_code=201, headers=headers)
    headers = {"Link": f'<{job_url}>; rel="monitor"'}
    try:
        await asyncio.wait_for(asyncio.shield(task), svc.settings.sync_timeout_s)
    except TimeoutError:
        raise Problem(504, "sync-time-limit", "result not ready in time",
                      f"The job did not finish within {svc.settings.sync_timeout_s:g} s, the "
                      f"limit of a synchronous execution; it keeps running as job {job.id}. "
                      "Poll its status (Location header), or send 'Prefer: respond-async'.",
                      headers={**headers, "Location": job_url}, jobID=job.id) from None
    done = store.get_job(job.id)
    if done is not None and done.status in ("accepted", "running"):
        raise Problem(503, "service-stopping", "service stopping",
                      "The service is shutting down and did not finish the job. Submit it "
                      "again in a moment.", headers=headers)
    return _results_or_problem(store, done, plan, response_kind, base, headers)


def _results_or_problem(store: Any, job: Job | None, plan: documents.Plan, response_kind: str,
                        base: str, headers: dict[str, str]) -> Response:
    if job is None:
        raise Problem(500, "internal-error", "job lost", "The job vanished. Submit it again.")
    if job.status in ("accepted", "running"):
        raise Problem(404, RESULT_NOT_READY, "result not ready",
                      f"Job {job.id} is {job.status} ({job.progress}%). Poll /jobs/{job.id} "
                      "until it is successful.", headers=headers)
    if job.status == "dismissed":
        raise Problem(410, "job-dismissed", "job dismissed",
                      f"Job {job.id} was dismissed; its results were deleted. Submit it again.",
                      headers=headers)
    if job.status == "failed":
        problem = Problem.from_body(job.problem or {
            "status": 500, "title": "job failed", "detail": job.message})
        problem.headers.update(headers)
        problem.extra.setdefault("jobID", job.id)
        raise problem
    return documents.results_response(store, job, plan, response_kind, base, headers)


# --- jobs -------------------------------------------------------------------------------------


def _interval(text: str) -> tuple[dt.datetime | None, dt.datetime | None]:
    def one(part: str) -> dt.datetime | None:
        if part in ("", ".."):
            return None
        value = dt.datetime.fromisoformat(part.replace("Z", "+00:00"))
        return value if value.tzinfo else value.replace(tzinfo=dt.UTC)

    try:
        if "/" in text:
            lo, hi = text.split("/", 1)
            return one(lo), one(hi)
        instant = one(text)
        return instant, instant
    except ValueError:
        raise Problem(400, "invalid-parameter", "invalid datetime",
                      f"datetime {text!r} is not an RFC 3339 instant or interval such as "
                      "'2026-01-01T00:00:00Z/..'.") from None


@router.get("/jobs", dependencies=[JsonOnly], summary="Your jobs")
def list_jobs(
    request: Request, owner: Owner,
    type: Annotated[list[Literal["process"]] | None, Query()] = None,  # noqa: A002
    processID: Annotated[list[str] | None, Query()] = None,  # noqa: N803
    status: Annotated[list[Literal[STATUSES]] | None, Query()] = None,  # type: ignore[valid-type]
    datetime: Annotated[str | None, Query(max_length=100)] = None,
    minDuration: Annotated[int | None, Query(ge=0)] = None,  # noqa: N803
    maxDuration: Annotated[int | None, Query(ge=0)] = None,  # noqa: N803
    limit: Annotated[int, Query(ge=1, le=10000)] = 10,
    offset: Annotated[int, Query(ge=0, le=1_000_000)] = 0,
) -> JSONResponse:
    svc = _service(request)
    jobs = svc.store.list_jobs(owner)
    if processID:
        jobs = [j for j in jobs if j.process_id in processID]
    if status:
        jobs = [j for j in jobs if j.status in status]
    if datetime:
        lo, hi = _interval(datetime)
        jobs = [j for j in jobs if (lo is None or parse_time(j.created) >= lo)
                and (hi is None or parse_time(j.created) <= hi)]
    if minDuration is not None:
        jobs = [j for j in jobs if (j.duration_s or 0.0) >= minDuration]
    if maxDuration is not None:
        jobs = [j for j in jobs if (j.duration_s or 0.0) <= maxDuration]
    base = _base(request)
    page = jobs[offset:offset + limit]
    query = request.url.query
    links = [documents.link(f"{base}/jobs" + (f"?{query}" if query else ""), "self",
                            "this list")]
    if offset + limit < len(jobs):
        params = dict(request.query_params)
        params.update(limit=str(limit), offset=str(offset + limit))
        from urllib.parse import urlencode

        links.append(documents.link(f"{base}/jobs?{urlencode(params)}", "next", "next page"))
    return JSONResponse({"jobs": [documents.status_info(j, base, svc.store.checksums(j))
                                  for j in page], "links": links})


def _own_job(request: Request, job_id: str, owner: str) -> Job:
    job = _service(request).store.get_job(job_id, owner)
    if job is None:
        raise not_found_job(job_id)
    return job


@router.get("/jobs/{job_id}", dependencies=[JsonOnly], summary="Status of a job")
def job_status(request: Request, job_id: JOB_ID, owner: Owner) -> JSONResponse:
    job = _own_job(request, job_id, owner)
    return JSONResponse(documents.status_info(job, _base(request),
                                              _service(request).store.checksums(job)))


@router.get("/jobs/{job_id}/results", summary="Results of a job")
def job_results(request: Request, job_id: JOB_ID, owner: Owner) -> Response:
    job = _own_job(request, job_id, owner)
    store = _service(request).store
    plan: documents.Plan = {}
    kind = "raw"
    if job.status == "successful":
        try:
            saved = json.loads((store.job_dir(job.id) / "request.json").read_text(
                encoding="utf-8"))
        except OSError:
            raise Problem(410, "result-gone", "results gone",
                          f"The files of job {job.id} are no longer there. Submit the job "
                          "again.") from None
        plan = {k: (v[0], v[1]) for k, v in saved["plan"].items()}
        kind = saved["response"]
    return _results_or_problem(store, job, plan, kind, _base(request), {})


@router.get("/jobs/{job_id}/downloads/{name}", summary="A result file of a job")
def job_download(request: Request, job_id: JOB_ID, name: Annotated[str, PathParam(
        max_length=200)], owner: Owner) -> FileResponse:
    job = _own_job(request, job_id, owner)
    store = _service(request).store
    if job.status != "successful":
        _results_or_problem(store, job, {}, "raw", _base(request), {})
    found = documents.download_file(store, job, name)
    if found is None:
        raise Problem(404, "no-such-file", "no such result file",
                      f"Job {job_id} has no result file {name!r}; its results document links "
                      "the files it has.")
    path, media = found
    return FileResponse(path, media_type=media, filename=f"rutwise-{job.id[:8]}-{name}")


@router.delete("/jobs/{job_id}", dependencies=[JsonOnly], summary="Dismiss a job")
async def dismiss_job(request: Request, job_id: JOB_ID, owner: Owner) -> JSONResponse:
    """Stops the job if it runs and deletes its results; the job then reads 'dismissed'."""
    svc = _service(request)
    _own_job(request, job_id, owner)
    svc.store.dismiss(job_id)
    await svc.runner.stop(job_id)
    svc.store.remove_files(job_id)
    job = _own_job(request, job_id, owner)
    return JSONResponse(documents.status_info(job, _base(request)))


# --- uploads ----------------------------------------------------------------------------------


def _suffix(media: str, name: str | None) -> str:
    if media in UPLOAD_TYPES:
        return UPLOAD_TYPES[media]
    suffix = Path(name or "").suffix.lower()
    if media in ("application/octet-stream", "") and suffix in UPLOAD_SUFFIXES:
        return suffix
    raise Problem(415, "unsupported-media-type", "unsupported upload type",
                  f"Uploads are GeoPackage, GeoJSON, GPX, FlatGeobuf or GeoTIFF; got Content-Type "
                  f"{media or 'none'!r}. Send one of {', '.join(UPLOAD_TYPES)}, or "
                  "application/octet-stream with ?name=<file name with its extension>.")


def _validate_upload(path: Path, max_features: int, max_vertices: int) -> tuple[str, int,
                                                                                 str | None]:
    if path.suffix in RASTER_SUFFIXES:
        from .builtin import check_raster  # rasterio loads only when a raster comes

        return "raster", 0, check_raster(path)
    layer = read_layer(path, max_features=max_features)
    vertices = sum(len(p) for parts in layer.parts for p in parts)
    if vertices > max_vertices:
        raise LimitExceeded(f"The layer has {vertices} vertices; the limit is {max_vertices}.",
                            "Simplify or split the layer.")
    return layer.layer, len(layer), layer.crs


def _upload_doc(upload: Upload, base: str) -> dict[str, Any]:
    href = f"{base}/uploads/{upload.id}"
    return {"id": upload.id, "href": href, "fileName": upload.file_name,
            "mediaType": upload.media_type, "size": upload.size, "layer": upload.layer,
            "features": upload.features, "crs": upload.crs, "created": upload.created,
            "links": [documents.link(href, "self", "this upload")]}


@router.post("/uploads", status_code=201, summary="Upload a rut layer or a raster",
             openapi_extra={"requestBody": _UPLOAD_BODY})
async def upload(request: Request, owner: Owner,
                 name: Annotated[str | None, Query(max_length=200)] = None) -> JSONResponse:
    """Streams the body to disk (size-limited), checks that it is a readable line layer or a
    single-band georeferenced raster, and returns an id and an href to give as {"href": ...}
    input."""
    svc = _service(request)
    media = _media_type(request)
    suffix = _suffix(media, name)
    limit = svc.settings.max_upload_bytes
    upload_id = new_id()
    folder = svc.store.upload_dir(upload_id)
    folder.mkdir(parents=True)
    path = folder / f"upload{suffix}"
    try:
        declared = request.headers.get("content-length")
        if declared is not None and declared.isdigit() and int(declared) > limit:
            raise _too_large(int(declared), limit)
        size = 0
        partial = folder / ".partial"
        with open(partial, "wb") as fh:
            async with _body_deadline(svc.settings.body_timeout_s):
                async for chunk in request.stream():
                    size += len(chunk)
                    if size > limit:
                        raise _too_large(size, limit)
                    fh.write(chunk)
        if size == 0:
            raise Problem(400, "empty-upload", "empty upload",
                          "The upload has no content. Send the file as the request body.")
        partial.replace(path)
        try:
            layer, features, crs = await anyio.to_thread.run_sync(
                _validate_upload, path, svc.settings.max_features, svc.settings.max_vertices)
        except RutwiseError as exc:
            exc.message = exc.message.replace(str(path), repr(name or path.name)[1:-1])
            if isinstance(exc, BadInput):
                exc.hint = exc.hint or ("Check that the file is a complete vector layer or "
                                        "GeoTIFF.")
            raise
    except BaseException:
        shutil.rmtree(folder, ignore_errors=True)
        raise
    record = Upload(upload_id, owner, path.name, media or "application/octet-stream", size,
                    layer, features, crs, now())
    svc.store.add_upload(record)
    doc = _upload_doc(record, _base(request))
    return JSONResponse(doc, status_code=201, headers={"Location": doc["href"]})


@router.get("/uploads/{upload_id}", dependencies=[JsonOnly], summary="An upload")
def upload_info(request: Request, upload_id: Annotated[str, PathParam(max_length=64)],
                owner: Owner) -> JSONResponse:
    record = _service(request).store.get_upload(upload_id, owner)
    if record is None:
        raise Problem(404, "no-such-upload", "no such upload",
                      f"There is no upload {upload_id!r} for this caller. POST a file to "
                      "/uploads.")
    return JSONResponse(_upload_doc(record, _base(request)))


# --- operations -------------------------------------------------------------------------------


@router.get("/health", summary="Liveness and readiness")
def health(request: Request) -> JSONResponse:
    """Open to all; with API keys on it omits the job counts (they are on /metrics, which
    needs a key)."""
    svc = _service(request)
    cluster: dict[str, Any] = {"configured": bool(svc.settings.scheduler)}
    if svc.settings.scheduler:
        from .cluster import reachable

        cluster["reachable"] = reachable(svc.settings.scheduler) is None
    doc: dict[str, Any] = {"status": "ok", "version": geoops.__version__}
    if not svc.settings.api_keys:
        counts = svc.store.count_by_status()
        doc.update(jobs_running=counts["running"], jobs_queued=counts["accepted"])
    doc.update(workers=svc.settings.workers, cluster=cluster)
    return JSONResponse(doc)


@router.get("/metrics", summary="Prometheus metrics", response_class=PlainTextResponse)
def metrics(request: Request, _owner: Owner) -> PlainTextResponse:
    """Job counts and run times of all keys together (no job ids); needs a key when keys
    are on."""
    store = _service(request).store
    lines = ["# HELP rutwise_jobs Jobs in the store by status.", "# TYPE rutwise_jobs gauge"]
    lines += [f'rutwise_jobs{{status="{k}"}} {v}' for k, v in store.count_by_status().items()]
    durations = np.asarray(store.durations(), dtype=float)
    lines += ["# HELP rutwise_job_duration_seconds Run time of finished jobs (started to "
              "finished).", "# TYPE rutwise_job_duration_seconds summary"]
    for q in (0.5, 0.9, 0.99):
        value = float(np.quantile(durations, q)) if durations.size else float("nan")
        lines.append(f'rutwise_job_duration_seconds{{quantile="{q}"}} {value:.6g}')
    lines.append(f"rutwise_job_duration_seconds_sum {float(durations.sum()):.6g}")
    lines.append(f"rutwise_job_duration_seconds_count {durations.size}")
    return PlainTextResponse("\n".join(lines) + "\n",
                             media_type="text/plain; version=0.0.4; charset=utf-8")
