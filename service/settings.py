"""The one typed settings object of the service, read from the environment at start-up.

Every knob is an environment variable prefixed ``SPANWRIGHT_`` (plus the conventional
``REDIS_URL``); :meth:`Settings.from_env` is called once by the command that starts a
process and the result is passed down explicitly: no module reads the environment later.
"""

from __future__ import annotations

import logging
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields
from typing import Any

from workers.planning.budget import DEFAULT_SECONDS
from workers.planning.errors import Issue, SpanwrightError

PREFIX = "SPANWRIGHT_"


class SettingsError(SpanwrightError):
    """An environment variable holds a value the service cannot use."""

    kind = "bad-settings"
    status = 500
    title = "The service is misconfigured"


@dataclass(frozen=True, slots=True)
class Settings:
    """Everything configurable about the API and its workers (times in seconds)."""

    #: ``REDIS_URL``; None means the embedded in-process store (``spanwright serve`` only)
    redis_url: str | None = None
    #: prefix of every Redis key we own (RQ keeps its own ``rq:`` keys)
    key_prefix: str = "spanwright"
    #: the one RQ queue the API fills and the workers drain
    queue_name: str = "spanwright"
    #: how long plans, results and idempotency records are kept after submission
    retention: int = 86_400
    #: largest request body accepted (bytes); larger ones get 413
    max_request_bytes: int = 32 * 1024 * 1024
    #: most jobs in one batch (422 beyond)
    max_jobs: int = 200_000
    #: most nodes in one request (422 beyond)
    max_nodes: int = 10_000
    #: ceiling on a request's ``time_budget`` (422 beyond)
    max_time_budget: float = 60.0
    #: ``time_budget`` when a request gives none
    default_time_budget: float = DEFAULT_SECONDS
    #: longest ``Prefer: wait=N`` honoured; longer waits are cut to this
    max_wait: float = 30.0
    #: requests of one process that may hold a thread in ``Prefer: wait`` at once; keep it
    #: below gunicorn's threads (8) so probes and reads always find a thread. A request
    #: past it is answered at once (202, no Preference-Applied) and polls
    max_waiters: int = 6
    #: refuse new work (503 + Retry-After) once Redis uses this share of its maxmemory,
    #: so reads, cancels and finishing workers keep the rest (no effect without maxmemory)
    store_high_water: float = 0.9
    #: RQ job timeout = time budget + this margin: a crash guard, never the normal stop
    job_timeout_margin: int = 30
    #: how often a solving worker publishes progress at most
    progress_interval: float = 0.25
    #: most items one page of ``GET /v1/plans`` may hold
    max_page: int = 200
    #: tenant of requests in keyless mode (no keys file: loopback callers only)
    default_tenant: str = "local"
    #: file of API keys, lines ``<tenant> <sha256 hex of the key> [admin]``; "" = keyless
    keys_file: str = ""
    #: most queued + solving records of one tenant (429 beyond; nothing queued is dropped)
    max_queued_per_tenant: int = 1_000
    #: most queued + solving records in the whole service (429 beyond)
    max_queued_total: int = 10_000
    #: requests one tenant may make per ``rate_window`` seconds (429 beyond)
    rate_limit: int = 1_200
    #: length of the request-rate window in seconds (a fixed window)
    rate_window: int = 60
    #: Redis Sentinels, ``host1:26379,host2:26379``; set, they replace ``REDIS_URL``
    sentinels: str = ""
    #: the master name the Sentinels monitor (required with ``sentinels``)
    sentinel_master: str = ""
    #: database number on the Sentinel-named master
    sentinel_db: int = 0
    #: password of the Redis data nodes behind the Sentinels; never logged, not in repr
    sentinel_password: str = field(default="", repr=False)
    #: level of the JSON logs (``DEBUG``, ``INFO``, ``WARNING``, ``ERROR``, ``CRITICAL``)
    log_level: str = "INFO"

    def __post_init__(self) -> None:
        issues: list[Issue] = []
        if not re.fullmatch(r"[A-Za-z0-9_.{}-]{1,64}", self.key_prefix):
            issues.append(Issue(("SPANWRIGHT_KEY_PREFIX",), "letters, digits, _ . - { } only"))
        if not re.fullmatch(r"[A-Za-z0-9_.-]{1,64}", self.queue_name):
            issues.append(Issue(("SPANWRIGHT_QUEUE_NAME",), "letters, digits, _ . - only"))
        for f in fields(self):
            v = getattr(self, f.name)
            number = isinstance(v, int | float) and not isinstance(v, bool)
            if f.name in _MAY_BE_ZERO:
                if number and not v >= 0:
                    issues.append(Issue((PREFIX + f.name.upper(),), "must be a whole number >= 0"))
            elif number and not (math.isfinite(v) and v > 0):
                issues.append(Issue((PREFIX + f.name.upper(),), "must be a finite number > 0"))
        if self.sentinels:
            try:
                if not parse_sentinels(self.sentinels):
                    issues.append(Issue(("SPANWRIGHT_SENTINELS",), "at least one host:port"))
            except SettingsError as exc:
                issues.extend(exc.issues)
            if not self.sentinel_master:
                issues.append(
                    Issue(
                        ("SPANWRIGHT_SENTINEL_MASTER",),
                        "required with SPANWRIGHT_SENTINELS: the master name the Sentinels monitor",
                    )
                )
        if not isinstance(logging.getLevelName(self.log_level.upper()), int):
            issues.append(
                Issue(("SPANWRIGHT_LOG_LEVEL",), "one of DEBUG, INFO, WARNING, ERROR, CRITICAL")
            )
        if self.default_time_budget > self.max_time_budget:
            issues.append(
                Issue(
                    ("SPANWRIGHT_DEFAULT_TIME_BUDGET",),
                    "must not exceed SPANWRIGHT_MAX_TIME_BUDGET",
                )
            )
        if issues:
            raise SettingsError("invalid settings: " + "; ".join(i.where for i in issues), issues)

    @classmethod
    def from_env(cls, environ: Mapping[str, str]) -> Settings:
        """Build from ``environ`` (pass ``os.environ``); a bad value names its variable."""
        values: dict[str, Any] = {}
        issues: list[Issue] = []
        url = environ.get("REDIS_URL", "").strip()
        values["redis_url"] = url or None
        for f in fields(cls):
            if f.name == "redis_url":
                continue
            var = PREFIX + f.name.upper()
            raw = environ.get(var)
            if raw is None or raw.strip() == "":
                continue
            conv: Callable[[str], Any] = _CONVERTERS[type(f.default)]
            try:
                values[f.name] = conv(raw.strip())
            except ValueError:
                issues.append(Issue((var,), f"cannot read {raw!r} as {type(f.default).__name__}"))
        if issues:
            raise SettingsError("invalid settings: " + "; ".join(i.where for i in issues), issues)
        return cls(**values)

    @property
    def embedded(self) -> bool:
        """True when no Redis URL is set: API and worker share an in-process store."""
        return self.redis_url is None

    @property
    def sentinel_hosts(self) -> list[tuple[str, int]]:
        """``sentinels`` as ``[(host, port), ...]`` (empty when Sentinel is not used)."""
        return parse_sentinels(self.sentinels)


#: numeric settings for which 0 is a meaningful value
_MAY_BE_ZERO = frozenset({"sentinel_db"})


def parse_sentinels(raw: str) -> list[tuple[str, int]]:
    """``"h1:26379,h2:26379"`` -> ``[("h1", 26379), ("h2", 26379)]``; bad parts raise."""
    out: list[tuple[str, int]] = []
    for part in (p.strip() for p in raw.split(",")):
        if not part:
            continue
        host, sep, port = part.rpartition(":")
        if not sep or not host or not port.isdigit():
            raise SettingsError(
                f"SPANWRIGHT_SENTINELS: {part!r} is not host:port",
                [Issue(("SPANWRIGHT_SENTINELS",), "comma-separated host:port pairs")],
            )
        out.append((host.strip("[]"), int(port)))
    return out


def _int(raw: str) -> int:
    return int(raw.replace("_", ""))


_CONVERTERS: dict[type, Callable[[str], Any]] = {int: _int, float: float, str: str}
