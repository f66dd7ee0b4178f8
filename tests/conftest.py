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


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The demo, run once per test process, in-process: its summary (the object
    ``demo --json`` prints), what it printed, its session (store, id) and the analyses
    it recorded (the last of each kind).

    Tests that use it carry ``@pytest.mark.xdist_group("demo")``, so that under
    ``pytest -n`` they share one worker and the demo still runs once. The demo as a
    separate process (``demo --json`` from an installed wheel) is ``.ci/wheel_check.sh``.
    """
    import contextlib
    import io
    import os

    from reconcile.cli.demo import run_demo
    from reconcile.store.repository import open_store

    out_dir = tmp_path_factory.mktemp("demo")
    printed = io.StringIO()
    mpl_before = os.environ.get("MPLCONFIGDIR")
    try:
        with contextlib.redirect_stdout(printed):
            summary = run_demo(json_output=False, out_dir=out_dir)
    finally:  # the demo points matplotlib's cache into its folder; undo that here
        if mpl_before is None:
            os.environ.pop("MPLCONFIGDIR", None)
        else:
            os.environ["MPLCONFIGDIR"] = mpl_before
    store_path, sid = summary["session"]["store"], summary["session"]["id"]
    with open_store(store_path) as store:
        view = store.show_session(sid)
        recorded = {a.kind: store.analysis(a.id).result for a in view.analyses}
    return {"out_dir": out_dir, "summary": summary, "printed": printed.getvalue(),
            "store": store_path, "id": sid, "recorded": recorded}
