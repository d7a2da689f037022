"""API keys and tenants, on fakeredis.

Protocol references: RFC 6750 (Bearer tokens; a refusal carries ``WWW-Authenticate:
Bearer``), RFC 9110 section 15.5.2 (401) and RFC 9457 (problem documents). The isolation
rule comes from the contract: another tenant's record reads exactly like a missing one
(404), for every way of reaching it (GET, DELETE, the list, the HTML page).
"""

from __future__ import annotations

import hashlib
import logging
from pathlib import Path
from typing import Any

import fakeredis
import pytest

from service.app import create_app
from service.auth import KeyRing, bearer_token
from service.settings import Settings, SettingsError
from tests.trust.conftest import KEYS, bearer, small_batch


def assert_problem(resp: Any, status: int, kind: str) -> dict[str, Any]:
    """RFC 9457 shape: the media type, ``status`` equal to the HTTP status, the type URI."""
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    doc: dict[str, Any] = resp.get_json()
    assert doc["status"] == status and doc["type"] == f"/problems/{kind}"
    return doc


def test_no_key_and_unknown_key_are_401(keyed_app: Any) -> None:
    """No Authorization, another scheme, an empty token or an unknown key: 401 problem+json
    with ``WWW-Authenticate: Bearer`` (RFC 6750 section 3) on every operation but the open
    ones, the HTML pages included."""
    c = keyed_app.test_client()
    bad = [
        {},
        {"Authorization": "Basic " + KEYS["quillfernvale"]},
        {"Authorization": "Bearer "},
        {"Authorization": "Bearer not-a-key"},
        {"Authorization": "Bearer " + KEYS["quillfernvale"] + "x"},
    ]
    rid = "0" * 21
    ops = [
        ("get", "/v1/plans"),
        ("post", "/v1/plans"),
        ("get", f"/v1/plans/{rid}"),
        ("delete", f"/v1/plans/{rid}"),
        ("post", f"/v1/plans/{rid}/replan"),
        ("get", "/v1/sizings"),
        ("post", "/v1/sizings"),
        ("get", f"/v1/sizings/{rid}"),
        ("delete", f"/v1/sizings/{rid}"),
        ("get", "/"),
        ("get", f"/plans/{rid}"),
        ("get", f"/sizings/{rid}"),
    ]
    for headers in bad:
        for method, path in ops:
            r = getattr(c, method)(path, headers=headers, json=small_batch())
            assert_problem(r, 401, "unauthorized")
            assert r.headers["WWW-Authenticate"].startswith("Bearer")


def test_open_paths_need_no_key(keyed_app: Any) -> None:
    """``/healthz``, ``/openapi.json`` and ``/problems/{kind}`` answer without a key
    (probes and documentation); ``/readyz`` answers (503 here: no worker) without 401."""
    c = keyed_app.test_client()
    assert c.get("/healthz").status_code == 200
    assert c.get("/openapi.json").status_code == 200
    assert c.get("/problems/unauthorized").status_code == 200
    assert c.get("/readyz").status_code in (200, 503)


def test_scheme_is_case_insensitive() -> None:
    """RFC 9110 section 11.1: the auth scheme name is case-insensitive."""
    assert bearer_token("bearer abc") == "abc"
    assert bearer_token("BEARER  abc ") == "abc"
    assert bearer_token("Basic abc") is None
    assert bearer_token(None) is None


def test_keys_file_holds_hashes_only(tmp_path: Path) -> None:
    """A line is `<tenant> <sha256 hex> [admin]`; a key pasted in clear is refused at start
    with the line number, and the message does not repeat the line (it could be a key)."""
    good = hashlib.sha256(b"k1").hexdigest()
    ring = KeyRing.parse(f"# comment\n\nalpha {good}\nops {good} admin\n")
    assert len(ring) == 1  # the same digest twice: one key (the later line wins)
    p = ring.authenticate("k1")
    assert p is not None and p.tenant == "ops" and p.admin
    with pytest.raises(SettingsError) as err:
        KeyRing.parse("alpha my-secret-key-in-clear\n")
    assert "my-secret-key-in-clear" not in str(err.value.detail)
    assert "my-secret-key-in-clear" not in repr(err.value.issues)
    assert err.value.issues[0].path[-1] == 1
    with pytest.raises(SettingsError):
        create_app(
            Settings(keys_file=str(tmp_path / "missing")),
            connection=fakeredis.FakeRedis(server=fakeredis.FakeServer()),
        )


