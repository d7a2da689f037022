"""gunicorn configuration of the spanwright API: ``gunicorn -c deploy/gunicorn.conf.py``.

Everything is read from the environment, with defaults for one VM next to the farm:

* ``SPANWRIGHT_BIND`` (default ``127.0.0.1:8080``). A non-loopback address needs a keys file
  (``SPANWRIGHT_KEYS_FILE``): without one the service is keyless and answers 401 to every
  caller that is not on loopback, so such a bind is refused here with a message. Make a
  keys line with ``printf %s "$KEY" | sha256sum`` (see deploy/README.md).
* ``SPANWRIGHT_WEB_WORKERS`` (default 2) processes of ``SPANWRIGHT_WEB_THREADS`` (default 8)
  threads. A request that asks ``Prefer: wait=N`` holds its thread for up to
  ``SPANWRIGHT_MAX_WAIT`` seconds, so threads, not CPU, bound concurrent waiting clients.
* ``SPANWRIGHT_MAX_WAIT`` (default 30, the service's cap): the worker timeout is kept above it.
* ``PROMETHEUS_MULTIPROC_DIR`` must be set, empty, by whoever starts gunicorn (the systemd
  unit, the container command); ``child_exit`` below marks dead workers' metric files.

The service's own settings (keys file, wait cap, log level) come from the one
:class:`service.settings.Settings` object; a bad value stops gunicorn with its name.
"""

import os

from prometheus_client import multiprocess

from service.auth import is_loopback
from service.settings import Settings, SettingsError


def _loopback(bind_addr: str) -> bool:
    if bind_addr.startswith("unix:"):
        return True
    return is_loopback(bind_addr.rsplit(":", 1)[0].strip("[]"))


try:
    _settings = Settings.from_env(os.environ)
except SettingsError as exc:
    raise SystemExit(f"spanwright: {exc.detail}") from None

bind = [os.environ.get("SPANWRIGHT_BIND", "127.0.0.1:8080")]
if not all(_loopback(b) for b in bind) and not _settings.keys_file:
    raise SystemExit(
        f"spanwright: refusing to bind {bind[0]} without a keys file: a keyless service "
        "serves loopback callers only, so every other caller would get 401. Set "
        "SPANWRIGHT_KEYS_FILE to a file of lines `<tenant> <sha256 hex of the key> [admin]` "
        '(printf %s "$KEY" | sha256sum; see deploy/README.md), or bind a loopback address.'
        + (
            " (SPANWRIGHT_ALLOW_NON_LOOPBACK is no longer read.)"
            if "SPANWRIGHT_ALLOW_NON_LOOPBACK" in os.environ
            else ""
        )
    )

wsgi_app = "service.wsgi:app"
worker_class = "gthread"
workers = int(os.environ.get("SPANWRIGHT_WEB_WORKERS", "2"))
threads = int(os.environ.get("SPANWRIGHT_WEB_THREADS", "8"))
# load the app once in the master: a missing REDIS_URL stops gunicorn with one clear message
preload_app = True
timeout = int(_settings.max_wait) + 30
graceful_timeout = int(_settings.max_wait) + 5
keepalive = 5
# the app writes one JSON access line per request itself (service/logs.py)
accesslog = None
errorlog = "-"
loglevel = _settings.log_level.lower()
proc_name = "spanwright-api"
forwarded_allow_ips = os.environ.get("SPANWRIGHT_FORWARDED_ALLOW_IPS", "127.0.0.1")


def child_exit(server, worker):  # type: ignore[no-untyped-def]
    """A worker process ended: fold its live gauges away (prometheus_client multiprocess)."""
    if os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        multiprocess.mark_process_dead(worker.pid)
