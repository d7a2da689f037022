"""gunicorn configuration of the spanwright API: ``gunicorn -c deploy/gunicorn.conf.py``.

Everything is read from the environment, with defaults for one VM next to the farm:

* ``SPANWRIGHT_BIND`` (default ``127.0.0.1:8080``). Without a keys file
  (``SPANWRIGHT_KEYS_FILE``) the service has no authentication, so a non-loopback address
  is then refused unless ``SPANWRIGHT_ALLOW_NON_LOOPBACK=1`` says the network around the
  process is trusted (a container network, a Kubernetes Service).
* ``SPANWRIGHT_WEB_WORKERS`` (default 2) processes of ``SPANWRIGHT_WEB_THREADS`` (default 8)
  threads. A request that asks ``Prefer: wait=N`` holds its thread for up to
  ``SPANWRIGHT_MAX_WAIT`` seconds, so threads, not CPU, bound concurrent waiting clients.
* ``SPANWRIGHT_MAX_WAIT`` (default 30, the service's cap): the worker timeout is kept above it.
* ``PROMETHEUS_MULTIPROC_DIR`` must be set, empty, by whoever starts gunicorn (the systemd
  unit, the container command); ``child_exit`` below marks dead workers' metric files.
"""

import os

from prometheus_client import multiprocess

from service.auth import is_loopback


def _loopback(bind_addr: str) -> bool:
    if bind_addr.startswith("unix:"):
        return True
    return is_loopback(bind_addr.rsplit(":", 1)[0].strip("[]"))


bind = [os.environ.get("SPANWRIGHT_BIND", "127.0.0.1:8080")]
if (
    not all(_loopback(b) for b in bind)
    and not os.environ.get("SPANWRIGHT_KEYS_FILE")
    and os.environ.get("SPANWRIGHT_ALLOW_NON_LOOPBACK") != "1"
):
    raise SystemExit(
        f"spanwright: refusing to bind {bind[0]}: no keys file (SPANWRIGHT_KEYS_FILE), so no "
        "authentication; bind a loopback address, set a keys file, or set "
        "SPANWRIGHT_ALLOW_NON_LOOPBACK=1 on a trusted network"
    )

wsgi_app = "service.wsgi:app"
worker_class = "gthread"
workers = int(os.environ.get("SPANWRIGHT_WEB_WORKERS", "2"))
threads = int(os.environ.get("SPANWRIGHT_WEB_THREADS", "8"))
# load the app once in the master: a missing REDIS_URL stops gunicorn with one clear message
preload_app = True
_max_wait = float(os.environ.get("SPANWRIGHT_MAX_WAIT", "30"))
timeout = int(_max_wait) + 30
graceful_timeout = int(_max_wait) + 5
keepalive = 5
# the app writes one JSON access line per request itself (service/logs.py)
accesslog = None
errorlog = "-"
loglevel = os.environ.get("SPANWRIGHT_LOG_LEVEL", "info").lower()
proc_name = "spanwright-api"
forwarded_allow_ips = os.environ.get("SPANWRIGHT_FORWARDED_ALLOW_IPS", "127.0.0.1")


def child_exit(server, worker):  # type: ignore[no-untyped-def]
    """A worker process ended: fold its live gauges away (prometheus_client multiprocess)."""
    if os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        multiprocess.mark_process_dead(worker.pid)
