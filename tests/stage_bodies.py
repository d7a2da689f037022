"""Request bodies of stage graphs shared by the tests (no expected values here).

:func:`issue_graph` is issue 17's example graph: three layers (``bg``, ``fg``, ``fx``)
each using one place of a licence of capacity 2, ``comp`` waiting for the three layers and
``encode`` waiting for ``comp``, on ``node-01`` (2 slots), ``node-02`` and ``node-03``
(speed 2). The tests give it their own durations and names.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

#: the layers of the example graph, each using the licence
LAYERS = ("bg", "fg", "fx")


def issue_graph(durations: Mapping[str, float], licence: str, prefix: str = "") -> dict[str, Any]:
    """The example graph with ``durations`` by job name (``bg``, ``fg``, ``fx``, ``comp``,
    ``encode``), the licence named ``licence`` and job ids ``prefix + name``."""
    layers = [prefix + name for name in LAYERS]
    comp, encode = prefix + "comp", prefix + "encode"
    return {
        "limits": {licence: 2},
        "nodes": [{"id": "node-01", "slots": 2}, {"id": "node-02"}, {"id": "node-03", "speed": 2}],
        "jobs": [
            *(
                {"id": prefix + name, "duration": durations[name], "uses": [licence]}
                for name in LAYERS
            ),
            {"id": comp, "duration": durations["comp"], "after": layers},
            {"id": encode, "duration": durations["encode"], "after": [comp]},
        ],
    }
