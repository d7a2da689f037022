"""The ``spanwright`` command.

Each subcommand lives in its own module under ``service/commands/`` and exposes
``NAME``, ``HELP``, ``add_arguments(parser)`` and ``run(args) -> int``; they are found by
discovery, so adding a command touches no other file. Modules import heavy things
(Flask, Redis) inside ``run`` so that ``spanwright solve`` starts fast.

Exit codes (the one table; POSIX leaves the meaning of statuses 1-125 to each utility,
and ``sysexits.h`` is not followed because argparse already answers usage errors with 2):

====  =========================  ===========================================================
code  name                       meaning
====  =========================  ===========================================================
0     EXIT_OK                    success (``submit``: finished and, with a deadline, met)
1     EXIT_FAILURE               runtime failure: the plan failed or was cancelled, ...
2     EXIT_INVALID               invalid input or usage (the API would answer 4xx)
3     EXIT_SERVER                the server said no (404, 409, 429, 5xx) or is unreachable
4     EXIT_DEADLINE_MISSED       ``submit``: the plan misses the deadline; a better plan
                                 might still meet it
5     EXIT_DEADLINE_UNREACHABLE  ``submit``: no plan can meet the deadline (proven: the
                                 lower bound is above it)
130   EXIT_INTERRUPTED           interrupted (Ctrl-C: 128 + SIGINT, the shells' convention)
====  =========================  ===========================================================
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from collections.abc import Sequence

from workers.planning.errors import Issue, SpanwrightError

from . import commands
from .csvio import CsvError

EXIT_OK = 0
EXIT_FAILURE = 1
EXIT_INVALID = 2
EXIT_SERVER = 3
EXIT_DEADLINE_MISSED = 4
EXIT_DEADLINE_UNREACHABLE = 5
EXIT_INTERRUPTED = 130


def _version() -> str:
    """The installed distribution's version (pyproject.toml)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("spanwright")
    except PackageNotFoundError:  # pragma: no cover - run from a tree never installed
        return "unknown"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="spanwright",
        description="Plan render and transcode batches onto farm nodes, with certificates.",
    )
    parser.add_argument("--version", action="version", version=f"spanwright {_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda i: i.name):
        if info.name.startswith("_"):
            continue
        mod = importlib.import_module(f"{commands.__name__}.{info.name}")
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


def format_issues(issues: list[Issue], limit: int | None = 10) -> str:
    """One line per issue (the first ``limit``; None: all), each named by its JSON Pointer
    as the API names it; an issue of the whole input (a CSV line names its own place) is
    its sentence alone."""
    from .problems import json_pointer

    shown = issues if limit is None else issues[:limit]
    lines = [f"{json_pointer(i.path)}: {i.detail}" if i.path else i.detail for i in shown]
    if limit is not None and len(issues) > limit:
        lines.append(f"... and {len(issues) - limit} more")
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        code: int = args._run(args)
    except SpanwrightError as exc:
        print(f"spanwright: {exc.detail}", file=sys.stderr)
        # an issue of the whole body that only repeats the message is not printed again
        rest = [i for i in exc.issues if i.path or i.detail not in exc.detail]
        if rest:
            # every bad line of a CSV file is reported, not the first ten
            print(format_issues(rest, None if isinstance(exc, CsvError) else 10), file=sys.stderr)
        from .problems import http_status

        return EXIT_INVALID if http_status(exc) < 500 else EXIT_FAILURE
    except KeyboardInterrupt:
        return EXIT_INTERRUPTED
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