def test_comparison_is_constant_time(monkeypatch: pytest.MonkeyPatch) -> None:
    """Every lookup, hit or miss, goes through ``hmac.compare_digest`` (the timing-safe
    comparison of the standard library) over SHA-256 digests, never the key itself."""
    import service.auth as auth

    seen: list[tuple[str, str]] = []
    real = auth.hmac.compare_digest

    def spy(a: str, b: str) -> bool:
        seen.append((a, b))
        return real(a, b)

    monkeypatch.setattr(auth.hmac, "compare_digest", spy)
    ring = KeyRing.parse(f"t {hashlib.sha256(b'secret').hexdigest()}\n")
    assert ring.authenticate("secret") is not None
    assert ring.authenticate("wrong") is None
    assert len(seen) == 2
    for a, b in seen:
        assert len(a) == len(b) == 64 and "secret" not in a + b


def test_keys_never_logged(keyed_app: Any, caplog: pytest.LogCaptureFixture) -> None:
    """Neither a good nor a bad key, nor its digest, appears in any log record or answer."""
    c = keyed_app.test_client()
    caplog.set_level(logging.DEBUG)
    bad = "Bearer wrong-key-0123456789"
    r1 = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
    r2 = c.get("/v1/plans", headers={"Authorization": bad})
    secrets = [KEYS["quillfernvale"], "wrong-key-0123456789"]
    secrets += [hashlib.sha256(s.encode()).hexdigest() for s in secrets]
    text = caplog.text + r1.get_data(as_text=True) + r2.get_data(as_text=True)
    for s in secrets:
        assert s not in text


def test_cross_tenant_reads_are_404(keyed_app: Any) -> None:
    """brightwater cannot see quillfernvale's plan by GET, DELETE, the list or the page: all
    answer like a missing id (404), and the owner still sees it untouched."""
    c = keyed_app.test_client()
    r = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
    assert r.status_code == 202
    loc = r.headers["Location"]
    rid = loc.rsplit("/", 1)[1]
    missing = "0" * 21
    other = bearer("brightwater")
    for path in (loc, f"/v1/plans/{missing}"):
        assert_problem(c.get(path, headers=other), 404, "not-found")
        assert_problem(c.delete(path, headers=other), 404, "not-found")
    page = c.get(f"/plans/{rid}", headers=other)
    assert page.status_code == 404
    assert c.get(f"/plans/{rid}", headers=bearer("quillfernvale")).status_code == 200
    listed = c.get("/v1/plans", headers=other).get_json()["items"]
    assert rid not in [it["id"] for it in listed]
    mine = c.get(loc, headers=bearer("quillfernvale")).get_json()
    assert mine["status"] == "queued" and not mine["cancel_requested"]
    assert rid in [
        it["id"] for it in c.get("/v1/plans", headers=bearer("quillfernvale")).json["items"]
    ]


def test_cross_tenant_sizing_is_404(keyed_app: Any) -> None:
    """The same isolation holds for sizings (one shared machinery)."""
    c = keyed_app.test_client()
    body = {
        "jobs": [{"id": f"j{i}", "duration": 100.0} for i in range(6)],
        "deadline": 250.0,
    }
    r = c.post("/v1/sizings", json=body, headers=bearer("brightwater"))
    assert r.status_code == 202, r.get_data(as_text=True)
    loc = r.headers["Location"]
    assert_problem(c.get(loc, headers=bearer("quillfernvale")), 404, "not-found")
    assert_problem(c.delete(loc, headers=bearer("quillfernvale")), 404, "not-found")
    assert c.get(loc, headers=bearer("brightwater")).status_code == 200


