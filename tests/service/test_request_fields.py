"""Where a request field lives: its shape in ``service/schemas.py`` and its contract in
``openapi/openapi.yaml`` name exactly the same fields (DEVELOPERS.md, "A new request
field"). Reference: the OpenAPI document itself (the authority for the HTTP contract)."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml
from marshmallow import Schema

from service import schemas

SPEC = yaml.safe_load((Path(__file__).parents[2] / "openapi" / "openapi.yaml").read_text())

PAIRS = [
    ("PlanRequest", schemas.PlanRequestSchema()),
    ("SizingRequest", schemas.SizingRequestSchema()),
    ("ReplanRequest", schemas.ReplanRequestSchema()),
    ("Job", schemas.JobSchema()),
    ("Node", schemas.NodeSchema()),
]


@pytest.mark.parametrize(("name", "schema"), PAIRS, ids=[p[0] for p in PAIRS])
def test_schema_and_contract_name_the_same_fields(name: str, schema: Schema) -> None:
    """Every field the contract documents is read, and every field read is documented."""
    documented = set(SPEC["components"]["schemas"][name]["properties"])
    assert set(schema.fields) == documented


CORE = Path(__file__).parents[2] / "workers" / "planning"
#: what reading a request body or speaking HTTP looks like in source text
EDGE_SIGNS = ("body.get(", "body[", 'Issue("/', 'Issue(f"/', "status = 4", "status = 5")


def test_the_core_reads_no_body_and_knows_no_http() -> None:
    """Request bodies are read at the service edge only (``service/reading``), and the core
    names problems by field path, never by JSON Pointer or HTTP status (issue 15, point 1;
    DEVELOPERS.md, "A new request field")."""
    found = [
        f"{path.relative_to(CORE)}: {sign}"
        for path in sorted(CORE.rglob("*.py"))
        for sign in EDGE_SIGNS
        if sign in path.read_text(encoding="utf-8")
    ]
    assert found == []
