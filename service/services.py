"""What every route uses, built once by ``create_app`` and kept on the app: the settings,
the store and the queue; and who the caller is (its tenant, and what it may read)."""

from __future__ import annotations

from dataclasses import dataclass

from flask import current_app

from .auth import current
from .queue import JobQueue
from .settings import Settings
from .store import Store


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
    who = current()
    return who.tenant if who is not None else services().settings.default_tenant


def may_read(owner: str | None) -> bool:
    """Whether the caller may see a record of ``owner``: its own, or any with an admin key."""
    if owner is None:
        return False
    who = current()
    return owner == tenant() or (who is not None and who.admin)
