"""A small HTTP client for the spanwright API (standard library only), used by the CLI."""

from __future__ import annotations

import json
import os
import time
import urllib.error
import urllib.request
import uuid
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

DEFAULT_SERVER = "http://127.0.0.1:8080"
FINISHED = ("done", "failed", "cancelled")


@dataclass
class ClientError(Exception):
    """The server answered with an error (a problem document) or could not be reached."""

    status: int
    problem: dict[str, Any]

    def __str__(self) -> str:
        p = self.problem
        text = p.get("detail") or p.get("title") or "request failed"
        lines = [f"HTTP {self.status}: {text}" if self.status else text]
        for e in p.get("errors", [])[:10]:
            where, what = e.get("pointer", ""), e.get("detail", "")
            if where:
                lines.append(f"  {where}: {what}")
            elif what not in text:  # a body-wide error that only repeats the detail is not
                lines.append(f"  {what}")
        return "\n".join(lines)


class Client:
    """JSON over HTTP to one server; ``key`` is sent as a Bearer token when given."""

    def __init__(self, server: str | None = None, key: str | None = None, timeout: float = 60):
        self.server = (server or os.environ.get("SPANWRIGHT_SERVER") or DEFAULT_SERVER).rstrip("/")
        self.key = key if key is not None else os.environ.get("SPANWRIGHT_KEY")
        self.timeout = timeout

    def request(
        self,
        method: str,
        path: str,
        body: Any = None,
        headers: dict[str, str] | None = None,
    ) -> tuple[int, dict[str, str], Any]:
        data = None if body is None else json.dumps(body, allow_nan=False).encode()
        hdrs = {"Accept": "application/json, application/problem+json"}
        if data is not None:
            hdrs["Content-Type"] = "application/json"
        if self.key:
            hdrs["Authorization"] = f"Bearer {self.key}"
        hdrs.update(headers or {})
        req = urllib.request.Request(self.server + path, data=data, method=method, headers=hdrs)
        try:
            with urllib.request.urlopen(req, timeout=self.timeout) as resp:
                raw = resp.read()
                return resp.status, dict(resp.headers), json.loads(raw) if raw else None
        except urllib.error.HTTPError as err:
            raw = err.read()
            if err.code == 304:
                return 304, dict(err.headers), None
            try:
                problem = json.loads(raw) if raw else {}
            except ValueError:
                problem = {"detail": raw.decode(errors="replace")[:200]}
            raise ClientError(err.code, problem if isinstance(problem, dict) else {}) from None
        except (urllib.error.URLError, OSError) as err:
            reason = getattr(err, "reason", err)
            raise ClientError(0, {"detail": f"cannot reach {self.server}: {reason}"}) from None

    def submit(self, body: dict[str, Any], kind: str = "plans") -> dict[str, Any]:
        """POST a batch with a fresh Idempotency-Key (retried once on a dropped connection)."""
        key = f'"{uuid.uuid4()}"'
        try:
            _, _, doc = self.request("POST", f"/v1/{kind}", body, {"Idempotency-Key": key})
        except ClientError as err:
            if err.status != 0:
                raise
            _, _, doc = self.request("POST", f"/v1/{kind}", body, {"Idempotency-Key": key})
        return dict(doc)

    def get(self, rid: str, kind: str = "plans") -> dict[str, Any]:
        _, _, doc = self.request("GET", f"/v1/{kind}/{rid}")
        return dict(doc)

    def get_any(self, rid: str) -> tuple[str, dict[str, Any]]:
        """The record ``rid``, a plan or a sizing (ids of both look alike): its kind
        (``plans`` or ``sizings``) and status body. A 404 for both is one 404."""
        try:
            return "plans", self.get(rid, "plans")
        except ClientError as err:
            if err.status != 404:
                raise
        try:
            return "sizings", self.get(rid, "sizings")
        except ClientError as err:
            if err.status != 404:
                raise
            detail = f"no plan or sizing {rid!r} (it may have expired)"
            raise ClientError(404, {**err.problem, "detail": detail}) from None

    def wait(
        self,
        rid: str,
        kind: str = "plans",
        on_update: Callable[[dict[str, Any]], None] | None = None,
        poll: float = 0.5,
        timeout: float | None = None,
    ) -> dict[str, Any]:
        """Poll (with If-None-Match) until finished; ``on_update`` sees every new state."""
        etag, doc = None, self.get(rid, kind)
        t0 = time.monotonic()
        while True:
            if on_update:
                on_update(doc)
            if doc.get("status") in FINISHED:
                return doc
            if timeout is not None and time.monotonic() - t0 > timeout:
                return doc
            time.sleep(poll)
            status, headers, new = self.request(
                "GET", f"/v1/{kind}/{rid}", headers={"If-None-Match": etag} if etag else None
            )
            etag = headers.get("ETag", etag)
            if status != 304 and new is not None:
                doc = new
