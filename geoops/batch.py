"""The nightly batch: many rut layers analysed on a Dask cluster, resumably, into one merge.

:func:`find_inputs` (:mod:`geoops.batch_inputs`) turns a folder or a manifest into
:class:`BatchInput` items; :func:`run_batch` analyses them on Dask distributed and writes,
under the output folder::

    layers/<name>.gpkg   one result per input (passes, ruts, run_metadata), atomically
    ledger.json          finished and failed inputs by key, rewritten atomically after each
    merged.gpkg          every finished input's passes and ruts with a ``source`` field
    report.md, report.json   counts by verdict, failures with reasons, timings

An input's key is the sha256 of its bytes together with its options, the tool version, a
fingerprint of the engine's source and the work-unit size. Each result file carries its key in
``run_metadata`` (``batch_key``); an input whose result file holds the current key is skipped,
whatever the ledger says, so a run killed between writing a result and updating the ledger
loses nothing, and a half-written file never exists under its final name (a killed run's
temporary files are removed when the next run starts). Failed inputs are tried again on the
next run. One batch at a time may use an output folder (a lock file held while the run lasts).

Large layers are cut into work units along the connected components of a neighbour graph that
holds every candidate pair (:mod:`geoops.batch_units`); smaller ones are one unit each. Workers
read inputs and write results by path, so a remote cluster needs the input and output folders
on a shared file system.

:func:`submit_analysis` is the entry point for other callers (the HTTP service): one analysis
on the cluster named by ``RUTWISE_SCHEDULER``, returned as a :class:`concurrent.futures.Future`.

No argument parsing or terminal output here beyond the progress callback; see
:mod:`geoops.batch_cli`.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import datetime as _dt
import json
import os
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyproj
from pyogrio.raw import read as raw_read

from . import __version__
from . import errors as _errors
from .batch_defaults import DEFAULT_UNIT_RUTS, SCHEDULER_ENV
from .batch_inputs import KEY_SCHEME, BatchInput, find_inputs, input_key
from .batch_report import merge_results, report_markdown
from .batch_units import UnitPiece, analyze_unit, assemble_units, components, plan_units
from .errors import CrsError, RutwiseError, writing_to
from .io import write_geopackage
from .pipeline import CAUTION, AnalyzeOptions, analyze_layer, read_input, write_result

if TYPE_CHECKING:  # pragma: no cover
    from distributed import Client

__all__ = [
    "BatchInput",
    "BatchRun",
    "Outcome",
    "find_inputs",
    "input_key",
    "result_key",
    "run_batch",
    "submit_analysis",
]

LAYERS_DIR = "layers"
LEDGER_NAME = "ledger.json"
MERGED_NAME = "merged.gpkg"
REPORT_MD = "report.md"
REPORT_JSON = "report.json"
LOCK_NAME = ".rutwise-batch.lock"


# ---------------------------------------------------------------------------------------------
# work done on the workers (module-level functions: Dask pickles them by reference)


@dataclass(frozen=True)
class Outcome:
    """What became of one input in one run.

    ``status`` is ``finished`` (analysed in this run), ``skipped`` (its result was already
    there under the same key) or ``failed`` (``kind``, ``reason`` and ``hint`` say why).
    ``seconds`` is the worker time spent on it (for a skipped input, in the run that made it).
    """

    name: str
    source: str
    key: str
    status: str
    seconds: float = 0.0
    work_units: int = 1
    kind: str = ""
    reason: str = ""
    hint: str = ""
    finished_utc: str = ""


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()


def _failure(name: str, source: str, key: str, exc: BaseException, seconds: float) -> Outcome:
    if isinstance(exc, RutwiseError):
        kind, reason, hint = exc.kind, exc.message, exc.hint
    elif isinstance(exc, OSError):
        kind = "os-error"
        reason = f"{exc.strerror or type(exc).__name__}: {exc.filename or ''}".strip()
        hint = "Check that the file exists and can be read."
    else:
        kind = "internal-error"
        reason = f"{type(exc).__name__}: {exc}"
        hint = "This is a bug in rutwise; report it with the input file."
    return Outcome(name, source, key, "failed", seconds, kind=kind, reason=reason, hint=hint)


@dataclass(frozen=True)
class FirstStep:
    """The first task's answer: the finished outcome, or the work units to run next."""

    outcome: Outcome | None
    units: list[list[int]] = field(default_factory=list)
    n_features: int = 0
    seconds: float = 0.0


