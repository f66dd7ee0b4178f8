"""The notebook API: the lazy exports of ``reconcile``, result reprs and ``report()``,
a read-only ``Board``, the kind types, figures without process-wide state, and no bare
``except Exception`` around known failures.

Checks against our own engine are self-consistency checks (the CLI's output against the
same result printed from Python); the repr units follow the project's formatter
(SI prefixes, IEC 80000-1 style ``kΩ``; common practice).
"""

from pathlib import Path

import pytest

import reconcile

SAMPLES = Path(__file__).resolve().parent.parent / "sample_data"


def test_load_solve_to_dict_and_frames():
    board = reconcile.load_board(SAMPLES / "two_stage_npn_pnp.toml")
    sol = reconcile.solve(board)
    d = sol.to_dict()
    assert set(d["transistors"]) == {"Q1", "Q2"}
    nodes = sol.nodes_frame()
    assert list(nodes.columns) == ["volts"] and nodes.loc["vcc", "volts"] == pytest.approx(15.0)
    q = sol.transistors_frame()
    assert q.loc["Q2", "region"] == "forward-active" and q.loc["Q2", "ic"] < 0  # pnp, signed
    assert set(sol.resistors_frame().index) == set(board.resistors)
    assert sol.supplies_frame().loc["VCC", "current"] > 0


def test_fit_from_python():
    board = reconcile.load_board(SAMPLES / "line_receiver_cb.toml")
    readings = reconcile.load_readings(SAMPLES / "line_receiver_built.csv", board)
    fit = reconcile.fit(board, readings)
    assert fit.verdict in ("consistent", "doubtful", "inconsistent")
    assert "Q1.beta" in fit.to_dict()["parameters"]


def test_api_names_survive_submodule_imports():
    # Importing every submodule must not shadow a lazily exported function.
    import importlib
    import pkgutil

    for mod in pkgutil.walk_packages(reconcile.__path__, "reconcile."):
        if not mod.name.endswith("__main__"):
            importlib.import_module(mod.name)
    for name in ("load_board", "board_from_text", "solve", "load_readings", "fit",
                 "diagnose", "analyse", "characterise_lot"):
        assert callable(getattr(reconcile, name)), name
        assert not isinstance(getattr(reconcile, name), type(reconcile)), name
    # `trim` is the package reconcile/trim/, callable as the function: no import shadows it
    assert callable(reconcile.trim)


def test_unknown_attribute():
    with pytest.raises(AttributeError):
        reconcile.no_such_thing  # noqa: B018


# ------------------------------------------------------------------ exports
def test_all_and_dir_list_every_export_and_each_resolves():
    assert set(reconcile.__all__) <= set(dir(reconcile))
    for name in reconcile.__all__:
        assert getattr(reconcile, name) is not None, name
    for name in ("Board", "FitResult", "Diagnosis", "TrimResult", "Analysis", "AnalysisInputs"):
        assert isinstance(getattr(reconcile, name), type), name


def test_import_reconcile_loads_nothing_heavy():
    # Common practice for fast start-up: the exports import lazily.
    import json
    import subprocess
    import sys

    probe = "import json, sys, reconcile; print(json.dumps(sorted(sys.modules)))"
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                          timeout=60, check=True)
    loaded = json.loads(done.stdout)
    heavy = ("numpy", "scipy", "lmfit", "pandas", "matplotlib", "sqlalchemy", "rich")
    assert [m for m in loaded if m.split(".")[0] in heavy] == []


# ------------------------------------------------------- reprs and report()
@pytest.fixture(scope="module")
def analysis():
    board = reconcile.load_board(SAMPLES / "line_receiver_cb.toml")
    readings = reconcile.load_readings(SAMPLES / "line_receiver_built.csv", board)
    inputs = reconcile.AnalysisInputs.from_objects(
        board, readings, reconcile.AnalysisOptions(trim_samples=500)
    )
    return reconcile.analyse(inputs)


def test_result_reprs_are_one_short_line_with_units(analysis):
    board = analysis.inputs.board
    lot = reconcile.characterise_lot(SAMPLES / "lot_jig.toml", SAMPLES / "lot_jig_readings.csv")
    results = [reconcile.solve(board), analysis.fit.fit, analysis.fit, analysis.diagnosis,
               analysis.diagnosis.top, analysis.trim.result, analysis.trim, lot, analysis,
               board]
    for result in results:
        text = repr(result)
        assert "\n" not in text and len(text) < 200, text
        assert text.startswith(type(result).__name__ + "("), text
    assert "Ω" in repr(reconcile.solve(board))  # input resistance with its unit
    assert "χ²" in repr(analysis.fit.fit)


def _printed(result) -> str:
    import io

    from reconcile.present.console import make_console

    buf = io.StringIO()
    result.report(make_console(file=buf, width=100))
    return buf.getvalue()


def _cli(*args: str) -> str:
    """What ``reconcile ARGS`` prints on a terminal 100 columns wide: the real entry
    point, in this process (``cli_support.run_cli``)."""
    from cli_support import run_cli

    with pytest.MonkeyPatch.context() as patch:
        patch.chdir(SAMPLES.parent)
        patch.setenv("COLUMNS", "100")
        done = run_cli(*args)
    assert done.exit_code == 0 and done.crash is None, done.crash or done.stderr
    return done.stdout


