"""The one error root of spanwright, and the input errors of the planning core.

Every error that spanwright raises on purpose derives from :class:`SpanwrightError`.
The core names what is wrong by a field path (:class:`Issue`); it knows nothing of HTTP.
The service maps errors to RFC 9457 problem documents, statuses and JSON Pointers in
exactly one place (``service/problems.py``); the CLI maps them to a message and an exit
code.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

#: where in an input a problem is: field names and list positions from its root,
#: ``("jobs", 3, "duration")``; ``()`` is the whole input
Path = tuple[str | int, ...]


@dataclass(frozen=True, slots=True)
class Issue:
    """One thing wrong with an input: where it is (a field :data:`Path`) and a sentence."""

    path: Path
    detail: str

    @property
    def where(self) -> str:
        """The path for people: ``jobs[3].duration``; ``""`` for the whole input."""
        out = ""
        for part in self.path:
            out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else part)
        return out


def under(prefix: Path, issues: list[Issue]) -> list[Issue]:
    """``issues`` of a part of an input, placed at ``prefix`` in the whole input."""
    return [Issue((*prefix, *i.path), i.detail) for i in issues]


class SpanwrightError(Exception):
    """Root of every error spanwright raises on purpose."""

    #: short, stable name of the problem kind (used as the tail of the problem ``type`` URI)
    kind = "error"
    title = "Internal error"

    def __init__(self, detail: str, issues: list[Issue] | None = None) -> None:
        super().__init__(detail)
        self.detail = detail
        self.issues = list(issues or [])


class InvalidInstance(SpanwrightError):
    """The batch cannot be planned as given (empty, bad durations, duplicate ids, ...)."""

    kind = "invalid-request"
    title = "The request is not a valid batch"


class Infeasible(SpanwrightError):
    """The batch is well formed but no plan can satisfy it (a job no node may run, ...)."""

    kind = "infeasible"
    title = "No plan can satisfy the request"

    def __init__(self, detail: str, jobs: list[str], issues: list[Issue] | None = None) -> None:
        super().__init__(detail, issues)
        self.jobs = list(jobs)

    @classmethod
    def naming(
        cls, why: str, job_ids: Sequence[str], bad: Sequence[int], issue: Callable[[int], Issue]
    ) -> Infeasible:
        """``"N job(s) {why}: a, b, ..."`` for the jobs at indices ``bad`` of ``job_ids``,
        naming the first ten in the sentence, all of them in ``jobs``, and giving the first
        twenty ``issue(j)``."""
        ids = [job_ids[j] for j in bad]
        return cls(
            f"{len(ids)} job(s) {why}: " + ", ".join(ids[:10]) + (" ..." if len(ids) > 10 else ""),
            jobs=ids,
            issues=[issue(j) for j in bad[:20]],
        )