def first_step(item: BatchInput, key: str, out_path: str, unit_ruts: int | None) -> FirstStep:
    """Read the layer; analyse and write it whole when it is small, else plan its units."""
    t0 = time.perf_counter()
    try:
        layer = read_input(item.path, item.options)
        if unit_ruts is not None and len(layer) > unit_ruts:
            units = plan_units(components(layer, item.options), unit_ruts)
            if len(units) > 1:
                return FirstStep(None, units, len(layer), time.perf_counter() - t0)
        result = analyze_layer(layer, item.options)
        result.metadata.update(batch_key=key, batch_source=item.source, work_units="1")
        write_result(result, out_path)
    except Exception as exc:  # every failure is reported per input, never ends the run
        return FirstStep(_failure(item.name, item.source, key, exc, time.perf_counter() - t0))
    seconds = time.perf_counter() - t0
    return FirstStep(
        Outcome(item.name, item.source, key, "finished", seconds, finished_utc=_now()),
        seconds=seconds,
    )


def unit_step(item: BatchInput, features: list[int], first: bool) -> tuple[UnitPiece, float]:
    """Analyse one work unit of a large layer (geometries back in the input CRS)."""
    t0 = time.perf_counter()
    layer = read_input(item.path, item.options)
    piece = analyze_unit(layer, features, item.options, first)
    return piece, time.perf_counter() - t0


def assemble_step(
    item: BatchInput, key: str, out_path: str, step: FirstStep, *pieces: tuple[UnitPiece, float]
) -> Outcome:
    """Renumber the units of one layer into one result and write it atomically."""
    t0 = time.perf_counter()
    try:
        layers, crs_wkt, metadata = assemble_units([p for p, _ in pieces], step.n_features)
        metadata.update(batch_key=key, batch_source=item.source)
        write_geopackage(out_path, layers, crs_wkt, metadata)
    except Exception as exc:
        return _failure(item.name, item.source, key, exc, time.perf_counter() - t0)
    seconds = step.seconds + sum(s for _, s in pieces) + time.perf_counter() - t0
    return Outcome(
        item.name,
        item.source,
        key,
        "finished",
        seconds,
        work_units=len(pieces),
        finished_utc=_now(),
    )


# ---------------------------------------------------------------------------------------------
# the output folder


def _write_atomic(path: Path, text: str) -> None:
    """Write a text file under a hidden temporary name, then rename it into place."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def result_key(path: str | os.PathLike[str]) -> str | None:
    """The ``batch_key`` stored in a result GeoPackage, or None (missing, unreadable, other)."""
    if not os.path.exists(path):
        return None
    try:
        _, _, _, (keys, values) = raw_read(
            os.fspath(path), layer="run_metadata", read_geometry=False
        )
    except Exception:
        return None
    found = dict(zip(keys.tolist(), values.tolist(), strict=True)).get("batch_key")
    return str(found) if found else None


class Ledger:
    """Finished and failed inputs of an output folder, by result name; saved atomically."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.entries: dict[str, dict[str, Any]] = {}
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
            if doc.get("scheme") == KEY_SCHEME:
                self.entries = dict(doc.get("entries", {}))
        except (OSError, ValueError, AttributeError):
            self.entries = {}  # missing or unreadable: the result files still hold their keys

    def record(self, outcome: Outcome, save: bool = True) -> None:
        entry = asdict(outcome)
        if outcome.status == "skipped":
            previous = self.entries.get(outcome.name, {})
            entry.update(
                status="finished",
                seconds=previous.get("seconds", outcome.seconds),
                finished_utc=previous.get("finished_utc", ""),
            )
        self.entries[outcome.name] = entry
        if save:
            self.save()

    def save(self) -> None:
        doc = {"scheme": KEY_SCHEME, "version": __version__, "entries": self.entries}
        _write_atomic(self.path, json.dumps(doc, indent=1, sort_keys=True))


@contextlib.contextmanager
def _folder_lock(outdir: Path) -> Iterator[None]:
    import fcntl

    fh = open(outdir / LOCK_NAME, "a+")
    try:
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise RutwiseError(
                f"Another batch is writing to {str(outdir)!r}.",
                "Wait for it to finish, or give another output folder with -o.",
            ) from None
        yield
    finally:
        fh.close()


def _remove_leftovers(outdir: Path) -> int:
    """Delete the temporary files a killed run left behind: every hidden file in ``layers/``
    (a folder of ours), and in the output folder those our atomic writes name (hidden, ending
    in ``.tmp``, or a hidden ``.merged.*`` GeoPackage with its journal files)."""
    removed = 0
    for folder, ours in (
        (outdir / LAYERS_DIR, lambda n: True),
        (outdir, lambda n: n.endswith(".tmp") or n.startswith(".merged.")),
    ):
        if not folder.is_dir():
            continue
        for entry in folder.iterdir():
            name = entry.name
            if entry.is_file() and name.startswith(".") and name != LOCK_NAME and ours(name):
                entry.unlink(missing_ok=True)
                removed += 1
    return removed


