"""Settings of the HTTP service: defaults, then an optional TOML file, then RUTWISE_* variables.

The file is named by ``RUTWISE_SETTINGS``; its keys are the field names below (``data_dir``,
``port``, ``api_keys`` as a list, ...). Each field can also be set by an environment variable
``RUTWISE_<FIELD>`` (lists as comma-separated text), which wins over the file. This module
reads configuration only; it starts nothing and touches no data.
"""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any

ENV_PREFIX = "RUTWISE_"
SETTINGS_FILE_VAR = "RUTWISE_SETTINGS"


class SettingsError(ValueError):
    """A setting has a value of the wrong kind; the message names the setting."""


@dataclass(frozen=True)
class Settings:
    """Everything the service can be configured with.

    Attributes
    ----------
    data_dir
        Folder of the job database, job results and uploads; created when missing.
    host, port
        Address to listen on.
    api_keys
        Accepted bearer tokens; empty means the service is open (no key needed).
    cors_origins
        Origins allowed to call from a browser; empty means no CORS headers.
    max_upload_mb
        Largest upload or execution request body, megabytes.
    max_features, max_vertices
        Largest rut layer an analysis accepts.
    job_timeout_s
        A job running longer is stopped and reported failed.
    workers
        How many jobs run at the same time (each in its own process).
    scheduler
        Address of a Dask scheduler (``tcp://host:port``) on which ``analyze`` jobs compute;
        empty means they compute in the service's own worker processes. The Dask workers
        must see ``data_dir`` under the same path.
    rate_per_s, rate_burst
        With API keys on, each key may send ``rate_burst`` requests at once and
        ``rate_per_s`` per second after that (a token bucket); more get 429. Requests with
        a wrong key are counted per client address. 0 turns the limit off.
    body_timeout_s
        An upload or execution request body that takes longer to arrive gets 408.
    sync_timeout_s
        A synchronous execution still running after this long is answered 504 with a link to
        its job, which keeps running.
    hsts_max_age_s
        When above 0, responses carry ``Strict-Transport-Security`` with this max-age (set it
        only behind HTTPS).
    """

    data_dir: Path = Path("data")
    host: str = "127.0.0.1"
    port: int = 8000
    api_keys: tuple[str, ...] = ()
    cors_origins: tuple[str, ...] = ()
    max_upload_mb: float = 50.0
    max_features: int = 5000
    max_vertices: int = 2_000_000
    job_timeout_s: float = 600.0
    workers: int = 2
    scheduler: str = ""
    rate_per_s: float = 20.0
    rate_burst: int = 60
    body_timeout_s: float = 120.0
    sync_timeout_s: float = 300.0
    hsts_max_age_s: int = 0

    def __post_init__(self) -> None:
        if self.port < 0 or self.port > 65535:
            raise SettingsError(f"port must lie in 0..65535, got {self.port}.")
        for name in ("max_upload_mb", "max_features", "max_vertices", "job_timeout_s",
                     "workers", "body_timeout_s", "sync_timeout_s"):
            if getattr(self, name) <= 0:
                raise SettingsError(f"{name} must be positive, got {getattr(self, name)}.")
        for name in ("rate_per_s", "rate_burst", "hsts_max_age_s"):
            if getattr(self, name) < 0:
                raise SettingsError(f"{name} must be 0 or more, got {getattr(self, name)}.")

    @property
    def max_upload_bytes(self) -> int:
        return int(self.max_upload_mb * 1024 * 1024)


def _convert(name: str, kind: Any, value: Any) -> Any:
    """Turn a file or environment value into the field's type."""
    try:
        if kind is Path or kind == "Path":
            return Path(str(value))
        if kind in (int, "int"):
            return int(value)
        if kind in (float, "float"):
            return float(value)
        if kind in ("tuple[str, ...]",):
            items = value.split(",") if isinstance(value, str) else list(value)
            return tuple(str(v).strip() for v in items if str(v).strip())
        return str(value)
    except (TypeError, ValueError):
        raise SettingsError(f"setting {name!r} has an unusable value {value!r}.") from None


def load_settings(env: Mapping[str, str] | None = None, **overrides: Any) -> Settings:
    """Settings from the defaults, the TOML file named by ``RUTWISE_SETTINGS``, the
    ``RUTWISE_*`` environment variables and finally ``overrides`` (values that are None are
    ignored).

    Examples
    --------
    >>> s = load_settings({"RUTWISE_PORT": "9000", "RUTWISE_API_KEYS": "a, b"})
    >>> s.port, s.api_keys
    (9000, ('a', 'b'))
    """
    env = os.environ if env is None else env
    kinds = {f.name: f.type for f in fields(Settings)}
    values: dict[str, Any] = {}
    file_name = env.get(SETTINGS_FILE_VAR)
    if file_name:
        try:
            with open(file_name, "rb") as fh:
                data = tomllib.load(fh)
        except (OSError, tomllib.TOMLDecodeError) as exc:
            raise SettingsError(f"cannot read the settings file {file_name!r}: {exc}") from None
        unknown = sorted(set(data) - set(kinds))
        if unknown:
            raise SettingsError(f"unknown settings in {file_name!r}: {', '.join(unknown)}; "
                                f"known: {', '.join(kinds)}.")
        values.update({k: _convert(k, kinds[k], v) for k, v in data.items()})
    for name, kind in kinds.items():
        raw = env.get(ENV_PREFIX + name.upper())
        if raw is not None and raw != "":
            values[name] = _convert(name, kind, raw)
    for name, value in overrides.items():
        if name not in kinds:
            raise SettingsError(f"unknown setting {name!r}.")
        if value is not None:
            values[name] = _convert(name, kinds[name], value)
    return replace(Settings(), **values)
