"""The memory budget and its chunks (plain arithmetic; no outside reference needed)."""

import pytest

from reconcile.engine import budget as b
from reconcile.errors import InputError


def test_chunks_cover_every_row_once():
    slices = list(b.chunks(10, 4))
    assert [(s.start, s.stop) for s in slices] == [(0, 4), (4, 8), (8, 10)]
    assert list(b.chunks(0, 4)) == []


def test_rows_per_chunk_follows_the_budget():
    with b.budget(64 * b.MIB):
        assert b.rows_per_chunk(1024) == 64 * 1024
        assert b.rows_per_chunk(1024, share=0.5) == 32 * 1024
        assert b.rows_per_chunk(10 * 1024 * b.MIB) == 1  # a row larger than the budget
        assert b.rows_per_chunk(1024, at_most=b.THROUGHPUT_ROWS) == b.THROUGHPUT_ROWS
        assert b.rows_per_chunk(10 * 1024 * b.MIB, at_most=b.THROUGHPUT_ROWS) == 1
    assert b.budget_bytes() == b.DEFAULT_BUDGET_BYTES


def test_a_budget_too_small_is_refused():
    with pytest.raises(InputError, match="--memory"):
        b.set_budget(1024)