# ---------------------------------------------------------------------------------------------
# running


def connect(scheduler: str | None = None, workers: int | None = None) -> tuple[Client, Any]:
    """A Dask client: to ``scheduler`` (or ``$RUTWISE_SCHEDULER``) when given, else to a new
    LocalCluster on loopback with one single-threaded worker process per core (or
    ``workers``), dashboard off. Returns the client and the cluster to close (None when the
    cluster is someone else's)."""
    from distributed import Client

    address = scheduler or os.environ.get(SCHEDULER_ENV) or None
    if address:
        try:
            return Client(address, timeout="20s", set_as_default=False), None
        except (OSError, TimeoutError) as exc:
            raise RutwiseError(
                f"Cannot reach the Dask scheduler at {address!r} ({exc}).",
                "Start it (dask scheduler) or check --scheduler / RUTWISE_SCHEDULER.",
            ) from None
    cluster = local_cluster(workers or os.cpu_count() or 1)
    return Client(cluster, set_as_default=False), cluster


def local_cluster(workers: int) -> Any:
    """A LocalCluster of ``workers`` single-threaded processes on loopback, dashboard off (the
    scheduler's small HTTP endpoint on a free port)."""
    from distributed import LocalCluster

    return LocalCluster(
        n_workers=workers,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
    )


@dataclass
class BatchRun:
    """What :func:`run_batch` did: per input outcome (input order) and the written files."""

    outcomes: list[Outcome]
    report: dict[str, Any]
    merged: Path | None
    report_md: Path
    report_json: Path

    @property
    def failed(self) -> list[Outcome]:
        return [o for o in self.outcomes if o.status == "failed"]


ProgressFn = Callable[[Outcome, int, int], None]


def _execute(
    client: Client,
    todo: list[tuple[BatchInput, str]],
    outdir: Path,
    unit_ruts: int | None,
) -> Iterator[Outcome]:
    """Submit every input to the cluster and yield outcomes as they complete."""
    from distributed import as_completed

    track: dict[Any, tuple[str, BatchInput, str]] = {}
    for item, key in todo:
        out = str(outdir / LAYERS_DIR / f"{item.name}.gpkg")
        fut = client.submit(first_step, item, key, out, unit_ruts, pure=False)
        track[fut] = ("first", item, key)
    pending = as_completed(list(track), loop=client.loop)
    for fut in pending:
        kind, item, key = track.pop(fut)
        out = str(outdir / LAYERS_DIR / f"{item.name}.gpkg")
        try:
            value = fut.result()
        except Exception as exc:  # a worker died, or the task could not run at all
            yield _failure(item.name, item.source, key, exc, 0.0)
            continue
        if isinstance(value, FirstStep) and value.outcome is None:
            pieces = [
                client.submit(unit_step, item, unit, n == 0, pure=False)
                for n, unit in enumerate(value.units)
            ]
            joined = client.submit(assemble_step, item, key, out, value, *pieces, pure=False)
            track[joined] = ("assemble", item, key)
            pending.add(joined)
            continue
        outcome = value.outcome if isinstance(value, FirstStep) else value
        assert isinstance(outcome, Outcome)
        yield outcome


