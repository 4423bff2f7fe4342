"""The JSON documents and result responses of the service, built from store records.

Status documents (OGC ``statusInfo``), process summaries and descriptions with their links, the
output plan of an execute request (which output, by value or by reference, in which media
type), and the results responses of the standard's table: a JSON document, one raw output,
``multipart/related`` for several raw outputs, or 204 with ``Link`` headers for raw references.

A result file is read only after its bytes matched the checksum the job recorded
(``integrity.json``); a damaged file is never sent (500 ``result-damaged``).
"""

from __future__ import annotations

import json
import uuid
from pathlib import Path
from typing import Any

from fastapi import Response
from fastapi.responses import FileResponse, JSONResponse

from geoops.integrity import file_sha256

from .jobs import Job, JobStore
from .problems import Problem
from .processes import INLINE_TYPES, JSON, TEXT, Process

OGC_REL = "http://www.opengis.net/def/rel/ogc/1.0/"
CONFORMANCE = [
    "http://www.opengis.net/spec/ogcapi-processes-1/1.0/conf/core",
    "http://www.opengis.net/spec/ogcapi-processes-1/1.0/conf/ogc-process-description",
    "http://www.opengis.net/spec/ogcapi-processes-1/1.0/conf/json",
    "http://www.opengis.net/spec/ogcapi-processes-1/1.0/conf/job-list",
    "http://www.opengis.net/spec/ogcapi-processes-1/1.0/conf/dismiss",
]
OPENAPI_TYPE = "application/vnd.oai.openapi+json;version=3.1"

#: one output of a request: (transmission mode, media type)
Plan = dict[str, tuple[str, str]]


def link(href: str, rel: str, title: str, media: str = JSON) -> dict[str, str]:
    return {"href": href, "rel": rel, "type": media, "title": title}


def landing(base: str) -> dict[str, Any]:
    return {
        "title": "rutwise processing service",
        "description": "Reads vehicle passes from mapped wheel ruts (OGC API - Processes).",
        "links": [
            link(f"{base}/", "self", "this document"),
            link(f"{base}/openapi.json", "service-desc", "the API definition", OPENAPI_TYPE),
            link(f"{base}/docs", "service-doc", "the API documentation", "text/html"),
            link(f"{base}/conformance", OGC_REL + "conformance", "conformance classes"),
            link(f"{base}/processes", OGC_REL + "processes", "the processes"),
            link(f"{base}/jobs", OGC_REL + "job-list", "your jobs"),
        ],
    }


def process_summary(process: Process, base: str) -> dict[str, Any]:
    doc = process.summary()
    doc["links"] = [link(f"{base}/processes/{process.id}", "self", "process description")]
    return doc


def process_description(process: Process, base: str) -> dict[str, Any]:
    doc = process.document()
    doc["links"] = [
        link(f"{base}/processes/{process.id}", "self", "this description"),
        link(f"{base}/processes/{process.id}/execution", OGC_REL + "execute",
             "execute the process"),
        link(f"{base}/jobs", OGC_REL + "job-list", "your jobs"),
    ]
    return doc


def status_info(job: Job, base: str, checksums: dict[str, Any] | None = None
                ) -> dict[str, Any]:
    """The OGC statusInfo document of a job; with ``checksums`` (a successful job's
    :meth:`JobStore.checksums`) also ``input_sha256`` and ``result_sha256``."""
    doc: dict[str, Any] = {
        "jobID": job.id, "type": "process", "processID": job.process_id, "status": job.status,
        "message": job.message, "progress": job.progress, "created": job.created,
    }
    if job.started:
        doc["started"] = job.started
    if job.finished:
        doc["finished"] = job.finished
    doc["updated"] = job.updated
    if checksums:
        doc["input_sha256"] = checksums.get("input_sha256", {})
        doc["result_sha256"] = checksums.get("result_sha256", {})
    href = f"{base}/jobs/{job.id}"
    links = [link(href, "self", "this job"), link(f"{base}/jobs", "up", "your jobs")]
    if job.status == "successful":
        links.append(link(f"{href}/results", OGC_REL + "results", "the results"))
    elif job.status == "failed":
        links.append(link(f"{href}/results", OGC_REL + "exceptions", "why the job failed",
                          "application/problem+json"))
    doc["links"] = links
    return doc


