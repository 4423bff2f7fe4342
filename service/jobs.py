"""The job and upload store: one SQLite database (WAL mode) plus one folder per job.

Layout under the data directory::

    rutwise.sqlite           jobs and uploads tables
    jobs/<job id>/           request.json, result files, integrity.json (checksums),
                             results.json (manifest, written last), problem.json
    uploads/<upload id>/     the uploaded file

Every file is written atomically (temporary file in the same folder, then rename), so a reader
never sees half a result. :meth:`JobStore.recover` marks jobs that a dead service left
``accepted`` or ``running`` as ``failed`` with the reason, and deletes what a killed service
left half-made: temporary files, and upload folders that were never recorded. Jobs and
uploads carry an ``owner`` (a digest of the API key that created them, empty on an open
service); every read is scoped to it. No HTTP here.

Test hook: when the environment variable ``RUTWISE_TEST_PAUSE_BEFORE_RENAME`` is set to
``<seconds>:<name>[,<name>...]``, :func:`write_atomic` waits that long between writing the
temporary file of a file with one of those names and renaming it, so that tests can kill the
service in the middle of writing a result. Unset (always, outside tests), nothing changes.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import re
import shutil
import sqlite3
import tempfile
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

STATUSES = ("accepted", "running", "successful", "failed", "dismissed")
ACTIVE = ("accepted", "running")
_ID = re.compile(r"^[0-9a-f]{32}$")

_SCHEMA = """
CREATE TABLE IF NOT EXISTS jobs (
    id TEXT PRIMARY KEY,
    owner TEXT NOT NULL,
    process_id TEXT NOT NULL,
    status TEXT NOT NULL,
    message TEXT NOT NULL DEFAULT '',
    progress INTEGER NOT NULL DEFAULT 0,
    created TEXT NOT NULL,
    started TEXT,
    finished TEXT,
    updated TEXT NOT NULL,
    worker_pid INTEGER,
    problem TEXT
);
CREATE INDEX IF NOT EXISTS jobs_owner_created ON jobs (owner, created);
CREATE TABLE IF NOT EXISTS uploads (
    id TEXT PRIMARY KEY,
    owner TEXT NOT NULL,
    file_name TEXT NOT NULL,
    media_type TEXT NOT NULL,
    size INTEGER NOT NULL,
    layer TEXT NOT NULL,
    features INTEGER NOT NULL,
    crs TEXT,
    created TEXT NOT NULL
);
"""


def now() -> str:
    """Current UTC time as RFC 3339 text with microseconds (sorts as text)."""
    return dt.datetime.now(dt.UTC).isoformat(timespec="microseconds").replace("+00:00", "Z")


def parse_time(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00"))


def new_id() -> str:
    return uuid.uuid4().hex


def is_id(text: str) -> bool:
    """True for the ids this store makes (32 lowercase hex): nothing else touches a path."""
    return bool(_ID.match(text))


PAUSE_VAR = "RUTWISE_TEST_PAUSE_BEFORE_RENAME"


def _test_pause(name: str) -> None:
    """The test hook of the module docstring (nothing unless ``PAUSE_VAR`` is set)."""
    spec = os.environ.get(PAUSE_VAR)
    if spec:
        seconds, _, names = spec.partition(":")
        if name in names.split(","):
            time.sleep(float(seconds))


def write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder and a rename."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        _test_pause(path.name)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def json_bytes(doc: Any) -> bytes:
    """The bytes :func:`write_json` writes for ``doc`` (UTF-8, no spaces)."""
    return json.dumps(doc, ensure_ascii=False, separators=(",", ":")).encode()


def write_json(path: Path, doc: Any) -> None:
    write_atomic(path, json_bytes(doc))


@dataclass(frozen=True)
class Job:
    id: str
    owner: str
    process_id: str
    status: str
    message: str
    progress: int
    created: str
    started: str | None
    finished: str | None
    updated: str
    worker_pid: int | None
    problem: dict[str, Any] | None

    @property
    def duration_s(self) -> float | None:
        if self.started is None:
            return None
        end = parse_time(self.finished) if self.finished else dt.datetime.now(dt.UTC)
        return (end - parse_time(self.started)).total_seconds()


@dataclass(frozen=True)
class Upload:
    id: str
    owner: str
    file_name: str
    media_type: str
    size: int
    layer: str
    features: int
    crs: str | None
    created: str


class JobStore:
    """Jobs and uploads in ``<data_dir>/rutwise.sqlite``; safe to use from several processes."""

    def __init__(self, data_dir: Path, create: bool = True) -> None:
        self.data_dir = Path(data_dir).resolve()
        self.db_path = self.data_dir / "rutwise.sqlite"
        if not create:  # a worker process: the service made everything already
            return
        self.data_dir.mkdir(parents=True, exist_ok=True)
        (self.data_dir / "jobs").mkdir(exist_ok=True)
        (self.data_dir / "uploads").mkdir(exist_ok=True)
        with self._db() as db:
            db.execute("PRAGMA journal_mode=WAL")
            db.executescript(_SCHEMA)

    @contextmanager
    def _db(self) -> Iterator[sqlite3.Connection]:
        db = sqlite3.connect(self.db_path, timeout=30, isolation_level=None)
        db.row_factory = sqlite3.Row
        try:
            db.execute("PRAGMA busy_timeout=30000")
            yield db
        finally:
            db.close()

    # --- folders -------------------------------------------------------------------------

    def job_dir(self, job_id: str) -> Path:
        if not is_id(job_id):
            raise ValueError(f"not a job id: {job_id!r}")
        return self.data_dir / "jobs" / job_id

    def upload_dir(self, upload_id: str) -> Path:
        if not is_id(upload_id):
            raise ValueError(f"not an upload id: {upload_id!r}")
        return self.data_dir / "uploads" / upload_id

    # --- jobs ------------------------------------------------------------------------------

    @staticmethod
    def _job(row: sqlite3.Row | None) -> Job | None:
        if row is None:
            return None
        data = dict(row)
        data["problem"] = json.loads(data["problem"]) if data["problem"] else None
        return Job(**data)

    def create_job(self, owner: str, process_id: str, request: dict[str, Any]) -> Job:
        job_id = new_id()
        write_json(self.job_dir(job_id) / "request.json", request)
        stamp = now()
        with self._db() as db:
            db.execute("INSERT INTO jobs (id, owner, process_id, status, message, created, "
                       "updated) VALUES (?, ?, ?, 'accepted', 'queued', ?, ?)",
                       (job_id, owner, process_id, stamp, stamp))
        job = self.get_job(job_id)
        assert job is not None
        return job

    def get_job(self, job_id: str, owner: str | None = None) -> Job | None:
        """The job, or None when it does not exist or belongs to another owner."""
        if not is_id(job_id):
            return None
        with self._db() as db:
            row = db.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone()
        job = self._job(row)
        if job is None or (owner is not None and job.owner != owner):
            return None
        return job

    def list_jobs(self, owner: str) -> list[Job]:
        with self._db() as db:
            rows = db.execute("SELECT * FROM jobs WHERE owner = ? ORDER BY created DESC",
                              (owner,)).fetchall()
        return [j for j in (self._job(r) for r in rows) if j is not None]

    def count_by_status(self) -> dict[str, int]:
        with self._db() as db:
            rows = db.execute("SELECT status, COUNT(*) FROM jobs GROUP BY status").fetchall()
        counts = dict.fromkeys(STATUSES, 0)
        counts.update({r[0]: int(r[1]) for r in rows})
        return counts

    def durations(self) -> list[float]:
        """Run times (started to finished, seconds) of successful and failed jobs."""
        with self._db() as db:
            rows = db.execute("SELECT started, finished FROM jobs WHERE status IN "
                              "('successful', 'failed') AND started IS NOT NULL AND "
                              "finished IS NOT NULL").fetchall()
        return [(parse_time(f) - parse_time(s)).total_seconds() for s, f in rows]

    def mark_running(self, job_id: str, pid: int | None) -> bool:
        stamp = now()
        with self._db() as db:
            cur = db.execute("UPDATE jobs SET status='running', message='running', started=?, "
                             "updated=?, worker_pid=? WHERE id=? AND status='accepted'",
                             (stamp, stamp, pid, job_id))
        return cur.rowcount == 1

    def set_progress(self, job_id: str, progress: int, message: str) -> None:
        """Progress report of a running job (from its worker process); ignored otherwise."""
        with self._db() as db:
            db.execute("UPDATE jobs SET progress=?, message=?, updated=? "
                       "WHERE id=? AND status='running'",
                       (max(0, min(100, int(progress))), message, now(), job_id))

    def finish(self, job_id: str, status: str, message: str,
               problem: dict[str, Any] | None = None) -> bool:
        """Move an active job to ``successful`` or ``failed``; False when it was not active
        (e.g. dismissed meanwhile)."""
        stamp = now()
        progress_sql = ", progress=100" if status == "successful" else ""
        with self._db() as db:
            cur = db.execute(
                f"UPDATE jobs SET status=?, message=?, finished=?, updated=?, problem=?"
                f"{progress_sql} WHERE id=? AND status IN ('accepted', 'running')",
                (status, message, stamp, stamp, json.dumps(problem) if problem else None,
                 job_id))
        return cur.rowcount == 1

    def dismiss(self, job_id: str) -> bool:
        """Mark the job dismissed (whatever its status); False when there is no such job."""
        stamp = now()
        with self._db() as db:
            cur = db.execute("UPDATE jobs SET status='dismissed', message='dismissed by the "
                             "client', finished=COALESCE(finished, ?), updated=? WHERE id=?",
                             (stamp, stamp, job_id))
        return cur.rowcount == 1

    def remove_files(self, job_id: str) -> None:
        """Delete the job's folder (request, results) once it is dismissed."""
        shutil.rmtree(self.job_dir(job_id), ignore_errors=True)

    def checksums(self, job: Job) -> dict[str, Any] | None:
        """``{"input_sha256": {input id: hex}, "result_sha256": {file name: hex}}`` of a
        successful job (its ``integrity.json``), or None (other states, older jobs)."""
        if job.status != "successful":
            return None
        try:
            doc: dict[str, Any] = json.loads(
                (self.job_dir(job.id) / "integrity.json").read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None
        return doc

    def recover(self) -> int:
        """Mark jobs left active by a service that stopped as failed, and delete what it left
        half-made (module docstring); returns how many jobs."""
        with self._db() as db:
            active = [r[0] for r in db.execute(
                "SELECT id FROM jobs WHERE status IN ('accepted', 'running')").fetchall()]
            uploads = {r[0] for r in db.execute("SELECT id FROM uploads").fetchall()}
        for job_id in active:
            for leftover in self.job_dir(job_id).glob(".*"):
                leftover.unlink(missing_ok=True)
        for folder in (self.data_dir / "uploads").iterdir():
            if folder.name not in uploads:
                shutil.rmtree(folder, ignore_errors=True)
        stamp = now()
        problem = {
            "type": "urn:rutwise:problem:service-stopped", "title": "job interrupted",
            "status": 503,
            "detail": "The service stopped while this job was queued or running, so it did "
                      "not finish. Submit it again.",
        }
        with self._db() as db:
            cur = db.execute(
                "UPDATE jobs SET status='failed', message=?, finished=?, updated=?, problem=? "
                "WHERE status IN ('accepted', 'running')",
                ("failed: the service stopped before the job finished; submit it again",
                 stamp, stamp, json.dumps(problem)))
        return cur.rowcount

    # --- uploads ---------------------------------------------------------------------------

    def add_upload(self, upload: Upload) -> None:
        with self._db() as db:
            db.execute("INSERT INTO uploads VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                       (upload.id, upload.owner, upload.file_name, upload.media_type,
                        upload.size, upload.layer, upload.features, upload.crs,
                        upload.created))

    def get_upload(self, upload_id: str, owner: str) -> Upload | None:
        if not is_id(upload_id):
            return None
        with self._db() as db:
            row = db.execute("SELECT * FROM uploads WHERE id = ? AND owner = ?",
                             (upload_id, owner)).fetchone()
        return None if row is None else Upload(**dict(row))

    def upload_path(self, upload: Upload) -> Path:
        return self.upload_dir(upload.id) / upload.file_name