def run_batch(
    inputs: list[BatchInput],
    outdir: str | os.PathLike[str],
    client: Client | None = None,
    scheduler: str | None = None,
    workers: int | None = None,
    merged_crs: str | None = None,
    unit_ruts: int | None = DEFAULT_UNIT_RUTS,
    progress: ProgressFn | None = None,
    source: str = "",
) -> BatchRun:
    """Analyse ``inputs`` into ``outdir``, skipping those already finished under their key.

    Parameters
    ----------
    client
        A Dask client to use; else one is made by :func:`connect` from ``scheduler`` and
        ``workers`` (and closed at the end).
    merged_crs
        CRS of ``merged.gpkg``; default: the inputs' CRS when they all share one, else
        EPSG:4326.
    unit_ruts
        Largest work unit, in ruts; None analyses every layer whole.
    progress
        Called with each outcome, the number done so far and the total.
    """
    started, t_start = _now(), time.perf_counter()
    if merged_crs is not None:
        try:
            pyproj.CRS.from_user_input(merged_crs)
        except pyproj.exceptions.CRSError:
            raise CrsError(
                f"Unknown CRS {merged_crs!r} for the merged output.",
                "Give an EPSG code such as EPSG:27700, or a WKT/PROJ definition.",
            ) from None
    out = Path(outdir)
    with writing_to(out):
        (out / LAYERS_DIR).mkdir(parents=True, exist_ok=True)
        (out / LOCK_NAME).touch()
    with _folder_lock(out):
        _remove_leftovers(out)
        ledger = Ledger(out / LEDGER_NAME)
        outcomes: dict[str, Outcome] = {}
        todo: list[tuple[BatchInput, str]] = []
        t0 = time.perf_counter()
        done = 0
        for item in inputs:
            try:
                key = input_key(item.path, item.options, unit_ruts)
            except OSError as exc:
                outcomes[item.name] = _failure(item.name, item.source, "", exc, 0.0)
                continue
            if result_key(out / LAYERS_DIR / f"{item.name}.gpkg") == key:
                old = ledger.entries.get(item.name, {})
                outcomes[item.name] = Outcome(
                    item.name,
                    item.source,
                    key,
                    "skipped",
                    float(old.get("seconds", 0.0)) if old.get("key") == key else 0.0,
                    work_units=int(old.get("work_units", 1)),
                    finished_utc=str(old.get("finished_utc", "")),
                )
            else:
                todo.append((item, key))
        for outcome in outcomes.values():
            ledger.record(outcome, save=False)
            done += 1
            if progress:
                progress(outcome, done, len(inputs))
        ledger.save()
        t_hash = time.perf_counter() - t0
        t0 = time.perf_counter()
        description = "none needed"
        t_connect = 0.0
        if todo:
            own = client is None
            cluster = None
            if client is None:
                client, cluster = connect(scheduler, workers)
            description = _describe(client, cluster)
            t_connect = time.perf_counter() - t0
            t0 = time.perf_counter()
            try:
                for outcome in _execute(client, todo, out, unit_ruts):
                    if outcome.status == "failed":
                        (out / LAYERS_DIR / f"{outcome.name}.gpkg").unlink(missing_ok=True)
                    outcomes[outcome.name] = outcome
                    ledger.record(outcome)
                    done += 1
                    if progress:
                        progress(outcome, done, len(inputs))
            finally:
                if own:
                    client.close()
                    if cluster is not None:
                        cluster.close()
        t_run = time.perf_counter() - t0
        ordered = [outcomes[item.name] for item in inputs]
        t0 = time.perf_counter()
        finished = [
            (item, o) for item, o in zip(inputs, ordered, strict=True) if o.status != "failed"
        ]
        merged, per_layer, crs_text = merge_results(
            [(item.source, out / LAYERS_DIR / f"{item.name}.gpkg") for item, _ in finished],
            out / MERGED_NAME,
            merged_crs,
        )
        if merged is None:
            (out / MERGED_NAME).unlink(missing_ok=True)  # never leave an older merge behind
        t_merge = time.perf_counter() - t0
        report = build_report(
            inputs,
            ordered,
            per_layer,
            {
                "started_utc": started,
                "finished_utc": _now(),
                "source": source,
                "output": str(out),
                "cluster": description,
                "merged": MERGED_NAME if merged else None,
                "merged_crs": crs_text,
                "timings_s": {
                    "keys": round(t_hash, 3),
                    "cluster_start": round(t_connect, 3),
                    "analysis_wall": round(t_run, 3),
                    "analysis_worker_total": round(
                        sum(o.seconds for o in ordered if o.status == "finished"), 3
                    ),
                    "merge": round(t_merge, 3),
                    "total": round(time.perf_counter() - t_start, 3),
                },
            },
        )
        md, js = out / REPORT_MD, out / REPORT_JSON
        _write_atomic(js, json.dumps(report, indent=1))
        _write_atomic(md, report_markdown(report))
    return BatchRun(ordered, report, merged, md, js)


def _describe(client: Client, cluster: Any) -> str:
    try:
        n = len(client.scheduler_info().get("workers", {}))
    except Exception:  # pragma: no cover - information only
        n = 0
    if cluster is not None:
        where = "a local cluster"
    else:
        where = f"the scheduler at {client.scheduler.address}"
    return f"{where} with {n} worker{'s' if n != 1 else ''}"


# ---------------------------------------------------------------------------------------------
# merging and reporting


