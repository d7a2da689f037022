"""Shared by the stage-graph tests: a reference graph given to the package's builder."""

from __future__ import annotations

from reference_stages import Tiny

from workers.planning import Instance, Node
from workers.planning.stages.problem import StageProblem


def to_problem(g: Tiny) -> StageProblem:
    """The same graph through the package's public builder (ids and names)."""
    ids = [f"j{j}" for j in range(g.n)]
    nodes = [
        Node(f"n{k}", speed=g.speeds[k], provides=frozenset(g.provides[k]), free_at=g.free_at[k])
        for k in range(g.m)
    ]
    inst = Instance.build(g.p, nodes, job_ids=ids, requires=g.requires, resolution=g.resolution)
    return StageProblem.build(
        inst,
        after=[[ids[i] for i in row] for row in g.after],
        uses=[[f"L{x}" for x in row] for row in g.uses],
        limits={f"L{x}": c for x, c in enumerate(g.caps)},
        slots=g.slots,
    )
