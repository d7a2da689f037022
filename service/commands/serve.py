"""``spanwright serve``: the HTTP API (and, without ``REDIS_URL``, an in-process worker)."""

from __future__ import annotations

import argparse
import os
import sys

NAME = "serve"
HELP = (
    "run the HTTP API on 127.0.0.1:8080; without REDIS_URL also an in-process worker "
    "on an embedded store (data kept in memory only)"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--host",
        default="127.0.0.1",
        help="address to bind (default 127.0.0.1; another address needs SPANWRIGHT_KEYS_FILE)",
    )
    p.add_argument("--port", type=int, default=8080, help="TCP port (default 8080)")
    p.add_argument(
        "--demo", action="store_true", help="plan the Lantern Hill demo batches at start"
    )


def run(args: argparse.Namespace) -> int:
    import redis
    from werkzeug.serving import run_simple

    from ..app import connect, create_app
    from ..auth import is_loopback
    from ..settings import Settings

    settings = Settings.from_env(os.environ)
    if not settings.keys_file and not is_loopback(args.host):
        print(
            f"spanwright: refusing to bind {args.host}: without SPANWRIGHT_KEYS_FILE the "
            "service is keyless and only listens on a loopback address",
            file=sys.stderr,
        )
        return 2
    worker = None
    conn: redis.Redis
    if settings.embedded:
        from ..embedded import embedded_store, warm_up

        warm_up()
        conn, worker = embedded_store(settings)
        where = "embedded in-process store and worker (nothing is kept after exit)"
    else:
        conn = connect(settings)
        where = f"Redis at {settings.redis_url}; run `spanwright worker` for the solving"
    app = create_app(settings, connection=conn)
    print(f"spanwright: {where}", file=sys.stderr)
    if settings.keys_file:
        n = len(app.extensions["spanwright.keys"] or ())
        print(f"spanwright: {n} API key(s) from {settings.keys_file}", file=sys.stderr)
    else:
        print(
            "spanwright: no keys file (SPANWRIGHT_KEYS_FILE): keyless, tenant "
            f"{settings.default_tenant!r}, accepting requests from loopback callers only",
            file=sys.stderr,
        )
    if args.demo:
        from ..demo import submit_all

        with app.test_client() as client:
            for name, status, loc in submit_all(client):
                print(f"spanwright: demo {name}: {status} {loc}", file=sys.stderr)
    print(f"spanwright: listening on http://{args.host}:{args.port}/v1/plans", file=sys.stderr)
    try:
        run_simple(args.host, args.port, app, threaded=True, use_reloader=False)
    finally:
        if worker is not None:
            worker.stop()
    return 0