def build_report(
    inputs: list[BatchInput],
    outcomes: list[Outcome],
    per_layer: dict[str, dict[str, Any]],
    run: dict[str, Any],
) -> dict[str, Any]:
    """The run report as a JSON-ready document."""
    layers = []
    verdicts: dict[str, int] = {}
    for item, o in zip(inputs, outcomes, strict=True):
        stats = per_layer.get(item.source, {}) if o.status != "failed" else {}
        for v, n in stats.get("passes_by_verdict", {}).items():
            verdicts[v] = verdicts.get(v, 0) + n
        row: dict[str, Any] = {
            "source": item.source,
            "result": f"{LAYERS_DIR}/{item.name}.gpkg" if o.status != "failed" else None,
            "status": o.status,
            "key": o.key,
            "seconds": round(o.seconds, 3),
            "work_units": o.work_units,
            **stats,
        }
        if o.status == "failed":
            row.update(kind=o.kind, reason=o.reason, hint=o.hint)
        layers.append(row)
    count = {
        s: sum(1 for o in outcomes if o.status == s) for s in ("finished", "skipped", "failed")
    }
    return {
        "tool": "rutwise",
        "version": __version__,
        **run,
        "inputs": len(inputs),
        **count,
        "passes_by_verdict": dict(sorted(verdicts.items())),
        "passes": sum(verdicts.values()),
        "undecided_passes": sum(r.get("undecided_passes", 0) for r in layers),
        "unpaired_ruts": sum(r.get("unpaired_ruts", 0) for r in layers),
        "rut_length_km": round(sum(r.get("rut_length_m", 0.0) for r in layers) / 1000.0, 4),
        "failures": [
            {"source": r["source"], "kind": r["kind"], "reason": r["reason"], "hint": r["hint"]}
            for r in layers
            if r["status"] == "failed"
        ],
        "layers": layers,
        "caution": CAUTION,
    }


# ---------------------------------------------------------------------------------------------
# one analysis for other callers (the HTTP service)

_clients: dict[str, Client] = {}
_clients_lock = threading.Lock()
#: submitted tasks still running: a Dask future that nobody holds is cancelled
_in_flight: set[Any] = set()

_ERROR_KINDS: dict[str, type[RutwiseError]] = {
    cls.kind: cls
    for cls in (
        RutwiseError,
        _errors.BadInput,
        _errors.CrsError,
        _errors.LimitExceeded,
        _errors.NotEstimable,
    )
}


def submit_analysis(
    path: str | os.PathLike[str],
    options: AnalyzeOptions,
    out_path: str | os.PathLike[str],
    scheduler: str | None = None,
) -> concurrent.futures.Future[Outcome]:
    """Run one analysis on the Dask cluster and write its result GeoPackage atomically.

    Parameters
    ----------
    path
        The input layer; it must be readable by the workers under this path.
    options
        As for :func:`geoops.pipeline.analyze_file` (``out_crs`` is not applied).
    out_path
        The result ``.gpkg``; written by a worker (temporary file, then rename), so its folder
        must be shared with the workers.
    scheduler
        ``tcp://host:port``; default ``$RUTWISE_SCHEDULER``. One client per address is kept
        open for the life of the process.

    Returns
    -------
    concurrent.futures.Future
        Resolves to a finished :class:`Outcome`, or raises the :class:`RutwiseError` subclass
        that the analysis raised (``kind``, message and hint kept), or :class:`RutwiseError`
        when the cluster could not run it. ``cancel()`` on it does not stop a running task.

    Raises
    ------
    RutwiseError
        When no scheduler is configured or it cannot be reached.
    """
    address = scheduler or os.environ.get(SCHEDULER_ENV)
    if not address:
        raise RutwiseError(
            "No Dask scheduler is configured.",
            f"Set {SCHEDULER_ENV}=tcp://host:port or run the analysis locally.",
        )
    with _clients_lock:
        client = _clients.get(address)
        if client is None or client.status not in ("running", "connecting"):
            client, _ = connect(address)
            _clients[address] = client
    item = BatchInput(Path(path).resolve(), Path(path).name, options, Path(out_path).stem)
    key = input_key(item.path, options, None)
    task = client.submit(first_step, item, key, os.fspath(out_path), None, pure=False)
    answer: concurrent.futures.Future[Outcome] = concurrent.futures.Future()

    def settle(done: Any) -> None:
        with _clients_lock:
            _in_flight.discard(done)
        if not answer.set_running_or_notify_cancel():
            return
        try:
            step = done.result()
        except Exception as exc:
            answer.set_exception(
                RutwiseError(
                    f"The cluster could not run the analysis ({type(exc).__name__}: {exc}).",
                    "Check the Dask workers' logs and that they can read the input file.",
                )
            )
            return
        outcome = step.outcome
        if outcome.status == "failed":
            cls = _ERROR_KINDS.get(outcome.kind, RutwiseError)
            answer.set_exception(cls(outcome.reason, outcome.hint))
        else:
            answer.set_result(outcome)

    with _clients_lock:
        _in_flight.add(task)
    task.add_done_callback(settle)
    return answer
