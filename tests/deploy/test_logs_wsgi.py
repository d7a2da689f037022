"""JSON logs with request ids, the production entry point, its settings (Sentinel, log
level: fields of the one Settings object), and who may reach ``/metrics``."""

from __future__ import annotations

import io
import json
import logging
import re
import subprocess
import sys
from pathlib import Path

import fakeredis
import pytest
from live import free_port, require
from spanwright_topology import Topology

from service.app import create_app
from service.logs import (
    REQUEST_ID_HEADER,
    JsonFormatter,
    configure_logging,
    init_request_logging,
    request_id_from,
)
from service.settings import Settings, SettingsError

REPO = Path(__file__).resolve().parents[2]


def lines(buf: io.StringIO) -> list[dict[str, object]]:
    return [json.loads(line) for line in buf.getvalue().splitlines() if line.strip()]


def test_access_lines_are_json_with_request_id_and_no_secrets(
    fake_conn: fakeredis.FakeRedis, settings: Settings, root_logging: None
) -> None:
    """Every line is one JSON object; the caller's X-Request-Id is echoed and logged; the
    Authorization header's value and the query string never reach the log."""
    buf = io.StringIO()
    configure_logging("INFO", stream=buf)
    app = create_app(settings, connection=fake_conn)
    init_request_logging(app)
    client = app.test_client()
    secret = "sk-live-5f0d1e2c3b4a"
    r1 = client.get(
        f"/healthz?key={secret}",
        headers={REQUEST_ID_HEADER: "rq-abc.123", "Authorization": f"Bearer {secret}"},
    )
    assert r1.headers[REQUEST_ID_HEADER] == "rq-abc.123"
    r2 = client.get("/healthz", headers={REQUEST_ID_HEADER: "bad id with spaces"})
    fresh = r2.headers[REQUEST_ID_HEADER]
    assert re.fullmatch(r"[0-9a-f]{32}", fresh)
    r3 = client.get("/v1/plans/0123456789abcdef01234")
    assert r3.status_code == 404
    logged = lines(buf)
    assert secret not in buf.getvalue()
    access = [d for d in logged if d["logger"] == "spanwright.access"]
    assert [d["request_id"] for d in access] == [
        "rq-abc.123",
        fresh,
        r3.headers[REQUEST_ID_HEADER],
    ]
    assert access[0]["path"] == "/healthz" and access[0]["status"] == 200
    assert access[2]["plan_id"] == "0123456789abcdef01234"
    assert access[2]["route"] == "/v1/plans/<rid>"
    for d in logged:
        assert {"ts", "level", "logger", "msg"} <= d.keys()


def test_formatter_drops_secret_extras_and_keeps_exceptions(root_logging: None) -> None:
    """Extras named like secrets are dropped; an exception is kept as text in ``exc``."""
    buf = io.StringIO()
    configure_logging("DEBUG", stream=buf)
    log = logging.getLogger("spanwright.test")
    try:
        raise ValueError("boom")
    except ValueError:
        log.exception("failed", extra={"authorization": "Bearer x", "plan_id": "p1", "n": 3})
    (doc,) = lines(buf)
    assert "authorization" not in doc and doc["plan_id"] == "p1" and doc["n"] == 3
    assert "ValueError: boom" in str(doc["exc"])
    assert isinstance(logging.getLogger().handlers[-1].formatter, JsonFormatter)


def test_request_id_rules() -> None:
    """Sane ids (1-128 of letters, digits, ``._:-``) pass; anything else gets a fresh id."""
    assert request_id_from("a" * 128) == "a" * 128
    assert request_id_from("a" * 129) != "a" * 129
    assert request_id_from("x\r\ny") != "x\r\ny"
    assert request_id_from(None) != request_id_from(None)


def test_build_refuses_to_start_without_redis(root_logging: None) -> None:
    """Without REDIS_URL (or Sentinel) the entry point stops with a message naming it."""
    from service.wsgi import NoRedis, build

    with pytest.raises(NoRedis) as info:
        build({})
    assert "REDIS_URL is not set" in str(info.value.code)


