"""HTTP routes: one blueprint per resource, all thin adapters over store and queue."""

from __future__ import annotations

from dataclasses import dataclass

from flask import current_app

from ..queue import JobQueue
from ..settings import Settings
from ..store import Store


@dataclass(frozen=True, slots=True)
class Services:
    """What the routes use, built once by ``create_app`` and kept on the app."""

    settings: Settings
    store: Store
    queue: JobQueue


def services() -> Services:
    svc: Services = current_app.extensions["spanwright"]
    return svc


def tenant() -> str:
    """The caller's tenant: the one of the API key (``service/auth.py``); keyless, the
    default tenant."""
    from ..auth import current

    who = current()
    return who.tenant if who is not None else services().settings.default_tenant


def may_read(owner: str | None) -> bool:
    """Whether the caller may see a record of ``owner``: its own, or any with an admin key."""
    from ..auth import current

    if owner is None:
        return False
    who = current()
    return owner == tenant() or (who is not None and who.admin)
