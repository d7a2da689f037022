"""Stage graphs: jobs that wait for jobs, shared limits and multi-slot nodes (issue 17).

Build a :class:`StageProblem` from an :class:`~workers.planning.model.Instance` and plain
values, then plan and certify it with :func:`solve_stages`::

    problem = StageProblem.build(inst, after=[[], ["render"]], limits={"lic": 2})
    result = solve_stages(problem, "longest_first")
    result.plan.makespan, result.bounds.best.name, result.stop_reason
"""

from .bounds import Bound as Bound
from .bounds import StageBounds as StageBounds
from .bounds import stage_bounds as stage_bounds
from .plan import StagePlan as StagePlan
from .problem import StageProblem as StageProblem
from .result import StageResult as StageResult
from .search import METHODS as METHODS
from .search import solve_stages as solve_stages
