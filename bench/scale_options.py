"""The options of the benchmarks that time one scale: how large (``--jobs``, ``--nodes``)
and how many runs to take the best and the median of (``--repeat``)."""

from __future__ import annotations

import argparse


def scale_options(doc: str, jobs: int, nodes: int, repeat: int = 3) -> argparse.ArgumentParser:
    """A parser described by ``doc``'s first line, with ``--jobs``, ``--nodes`` and
    ``--repeat`` defaulting to these; the benchmark adds its own."""
    ap = argparse.ArgumentParser(description=doc.splitlines()[0])
    ap.add_argument("--jobs", type=int, default=jobs)
    ap.add_argument("--nodes", type=int, default=nodes)
    ap.add_argument("--repeat", type=int, default=repeat, help="runs of each timing")
    return ap
