"""The production entry point: ``gunicorn -c deploy/gunicorn.conf.py`` serves ``service.wsgi:app``.

Reads the environment once (:meth:`Settings.from_env`), connects to Redis, builds the app
with :func:`service.app.create_app`, then adds JSON logs with request ids
(:mod:`service.logs`) and ``/metrics`` (:mod:`service.metrics`) from the outside.

Redis is required: ``REDIS_URL`` (``redis://host:6379/0``), or Sentinel with
``SPANWRIGHT_SENTINELS=host1:26379,host2:26379`` and ``SPANWRIGHT_SENTINEL_MASTER=name``
(optional ``SPANWRIGHT_SENTINEL_DB``, and ``SPANWRIGHT_SENTINEL_PASSWORD`` for the data
nodes; the password is never logged). All of them, and ``SPANWRIGHT_LOG_LEVEL`` (default
INFO), are fields of :class:`Settings`. The embedded in-memory store is for
``spanwright serve`` only; without Redis this module refuses to start with a message.

``app`` is built when first read (a module ``__getattr__``), so importing the module has no
side effect. ``PROMETHEUS_MULTIPROC_DIR`` (prometheus_client's own variable) is set and
wiped by the start-up shell or unit, never here.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Mapping

import redis
from flask import Flask
from redis.sentinel import Sentinel

from .app import connect, create_app
from .logs import configure_logging, init_request_logging
from .metrics import init_metrics
from .settings import Settings, SettingsError, parse_sentinels

__all__ = ["NoRedis", "build", "parse_sentinels", "sentinel_connection"]

log = logging.getLogger("spanwright.wsgi")


class NoRedis(SystemExit):
    """Raised at import when no Redis is configured: gunicorn stops with the message."""


def sentinel_connection(settings: Settings) -> redis.Redis | None:
    """A client for the current Sentinel master, or None when Sentinel is not configured.

    redis-py's ``master_for`` asks the Sentinels for the master on every new connection and
    reconnects after a failover; RQ shares this client (responses stay bytes).
    """
    if not settings.sentinels:
        return None
    sentinel = Sentinel(settings.sentinel_hosts, socket_timeout=5, socket_connect_timeout=5)
    client: redis.Redis = sentinel.master_for(
        settings.sentinel_master,
        db=settings.sentinel_db,
        password=settings.sentinel_password or None,
        socket_timeout=60,
        socket_connect_timeout=5,
        health_check_interval=30,
    )
    return client


def build(environ: Mapping[str, str]) -> Flask:
    """The configured app for ``environ``; raises :class:`NoRedis` without a Redis."""
    settings = Settings.from_env(environ)
    configure_logging(settings.log_level)
    conn = sentinel_connection(settings)
    if conn is None:
        if settings.redis_url is None:
            raise NoRedis(
                "spanwright: REDIS_URL is not set. The production API needs Redis "
                "(e.g. REDIS_URL=redis://127.0.0.1:6379/0, or SPANWRIGHT_SENTINELS and "
                "SPANWRIGHT_SENTINEL_MASTER); `spanwright serve` runs the in-memory demo."
            )
        conn = connect(settings)
        where = "REDIS_URL"
    else:
        where = "Sentinel master " + settings.sentinel_master
    app = create_app(settings, connection=conn)
    init_request_logging(app)
    init_metrics(
        app, settings, conn, multiprocess_dir=environ.get("PROMETHEUS_MULTIPROC_DIR") or None
    )
    log.info("api ready", extra={"redis": where, "queue": settings.queue_name, "pid": os.getpid()})
    return app


def _load() -> Flask:
    """``build(os.environ)``; a configuration error exits with one line on stderr."""
    try:
        return build(os.environ)
    except SettingsError as exc:
        raise NoRedis(f"spanwright: {exc.detail}") from None


_built: list[Flask] = []


def __getattr__(name: str) -> Flask:
    """``service.wsgi.app`` is built on first access (gunicorn's ``getattr``), so importing
    this module for its functions starts nothing."""
    if name != "app":
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    if not _built:
        _built.append(_load())
    return _built[0]
