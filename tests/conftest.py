"""Suite-wide pytest hooks.

The team's rule: every test that takes more than 5 s carries ``@pytest.mark.slow``
(slow tests still run by default; ``-m "not slow"`` leaves them out). This hook reports,
at the end of a run, each test whose setup + call + teardown took longer than that
without the marker, so a new slow test is noticed. It only reports: durations depend on
the machine and its load, so no test fails on time (speed targets live in
``tests/benchmarks/``).
"""

from __future__ import annotations

import pytest

SLOW_S = 5.0

_durations: dict[str, float] = {}
_marked: set[str] = set()


def pytest_runtest_logreport(report: pytest.TestReport) -> None:
    # reports carry the test's keywords (its markers among them), also from xdist workers
    _durations[report.nodeid] = _durations.get(report.nodeid, 0.0) + report.duration
    if "slow" in report.keywords:
        _marked.add(report.nodeid)


def pytest_terminal_summary(terminalreporter) -> None:
    unmarked = sorted(
        ((s, nodeid) for nodeid, s in _durations.items() if s > SLOW_S and nodeid not in _marked),
        reverse=True,
    )
    if unmarked:
        terminalreporter.section(f"tests over {SLOW_S:g} s without @pytest.mark.slow")
        for seconds, nodeid in unmarked:
            terminalreporter.write_line(f"{seconds:6.1f} s  {nodeid}")