def plan_outputs(process: Process, requested: Any) -> Plan:
    """Which outputs to return and how; all outputs by value when none are named.

    Raises
    ------
    Problem
        An unknown output, an unknown media type, or a media type that cannot go inline.
    """
    if requested is None or requested == {}:
        return {k: ("value", spec.formats[0]) for k, spec in process.outputs.items()}
    if not isinstance(requested, dict):
        raise Problem(400, "invalid-outputs", "invalid outputs",
                      "'outputs' must be an object keyed by output id.")
    plan: Plan = {}
    for out_id, wanted in requested.items():
        spec = process.outputs.get(out_id)
        if spec is None:
            raise Problem(400, "no-such-output", "no such output",
                          f"Process {process.id!r} has no output {out_id!r}; its outputs are: "
                          f"{', '.join(process.outputs)}.")
        wanted = wanted if isinstance(wanted, dict) else {}
        mode = wanted.get("transmissionMode", "value")
        if mode not in ("value", "reference"):
            raise Problem(400, "invalid-outputs", "invalid transmission mode",
                          f"transmissionMode of {out_id!r} must be 'value' or 'reference'.")
        fmt = wanted.get("format") if isinstance(wanted.get("format"), dict) else {}
        media = fmt.get("mediaType") if isinstance(fmt, dict) else None
        if media is None:
            media = spec.formats[0] if mode == "value" else (spec.reference_format
                                                             or spec.formats[0])
        if media not in spec.formats:
            raise Problem(400, "unsupported-format", "unsupported output format",
                          f"Output {out_id!r} comes as {', '.join(spec.formats)}; "
                          f"not {media!r}.")
        if mode == "value" and media not in INLINE_TYPES:
            raise Problem(400, "unsupported-format", "format only by reference",
                          f"Output {out_id!r} as {media} is a file; ask for it with "
                          "\"transmissionMode\": \"reference\".")
        plan[out_id] = (mode, media)
    return plan


def _manifest(store: JobStore, job: Job) -> dict[str, dict[str, str]]:
    path = store.job_dir(job.id) / "results.json"
    try:
        data: dict[str, dict[str, str]] = json.loads(path.read_text(encoding="utf-8"))
    except OSError:
        raise Problem(410, "result-gone", "results gone",
                      f"The result files of job {job.id} are no longer there. Submit the job "
                      "again.") from None
    return data


def checked_file(store: JobStore, job: Job, name: str) -> Path:
    """The path of result file ``name`` of ``job`` once its bytes match the recorded
    checksum (jobs from before checksums were recorded pass unchecked).

    Raises
    ------
    Problem
        500 ``result-damaged`` when the file is missing or differs from its checksum.
    """
    path = store.job_dir(job.id) / name
    expected = (store.checksums(job) or {}).get("result_sha256", {}).get(name)
    if expected is not None and file_sha256(path, reuse=False) != expected:
        raise Problem(500, "result-damaged", "result damaged",
                      f"The result file {name!r} of job {job.id} no longer matches its "
                      "checksum, so it is not sent. Submit the job again, and tell the "
                      "operator.")
    return path


def download_file(store: JobStore, job: Job, name: str) -> tuple[Path, str] | None:
    """Path (checked, :func:`checked_file`) and media type of a result file of ``job`` named
    in its manifest, else None."""
    for formats in _manifest(store, job).values():
        for media, file_name in formats.items():
            if file_name == name:
                return checked_file(store, job, file_name), media
    return None


def _inline(store: JobStore, job: Job, name: str, media: str) -> Any:
    text = checked_file(store, job, name).read_text(encoding="utf-8")
    return text if media == TEXT else json.loads(text)


def results_response(store: JobStore, job: Job, plan: Plan, response: str, base: str,
                     headers: dict[str, str] | None = None) -> Response:
    """The results of a successful job as the request asked for them (OGC results table)."""
    manifest = _manifest(store, job)
    sums = (store.checksums(job) or {}).get("result_sha256", {})
    headers = dict(headers or {})

    def href(out_id: str, media: str) -> str:
        return f"{base}/jobs/{job.id}/downloads/{manifest[out_id][media]}"

    if response == "document":
        doc: dict[str, Any] = {}
        for out_id, (mode, media) in plan.items():
            if mode == "value":
                doc[out_id] = {"value": _inline(store, job, manifest[out_id][media], media),
                               "mediaType": media}
            else:
                doc[out_id] = {"href": href(out_id, media), "type": media, "rel": out_id}
                if manifest[out_id][media] in sums:
                    doc[out_id]["sha256"] = sums[manifest[out_id][media]]
        return JSONResponse(doc, headers=headers)
    if all(mode == "reference" for mode, _ in plan.values()):
        links = [f'<{href(o, m)}>; rel="{OGC_REL}results"; type="{m}"; title="{o}"'
                 for o, (_, m) in plan.items()]
        headers["Link"] = ", ".join(filter(None, [headers.get("Link"), *links]))
        return Response(status_code=204, headers=headers)
    if len(plan) == 1:
        (out_id, (_, media)), = plan.items()
        return FileResponse(checked_file(store, job, manifest[out_id][media]),
                            media_type=media, headers=headers)
    boundary = uuid.uuid4().hex
    chunks: list[bytes] = []
    for out_id, (mode, media) in plan.items():
        head = f"--{boundary}\r\nContent-ID: <{out_id}>\r\n"
        if mode == "value":
            body = checked_file(store, job, manifest[out_id][media]).read_bytes()
            chunks.append(f"{head}Content-Type: {media}\r\n\r\n".encode() + body + b"\r\n")
        else:
            chunks.append(f"{head}Content-Type: {media}\r\nContent-Location: "
                          f"{href(out_id, media)}\r\n\r\n\r\n".encode())
    chunks.append(f"--{boundary}--\r\n".encode())
    return Response(b"".join(chunks), headers=headers,
                    media_type=f'multipart/related; boundary="{boundary}"')
