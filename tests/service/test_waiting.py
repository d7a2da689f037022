"""``Prefer: wait`` holds a request thread; past ``max_waiters`` waiting requests in one
process the next is answered at once, so probes and reads always find a thread.

Reference: RFC 7240 (a server may ignore a preference; it then sends no
Preference-Applied) and the readiness contract in openapi/openapi.yaml.
"""

from __future__ import annotations

import dataclasses
import threading
import time
from typing import Any

from service.app import create_app
from service.settings import Settings

BODY = {"jobs": [{"id": "lh_fern_001", "duration": 30}], "node_count": 1}


def test_past_max_waiters_a_wait_is_not_applied(settings: Settings, conn: Any) -> None:
    """One waiting slot: a first request waits (no worker, so it waits out its 2 s), a
    second sent meanwhile is answered at once with 202 and no Preference-Applied, and a
    probe answers at once."""
    app = create_app(dataclasses.replace(settings, max_waiters=1), connection=conn)
    first: dict[str, Any] = {}

    def waiting() -> None:
        r = app.test_client().post("/v1/plans", json=BODY, headers={"Prefer": "wait=2"})
        first["status"], first["applied"] = r.status_code, r.headers.get("Preference-Applied")

    t = threading.Thread(target=waiting)
    t.start()
    time.sleep(0.3)  # the first request is in its wait now
    c = app.test_client()
    t0 = time.perf_counter()
    r = c.post("/v1/plans", json=BODY, headers={"Prefer": "wait=2"})
    took = time.perf_counter() - t0
    assert r.status_code == 202 and "Preference-Applied" not in r.headers
    assert took < 1.0
    assert c.get("/healthz").status_code == 200
    t.join()
    assert first == {"status": 202, "applied": "wait=2"}
