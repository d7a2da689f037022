"""The one place request bodies become core objects.

The service's edge reads every body here, after the marshmallow shape check
(``service/schemas.py``): the API routes, the worker (``workers/tasks.py``) and the
command line call the same readers, so one body gives one verdict and one set of messages
everywhere. Problems are collected with their field paths (the core's
:class:`~workers.planning.errors.Issue`); ``service/problems.py`` writes them as JSON
Pointers. A new request field is read here and nowhere else (DEVELOPERS.md, "A new
request field").

``plan``     ``POST /v1/plans`` -> Instance (per job, or from columns)
``stages``   its stage-graph fields (after, uses, limits, slots) -> StageProblem
``sizing``   ``POST /v1/sizings`` -> SizingArgs
``spread``   spread inputs of either -> SpreadRequest | None
``events``   ``POST /v1/plans/{id}/replan`` -> Events; what is left -> a plan body
"""

from __future__ import annotations

from .events import planned_nodes as planned_nodes
from .events import read_events as read_events
from .events import replan_body as replan_body
from .plan import read_columns as read_columns
from .plan import read_instance as read_instance
from .plan import read_plan_body as read_plan_body
from .plan import read_problem as read_problem
from .sizing import read_sizing_request as read_sizing_request
from .spread import read_spread as read_spread
from .stages import Problem as Problem
from .stages import refuse_stages as refuse_stages
from .stages import with_stages as with_stages
