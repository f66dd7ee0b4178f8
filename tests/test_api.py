"""The notebook API: reconcile.load_board / reconcile.solve / reconcile.fit."""

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
    for name in ("load_board", "board_from_text", "solve", "load_readings", "fit"):
        assert callable(getattr(reconcile, name)), name
        assert not isinstance(getattr(reconcile, name), type(reconcile)), name


def test_unknown_attribute():
    with pytest.raises(AttributeError):
        reconcile.no_such_thing  # noqa: B018
