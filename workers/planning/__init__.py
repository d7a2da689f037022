"""The pure planning core of spanwright: instances in, plans with certificates out.

No Flask and no Redis here; anyone can call it as a library::

    from workers.planning import Instance, solve
    inst = Instance.build([3600, 1800, 1800, 1200], nodes=2)
    result = solve(inst, "longest_first")
    print(result.summary())
"""

from .budget import Budget as Budget
from .errors import Infeasible as Infeasible
from .errors import InvalidInstance as InvalidInstance
from .errors import Issue as Issue
from .errors import SpanwrightError as SpanwrightError
from .model import Instance as Instance
from .model import Node as Node
from .result import Certificate as Certificate
from .result import PlanResult as PlanResult
from .result import Schedule as Schedule
from .solve import METHODS as METHODS
from .solve import Progress as Progress
from .solve import solve as solve
