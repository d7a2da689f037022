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
from typing import Any, TypeVar

from workers.planning.budget import DEFAULT_SECONDS
from workers.planning.errors import Issue, SpanwrightError

PREFIX = "SPANWRIGHT_"

T = TypeVar("T")


def knob(default: T, doc: str, *, zero_ok: bool = False, secret: bool = False) -> T:
    """A setting: its default, what it does (:func:`variables` lists it with its
    environment variable), whether 0 is a meaningful value of a number (otherwise it
    must be > 0), and whether it is a secret (never in ``repr``)."""
    meta = {"doc": doc, "zero_ok": zero_ok}
    made: T = field(default=default, repr=not secret, metadata=meta)
    return made


class SettingsError(SpanwrightError):
    """An environment variable holds a value the service cannot use."""

    kind = "bad-settings"
    status = 500
    title = "The service is misconfigured"


@dataclass(frozen=True, slots=True)
class Settings:
    """Everything configurable about the API and its workers (times in seconds)."""

    redis_url: str | None = knob(None, "the Redis URL; unset: the embedded store (``serve`` only)")
    key_prefix: str = knob("spanwright", "prefix of every Redis key we own (RQ keeps ``rq:``)")
    queue_name: str = knob("spanwright", "the one RQ queue the API fills and the workers drain")
    retention: int = knob(86_400, "seconds records, results and keys are kept once finished")
    max_request_bytes: int = knob(32 * 1024 * 1024, "largest request body (bytes; 413 beyond)")
    max_jobs: int = knob(200_000, "most jobs in one batch (422 beyond)")
    max_nodes: int = knob(10_000, "most nodes in one request (422 beyond)")
    max_time_budget: float = knob(60.0, "ceiling on a request's ``time_budget`` (422 beyond)")
    default_time_budget: float = knob(DEFAULT_SECONDS, "``time_budget`` when a request has none")
    max_wait: float = knob(30.0, "longest ``Prefer: wait=N`` honoured (longer ones are cut)")
    #: below gunicorn's threads (8), so probes and reads always find a thread; a request
    #: past it is answered at once (202, no Preference-Applied) and polls
    max_waiters: int = knob(6, "requests of one process waiting (``Prefer: wait``) at once")
    #: so reads, cancels and finishing workers keep the rest (no effect without maxmemory)
    store_high_water: float = knob(0.9, "share of Redis's maxmemory from which new work is 503")
    job_timeout_margin: int = knob(30, "RQ's job timeout past the budget: a crash guard only")
    progress_interval: float = knob(0.25, "how often a solving worker publishes progress at most")
    max_page: int = knob(200, "most items one page of ``GET /v1/plans`` may hold")
    default_tenant: str = knob("local", "tenant of keyless requests (loopback callers only)")
    #: lines ``<tenant> <sha256 hex of the key> [admin]``
    keys_file: str = knob("", "the file of API keys; empty: keyless")
    max_queued_per_tenant: int = knob(1_000, "most queued + solving records of a tenant (429)")
    max_queued_total: int = knob(10_000, "most queued + solving records in all (429 beyond)")
    rate_limit: int = knob(1_200, "requests one tenant may make per ``rate_window`` (429)")
    rate_window: int = knob(60, "length of the request-rate window in seconds (a fixed window)")
    sentinels: str = knob("", "Redis Sentinels ``host1:26379,host2:26379``, instead of the URL")
    sentinel_master: str = knob("", "the master the Sentinels monitor (with ``sentinels``)")
    sentinel_db: int = knob(0, "database number on the Sentinel-named master", zero_ok=True)
    sentinel_password: str = knob("", "password of the Redis data nodes", secret=True)
    log_level: str = knob("INFO", "level of the JSON logs: DEBUG, INFO, WARNING, ERROR, CRITICAL")
    #: stored finished, listed, counted and replayed as a worker's plan, while the queue has
    #: a worker; larger, exact and simulated plans take the queue
    solve_here_max_jobs: int = knob(2_000, "most jobs of a plan solved by the API", zero_ok=True)

    def __post_init__(self) -> None:
        issues: list[Issue] = []
        if not re.fullmatch(r"[A-Za-z0-9_.{}-]{1,64}", self.key_prefix):
            issues.append(Issue(("SPANWRIGHT_KEY_PREFIX",), "letters, digits, _ . - { } only"))
        if not re.fullmatch(r"[A-Za-z0-9_.-]{1,64}", self.queue_name):
            issues.append(Issue(("SPANWRIGHT_QUEUE_NAME",), "letters, digits, _ . - only"))
        for f in fields(self):
            v = getattr(self, f.name)
            number = isinstance(v, int | float) and not isinstance(v, bool)
            if f.metadata["zero_ok"]:
                if number and not v >= 0:
                    issues.append(Issue((env_var(f.name),), "must be a whole number >= 0"))
            elif number and not (math.isfinite(v) and v > 0):
                issues.append(Issue((env_var(f.name),), "must be a finite number > 0"))
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
            var = env_var(f.name)
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


def env_var(name: str) -> str:
    """The environment variable of the setting ``name`` (``REDIS_URL`` for ``redis_url``)."""
    return "REDIS_URL" if name == "redis_url" else PREFIX + name.upper()


def variables() -> list[tuple[str, Any, str]]:
    """Every setting as ``(environment variable, default, what it does)``, in order: the
    one table the documentation of the environment follows (``deploy/README.md``)."""
    return [(env_var(f.name), f.default, f.metadata["doc"]) for f in fields(Settings)]


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
