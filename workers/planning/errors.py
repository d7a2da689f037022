"""The one error root of spanwright, and the input errors of the planning core.

Every error that spanwright raises on purpose derives from :class:`SpanwrightError`.
The HTTP layer maps these to RFC 9457 problem documents in exactly one place
(``service/problems.py``); the CLI maps them to a message and an exit code.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Issue:
    """One thing wrong with an input: a JSON Pointer (RFC 6901) into it and a sentence."""

    pointer: str
    detail: str

    def to_dict(self) -> dict[str, str]:
        return {"pointer": self.pointer, "detail": self.detail}


class SpanwrightError(Exception):
    """Root of every error spanwright raises on purpose."""

    #: short, stable name of the problem kind (used as the tail of the problem ``type`` URI)
    kind = "error"
    #: the HTTP status this kind maps to
    status = 500
    title = "Internal error"

    def __init__(self, detail: str, issues: list[Issue] | None = None) -> None:
        super().__init__(detail)
        self.detail = detail
        self.issues = list(issues or [])


class InvalidInstance(SpanwrightError):
    """The batch cannot be planned as given (empty, bad durations, duplicate ids, ...)."""

    kind = "invalid-request"
    status = 422
    title = "The request is not a valid batch"


class Infeasible(SpanwrightError):
    """The batch is well formed but no plan can satisfy it (a job no node may run, ...)."""

    kind = "infeasible"
    status = 422
    title = "No plan can satisfy the request"

    def __init__(self, detail: str, jobs: list[str], issues: list[Issue] | None = None) -> None:
        super().__init__(detail, issues)
        self.jobs = list(jobs)


def format_issues(issues: list[Issue], limit: int = 10) -> str:
    """One line per issue, for messages on a terminal."""
    lines = [f"{i.pointer or '/'}: {i.detail}" for i in issues[:limit]]
    if len(issues) > limit:
        lines.append(f"... and {len(issues) - limit} more")
    return "\n".join(lines)
