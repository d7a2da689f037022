"""Reading a plain plan body: the per-job path against columns from the bytes (issue 16).

For batches of plain jobs (``{"id": ..., "duration": ...}``, a third with a ``group``), the
median time of

* ``parse``: ``json.loads`` then ``schemas.load_plan_columns`` (a dict per job, then the
  columns) against ``jobscan.read_plain`` (columns straight from the bytes);
* ``read_plan``: the whole API validation of ``routes/plans.read_plan`` (limits, shape,
  the reader's semantic checks, the worker's copy) on either.

    python bench/jobscan.py                  # 1,000, 100,000 and 200,000 jobs
    python bench/jobscan.py --jobs 1000 --repeat 51
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
from collections.abc import Callable
from typing import Any

from service import jobscan
from service.routes.plans import read_plan
from service.schemas import load_plan_columns
from service.settings import Settings


def body(n: int) -> bytes:
    """``n`` plain jobs of an invented studio, a third of them in a group."""
    jobs: list[dict[str, Any]] = []
    for i in range(n):
        job: dict[str, Any] = {"id": f"lh_sq{i // 1000:03d}_{i % 1000:04d}"}
        job["duration"] = 60 + (i % 7) * 12.5 if i % 2 else 45 + i % 11
        if i % 3 == 0:
            job["group"] = f"lh_sq{i // 1000:03d}"
        jobs.append(job)
    return json.dumps({"jobs": jobs, "node_count": 40}).encode()


def median_seconds(run: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        run()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def _paths(
    raw: bytes, settings: Settings
) -> list[tuple[str, Callable[[], object], Callable[[], object]]]:
    """(what, the per-job path, the columns path) on ``raw``."""
    return [
        (
            "parse",
            lambda: load_plan_columns(json.loads(raw), settings),
            lambda: jobscan.read_plain(raw),
        ),
        (
            "read_plan",
            lambda: read_plan(json.loads(raw), settings),
            lambda: read_plan(jobscan.read_plain(raw), settings),
        ),
    ]


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--jobs", type=int, nargs="*", default=[1_000, 100_000, 200_000])
    p.add_argument("--repeat", type=int, default=0, help="runs per figure (default: by size)")
    args = p.parse_args()
    settings = Settings()
    print(f"{'jobs':>8}  {'what':<10}{'per job ms':>12}{'columns ms':>12}{'ratio':>7}")
    for n in args.jobs:
        raw = body(n)
        repeat = args.repeat or (201 if n <= 10_000 else 11)
        cols = jobscan.read_plain(raw)
        assert cols is not None and len(cols.ids) == n
        for what, old, new in _paths(raw, settings):
            a, b = median_seconds(old, repeat), median_seconds(new, repeat)
            print(f"{n:>8}  {what:<10}{a * 1e3:>12.2f}{b * 1e3:>12.2f}{b / a:>7.2f}")


if __name__ == "__main__":
    main()