def test_build_serves_metrics_and_probes(root_logging: None) -> None:
    """The production app has the probes the manifests use and ``/metrics`` (Redis is only
    contacted on use, so an unused URL is enough to build it)."""
    from service.wsgi import build

    app = build({"REDIS_URL": "redis://127.0.0.1:1/0", "SPANWRIGHT_LOG_LEVEL": "WARNING"})
    rules = {r.rule for r in app.url_map.iter_rules()}
    assert {"/healthz", "/readyz", "/metrics", "/v1/plans"} <= rules
    assert app.test_client().get("/healthz").status_code == 200


def test_sentinel_settings_are_checked(root_logging: None) -> None:
    """A Sentinel list needs a master name and host:port pairs."""
    from service.wsgi import build, parse_sentinels

    assert parse_sentinels("a:26379, [::1]:26380") == [("a", 26379), ("::1", 26380)]
    with pytest.raises(SettingsError):
        parse_sentinels("a:b")
    with pytest.raises(SettingsError):
        build({"SPANWRIGHT_SENTINELS": "127.0.0.1:26379"})


def test_sentinel_and_log_level_are_settings(
    root_logging: None, capsys: pytest.CaptureFixture[str]
) -> None:
    """SPANWRIGHT_SENTINELS / _SENTINEL_MASTER / _SENTINEL_DB / _SENTINEL_PASSWORD and
    SPANWRIGHT_LOG_LEVEL are typed fields of Settings (read from the environment once);
    bad values name their variable; the password is in no repr, error or log line (the
    start-up line of build() included), and redis-py's Sentinel client gets it."""
    from service.wsgi import build, sentinel_connection

    secret = "lh-sentinel-pw-5e1f"
    env = {
        "SPANWRIGHT_SENTINELS": "127.0.0.1:1, [::1]:2",
        "SPANWRIGHT_SENTINEL_MASTER": "spanwright-main",
        "SPANWRIGHT_SENTINEL_DB": "3",
        "SPANWRIGHT_SENTINEL_PASSWORD": secret,
        "SPANWRIGHT_LOG_LEVEL": "info",
    }
    s = Settings.from_env(env)
    assert s.sentinel_hosts == [("127.0.0.1", 1), ("::1", 2)]
    assert (s.sentinel_master, s.sentinel_db, s.log_level) == ("spanwright-main", 3, "info")
    assert s.sentinel_password == secret and secret not in repr(s)
    client = sentinel_connection(s)
    assert client is not None
    kwargs = client.connection_pool.connection_kwargs
    assert (kwargs["db"], kwargs["password"]) == (3, secret)
    assert sentinel_connection(Settings()) is None
    assert Settings.from_env({"SPANWRIGHT_SENTINEL_DB": "0"}).sentinel_db == 0
    for var, bad in (
        ("SPANWRIGHT_SENTINEL_DB", "-1"),
        ("SPANWRIGHT_SENTINEL_DB", "one"),
        ("SPANWRIGHT_LOG_LEVEL", "LOUD"),
        ("SPANWRIGHT_SENTINELS", "a:b"),
    ):
        with pytest.raises(SettingsError) as err:
            Settings.from_env({**env, var: bad})
        assert var in err.value.detail and secret not in err.value.detail
    build(env)
    logging.getLogger("spanwright.test").info("after build")
    out, err_text = capsys.readouterr()
    assert '"api ready"' in out and "spanwright-main" in out and "after build" in out
    assert secret not in out + err_text


def test_metrics_is_open_and_names_no_tenant(tmp_path: Path, root_logging: None) -> None:
    """``/metrics`` is an open path like ``/healthz`` (the decision: counts and timings
    only, kept on the private network; the Kubernetes scrape sends no credentials). The
    production app with a keys file answers a non-loopback caller without a key with
    Prometheus text, while an API route still answers 401; no tenant of the keys file is
    named in the scrape (service/metrics.py labels: method, route, status, kind, queue)."""
    from service.wsgi import build
    from tests.trust.conftest import KEYS, write_keys

    keys = write_keys(tmp_path / "keys")
    app = build(
        {
            "REDIS_URL": "redis://127.0.0.1:1/0",
            "SPANWRIGHT_KEYS_FILE": str(keys),
            "SPANWRIGHT_LOG_LEVEL": "WARNING",
        }
    )
    c = app.test_client()
    away = {"REMOTE_ADDR": "10.1.2.3"}
    r = c.get("/v1/plans", environ_base=away)
    assert r.status_code == 401 and r.headers["WWW-Authenticate"].startswith("Bearer")
    r = c.get("/metrics", environ_base=away)
    assert r.status_code == 200 and r.mimetype == "text/plain"
    text = r.get_data(as_text=True)
    assert "# TYPE spanwright_http_requests_total counter" in text
    assert 'route="/v1/plans",status="401"' in text
    assert "spanwright_redis_up 0.0" in text  # nothing listens on port 1
    for tenant in KEYS:
        assert tenant not in text