@pytest.mark.slow
def test_report_prints_what_the_cli_prints_self_consistency(analysis):
    # Self-consistency: the same results printed by the command and from Python.
    board_file = "sample_data/line_receiver_cb.toml"
    readings_file = "sample_data/line_receiver_built.csv"
    assert _printed(reconcile.solve(analysis.inputs.board)) == _cli("solve", board_file)
    assert _printed(analysis.fit) == _cli("fit", board_file, readings_file)
    assert _printed(analysis.trim) == _cli("trim", board_file, readings_file, "--samples", "500")


def test_whole_analysis_report_prints_fit_diagnosis_and_trim_once_self_consistency(analysis):
    # Self-consistency: Analysis.report() is the three results' own reports in order.
    whole = _printed(analysis)
    parts = [_printed(analysis.fit), _printed(analysis.diagnosis), _printed(analysis.trim)]
    assert whole == "".join(parts)


# ------------------------------------------------------------ a read-only board
def test_board_is_read_only_all_the_way_down():
    import dataclasses

    board = reconcile.load_board(SAMPLES / "line_receiver_cb.toml")
    with pytest.raises(TypeError):
        board.resistors["RC"] = board.resistors["RE"]  # type: ignore[index]
    with pytest.raises(TypeError):
        del board.capacitors["C_B"]  # type: ignore[attr-defined]
    with pytest.raises(TypeError):
        board.spec.targets["gain"] = None  # type: ignore[index]
    with pytest.raises(dataclasses.FrozenInstanceError):
        board.resistors["RC"].ohms = 1.0  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        board.devices["lab-npn-a"].beta.value = 1.0  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        board.signal.input = "b"  # type: ignore[misc]
    with pytest.raises(AttributeError):
        board.resistors["RC"].nodes.append("x")  # type: ignore[attr-defined]
    # a variant is a new board; the caller's dict cannot reach into it
    parts = dict(board.resistors)
    variant = dataclasses.replace(board, resistors=parts)
    parts.pop("RC")
    assert "RC" in variant.resistors and board.with_resistor_ohms("RC", 900.0) is not board
    assert board.resistors["RC"].ohms == 1000.0


# ------------------------------------------------------------------ kinds
def test_kind_types_are_the_tables_the_code_keeps(analysis):
    from typing import get_args

    from reconcile.diagnosis.weights import FAULT_KINDS
    from reconcile.engine.devices import REGIONS
    from reconcile.model import kinds
    from reconcile.store.schema import ANALYSIS_KINDS
    from reconcile.trim.candidates import ACTIONS

    assert REGIONS == get_args(kinds.Region)
    assert FAULT_KINDS == get_args(kinds.FaultKind)
    assert ACTIONS == get_args(kinds.ReworkAction)
    assert ANALYSIS_KINDS == get_args(kinds.AnalysisKind)
    fit = analysis.fit.fit
    assert fit.verdict in get_args(kinds.Verdict)
    assert {p.kind for p in fit.space.parameters} <= set(get_args(kinds.ParameterKind))
    assert {p.transform for p in fit.space.parameters} <= set(get_args(kinds.Transform))
    hypothesis_kinds = set(get_args(kinds.FaultKind)) | {"pair"}
    assert set(get_args(kinds.HypothesisKind)) == hypothesis_kinds
    assert {h.fault for h in analysis.diagnosis.hypotheses} <= hypothesis_kinds
    assert analysis.trim.result.mode in get_args(kinds.TrimMode)
    assert analysis.trim.result.search in get_args(kinds.SearchKind)
    assert {q.polarity for q in analysis.inputs.board.transistors.values()} <= set(
        get_args(kinds.Polarity))


# --------------------------------------------- figures and known failures
PACKAGE = SAMPLES.parent / "reconcile"
DRIVERS = SAMPLES.parent / "instruments"


def _sources():
    return [p for folder in (PACKAGE, DRIVERS) for p in sorted(folder.rglob("*.py"))]


def test_no_process_wide_matplotlib_state_in_the_package():
    for path in _sources():
        text = path.read_text(encoding="utf-8")
        for use in ("matplotlib.use(", "import matplotlib.pyplot", "from matplotlib import pyplot",
                    "from matplotlib.pyplot"):
            assert use not in text, (path, use)


@pytest.mark.slow
def test_drawing_a_figure_leaves_pyplot_unimported(tmp_path):
    import subprocess
    import sys

    probe = (
        "import sys, reconcile\n"
        "from reconcile.present.plots_fit import plot_fit\n"
        f"b = reconcile.load_board({str(SAMPLES / 'line_receiver_cb.toml')!r})\n"
        f"r = reconcile.load_readings({str(SAMPLES / 'line_receiver_built.csv')!r}, b)\n"
        f"plot_fit(reconcile.fit(b, r), {str(tmp_path / 'fit.png')!r})\n"
        "print('matplotlib.pyplot' in sys.modules)\n"
    )
    env = {"MPLCONFIGDIR": str(tmp_path / "mpl"), "PATH": "/usr/bin:/bin"}
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                          timeout=120, env=env, check=True)
    assert done.stdout.strip() == "False"
    assert (tmp_path / "fit.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature


def test_no_bare_except_exception_around_known_failures():
    import ast

    for path in _sources():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ExceptHandler):
                caught = node.type
                assert caught is not None, f"{path}:{node.lineno}: bare except"
                assert not (isinstance(caught, ast.Name) and caught.id == "Exception"), (
                    f"{path}:{node.lineno}: except Exception")
