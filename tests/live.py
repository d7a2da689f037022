"""A real HTTP server on 127.0.0.1 for tests that need one (browser, CLI client).

The app is served by werkzeug's threaded server in a daemon thread of the test process,
so the test talks to it over a real loopback socket.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from werkzeug.serving import make_server


@contextmanager
def serve(app: Any) -> Iterator[str]:
    """Serve ``app`` on a free loopback port; yields its base URL."""
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_port}"
    finally:
        server.shutdown()
        thread.join(timeout=5)


def fine_grained(seed: int, n: int = 40, m: int = 4) -> dict[str, Any]:
    """An invented Lantern Hill batch of 40 fx caches (30 to 90 min, timed to the
    microsecond) on 4 nodes. With durations this fine an even split is all but impossible,
    so no lower bound reaches the optimum and an exact search can only prove optimality by
    exhausting a multiway number-partitioning tree (Korf 2009, "Multi-way number
    partitioning", IJCAI): it runs to its budget, improving its best plan as it goes."""
    import numpy as np

    rng = np.random.default_rng(seed)
    durations = np.round(rng.uniform(1800, 5400, size=n), 6)
    return {
        "name": "Lantern Hill fx caches, timed to the microsecond",
        "jobs": [
            {"id": f"lh_fx_cache_{i:03d}", "duration": float(d), "group": f"fx{i % 4}"}
            for i, d in enumerate(durations)
        ],
        "node_count": m,
        "resolution": 1e-6,
    }
