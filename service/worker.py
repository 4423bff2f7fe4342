"""Runs jobs, each in its own worker process, at most ``workers`` at a time.

A job's process is forked from a preloaded fork server (the engine is imported once), so
starting one costs little, and it can be stopped: dismissing a job terminates its process, and
a job running past ``job_timeout_s`` is terminated and reported failed. The worker process
writes the result files, their checksums (``integrity.json``) and last ``results.json`` (or
``problem.json``) into the job folder and reports progress to the store; this module then
records the outcome. A job counts as successful only when ``results.json`` exists, so a
process killed while writing leaves a job that is reported failed. The event loop only
waits on process sentinels; it never computes.
"""

from __future__ import annotations

import asyncio
import json
import logging
import multiprocessing
import multiprocessing.context
import multiprocessing.process
import sys
import traceback
from pathlib import Path
from typing import Any

import anyio.to_thread

from geoops.errors import RutwiseError
from geoops.integrity import file_sha256

from .jobs import JobStore, write_json
from .processes import InputProblem, Process, RunContext, RunFunction
from .settings import Settings

log = logging.getLogger("service")

_PRELOAD = ["geoops.pipeline", "geoops.raster", "geoops.scenarios", "service.builtin",
            "service.problems"]
_STOP_GRACE_S = 3.0


def _context() -> multiprocessing.context.ForkServerContext:
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(_PRELOAD)
    return ctx


def _warm_up() -> None:
    """Nothing: started once so that the fork server exists before the first job."""


def _problem_doc(exc: BaseException) -> dict[str, Any]:
    from .problems import Problem, from_rutwise_error, invalid_input

    problem: Problem
    if isinstance(exc, RutwiseError):
        problem = from_rutwise_error(exc)
    elif isinstance(exc, InputProblem):
        problem = invalid_input(exc.input_id, exc.message)
    else:
        problem = Problem(500, "internal-error", "internal error",
                          f"The process failed unexpectedly ({type(exc).__name__}: {exc}). "
                          "Report it with the job id.")
    return problem.body()


def job_main(data_dir: str, job_id: str, run: RunFunction, inputs: dict[str, Any],
             max_features: int, max_vertices: int, wanted: frozenset[str],
             scheduler: str = "") -> None:
    """Body of a worker process: run one job and leave its outcome in the job folder."""
    store = JobStore(Path(data_dir), create=False)
    work = store.job_dir(job_id)
    ctx = RunContext(work, store.data_dir, max_features, max_vertices,
                     lambda pct, msg: store.set_progress(job_id, pct, msg), wanted, scheduler)
    try:
        manifest = run(inputs, ctx)
    except BaseException as exc:  # everything ends up in problem.json
        if not isinstance(exc, RutwiseError | InputProblem):
            traceback.print_exc(file=sys.stderr)
        doc = _problem_doc(exc)
        for folder in (work, store.data_dir):  # no server paths in messages to clients
            doc["detail"] = str(doc["detail"]).replace(f"{folder}/", "")
        write_json(work / "problem.json", doc)
        return
    from .builtin import input_checksums

    files = sorted({name for formats in manifest.values() for name in formats.values()})
    write_json(work / "integrity.json", {
        "input_sha256": input_checksums(inputs, store.data_dir),
        "result_sha256": {name: file_sha256(work / name, reuse=False) for name in files}})
    write_json(work / "results.json", manifest)


def _exit_future(proc: multiprocessing.process.BaseProcess) -> asyncio.Future[None]:
    """A future that completes when ``proc`` (started) ends; one reader per process."""
    loop = asyncio.get_running_loop()
    done: asyncio.Future[None] = loop.create_future()

    def _ready() -> None:
        loop.remove_reader(proc.sentinel)
        proc.join()
        if not done.done():
            done.set_result(None)

    loop.add_reader(proc.sentinel, _ready)
    return done


async def _wait(done: asyncio.Future[None], timeout: float) -> bool:
    """True when ``done`` completes within ``timeout`` seconds (``done`` is never cancelled)."""
    try:
        await asyncio.wait_for(asyncio.shield(done), timeout)
        return True
    except TimeoutError:
        return False


