"""``spanwright serve``: the HTTP API (and, without ``REDIS_URL``, an in-process worker)."""

from __future__ import annotations

import argparse
import errno
import os
import socket
import sys

from ..cli import EXIT_FAILURE, EXIT_INVALID, EXIT_OK

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
    p.add_argument(
        "--port", type=int, default=8080, help="TCP port (default 8080; 0: any free port)"
    )
    p.add_argument(
        "--demo", action="store_true", help="plan the Quillfern Vale demo batches at start"
    )


def bind(host: str, port: int) -> socket.socket:
    """A listening TCP socket on ``host:port``, made before anything else starts, so a
    taken port fails at once and "listening" is only ever said of a bound socket. The
    address family is chosen as werkzeug chooses it for the same host."""
    from werkzeug.serving import select_address_family

    family = select_address_family(host, port)
    return socket.create_server((host, port), family=family, backlog=128)


def url(host: str, port: int, path: str = "/") -> str:
    """``http://host:port/path``; an IPv6 address in brackets (RFC 3986, 3.2.2)."""
    return f"http://{f'[{host}]' if ':' in host else host}:{port}{path}"


def run(args: argparse.Namespace) -> int:
    import redis
    from werkzeug.serving import make_server

    from ..app import connect, create_app
    from ..auth import is_loopback
    from ..csvio import plural
    from ..settings import Settings

    settings = Settings.from_env(os.environ)
    if not settings.keys_file and not is_loopback(args.host):
        print(
            f"spanwright: refusing to bind {args.host}: without SPANWRIGHT_KEYS_FILE the "
            "service is keyless and only listens on a loopback address",
            file=sys.stderr,
        )
        return EXIT_INVALID
    try:
        sock = bind(args.host, args.port)
    except OSError as exc:
        why = os.strerror(exc.errno) if exc.errno else str(exc)
        if exc.errno == errno.EADDRINUSE:
            why += " (another program listens there; stop it or give another --port)"
        print(f"spanwright: cannot listen on {args.host} port {args.port}: {why}", file=sys.stderr)
        return EXIT_FAILURE
    port = sock.getsockname()[1]
    worker = None
    try:
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
            print(f"spanwright: {plural(n, 'API key')} from {settings.keys_file}", file=sys.stderr)
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
        server = make_server(args.host, port, app, threaded=True, fd=sock.fileno())
        sock.close()  # the server holds its own copy of the listening socket
        print(
            f"spanwright: listening on {url(args.host, port)} "
            f"(pages; the API is under {url(args.host, port, '/v1/')})",
            file=sys.stderr,
            flush=True,
        )
        try:
            server.serve_forever()
        finally:
            server.server_close()
    finally:
        sock.close()
        if worker is not None:
            worker.stop()
    return EXIT_OK
