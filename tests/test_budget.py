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


# ------------------------------------------------------- the command line's --memory
def test_memory_option_sets_the_budget_for_that_command_line_only(monkeypatch):
    from pathlib import Path

    from cli_support import run_cli

    monkeypatch.delenv(b.ENVIRONMENT, raising=False)
    board = str(Path(__file__).resolve().parent.parent / "sample_data" / "line_receiver_cb.toml")
    out = run_cli("--memory", "64M", "solve", board, "--json")
    assert out.exit_code == 0, out.stderr
    assert b.budget_bytes() == 64 * b.MIB  # in force for the command that was given it
    out = run_cli("solve", board, "--json")
    assert out.exit_code == 0, out.stderr
    assert b.budget_bytes() == b.DEFAULT_BUDGET_BYTES  # and forgotten by the next one


@pytest.mark.parametrize("value, why", [("2X", "not a memory size"), ("1M", "too small"),
                                        ("5000G", "at most 1024 GiB"), ("", "not a memory size")])
def test_a_bad_memory_option_is_one_line_exit_2(value, why):
    from cli_support import run_cli

    out = run_cli("--memory", value, "solve", "x.toml")
    assert out.exit_code == 2 and out.crash is None
    (line,) = out.message_lines
    assert line.startswith("reconcile: [--memory] ") and why in line


# ---------------------------------------------------------------- BLAS threads
def test_small_problems_run_blas_on_one_thread_and_restore_it(monkeypatch):
    # threadpoolctl (a reference library) reports what the BLAS library was set to
    from threadpoolctl import threadpool_info, threadpool_limits

    from reconcile.inference.threads import small_problem_threads

    def blas_threads() -> set[int]:
        return {i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"}

    if not blas_threads():
        pytest.skip("no BLAS library that threadpoolctl can see")
    monkeypatch.delenv("RECONCILE_BLAS_THREADS", raising=False)
    with threadpool_limits(limits=2, user_api="blas"):
        before = blas_threads()

        @small_problem_threads()
        def inner() -> set[int]:
            return blas_threads()

        @small_problem_threads()
        def outer() -> tuple[set[int], set[int], set[int]]:
            first = blas_threads()
            nested = inner()
            return first, nested, blas_threads()

        assert outer() == ({1}, {1}, {1})
        assert blas_threads() == before
        monkeypatch.setenv("RECONCILE_BLAS_THREADS", "2")
        assert inner() == before  # two threads asked for, as outside


def test_scipy_blas_is_held_only_when_asked_and_numpy_work_does_not_import_it():
    # threadpoolctl (a reference library) reports every loaded BLAS library's threads;
    # a fresh interpreter shows what the numpy-only path imports
    import json
    import os
    import subprocess
    import sys

    script = (
        "import json, sys\n"
        "from threadpoolctl import threadpool_info, threadpool_limits\n"
        "from reconcile.inference.threads import small_problem_threads\n"
        "def blas(): return sorted(i['num_threads'] for i in threadpool_info() "
        "if i['user_api'] == 'blas')\n"
        "with threadpool_limits(limits=2, user_api='blas'):\n"
        "    with small_problem_threads():\n"
        "        print('scipy.linalg' in sys.modules)\n"
        "    with small_problem_threads(scipy=True):\n"
        "        print(json.dumps(blas()))\n"
    )
    env = {k: v for k, v in os.environ.items() if k != "RECONCILE_BLAS_THREADS"}
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          check=True, env=env)
    without_scipy, held = done.stdout.split("\n")[:2]
    assert without_scipy == "False"
    counts = json.loads(held)
    if not counts:
        pytest.skip("no BLAS library that threadpoolctl can see")
    assert set(counts) == {1}