def test_admin_reads_any_tenant(keyed_app: Any) -> None:
    """The admin key reads and lists another tenant's records (``?tenant=``); a tenant key
    asking for another tenant's list gets 400; the admin's own submissions are its own."""
    c = keyed_app.test_client()
    loc = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).headers[
        "Location"
    ]
    rid = loc.rsplit("/", 1)[1]
    assert c.get(loc, headers=bearer("ops")).status_code == 200
    items = c.get("/v1/plans?tenant=quillfernvale", headers=bearer("ops")).get_json()["items"]
    assert [it["id"] for it in items] == [rid]
    assert c.get("/v1/plans", headers=bearer("ops")).get_json()["items"] == []
    assert_problem(
        c.get("/v1/plans?tenant=quillfernvale", headers=bearer("brightwater")), 400, "bad-request"
    )
    own = c.get("/v1/plans?tenant=quillfernvale", headers=bearer("quillfernvale")).get_json()
    assert [it["id"] for it in own["items"]] == [rid]
    r = c.delete(loc, headers=bearer("ops"))
    assert r.status_code == 200 and r.get_json()["status"] == "cancelled"


def test_keyless_serves_loopback_only(fake_server: fakeredis.FakeServer) -> None:
    """Without a keys file: loopback callers are the tenant ``local``; any other address
    gets 401 (the embedded demo must not be reachable from the network)."""
    app = create_app(Settings(), connection=fakeredis.FakeRedis(server=fake_server))
    c = app.test_client()
    for addr in ("127.0.0.1", "::1"):
        r = c.get("/v1/plans", environ_base={"REMOTE_ADDR": addr})
        assert r.status_code == 200
    for addr in ("10.1.2.3", "192.168.0.7", "2001:db8::1"):
        r = c.get("/v1/plans", environ_base={"REMOTE_ADDR": addr})
        assert_problem(r, 401, "unauthorized")
    r = c.post("/v1/plans", json=small_batch(), environ_base={"REMOTE_ADDR": "127.0.0.1"})
    assert r.status_code == 202
    assert app.extensions["spanwright"].store.get("plan", r.headers["Location"][-21:]).tenant == (
        "local"
    )


def test_keyed_app_serves_callers_on_other_addresses(keyed_app: Any) -> None:
    """With a keys file the caller's address does not matter (this is what a non-loopback
    bind relies on: deploy/gunicorn.conf.py refuses one without keys): a caller at
    10.1.2.3 with a valid key is served as its tenant (RFC 6750 section 2.1); the same
    caller without a key, or with an unknown one, gets 401 with ``WWW-Authenticate``."""
    c = keyed_app.test_client()
    away = {"REMOTE_ADDR": "10.1.2.3"}
    r = c.post("/v1/plans", json=small_batch(), headers=bearer("brightwater"), environ_base=away)
    assert r.status_code == 202, r.get_data(as_text=True)
    rid = r.headers["Location"].rsplit("/", 1)[1]
    assert keyed_app.extensions["spanwright"].store.get("plan", rid).tenant == "brightwater"
    r = c.get("/v1/plans", headers=bearer("brightwater"), environ_base=away)
    assert r.status_code == 200 and [it["id"] for it in r.get_json()["items"]] == [rid]
    for headers in ({}, {"Authorization": "Bearer not-a-key"}):
        r = c.get("/v1/plans", headers=headers, environ_base=away)
        assert_problem(r, 401, "unauthorized")
        assert r.headers["WWW-Authenticate"].startswith("Bearer")


def test_serve_says_keyless_and_refuses_other_addresses(tmp_path: Path) -> None:
    """``spanwright serve --host 0.0.0.0`` without a keys file refuses with a message that
    names SPANWRIGHT_KEYS_FILE, and exits 2 (before binding anything)."""
    import os
    import subprocess
    import sys

    root = Path(__file__).resolve().parents[2]
    env = {k: v for k, v in os.environ.items() if not k.startswith("SPANWRIGHT_")}
    env.pop("REDIS_URL", None)
    p = subprocess.run(
        [sys.executable, "-m", "service.cli", "serve", "--host", "0.0.0.0", "--port", "1"],
        cwd=root,
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert p.returncode == 2
    assert "SPANWRIGHT_KEYS_FILE" in p.stderr and "loopback" in p.stderr
