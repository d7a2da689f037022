"""``create_app(settings)``: the Flask app, a thin adapter over store and queue.

Data flows one way: HTTP -> validate (marshmallow shape, then the core's semantics) ->
store -> queue -> (worker: solve -> store) -> HTTP. One error handler turns every error
into RFC 9457 problem+json (``service/problems.py``).
"""

from __future__ import annotations

import redis
from flask import Flask, g, request

from . import auth, limits, problems
from .queue import JobQueue
from .routes import health, plans, replan, sizings
from .services import Services
from .settings import Settings, SettingsError
from .store import Store
from .web import routes as web_routes


def connect(settings: Settings) -> redis.Redis:
    """A Redis client for ``REDIS_URL`` (bytes responses: RQ shares it)."""
    if settings.redis_url is None:
        raise SettingsError("REDIS_URL is not set (the embedded store is made by `serve`)")
    return redis.Redis.from_url(
        settings.redis_url, socket_timeout=60, socket_connect_timeout=5, health_check_interval=30
    )


def create_app(settings: Settings, *, connection: redis.Redis | None = None) -> Flask:
    """The API. ``connection`` defaults to ``REDIS_URL``; ``serve`` passes the embedded one."""
    conn = connection if connection is not None else connect(settings)
    app = Flask("spanwright")
    app.config["MAX_CONTENT_LENGTH"] = settings.max_request_bytes
    app.json.sort_keys = False  # type: ignore[attr-defined]
    store = Store(conn, prefix=settings.key_prefix, retention=settings.retention)
    app.extensions["spanwright"] = Services(settings, store, JobQueue(conn, settings))
    app.register_blueprint(plans.blueprint)
    app.register_blueprint(sizings.blueprint)
    app.register_blueprint(replan.blueprint)
    app.register_blueprint(health.blueprint)
    app.register_blueprint(web_routes.blueprint)
    app.register_error_handler(Exception, problems.handle)
    auth.install(app, settings)  # Bearer keys -> tenant

    @app.before_request
    def _admit() -> None:
        """After authentication: the per-tenant rate limit, then hand plans of killed
        workers back to the queue when a sweep is due (``service/queue.py``). A new
        plan's count may wait for the script that stores it (``limits.defer_rate``)."""
        who = g.get("principal")
        if who is None:  # an open path (health, spec, problems, metrics)
            return
        if request.endpoint != "plans.submit" or not limits.defer_rate(who.tenant):
            limits.check_rate(who.tenant)
        svc: Services = app.extensions["spanwright"]
        svc.queue.reap_if_due()

    @app.teardown_request
    def _count_late(exc: BaseException | None) -> None:
        """A request whose count waited and that stored nothing (refused, replayed) is
        counted once answered."""
        limits.settle(refuse=False)

    return app
