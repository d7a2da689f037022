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


def hard_batch(n: int = 100, m: int = 40, seed: int = 7) -> dict[str, Any]:
    """Few jobs per node with normal times, int(N(4n, n)) (Dell'Amico-Martello-style class 7,
    references.md section 2.2): such batches keep an exact search busy for seconds."""
    import numpy as np

    rng = np.random.default_rng(seed)
    p = np.maximum(1, rng.normal(4 * n, n, size=n).astype(int))
    return {
        "jobs": [
            {"id": f"sim_{i:03d}", "duration": int(x), "group": "sim"} for i, x in enumerate(p)
        ],
        "node_count": m,
    }
