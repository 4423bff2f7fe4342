"""A process shipped by another package, for the plugin test (loaded by entry point)."""

from __future__ import annotations

from typing import Any

from service.jobs import write_json
from service.processes import JSON, InputSpec, Manifest, OutputSpec, Process, RunContext


def _run(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    write_json(ctx.work_dir / "sum.json", {"total": sum(inputs["values"])})
    return {"total": {JSON: "sum.json"}}


def make() -> Process:
    return Process(
        id="sum-values", version="0.0.1", title="Sum", description="Adds numbers.",
        inputs={"values": InputSpec("Numbers", "Numbers to add.",
                                    {"type": "array", "items": {"type": "number"}},
                                    max_occurs=-1)},
        outputs={"total": OutputSpec("Total", "Their sum.", {"type": "object"}, (JSON,))},
        run=_run, job_control=("sync-execute",), output_transmission=("value",))
