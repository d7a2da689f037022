"""How likely a plan is to make its deadline when durations are estimates.

Each job's actual duration is a lognormal around its estimate (its ``duration_p90``, or
the batch ``spread``); a plan is run many times over, under the ``static`` policy (each
node runs its own jobs of the plan) and the ``dynamic`` one (a dispatcher hands the jobs
out in plan order), and the share of runs that meet the deadline is reported with its
Monte-Carlo error. The modules, each with its own sources and reasons in its docstring:

``spread``      the spread model (SpreadModel), per-job closed forms (job_probabilities)
``streams``     random numbers: numpy's SFC64 stepped in a kernel, ziggurat normals
``kernels``     the compiled simulation kernels of the two policies
``simulation``  simulate(), its ConfidenceResult, the Wilson interval, confidence_block()
``target``      sizing to a confidence: confidence_target(), nodes_for_confidence()
``request``     SpreadRequest (what a request body asks for), sizing_confidence()
``rental``      a rental's plan under spread and renting to a confidence:
                rental_confidence(), check_rental_spread() (import it from its module:
                it pulls in the rental search)

Everything else callers use is importable from here.
"""

from .kernels import Dispatch as Dispatch
from .kernels import Draws as Draws
from .kernels import dispatch_row as dispatch_row
from .kernels import dispatch_row_plain as dispatch_row_plain
from .kernels import dynamic_rows as dynamic_rows
from .kernels import static_rows as static_rows
from .request import DEFAULT_SAMPLES as DEFAULT_SAMPLES
from .request import MAX_SEED as MAX_SEED
from .request import SIMULATION_KEYS as SIMULATION_KEYS
from .request import SpreadRequest as SpreadRequest
from .request import sizing_confidence as sizing_confidence
from .simulation import CHUNK_DRAWS as CHUNK_DRAWS
from .simulation import POLICIES as POLICIES
from .simulation import Z95 as Z95
from .simulation import ConfidenceResult as ConfidenceResult
from .simulation import Policy as Policy
from .simulation import block_of as block_of
from .simulation import confidence_block as confidence_block
from .simulation import dispatch_tables as dispatch_tables
from .simulation import plan_order as plan_order
from .simulation import simulate as simulate
from .simulation import wilson_interval as wilson_interval
from .spread import MAX_SIGMA as MAX_SIGMA
from .spread import Z90 as Z90
from .spread import SpreadModel as SpreadModel
from .spread import job_probabilities as job_probabilities
from .streams import ZIG_LAYERS as ZIG_LAYERS
from .streams import fill_normals as fill_normals
from .streams import sfc64_raw as sfc64_raw
from .streams import ziggurat_tables as ziggurat_tables
from .target import ConfidenceSizing as ConfidenceSizing
from .target import ConfidenceTarget as ConfidenceTarget
from .target import confidence_target as confidence_target
from .target import lpt_plan as lpt_plan
from .target import nodes_for_confidence as nodes_for_confidence