class Runner:
    """The job runner of one service (create it inside the running event loop)."""

    def __init__(self, store: JobStore, settings: Settings) -> None:
        self.store = store
        self.settings = settings
        self._ctx = _context()
        self._slots = asyncio.Semaphore(settings.workers)
        self._procs: dict[str, multiprocessing.process.BaseProcess] = {}
        self._tasks: dict[str, asyncio.Task[None]] = {}
        self._exits: dict[str, asyncio.Future[None]] = {}
        self._closing = False

    async def start(self) -> None:
        """Start the fork server (imports the engine once) before the first job."""
        proc = self._ctx.Process(target=_warm_up, daemon=True)
        await anyio.to_thread.run_sync(proc.start)
        await _wait(_exit_future(proc), 120.0)

    def submit(self, job_id: str, process: Process, inputs: dict[str, Any],
               wanted: frozenset[str] = frozenset()) -> asyncio.Task[None]:
        """Queue the job; the task ends when the job's outcome is recorded. ``wanted`` are
        the media types the request asked for."""
        task = asyncio.create_task(self._run(job_id, process, inputs, wanted))
        self._tasks[job_id] = task
        task.add_done_callback(lambda _t: self._tasks.pop(job_id, None))
        return task

    @property
    def running(self) -> int:
        return len(self._procs)

    async def _run(self, job_id: str, process: Process, inputs: dict[str, Any],
                   wanted: frozenset[str]) -> None:
        try:
            await self._run_in_slot(job_id, process, inputs, wanted)
        except Exception as exc:  # a fault of the runner itself: never leave the job active
            log.exception("job %s could not be run", job_id)
            self.store.finish(job_id, "failed", "failed: the service could not run the job", {
                "type": "urn:rutwise:problem:internal-error", "title": "internal error",
                "status": 500,
                "detail": f"The service could not run the job ({type(exc).__name__}). Submit "
                          "it again; if it happens again, report it with the job id."})

    async def _run_in_slot(self, job_id: str, process: Process, inputs: dict[str, Any],
                           wanted: frozenset[str]) -> None:
        async with self._slots:
            job = self.store.get_job(job_id)
            if job is None or job.status != "accepted":
                return  # dismissed while queued
            proc = self._ctx.Process(
                target=job_main, daemon=True, name=f"rutwise-job-{job_id}",
                args=(str(self.store.data_dir), job_id, process.run, inputs,
                      self.settings.max_features, self.settings.max_vertices, wanted,
                      self.settings.scheduler))
            await anyio.to_thread.run_sync(proc.start)
            done = _exit_future(proc)
            self._procs[job_id] = proc
            self._exits[job_id] = done
            try:
                if not self.store.mark_running(job_id, proc.pid):
                    await self.stop(job_id)  # dismissed while starting
                    return
                finished = await _wait(done, self.settings.job_timeout_s)
                if self._closing:
                    return  # close() records the job as stopped with the service
                if not finished:
                    await self.stop(job_id)
                    limit = self.settings.job_timeout_s
                    self.store.finish(job_id, "failed", f"failed: ran longer than {limit:g} s", {
                        "type": "urn:rutwise:problem:time-limit", "title": "job too long",
                        "status": 413,
                        "detail": f"The job ran longer than the limit of {limit:g} s and was "
                                  "stopped. Split the input into smaller layers, or ask the "
                                  "operator to raise job_timeout_s."})
                    return
                self._settle(job_id, proc.exitcode)
            finally:
                self._procs.pop(job_id, None)
                self._exits.pop(job_id, None)

    def _settle(self, job_id: str, exitcode: int | None) -> None:
        work = self.store.job_dir(job_id)
        if exitcode == 0 and (work / "results.json").exists():
            self.store.finish(job_id, "successful", "finished")
            return
        problem_file = work / "problem.json"
        if problem_file.exists():
            problem = json.loads(problem_file.read_text(encoding="utf-8"))
            self.store.finish(job_id, "failed", "failed: " + str(problem.get("detail", "")),
                              problem)
            return
        self.store.finish(job_id, "failed", f"failed: the worker process ended unexpectedly "
                                            f"(exit code {exitcode})", {
            "type": "urn:rutwise:problem:worker-lost", "title": "worker process lost",
            "status": 500,
            "detail": f"The worker process ended unexpectedly (exit code {exitcode}). Submit "
                      "the job again; if it happens again, report it with the job id."})

    @staticmethod
    def _terminate(proc: multiprocessing.process.BaseProcess) -> None:
        if proc.exitcode is None:
            proc.terminate()

    async def stop(self, job_id: str) -> bool:
        """Stop the job's worker process if it runs; True when one was stopped."""
        proc, done = self._procs.get(job_id), self._exits.get(job_id)
        if proc is None or done is None:
            return False
        self._terminate(proc)
        if not await _wait(done, _STOP_GRACE_S):
            proc.kill()
            await _wait(done, _STOP_GRACE_S)
        return True

    async def close(self) -> None:
        """Stop every worker process; their jobs are then recorded as failed."""
        self._closing = True
        for job_id in list(self._procs):
            await self.stop(job_id)
        for task in list(self._tasks.values()):
            task.cancel()
        self.store.recover()
