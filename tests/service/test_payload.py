"""The worker's copy of a plan body in columns (``service/payload.py``): exact round trips."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service import payload


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.text(max_size=6),  # any text: newlines and quotes included
            st.floats(allow_nan=False, allow_infinity=False),
            st.one_of(st.none(), st.text(max_size=3)),
        ),
        max_size=20,
    ),
    st.dictionaries(st.sampled_from(["node_count", "deadline", "name"]), st.integers(0, 9)),
    st.booleans(),
)
def test_columns_come_back_exactly(
    jobs: list[tuple[str, float, str | None]], envelope: dict[str, Any], with_groups: bool
) -> None:
    """decode(encode(x)) is x: the same envelope, ids, groups and bit-identical float64
    durations (negative zero and subnormals included). Reference: the Python values given."""
    ids = [j[0] for j in jobs]
    durations = [j[1] for j in jobs]
    groups = [j[2] for j in jobs] if with_groups else None
    given_cols = payload.Columns(envelope, ids, np.asarray(durations, dtype=np.float64), groups)
    cols = payload.decode(payload.encode(given_cols))
    assert cols.envelope == envelope and cols.ids == ids and cols.groups == groups
    got = cols.durations.tolist()
    assert [(x, math.copysign(1, x)) for x in got] == [(x, math.copysign(1, x)) for x in durations]
    assert payload.is_columns(payload.encode(given_cols))


def test_what_is_not_a_copy_is_refused() -> None:
    """A raw JSON body is not mistaken for a copy, and damaged copies raise ValueError
    (never a wrong instance): a body cut short, a count that does not match."""
    good = payload.encode(_columns({"node_count": 2}, ["a", "b"], [1.0, 2.0]))
    assert not payload.is_columns(b'{"jobs": []}')
    for bad in (b'{"jobs": []}', good[:-3], good.replace(b'["a","b"]', b'["a"]')):
        with pytest.raises(ValueError):
            payload.decode(bad)
    with pytest.raises(ValueError):
        payload.encode(_columns({"jobs": []}, ["a"], [1.0]))
    with pytest.raises(ValueError):
        payload.encode(_columns({}, ["a", "b"], [1.0]))


def _columns(envelope: dict[str, Any], ids: list[str], durations: list[float]) -> payload.Columns:
    return payload.Columns(envelope, ids, np.asarray(durations, dtype=np.float64))
