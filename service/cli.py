"""The ``spanwright`` command.

Each subcommand lives in its own module under ``service/commands/`` and exposes
``NAME``, ``HELP``, ``add_arguments(parser)`` and ``run(args) -> int``; they are found by
discovery, so adding a command touches no other file. Modules import heavy things
(Flask, Redis) inside ``run`` so that ``spanwright solve`` starts fast.

Exit codes: 0 success, 1 runtime failure, 2 invalid input or usage, 3 the server said no.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from collections.abc import Sequence

from workers.planning.errors import Issue, SpanwrightError

from . import commands

EXIT_OK, EXIT_FAILURE, EXIT_INVALID = 0, 1, 2


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


def format_issues(issues: list[Issue], limit: int = 10) -> str:
    """One line per issue, each named by its JSON Pointer as the API names it."""
    from .problems import json_pointer

    lines = [f"{json_pointer(i.path) or '/'}: {i.detail}" for i in issues[:limit]]
    if len(issues) > limit:
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
            print(format_issues(rest), file=sys.stderr)
        from .problems import http_status

        return EXIT_INVALID if http_status(exc) < 500 else EXIT_FAILURE
    except KeyboardInterrupt:
        return 130
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
