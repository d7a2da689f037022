"""API keys and tenants: ``Authorization: Bearer <key>`` -> a :class:`Principal`.

The keys file (``SPANWRIGHT_KEYS_FILE``) has one key per line::

    <tenant> <sha256 hex of the key> [admin]

Blank lines and lines starting with ``#`` are ignored. The service never sees a key in
clear at rest: it hashes the presented key with SHA-256, looks the digest up, and compares
it with :func:`hmac.compare_digest` (constant time). Keys and their digests are never
logged; a refusal says only that the key is missing or unknown.

Every plan and sizing belongs to the tenant of the key that submitted it; reading another
tenant's id answers 404, exactly like an id that does not exist. An ``admin`` key is an
operator's: it may read and cancel any tenant's record by id, and list another tenant's
records with ``?tenant=<name>``; it submits as its own tenant.

Without a keys file the service is keyless (the embedded demo): every request is the
default tenant, and only callers on a loopback address are served; others get 401. So a
service reachable from other machines needs a keys file: ``spanwright serve`` and
``deploy/gunicorn.conf.py`` refuse a non-loopback bind without one.

No key is needed for ``/healthz``, ``/readyz``, ``/openapi.json``, ``/problems/{kind}``
(probes and documentation) and ``/metrics`` (Prometheus scrapes: counts and timings by
kind, status, route and queue, never a tenant name or a record id). Keep the service's
port on a private network, or keep these paths off a public ingress.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import re
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path

from flask import Flask, g, request

from workers.planning.errors import Issue

from .problems import Unauthorized
from .settings import Settings, SettingsError

#: paths served without a key (probes, documentation, the Prometheus scrape)
OPEN_PATHS = ("/healthz", "/readyz", "/openapi.json", "/metrics")
OPEN_PREFIXES = ("/problems/",)
_TENANT_RE = re.compile(r"[A-Za-z0-9_.-]{1,64}")
_HEX_RE = re.compile(r"[0-9a-f]{64}")
_NO_DIGEST = "-" * 64  # never equal to a hex digest


@dataclass(frozen=True, slots=True)
class Principal:
    """Who is calling: a tenant, and whether the key has the operator (admin) scope."""

    tenant: str
    admin: bool = False


def digest(key: str) -> str:
    """SHA-256 hex of a key, the form the keys file holds."""
    return hashlib.sha256(key.encode("utf-8")).hexdigest()


class KeyRing:
    """The configured keys, by digest. ``None`` keys file means keyless (loopback only)."""

    def __init__(self, entries: Iterable[tuple[str, str, bool]]) -> None:
        self._by_digest: dict[str, Principal] = {}
        self._digests: dict[str, str] = {}  # the stored digest string, for compare_digest
        for tenant, hexdigest, admin in entries:
            self._by_digest[hexdigest] = Principal(tenant, admin)
            self._digests[hexdigest] = hexdigest

    def __len__(self) -> int:
        return len(self._by_digest)

    @classmethod
    def parse(cls, text: str, source: str = "SPANWRIGHT_KEYS_FILE") -> KeyRing:
        """Read the file's text; a bad line is a :class:`SettingsError` naming its number."""
        entries: list[tuple[str, str, bool]] = []
        issues: list[Issue] = []
        for no, line in enumerate(text.splitlines(), 1):
            parts = line.split()
            if not parts or parts[0].startswith("#"):
                continue
            ok = (
                len(parts) in (2, 3)
                and _TENANT_RE.fullmatch(parts[0]) is not None
                and _HEX_RE.fullmatch(parts[1].lower()) is not None
                and (len(parts) == 2 or parts[2] == "admin")
            )
            if not ok:  # the line itself is not echoed: it may hold a key pasted by mistake
                issues.append(Issue((source, no), "expected `<tenant> <sha256 hex> [admin]`"))
                continue
            entries.append((parts[0], parts[1].lower(), len(parts) == 3))
        if issues:
            lines = ", ".join(str(i.path[-1]) for i in issues)
            raise SettingsError(
                f"{source}: unreadable line(s) {lines}; each line must be "
                "`<tenant> <sha256 hex of the key> [admin]`",
                issues,
            )
        return cls(entries)

    @classmethod
    def load(cls, path: str) -> KeyRing:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise SettingsError(
                f"SPANWRIGHT_KEYS_FILE: cannot read {path}: {exc.strerror}",
                [Issue(("SPANWRIGHT_KEYS_FILE",), "a readable file")],
            ) from None
        return cls.parse(text)

    def authenticate(self, presented: str) -> Principal | None:
        """The principal of a presented key, or None. Digest lookup, then a constant-time
        comparison of the digests (the dict lookup alone would compare with ``==``)."""
        d = digest(presented)
        found = self._by_digest.get(d)
        stored = self._digests.get(d, _NO_DIGEST)
        if hmac.compare_digest(stored, d) and found is not None:
            return found
        return None


def is_loopback(addr: str | None) -> bool:
    """Whether ``addr`` (an IP address, or the name ``localhost``) is a loopback address."""
    if not addr:
        return False
    if addr == "localhost":
        return True
    try:
        return ipaddress.ip_address(addr.split("%", 1)[0]).is_loopback
    except ValueError:
        return False


def bearer_token(header: str | None) -> str | None:
    """The token of ``Authorization: Bearer <token>`` (scheme case-insensitive), or None."""
    if not header:
        return None
    scheme, _, token = header.strip().partition(" ")
    token = token.strip()
    if scheme.lower() != "bearer" or not token:
        return None
    return token


def needs_key(path: str) -> bool:
    return not (path in OPEN_PATHS or path.startswith(OPEN_PREFIXES))


def install(app: Flask, settings: Settings) -> KeyRing | None:
    """Load the keys (a bad file stops start-up) and authenticate every request."""
    ring = KeyRing.load(settings.keys_file) if settings.keys_file else None
    keyless = Principal(settings.default_tenant, admin=False)

    @app.before_request
    def _authenticate() -> None:
        if not needs_key(request.path):
            return
        if ring is None:
            if not is_loopback(request.remote_addr):
                raise Unauthorized("this service has no keys file and serves loopback callers only")
            g.principal = keyless
        else:
            token = bearer_token(request.headers.get("Authorization"))
            if token is None:
                raise Unauthorized("send `Authorization: Bearer <key>`")
            who = ring.authenticate(token)
            if who is None:
                raise Unauthorized("the API key is not known to this service")
            g.principal = who

    app.extensions["spanwright.keys"] = ring
    return ring


def current() -> Principal | None:
    """The authenticated caller of this request (None outside a request / on open paths)."""
    p: Principal | None = g.get("principal")
    return p