@pytest.mark.slow
def test_gunicorn_with_shipped_config_refuses_without_redis(tmp_path: Path) -> None:
    """``gunicorn -c deploy/gunicorn.conf.py`` without REDIS_URL exits non-zero at once with
    the message (the app is preloaded in the master), instead of looping on worker boots."""
    require("gunicorn")
    gunicorn = Path(sys.executable).parent / "gunicorn"
    env = {
        "PATH": str(Path(sys.executable).parent),
        "PYTHONPATH": str(REPO),
        "PROMETHEUS_MULTIPROC_DIR": str(tmp_path),
        "SPANWRIGHT_BIND": "127.0.0.1:0",
    }
    proc = subprocess.run(
        [str(gunicorn), "-c", "deploy/gunicorn.conf.py"],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert proc.returncode != 0
    assert "REDIS_URL is not set" in proc.stderr


@pytest.mark.slow
def test_sentinel_master_is_used(tmp_path: Path, root_logging: None) -> None:
    """With SPANWRIGHT_SENTINELS the API writes to the master a real Sentinel names
    (redis-server --sentinel monitoring a redis-server started with deploy/redis.conf)."""
    require("redis-server")
    topo = Topology(tmp_path)
    try:
        topo.start_redis()
        sport = free_port()
        conf = tmp_path / "sentinel.conf"
        conf.write_text(
            f"port {sport}\nbind 127.0.0.1\ndir {tmp_path}\n"
            f"sentinel monitor spanwright-main 127.0.0.1 {topo.redis_port} 1\n"
        )
        topo._spawn("sentinel", ["redis-server", str(conf), "--sentinel"], topo._env())
        import redis

        s = redis.Redis(port=sport)
        topo._wait(lambda: _sentinel_knows(s), 20, "sentinel")
        from service.wsgi import build

        app = build(
            {
                "SPANWRIGHT_SENTINELS": f"127.0.0.1:{sport}",
                "SPANWRIGHT_SENTINEL_MASTER": "spanwright-main",
                "SPANWRIGHT_LOG_LEVEL": "WARNING",
            }
        )
        body = {"jobs": [{"id": "a", "duration": 3}], "node_count": 1, "method": "list"}
        resp = app.test_client().post("/v1/plans", json=body, headers={"Prefer": "respond-async"})
        assert resp.status_code == 202
        rid = resp.get_json()["id"]
        direct = redis.Redis(port=topo.redis_port)
        assert direct.hget(f"spanwright:plan:{rid}", "status") == b"queued"
    finally:
        topo.stop()


def _sentinel_knows(s: object) -> bool:
    import redis

    try:
        return bool(s.sentinel_get_master_addr_by_name("spanwright-main"))  # type: ignore[attr-defined]
    except redis.RedisError:
        return False


def test_worker_lines_carry_the_plan_id() -> None:
    """RQ's own lines about job ``plan-<id>`` (service/queue.py's job ids) get ``plan_id``
    (formatted directly: RQ may have configured its loggers earlier in the session)."""
    fmt = JsonFormatter()

    def record(msg: str) -> dict[str, object]:
        rec = logging.LogRecord("rq.worker", logging.INFO, __file__, 1, msg, None, None)
        out: dict[str, object] = json.loads(fmt.format(rec))
        return out

    assert record("Job OK (plan-0123456789abcdef01234)")["plan_id"] == "0123456789abcdef01234"
    assert "plan_id" not in record("Listening on spanwright...")
